//! The admin listener's one bearer token: where it comes from, how a request's token is
//! compared with it, and the 401 answer when it does not match.
//!
//! ```text
//! --admin-token-file FILE     the token is the file's content, less one trailing newline
//!                             ("\n" or "\r\n"), so `echo TOKEN > FILE` works
//! OGIVE_ADMIN_TOKEN=TOKEN     the token itself (for platforms that inject secrets as variables)
//! --admin-token-label LABEL   who the token stands for in the history: `who` = "admin:LABEL"
//!                             (default label "admin")
//! ```
//!
//! Setting both sources is refused, as is a token shorter than [`MIN_TOKEN`] characters (16:
//! a one-character token can be guessed in under a hundred requests) or one with characters
//! other than visible ASCII (it could not be sent in a header as written). A token shorter than
//! `SHORT_TOKEN` starts with a warning. Without either source, no
//! admin route starts ([`AdminToken::configured`] returns `None`, and `ogive serve` says so).
//!
//! Every request must carry exactly one `Authorization: Bearer TOKEN` header (the scheme in any
//! case, RFC 7235 §2.1); a request with two is refused whatever they hold, so that no proxy and
//! no server can disagree over which one counts. The comparison takes the same time for every presented token of any content: it
//! walks the configured token's bytes, comparing each with the presented byte at the same
//! place (or 0 past its end) with `subtle`'s constant-time equality, and folds in the equality
//! of the lengths. A missing header, another scheme, an empty token and a wrong token each get
//! 401 problem details `urn:ogive:problem:unauthorized` with a `WWW-Authenticate` challenge
//! (RFC 6750 §3). Neither the token nor what a client presented is ever logged or echoed:
//! [`AdminToken`]'s `Debug` prints the label only.

use std::fmt;
use std::io;
use std::path::{Path, PathBuf};

use actix_web::body::{BoxBody, MessageBody};
use actix_web::dev::{ServiceRequest, ServiceResponse};
use actix_web::http::header::{self, HeaderValue};
use actix_web::middleware::Next;
use actix_web::{web, Error, ResponseError};
use subtle::ConstantTimeEq;

use super::AdminState;
use crate::service::problem::{Kind, Problem};

/// The environment variable that may hold the token itself.
pub const TOKEN_ENV: &str = "OGIVE_ADMIN_TOKEN";
/// The label of a token configured without one.
pub const DEFAULT_LABEL: &str = "admin";
/// The longest label.
pub const MAX_LABEL: usize = 64;
/// Tokens shorter than this are refused at start: at 16 characters even a token of lower-case
/// letters alone holds 75 bits, beyond guessing over a network; a shorter one is a typo or a
/// placeholder.
pub const MIN_TOKEN: usize = 16;
/// Tokens shorter than this start with a warning (common practice: at least 128 bits of
/// randomness, which base64 spells in 22 characters and hex in 32).
pub const SHORT_TOKEN: usize = 22;

/// Why the configured token cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum TokenError {
    /// The token file could not be read.
    #[error("cannot read the admin token file {}: {cause}", path.display())]
    Unreadable {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// The operating system's error.
        cause: io::Error,
    },
    /// Both a token file and the variable are set.
    #[error("both --admin-token-file ({}) and {TOKEN_ENV} are set; set one", path.display())]
    TwoSources {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
    },
    /// The token is empty (after removing one trailing newline).
    #[error("the admin token from {origin} is empty")]
    Empty {
        /// Where it came from.
        origin: String,
    },
    /// The token is shorter than [`MIN_TOKEN`].
    #[error("the admin token from {origin} has {length} characters; the minimum is {MIN_TOKEN} (make one with: head -c 24 /dev/urandom | base64)")]
    TooShort {
        /// Where it came from.
        origin: String,
        length: usize,
    },
    /// The token has a character that is not visible ASCII.
    #[error("the admin token from {origin} has a character that is not visible ASCII (a space, a control character or non-ASCII) at byte {position}; it could not be sent in a header as written")]
    NotVisibleAscii {
        /// Where it came from.
        origin: String,
        /// The byte offset of the first such character.
        position: usize,
    },
    /// The label breaks its rule.
    #[error(
        "the admin token label {label:?} must be 1 to {MAX_LABEL} letters, digits, '-', '_' or '.'"
    )]
    BadLabel { label: String },
}

/// The configured admin token and its label.
pub struct AdminToken {
    secret: Vec<u8>,
    label: String,
}

impl fmt::Debug for AdminToken {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("AdminToken")
            .field("label", &self.label)
            .field("secret", &"(not shown)")
            .finish()
    }
}

fn is_label(label: &str) -> bool {
    !label.is_empty()
        && label.len() <= MAX_LABEL
        && label
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.'))
}

impl AdminToken {
    /// A token from its raw bytes (`source` says where they came from, for errors).
    pub fn new(raw: &[u8], label: &str, source: &str) -> Result<AdminToken, TokenError> {
        if !is_label(label) {
            return Err(TokenError::BadLabel {
                label: label.chars().take(100).collect(),
            });
        }
        let had_newline = raw.ends_with(b"\n");
        let mut secret = raw.strip_suffix(b"\n").unwrap_or(raw);
        if had_newline {
            secret = secret.strip_suffix(b"\r").unwrap_or(secret);
        }
        if secret.is_empty() {
            return Err(TokenError::Empty {
                origin: source.to_string(),
            });
        }
        if let Some(position) = secret.iter().position(|b| !b.is_ascii_graphic()) {
            return Err(TokenError::NotVisibleAscii {
                origin: source.to_string(),
                position,
            });
        }
        if secret.len() < MIN_TOKEN {
            return Err(TokenError::TooShort {
                origin: source.to_string(),
                length: secret.len(),
            });
        }
        Ok(AdminToken {
            secret: secret.to_vec(),
            label: label.to_string(),
        })
    }

    /// The token of the command line and environment: from `file`, or from `variable` (the
    /// value of `TOKEN_ENV`), or `None` when neither is set.
    pub fn configured(
        file: Option<&Path>,
        variable: Option<&[u8]>,
        label: &str,
    ) -> Result<Option<AdminToken>, TokenError> {
        match (file, variable) {
            (Some(path), Some(_)) => Err(TokenError::TwoSources {
                path: path.to_path_buf(),
            }),
            (Some(path), None) => {
                let raw = std::fs::read(path).map_err(|cause| TokenError::Unreadable {
                    path: path.to_path_buf(),
                    cause,
                })?;
                let source = format!("the file {}", path.display());
                AdminToken::new(&raw, label, &source).map(Some)
            }
            (None, Some(raw)) => AdminToken::new(raw, label, TOKEN_ENV).map(Some),
            (None, None) => Ok(None),
        }
    }

    /// The token's label.
    pub fn label(&self) -> &str {
        &self.label
    }

    /// Who acts with this token, as the history records it: `admin:LABEL`.
    pub fn who(&self) -> String {
        format!("admin:{}", self.label)
    }

    /// Whether the configured token is shorter than `SHORT_TOKEN`.
    pub fn is_short(&self) -> bool {
        self.secret.len() < SHORT_TOKEN
    }

    /// Whether `presented` is the token, in time that depends on the configured token's length
    /// only.
    pub fn matches(&self, presented: &[u8]) -> bool {
        let mut same = presented.len().ct_eq(&self.secret.len());
        for (i, byte) in self.secret.iter().enumerate() {
            let other = presented.get(i).copied().unwrap_or(0);
            same &= byte.ct_eq(&other);
        }
        same.into()
    }

    /// Check a request's headers: exactly one `Authorization`, holding the token.
    pub fn check_headers(&self, headers: &header::HeaderMap) -> Result<(), Refusal> {
        let mut values = headers.get_all(header::AUTHORIZATION);
        let first = values.next();
        if values.next().is_some() {
            return Err(Refusal::Several);
        }
        self.check(first)
    }

    /// Check a request's `Authorization` header.
    pub fn check(&self, authorization: Option<&HeaderValue>) -> Result<(), Refusal> {
        let value = authorization.ok_or(Refusal::Missing)?.as_bytes();
        let split = value.iter().position(|&b| b == b' ');
        let (scheme, rest) = match split {
            Some(at) => (&value[..at], &value[at + 1..]),
            None => (value, &b""[..]),
        };
        if !scheme.eq_ignore_ascii_case(b"bearer") {
            return Err(Refusal::OtherScheme);
        }
        let presented = rest.trim_ascii();
        if presented.is_empty() {
            return Err(Refusal::Empty);
        }
        if self.matches(presented) {
            Ok(())
        } else {
            Err(Refusal::Wrong)
        }
    }
}

/// Why a request was refused.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Refusal {
    /// No `Authorization` header.
    Missing,
    /// A scheme other than `Bearer`.
    OtherScheme,
    /// `Bearer` with nothing after it.
    Empty,
    /// A token that is not the configured one.
    Wrong,
    /// More than one `Authorization` header.
    Several,
}

impl Refusal {
    /// A short name for the log.
    pub fn reason(self) -> &'static str {
        match self {
            Refusal::Missing => "missing",
            Refusal::OtherScheme => "other-scheme",
            Refusal::Empty => "empty",
            Refusal::Wrong => "wrong",
            Refusal::Several => "several",
        }
    }

    /// The 401 problem.
    pub fn problem(self) -> Problem {
        let detail = match self {
            Refusal::Missing => "the admin routes need an 'Authorization: Bearer TOKEN' header",
            Refusal::OtherScheme => {
                "the Authorization header must use the Bearer scheme: 'Authorization: Bearer TOKEN'"
            }
            Refusal::Empty => "the Authorization header has the Bearer scheme but no token",
            Refusal::Wrong => "the bearer token is not the admin token",
            Refusal::Several => {
                "the request has more than one Authorization header; send exactly one"
            }
        };
        Problem::new(Kind::Unauthorized, detail)
    }

    /// The challenge of RFC 6750 §3: no error code when no credentials were sent.
    pub fn challenge(self) -> &'static str {
        match self {
            Refusal::Missing | Refusal::OtherScheme => "Bearer realm=\"ogive-admin\"",
            Refusal::Several => "Bearer realm=\"ogive-admin\", error=\"invalid_request\"",
            Refusal::Empty | Refusal::Wrong => {
                "Bearer realm=\"ogive-admin\", error=\"invalid_token\""
            }
        }
    }
}

/// The middleware of the admin app: every request, including unknown paths, must carry the
/// token; anything else is answered 401 here.
pub async fn require_token(
    req: ServiceRequest,
    next: Next<impl MessageBody + 'static>,
) -> Result<ServiceResponse<BoxBody>, Error> {
    let verdict = match req.app_data::<web::Data<AdminState>>() {
        Some(state) => state.token.check_headers(req.headers()),
        // The admin app always carries its state; refusing is the safe answer if it does not.
        None => Err(Refusal::Missing),
    };
    match verdict {
        Ok(()) => next
            .call(req)
            .await
            .map(ServiceResponse::map_into_boxed_body),
        Err(refusal) => {
            tracing::warn!(
                reason = refusal.reason(),
                path = req.path(),
                "admin request refused"
            );
            let mut response = refusal.problem().error_response();
            response.headers_mut().insert(
                header::WWW_AUTHENTICATE,
                HeaderValue::from_static(refusal.challenge()),
            );
            Ok(req.into_response(response))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn token(raw: &str) -> AdminToken {
        AdminToken::new(raw.as_bytes(), "ops", "a test").expect("a valid token")
    }

    #[test]
    fn one_trailing_newline_is_removed_and_no_more() {
        assert!(token("s3cret-token-0123\n").matches(b"s3cret-token-0123"));
        assert!(token("s3cret-token-0123\r\n").matches(b"s3cret-token-0123"));
        assert!(matches!(
            AdminToken::new(b"s3cret\n\n", "ops", "a test"),
            Err(TokenError::NotVisibleAscii { position: 6, .. })
        ));
        assert!(matches!(
            AdminToken::new(b"\n", "ops", "a test"),
            Err(TokenError::Empty { .. })
        ));
        assert!(matches!(
            AdminToken::new(b"two words", "ops", "a test"),
            Err(TokenError::NotVisibleAscii { position: 3, .. })
        ));
    }

    #[test]
    fn a_token_shorter_than_the_minimum_is_refused_stating_the_minimum() {
        for short in ["x", "x\n", "abcdef123456789"] {
            let error = AdminToken::new(short.as_bytes(), "ops", "a test").expect_err(short);
            assert!(matches!(error, TokenError::TooShort { .. }), "{short:?}");
            assert!(error.to_string().contains("the minimum is 16"), "{error}");
        }
        assert!(AdminToken::new(b"abcdef1234567890", "ops", "a test").is_ok());
    }

    #[test]
    fn two_authorization_headers_are_refused_even_when_one_holds_the_token() {
        let t = token("abcdef1234567890");
        let mut headers = header::HeaderMap::new();
        let right = HeaderValue::from_static("Bearer abcdef1234567890");
        headers.append(header::AUTHORIZATION, right.clone());
        assert_eq!(t.check_headers(&headers), Ok(()));
        headers.append(header::AUTHORIZATION, right);
        assert_eq!(t.check_headers(&headers), Err(Refusal::Several));
    }

    #[test]
    fn only_the_exact_token_matches() {
        let t = token("abcdef1234567890");
        assert!(t.matches(b"abcdef1234567890"));
        for other in [
            &b""[..],
            b"abcdef123456789",
            b"abcdef12345678901",
            b"abcdef1234567891",
            b"Abcdef1234567890",
            b"abcdef1234567890\0",
        ] {
            assert!(!t.matches(other), "{other:?}");
        }
    }

    #[test]
    fn the_header_needs_the_bearer_scheme_and_the_token() {
        let t = token("abcdef1234567890");
        let check = |v: &str| t.check(Some(&HeaderValue::from_str(v).expect("header")));
        assert_eq!(t.check(None), Err(Refusal::Missing));
        assert_eq!(check("Bearer abcdef1234567890"), Ok(()));
        assert_eq!(check("bearer abcdef1234567890"), Ok(()));
        assert_eq!(check("Basic abcdef1234567890"), Err(Refusal::OtherScheme));
        assert_eq!(check("Bearer"), Err(Refusal::Empty));
        assert_eq!(check("Bearer "), Err(Refusal::Empty));
        assert_eq!(check("Bearer abcdef"), Err(Refusal::Wrong));
        assert_eq!(check("abcdef1234567890"), Err(Refusal::OtherScheme));
    }

    #[test]
    fn debug_never_shows_the_secret() {
        let shown = format!("{:?}", token("abcdef1234567890"));
        assert!(!shown.contains("abcdef"), "{shown}");
        assert!(shown.contains("ops"));
    }

    #[test]
    fn two_sources_and_bad_labels_are_refused() {
        let file = Path::new("/nonexistent/token");
        assert!(matches!(
            AdminToken::configured(Some(file), Some(b"x"), "ops"),
            Err(TokenError::TwoSources { .. })
        ));
        assert!(matches!(
            AdminToken::configured(None, None, "ops"),
            Ok(None)
        ));
        assert!(matches!(
            AdminToken::configured(Some(file), None, "ops"),
            Err(TokenError::Unreadable { .. })
        ));
        for label in ["", "has space", "a:b", &"x".repeat(65)] {
            assert!(matches!(
                AdminToken::new(b"abcdef1234567890", label, "a test"),
                Err(TokenError::BadLabel { .. })
            ));
        }
    }
}
