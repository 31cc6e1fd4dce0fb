//! The one HTTP error type of the service: every failure a handler or the middleware can answer
//! with becomes a [`Problem`], rendered as RFC 9457 problem details
//! (`application/problem+json`).
//!
//! Problem types are URNs of our own, `urn:ogive:problem:SLUG`, one per kind of mistake
//! ([`Kind`]); a URN says "this is an identifier, not a page" (RFC 9457 §3.1.1 allows any URI).
//! The slugs are stable: clients may branch on them. Members:
//!
//! ```text
//! type      urn:ogive:problem:SLUG                    always
//! title     a fixed sentence per kind                 always
//! status    the HTTP status code                      always
//! detail    what exactly is wrong, naming the value   always
//! pointer   RFC 6901 JSON Pointer into the request body, e.g. /observations/3/annual_revenue
//! index     the observation's position in a batch
//! parameter the query parameter at fault (curve route)
//! errors    in a batch, every faulty observation (up to 100), each {pointer, index, type, detail}
//! missing   missing-covariate: every covariate the observation lacks (the pointer names the first)
//! …         extension members of the admin routes (see `service::admin::refusals`)
//! ```
//!
//! Client mistakes map to 4xx; anything unexpected is [`Kind::Internal`] (500) whose cause is
//! logged, never sent. This module does not decide what is a mistake: the routes do.
//!
//! What a client sent is echoed in a detail by one rule, so that no answer grows with a hostile
//! input and no number changes on the way back:
//!
//! ```text
//! text     echo: 'as sent' when at most 64 characters, else 'the first 64…' (N characters)
//! numbers  echo_number: the shortest digits that read back as the same double (0.1, 1e-13,
//!          2000000000000, 1.5e300), never rounded for display
//! values   echo_json: numbers and text as above; an array or object by its size only
//! ```

use actix_web::http::{header, StatusCode};
use actix_web::{HttpResponse, ResponseError};
use serde::Serialize;

use crate::model::ObservationError;

/// The prefix of every problem type.
pub const TYPE_PREFIX: &str = "urn:ogive:problem:";
/// The content type of problem details.
pub const PROBLEM_CONTENT_TYPE: &str = "application/problem+json";

macro_rules! kinds {
    ($($variant:ident => $slug:literal, $status:literal, $title:literal;)*) => {
        /// Every kind of problem the service reports, with its stable slug and status.
        #[derive(Debug, Clone, Copy, PartialEq, Eq)]
        pub enum Kind {
            $(
                #[doc = $title]
                $variant,
            )*
        }

        impl Kind {
            /// Every kind, for documentation and tests.
            pub const ALL: &'static [Kind] = &[$(Kind::$variant),*];

            /// The stable slug, the last part of the type URN.
            pub fn slug(self) -> &'static str {
                match self { $(Kind::$variant => $slug,)* }
            }

            /// The HTTP status code.
            pub fn status(self) -> u16 {
                match self { $(Kind::$variant => $status,)* }
            }

            /// The problem's `title`: the same for every occurrence of this kind, whatever
            /// the `detail` says (RFC 9457 §3.1.3).
            pub fn title(self) -> &'static str {
                match self { $(Kind::$variant => $title,)* }
            }
        }
    };
}

kinds! {
    MalformedJson => "malformed-json", 400, "The body is not well-formed JSON";
    InvalidQuery => "invalid-query", 400, "A query parameter cannot be read";
    NotFound => "not-found", 404, "There is no such route";
    UnknownModel => "unknown-model", 404, "There is no such model";
    MethodNotAllowed => "method-not-allowed", 405, "The route does not take this method";
    BodyTooLarge => "body-too-large", 413, "The body is larger than the configured limit";
    BodyTimeout => "body-timeout", 408, "The body did not arrive within the configured time";
    UnsupportedMediaType => "unsupported-media-type", 415, "The body must be sent as application/json";
    HeadersTooLarge => "headers-too-large", 431, "The request headers are larger than the configured limit";
    InvalidBody => "invalid-body", 422, "The body does not have the expected shape";
    DuplicateKey => "duplicate-key", 422, "An object in the body has the same key more than once";
    MissingObservation => "missing-observation", 422, "Send either observation or observations";
    ConflictingFields => "conflicting-fields", 422, "Fields that cannot be sent together";
    EmptyBatch => "empty-batch", 422, "The batch has no observations";
    TooManyObservations => "too-many-observations", 422, "The batch has more observations than the configured limit";
    UnknownField => "unknown-field", 422, "A field that the model or the route does not know";
    InvalidOption => "invalid-option", 422, "An option has a value it cannot take";
    MissingCovariate => "missing-covariate", 422, "A covariate the model needs is missing";
    NotANumber => "not-a-number", 422, "A numeric covariate was not sent a number";
    NonFinite => "non-finite", 422, "A number is not finite";
    NotBinary => "not-binary", 422, "A binary covariate takes 0 or 1";
    NotACount => "not-a-count", 422, "A count covariate takes a whole number at least 0";
    NotALevel => "not-a-level", 422, "A categorical covariate takes one of its levels as text";
    UnseenLevel => "unseen-level", 422, "A level the model never saw in training cannot be scored";
    OutsideDomain => "outside-domain", 422, "A value outside the domain of a term or the service's numeric bounds";
    NotComputable => "not-computable", 422, "The answer at these values is not a finite number";
    Internal => "internal", 500, "An unexpected error; it has been logged";
    Unavailable => "unavailable", 503, "The service is not ready";
    InvalidReceipt => "invalid-receipt", 422, "The receipt was altered, cut short, or sealed with a key this server does not hold";
    ReceiptOfAnotherModel => "receipt-of-another-model", 422, "The receipt was given by another model than the route's";
    ReceiptExpired => "receipt-expired", 422, "The receipt is older than the maximum age for outcomes";
    OutcomeAlreadyReported => "outcome-already-reported", 409, "This replica has already recorded an outcome for the receipt";
    MonitoringOff => "monitoring-off", 404, "Monitoring is off in this process";
    Unauthorized => "unauthorized", 401, "The admin routes need a valid bearer token";
    InvalidLabel => "invalid-label", 422, "A model name or version label breaks its naming rule";
    InvalidModelFile => "invalid-model-file", 422, "The model file is not valid, or its check cases do not reproduce";
    ModelTooLarge => "model-too-large", 422, "A list in the model file is longer than the service's limit";
    LabelMismatch => "label-mismatch", 422, "The file names another model or version than the route";
    VersionExists => "version-exists", 409, "A different file is already stored under this version label";
    VersionChanged => "version-changed", 409, "A stored version's file no longer holds the bytes stored under its label";
    BreakingChange => "breaking-change", 422, "The candidate changes the contract with callers";
    UnknownVersion => "unknown-version", 404, "The model has no such stored version";
    NoLiveVersion => "no-live-version", 409, "The model has no live version";
    NothingToRollBack => "nothing-to-roll-back", 409, "There is no earlier live version to return to";
    LiveUnreadable => "live-unreadable", 409, "The live version cannot be read";
    RollbackTargetInvalid => "rollback-target-invalid", 409, "The version a rollback would return to cannot go live";
    ModelBusy => "model-busy", 503, "Another change to this model holds its lock";
    Overloaded => "overloaded", 503, "The service is at a configured load limit; retry after the time it states";
    WorkOverBudget => "work-over-budget", 413, "The request asks for more work than one request may";
    StoreUnwritable => "store-unwritable", 503, "The model directory cannot be written by this process";
    NoShadow => "no-shadow", 404, "The model has no shadow";
    CannotShadow => "cannot-shadow", 422, "This version cannot shadow the live version";
    ShadowOff => "shadow-off", 404, "Shadow scoring is off in this process";
}

impl Kind {
    /// The full type URN.
    pub fn type_uri(self) -> String {
        format!("{TYPE_PREFIX}{}", self.slug())
    }

    /// The kind for an observation error.
    pub fn of_observation(error: &ObservationError) -> Kind {
        match error {
            ObservationError::Missing(_) => Kind::MissingCovariate,
            ObservationError::UnknownField(_) => Kind::UnknownField,
            ObservationError::NotANumber { .. } => Kind::NotANumber,
            ObservationError::NonFinite { .. } => Kind::NonFinite,
            ObservationError::NotBinary { .. } => Kind::NotBinary,
            ObservationError::NotCount { .. } => Kind::NotACount,
            ObservationError::NotALevel { .. } => Kind::NotALevel,
            ObservationError::UnknownLevel { .. } => Kind::UnseenLevel,
            ObservationError::LogOfNonPositive { .. } => Kind::OutsideDomain,
        }
    }
}

/// One faulty observation of a batch, listed in the problem's `errors` member.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct FieldError {
    /// The problem type of this observation's fault.
    #[serde(rename = "type")]
    pub type_uri: String,
    /// What is wrong.
    pub detail: String,
    /// The JSON Pointer of the field at fault.
    pub pointer: String,
    /// The observation's index in the batch.
    pub index: usize,
}

/// An RFC 9457 problem, ready to send. Boxed, so that `Result<_, Problem>` stays one pointer
/// wide on the success path; its members are read through [`Details`].
#[derive(Debug, Clone, PartialEq)]
pub struct Problem(Box<Details>);

/// The members of a [`Problem`].
#[derive(Debug, Clone, PartialEq)]
pub struct Details {
    /// The kind, which fixes type, title and status.
    pub kind: Kind,
    /// What exactly is wrong.
    pub detail: String,
    /// The JSON Pointer into the body of the field at fault.
    pub pointer: Option<String>,
    /// The observation's index in a batch.
    pub index: Option<usize>,
    /// The query parameter at fault.
    pub parameter: Option<String>,
    /// Every faulty observation of a batch.
    pub errors: Vec<FieldError>,
    /// Line and column of a JSON syntax error.
    pub position: Option<(usize, usize)>,
    /// The methods a route does take (for 405).
    pub allow: Option<&'static str>,
    /// A configured limit that was exceeded.
    pub limit: Option<u64>,
    /// Seconds to wait before retrying (sent as `Retry-After`).
    pub retry_after: Option<u32>,
    /// Extension members (RFC 9457 §3.2) of the admin routes' problems, such as the covariate
    /// changes a breaking candidate makes; empty elsewhere.
    pub extensions: serde_json::Map<String, serde_json::Value>,
}

#[derive(Serialize)]
struct Body<'a> {
    #[serde(rename = "type")]
    type_uri: String,
    title: &'static str,
    status: u16,
    detail: &'a str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pointer: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    index: Option<usize>,
    #[serde(skip_serializing_if = "Option::is_none")]
    parameter: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    line: Option<usize>,
    #[serde(skip_serializing_if = "Option::is_none")]
    column: Option<usize>,
    #[serde(skip_serializing_if = "Option::is_none")]
    limit: Option<u64>,
    #[serde(skip_serializing_if = "<[_]>::is_empty")]
    errors: &'a [FieldError],
    #[serde(flatten)]
    extensions: &'a serde_json::Map<String, serde_json::Value>,
}

impl Problem {
    /// A problem of this kind with this detail.
    pub fn new(kind: Kind, detail: impl Into<String>) -> Problem {
        Problem(Box::new(Details {
            kind,
            detail: detail.into(),
            pointer: None,
            index: None,
            parameter: None,
            errors: Vec::new(),
            position: None,
            allow: None,
            limit: None,
            retry_after: None,
            extensions: serde_json::Map::new(),
        }))
    }

    /// Add an extension member (a name that is not one of the standard members above).
    pub fn extension(mut self, name: &str, value: serde_json::Value) -> Problem {
        self.extensions.insert(name.to_string(), value);
        self
    }

    /// Name the field at fault by its JSON Pointer.
    pub fn at(mut self, pointer: impl Into<String>) -> Problem {
        self.pointer = Some(pointer.into());
        self
    }

    /// Name the observation's index in a batch.
    pub fn index(mut self, index: usize) -> Problem {
        self.index = Some(index);
        self
    }

    /// Name the query parameter at fault.
    pub fn parameter(mut self, name: impl Into<String>) -> Problem {
        self.parameter = Some(name.into());
        self
    }

    /// Tell the client to retry after `seconds` (the `Retry-After` header).
    pub fn retry_after(mut self, seconds: u32) -> Problem {
        self.retry_after = Some(seconds);
        self
    }

    /// State the limit that was exceeded.
    pub fn limit(mut self, limit: u64) -> Problem {
        self.limit = Some(limit);
        self
    }

    /// The problem for an observation error at `base` (the observation's own pointer, such as
    /// `/observation` or `/observations/3`); `sent` is the value the client sent for the field.
    pub fn observation(
        error: &ObservationError,
        base: &str,
        sent: Option<&serde_json::Value>,
    ) -> Problem {
        Problem::new(Kind::of_observation(error), observation_detail(error, sent))
            .at(format!("{base}/{}", escape_pointer_token(error.field())))
    }

    /// A 500 for something that should not happen; the cause goes to the log, not the client.
    pub fn internal(cause: &dyn std::fmt::Display) -> Problem {
        tracing::error!(cause = %cause, "internal error");
        Problem::new(
            Kind::Internal,
            "the service could not answer this request; the cause has been logged",
        )
    }

    /// The problem's JSON body.
    pub fn to_json(&self) -> Vec<u8> {
        let body = Body {
            type_uri: self.kind.type_uri(),
            title: self.kind.title(),
            status: self.kind.status(),
            detail: &self.detail,
            pointer: self.pointer.as_deref(),
            index: self.index,
            parameter: self.parameter.as_deref(),
            line: self.position.map(|p| p.0),
            column: self.position.map(|p| p.1),
            limit: self.limit,
            errors: &self.errors,
            extensions: &self.extensions,
        };
        serde_json::to_vec(&body).unwrap_or_else(|_| b"{}".to_vec())
    }
}

/// The most characters of a client's text that a detail echoes.
pub const MAX_ECHO_CHARS: usize = 64;

/// A client's text as a detail echoes it: quoted whole when at most [`MAX_ECHO_CHARS`]
/// characters, else its first [`MAX_ECHO_CHARS`] characters, an ellipsis and its full length.
pub fn echo(text: &str) -> String {
    let count = text.chars().count();
    if count <= MAX_ECHO_CHARS {
        format!("'{text}'")
    } else {
        let head: String = text.chars().take(MAX_ECHO_CHARS).collect();
        format!("'{head}…' ({count} characters)")
    }
}

/// A number as a detail echoes it: the shortest decimal that parses back to the same double
/// (Rust's `Display` and `LowerExp` both print those digits), in positional form for magnitudes
/// from 1e-5 to below 1e16 and in exponent form outside, so that no echo runs to hundreds of
/// zeros.
pub fn echo_number(x: f64) -> String {
    let magnitude = x.abs();
    if x == 0.0 || !x.is_finite() || (1e-5..1e16).contains(&magnitude) {
        format!("{x}")
    } else {
        format!("{x:e}")
    }
}

/// A JSON value as a detail echoes it: `null`, `true`, a number by [`echo_number`], text by
/// [`echo`], an array or object by its size.
pub fn echo_json(value: &serde_json::Value) -> String {
    use serde_json::Value as Json;
    match value {
        Json::Null => "null".to_string(),
        Json::Bool(b) => b.to_string(),
        Json::Number(n) => match (n.as_i64(), n.as_u64(), n.as_f64()) {
            (Some(i), _, _) => i.to_string(),
            (_, Some(u), _) => u.to_string(),
            (_, _, Some(x)) => echo_number(x),
            _ => n.to_string(),
        },
        Json::String(s) => format!("the text {}", echo(s)),
        Json::Array(a) => format!("an array of {} items", a.len()),
        Json::Object(o) => format!("an object of {} members", o.len()),
    }
}

/// The detail of an observation error, with the client's values echoed by the rule above
/// (the model's own messages, written for files and the command line, echo them whole).
/// `sent` is the JSON value the client sent for the field, where there is one.
pub fn observation_detail(error: &ObservationError, sent: Option<&serde_json::Value>) -> String {
    let found = |described: &str| sent.map_or_else(|| shorten(described), echo_json);
    match error {
        ObservationError::Missing(name) => format!("covariate {} is missing", echo(name)),
        ObservationError::UnknownField(name) => {
            format!("field {} is not a covariate of this model", echo(name))
        }
        ObservationError::NotANumber {
            covariate,
            found: described,
        } => {
            format!(
                "covariate {} must be a number, got {}",
                echo(covariate),
                found(described)
            )
        }
        ObservationError::NonFinite { covariate, value } => format!(
            "covariate {} must be finite, got {}",
            echo(covariate),
            echo_number(*value)
        ),
        ObservationError::NotBinary {
            covariate,
            found: described,
        } => format!(
            "covariate {} is binary: send 0 or 1 (or false/true), got {}",
            echo(covariate),
            found(described)
        ),
        ObservationError::NotCount { covariate, value } => format!(
            "covariate {} is a count: send a whole number ≥ 0, got {}",
            echo(covariate),
            echo_number(*value)
        ),
        ObservationError::NotALevel {
            covariate,
            found: described,
        } => format!(
            "covariate {} is categorical: send one of its levels as text, got {}",
            echo(covariate),
            found(described)
        ),
        ObservationError::UnknownLevel {
            covariate,
            level,
            levels,
        } => format!(
            "covariate {} has no level {} (levels: {levels})",
            echo(covariate),
            echo(level)
        ),
        ObservationError::LogOfNonPositive {
            term,
            covariate,
            value,
        } => format!(
            "term '{term}' needs {covariate} > 0, got {}",
            echo_number(*value)
        ),
    }
}

/// A description of a sent value that the model module wrote (which may quote the value
/// whole), cut by the echo rule.
fn shorten(described: &str) -> String {
    let count = described.chars().count();
    if count <= MAX_ECHO_CHARS {
        described.to_string()
    } else {
        let head: String = described.chars().take(MAX_ECHO_CHARS).collect();
        format!("{head}… ({count} characters)")
    }
}

/// Escape one reference token of a JSON Pointer (RFC 6901 §3: `~` → `~0`, `/` → `~1`).
pub fn escape_pointer_token(token: &str) -> String {
    if token.contains(['~', '/']) {
        token.replace('~', "~0").replace('/', "~1")
    } else {
        token.to_string()
    }
}

impl std::ops::Deref for Problem {
    type Target = Details;

    fn deref(&self) -> &Details {
        &self.0
    }
}

impl std::ops::DerefMut for Problem {
    fn deref_mut(&mut self) -> &mut Details {
        &mut self.0
    }
}

impl std::fmt::Display for Problem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.kind.slug(), self.detail)
    }
}

impl ResponseError for Problem {
    fn status_code(&self) -> StatusCode {
        StatusCode::from_u16(self.kind.status()).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR)
    }

    fn error_response(&self) -> HttpResponse {
        let mut response = HttpResponse::build(self.status_code());
        response.insert_header((header::CONTENT_TYPE, PROBLEM_CONTENT_TYPE));
        if let Some(allow) = self.allow {
            response.insert_header((header::ALLOW, allow));
        }
        if let Some(seconds) = self.retry_after {
            response.insert_header((header::RETRY_AFTER, seconds.to_string()));
        }
        response.body(self.to_json())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slugs_are_unique_and_statuses_are_errors() {
        let mut slugs: Vec<&str> = Kind::ALL.iter().map(|k| k.slug()).collect();
        slugs.sort_unstable();
        let n = slugs.len();
        slugs.dedup();
        assert_eq!(slugs.len(), n);
        assert!(Kind::ALL.iter().all(|k| k.status() >= 400));
    }

    #[test]
    fn echoed_text_is_cut_at_the_limit_with_an_ellipsis_and_its_length() {
        assert_eq!(echo("short"), "'short'");
        let exact = "é".repeat(MAX_ECHO_CHARS);
        assert_eq!(echo(&exact), format!("'{exact}'"));
        let long = "é".repeat(MAX_ECHO_CHARS + 1);
        assert_eq!(
            echo(&long),
            format!(
                "'{}…' ({} characters)",
                "é".repeat(MAX_ECHO_CHARS),
                MAX_ECHO_CHARS + 1
            )
        );
    }

    #[test]
    fn echoed_numbers_read_back_as_the_same_double() {
        for x in [
            0.1,
            0.1 + 0.2,
            -2.5e-300,
            1.5e-13,
            2e12,
            1e16,
            f64::MAX,
            f64::MIN_POSITIVE,
            5e-324,
            123_456.789,
        ] {
            let text = echo_number(x);
            assert_eq!(text.parse::<f64>(), Ok(x), "{text}");
            assert!(text.len() <= 24, "{text} is not short");
        }
        assert_eq!(echo_number(1.5e-13), "1.5e-13");
        assert_eq!(echo_number(0.30000000000000004), "0.30000000000000004");
        assert_eq!(echo_number(2e12), "2000000000000");
    }

    #[test]
    fn pointer_tokens_are_escaped_per_rfc_6901() {
        assert_eq!(escape_pointer_token("a/b~c"), "a~1b~0c");
        assert_eq!(escape_pointer_token("plain"), "plain");
    }
}
