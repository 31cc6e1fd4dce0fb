//! The one reader of JSON request bodies. Every route that takes a body reads it with
//! [`read_json`] (or [`read_optional_json`] where the body may be left out), which checks, in
//! this order:
//!
//! ```text
//! content type       application/json or application/*+json, else 415
//! content encoding   none or identity, else 415 (a compressed body is refused, never inflated)
//! size               Content-Length against the limit before reading, the bytes while reading: 413
//! load               the bytes of all bodies being read at once against a process-wide limit:
//!                    503 with Retry-After (`service::compute`)
//! time               the whole body within the body timeout, else 408 (actix times only the head)
//! empty              400 "the body is empty"
//! byte-order mark    a UTF-8 or UTF-16 BOM, 415 (RFC 8259 §8.1: JSON text carries none)
//! syntax             400 with line and column
//! numbers            one too large for a double: 422 non-finite, with its JSON Pointer
//! duplicate keys     the same key twice in any object: 422 duplicate-key, naming the key and
//!                    the JSON Pointer of the second occurrence
//! ```
//!
//! This module knows nothing of models; the routes interpret the parsed value.

use std::pin::Pin;
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Duration;

use actix_web::body::{BodySize, BoxBody, MessageBody};
use actix_web::dev::ServiceResponse;
use actix_web::http::header;
use actix_web::web::{self, Bytes, Payload};
use actix_web::{HttpMessage, HttpRequest};
use serde::de::{DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};
use serde_json::Value as Json;
use tokio::time::{timeout_at, Instant};

use super::config::Limits;
use super::problem::{echo, escape_pointer_token, Kind, Problem};
use super::state::AppState;

/// How long a client may take to send a request body once its head has arrived. Each listener
/// registers its configured value as app data; where none is registered,
/// [`Limits::default`]'s applies.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BodyTimeout(pub Duration);

impl BodyTimeout {
    /// The body timeout of these limits.
    pub fn of(limits: &Limits) -> BodyTimeout {
        BodyTimeout(Duration::from_millis(limits.body_timeout_ms))
    }
}

/// Whether the request declares a JSON body: `application/json` or any `application/*+json`,
/// parameters (such as `charset`) allowed.
pub fn is_json_content_type(req: &HttpRequest) -> bool {
    let Some(value) = req.headers().get(header::CONTENT_TYPE) else {
        return false;
    };
    let Ok(text) = value.to_str() else {
        return false;
    };
    let essence = text.split(';').next().unwrap_or("").trim();
    let essence = essence.to_ascii_lowercase();
    essence == "application/json"
        || (essence.starts_with("application/") && essence.ends_with("+json"))
}

/// A JSON body as it arrived and as parsed.
#[derive(Debug, Clone)]
pub struct JsonBody {
    /// The bytes as sent.
    pub bytes: Bytes,
    /// The parsed value (no object in it has a key twice).
    pub value: Json,
}

/// Read and parse a JSON request body within `limit` bytes and the body timeout: every check
/// of the module comment, in its order.
pub async fn read_json(
    req: &HttpRequest,
    payload: Payload,
    limit: usize,
) -> Result<JsonBody, Problem> {
    let bytes = read_json_bytes(req, payload, limit).await?;
    let value = parse_json(&bytes)?;
    Ok(JsonBody { bytes, value })
}

/// Read a body that is a document with a validator of its own (a model file): every check of
/// [`read_json`], except that a syntax error or an overflowing number is left to that
/// validator, which reports it in the document's own terms. An empty body, a byte-order mark and
/// a repeated key are still refused here: a validator built on serde_json would keep the last
/// of two repeated keys without a word.
pub async fn read_json_document(
    req: &HttpRequest,
    payload: Payload,
    limit: usize,
) -> Result<Bytes, Problem> {
    let bytes = read_json_bytes(req, payload, limit).await?;
    match parse_json(&bytes) {
        Ok(_) => Ok(bytes),
        Err(problem) if problem.position.is_some() || problem.kind == Kind::NonFinite => Ok(bytes),
        Err(problem) => Err(problem),
    }
}

/// Read a body that may be left out: `None` when the request declares no body (no
/// Content-Type, no Transfer-Encoding, no or a zero Content-Length) or sends only whitespace;
/// otherwise as [`read_json`].
pub async fn read_optional_json(
    req: &HttpRequest,
    payload: Payload,
    limit: usize,
) -> Result<Option<JsonBody>, Problem> {
    let headers = req.headers();
    let declared_empty = headers.get(header::CONTENT_TYPE).is_none()
        && headers.get(header::TRANSFER_ENCODING).is_none()
        && headers
            .get(header::CONTENT_LENGTH)
            .is_none_or(|v| v.as_bytes() == b"0");
    if declared_empty {
        return Ok(None);
    }
    let bytes = read_json_bytes(req, payload, limit).await?;
    if bytes.iter().all(u8::is_ascii_whitespace) {
        return Ok(None);
    }
    let value = parse_json(&bytes)?;
    Ok(Some(JsonBody { bytes, value }))
}

/// Refuse a compressed body: the limits are on the bytes the service would parse, and a small
/// compressed body can inflate past any of them.
fn check_encoding(req: &HttpRequest) -> Result<(), Problem> {
    for value in req.headers().get_all(header::CONTENT_ENCODING) {
        let text = String::from_utf8_lossy(value.as_bytes());
        let compressed = text
            .split(',')
            .map(str::trim)
            .any(|coding| !coding.is_empty() && !coding.eq_ignore_ascii_case("identity"));
        if compressed {
            return Err(Problem::new(
                Kind::UnsupportedMediaType,
                format!(
                    "the body is sent with Content-Encoding {}; send it uncompressed",
                    echo(&text)
                ),
            ));
        }
    }
    Ok(())
}

/// The first half of [`read_json`], for a route that parses elsewhere (on the scoring pool):
/// the content type, encoding, load, size and time checks. The bytes must then go through
/// [`parse_json`], the second half.
pub async fn read_json_bytes(
    req: &HttpRequest,
    payload: Payload,
    limit: usize,
) -> Result<Bytes, Problem> {
    if !is_json_content_type(req) {
        let sent = req
            .headers()
            .get(header::CONTENT_TYPE)
            .map(|v| {
                format!(
                    "Content-Type {}",
                    echo(&String::from_utf8_lossy(v.as_bytes()))
                )
            })
            .unwrap_or_else(|| "no Content-Type".to_string());
        return Err(Problem::new(
            Kind::UnsupportedMediaType,
            format!("send the body as application/json; the request has {sent}"),
        ));
    }
    check_encoding(req)?;
    let timeout = req
        .app_data::<BodyTimeout>()
        .copied()
        .unwrap_or_else(|| BodyTimeout::of(&Limits::default()));
    let deadline = Instant::now() + timeout.0;
    let too_large = || {
        Problem::new(
            Kind::BodyTooLarge,
            format!("the body is larger than {limit} bytes"),
        )
        .limit(limit as u64)
    };
    let declared = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|s| s.parse::<u64>().ok());
    if declared.is_some_and(|n| n > limit as u64) {
        let rest = discard(payload, limit.saturating_mul(DRAIN_FACTOR), deadline).await;
        req.extensions_mut().insert(UnreadBody { _payload: rest });
        return Err(too_large());
    }
    let compute = req
        .app_data::<web::Data<AppState>>()
        .map(|state| Arc::clone(&state.compute));
    // The declared length is reserved at once (a client cannot hold more than it said), a
    // chunked body as its chunks arrive.
    let mut reservation = compute
        .as_ref()
        .map(|c| c.reserve_body(declared.unwrap_or(0) as usize))
        .transpose()?;
    let mut reserved = declared.unwrap_or(0) as usize;
    let mut payload = payload;
    let mut body = web::BytesMut::new();
    loop {
        let Ok(next) = timeout_at(deadline, next_chunk(&mut payload)).await else {
            req.extensions_mut()
                .insert(UnreadBody { _payload: payload });
            let ms = timeout.0.as_millis();
            return Err(Problem::new(
                Kind::BodyTimeout,
                format!(
                    "{} bytes of the body arrived within {ms} ms, and then no more",
                    body.len()
                ),
            ));
        };
        let Some(chunk) = next else { break };
        let chunk = chunk.map_err(|error| {
            Problem::new(
                Kind::MalformedJson,
                format!("the body could not be read: {error}"),
            )
        })?;
        if body.len() + chunk.len() > limit {
            let rest = discard(payload, limit.saturating_mul(DRAIN_FACTOR), deadline).await;
            req.extensions_mut().insert(UnreadBody { _payload: rest });
            return Err(too_large());
        }
        if body.len() + chunk.len() > reserved {
            let more = body.len() + chunk.len() - reserved;
            if let Some(reservation) = reservation.as_mut() {
                if let Err(problem) = reservation.grow(more) {
                    req.extensions_mut()
                        .insert(UnreadBody { _payload: payload });
                    return Err(problem);
                }
            }
            reserved += more;
        }
        body.extend_from_slice(&chunk);
    }
    drop(reservation);
    Ok(body.freeze())
}

/// An oversized body is read and thrown away up to this many times the limit (and no longer than
/// the body timeout) before the 413 is sent, so that the client, still writing, reads a clean
/// answer instead of a reset connection; beyond that the connection is closed.
pub const DRAIN_FACTOR: usize = 4;

async fn next_chunk(
    payload: &mut Payload,
) -> Option<Result<Bytes, actix_web::error::PayloadError>> {
    use futures_core::Stream;
    std::future::poll_fn(|cx| std::pin::Pin::new(&mut *payload).poll_next(cx)).await
}

async fn discard(mut payload: Payload, most: usize, deadline: Instant) -> Payload {
    let mut seen = 0usize;
    while let Ok(Some(Ok(chunk))) = timeout_at(deadline, next_chunk(&mut payload)).await {
        seen += chunk.len();
        if seen > most {
            break;
        }
    }
    payload
}

/// The unread rest of a refused body (413 or 408), left in the request's extensions by
/// [`read_json_bytes`] for [`close_after_refused_body`].
struct UnreadBody {
    /// Held, never read: while it is alive actix sees the payload as unread.
    _payload: Payload,
}

/// Make a response to a refused body end its connection. actix closes a connection whose
/// request payload is still unread when the response is written, but once the handler has
/// dropped the payload of a chunked body it drains the rest instead, for as long as the client
/// keeps the stream open; so the response holds the payload until its last byte is written.
/// The middleware calls this on every response; others pass through unchanged.
pub fn close_after_refused_body(response: ServiceResponse<BoxBody>) -> ServiceResponse<BoxBody> {
    let unread = response.request().extensions_mut().remove::<UnreadBody>();
    match unread {
        None => response,
        Some(unread) => response.map_body(|_, body| {
            BoxBody::new(HoldingUnread {
                body,
                _unread: unread,
            })
        }),
    }
}

/// A response body that keeps the request's unread payload alive while it is written.
struct HoldingUnread {
    body: BoxBody,
    _unread: UnreadBody,
}

impl MessageBody for HoldingUnread {
    type Error = <BoxBody as MessageBody>::Error;

    fn size(&self) -> BodySize {
        self.body.size()
    }

    fn poll_next(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<Option<Result<Bytes, Self::Error>>> {
        Pin::new(&mut self.body).poll_next(cx)
    }
}

/// The byte-order marks refused at the start of a body: UTF-8, UTF-16 big- and little-endian.
const BYTE_ORDER_MARKS: [(&[u8], &str); 3] = [
    (b"\xEF\xBB\xBF", "UTF-8"),
    (b"\xFE\xFF", "UTF-16 big-endian"),
    (b"\xFF\xFE", "UTF-16 little-endian"),
];

/// Parse a body as JSON, strictly: an empty body, a byte-order mark and a key repeated in any
/// object are refused (see the module comment for the problems).
pub fn parse_json(bytes: &[u8]) -> Result<Json, Problem> {
    if bytes.iter().all(u8::is_ascii_whitespace) {
        let detail = if bytes.is_empty() {
            "the body is empty; send a JSON object".to_string()
        } else {
            format!(
                "the body is empty ({} bytes of whitespace); send a JSON object",
                bytes.len()
            )
        };
        return Err(Problem::new(Kind::MalformedJson, detail));
    }
    if let Some((_, name)) = BYTE_ORDER_MARKS
        .iter()
        .find(|(bom, _)| bytes.starts_with(bom))
    {
        return Err(Problem::new(
            Kind::UnsupportedMediaType,
            format!("the body starts with a {name} byte-order mark; send UTF-8 JSON without one"),
        ));
    }
    let mut duplicate: Option<Duplicate> = None;
    let mut path: Vec<String> = Vec::new();
    let mut deserializer = serde_json::Deserializer::from_slice(bytes);
    let parsed = StrictValue {
        path: &mut path,
        duplicate: &mut duplicate,
    }
    .deserialize(&mut deserializer)
    .and_then(|value| deserializer.end().map(|()| value));
    parsed.map_err(|error| {
        if let Some(duplicate) = duplicate {
            return duplicate.problem();
        }
        let (line, column) = (error.line(), error.column());
        let message = error.to_string();
        if message.starts_with("number out of range") {
            let offset = byte_offset(bytes, line, column);
            Problem::new(
                Kind::NonFinite,
                format!("a number at line {line}, column {column} is too large to be finite"),
            )
            .at(pointer_at(bytes, offset))
        } else {
            let mut problem = Problem::new(
                Kind::MalformedJson,
                format!("the body is not well-formed JSON: {message}"),
            );
            problem.position = Some((line, column));
            problem
        }
    })
}

/// A key met twice in one object, and where.
struct Duplicate {
    /// The reference tokens of the object holding the key (unescaped).
    object: Vec<String>,
    key: String,
}

impl Duplicate {
    fn problem(self) -> Problem {
        let object: String = self
            .object
            .iter()
            .map(|t| format!("/{}", escape_pointer_token(t)))
            .collect();
        let pointer = format!("{object}/{}", escape_pointer_token(&self.key));
        let place = if object.is_empty() {
            "the body's top-level object".to_string()
        } else {
            format!("the object at {}", echo(&object))
        };
        Problem::new(
            Kind::DuplicateKey,
            format!(
                "the key {} appears more than once in {place}; send each key once",
                echo(&self.key)
            ),
        )
        .at(pointer)
    }
}

/// A `serde_json::Value` built by a visitor that refuses a repeated key, remembering where it
/// stood (serde_json's own `Value` keeps the last of repeated keys silently). serde_json's
/// nesting limit (128) still applies: the deserializer counts depth, not the visitor.
struct StrictValue<'a> {
    path: &'a mut Vec<String>,
    duplicate: &'a mut Option<Duplicate>,
}

impl<'de> DeserializeSeed<'de> for StrictValue<'_> {
    type Value = Json;

    fn deserialize<D: Deserializer<'de>>(self, deserializer: D) -> Result<Json, D::Error> {
        deserializer.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for StrictValue<'_> {
    type Value = Json;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("any JSON value")
    }

    fn visit_bool<E>(self, v: bool) -> Result<Json, E> {
        Ok(Json::Bool(v))
    }

    fn visit_i64<E>(self, v: i64) -> Result<Json, E> {
        Ok(Json::from(v))
    }

    fn visit_u64<E>(self, v: u64) -> Result<Json, E> {
        Ok(Json::from(v))
    }

    fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<Json, E> {
        serde_json::Number::from_f64(v)
            .map(Json::Number)
            .ok_or_else(|| E::custom("number out of range"))
    }

    fn visit_str<E>(self, v: &str) -> Result<Json, E> {
        Ok(Json::String(v.to_string()))
    }

    fn visit_string<E>(self, v: String) -> Result<Json, E> {
        Ok(Json::String(v))
    }

    fn visit_unit<E>(self) -> Result<Json, E> {
        Ok(Json::Null)
    }

    fn visit_none<E>(self) -> Result<Json, E> {
        Ok(Json::Null)
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Json, A::Error> {
        let mut items = Vec::with_capacity(seq.size_hint().unwrap_or(0).min(4096));
        loop {
            self.path.push(items.len().to_string());
            let next = seq.next_element_seed(StrictValue {
                path: &mut *self.path,
                duplicate: &mut *self.duplicate,
            })?;
            self.path.pop();
            match next {
                Some(item) => items.push(item),
                None => break,
            }
        }
        Ok(Json::Array(items))
    }

    fn visit_map<A: MapAccess<'de>>(self, mut access: A) -> Result<Json, A::Error> {
        let mut map = serde_json::Map::new();
        while let Some(key) = access.next_key::<String>()? {
            if map.contains_key(&key) {
                *self.duplicate = Some(Duplicate {
                    object: self.path.clone(),
                    key,
                });
                return Err(serde::de::Error::custom("a key is repeated"));
            }
            self.path.push(key);
            let value = access.next_value_seed(StrictValue {
                path: &mut *self.path,
                duplicate: &mut *self.duplicate,
            })?;
            let key = self.path.pop().unwrap_or_default();
            map.insert(key, value);
        }
        Ok(Json::Object(map))
    }
}

fn byte_offset(bytes: &[u8], line: usize, column: usize) -> usize {
    let mut current = 1;
    let mut start = 0;
    for (i, &b) in bytes.iter().enumerate() {
        if current == line {
            break;
        }
        if b == b'\n' {
            current += 1;
            start = i + 1;
        }
    }
    (start + column.saturating_sub(1)).min(bytes.len())
}

enum Frame {
    Object {
        key: Option<String>,
        expecting_key: bool,
    },
    Array {
        index: usize,
    },
}

/// The JSON Pointer of the value being read at byte `offset` of a document that is well formed
/// up to there (a JSON parser stopped at `offset`).
pub fn pointer_at(bytes: &[u8], offset: usize) -> String {
    let mut stack: Vec<Frame> = Vec::new();
    let mut i = 0;
    let end = offset.min(bytes.len());
    while i < end {
        match bytes[i] {
            b'"' => {
                let start = i;
                i += 1;
                while i < bytes.len() && bytes[i] != b'"' {
                    if bytes[i] == b'\\' {
                        i += 1;
                    }
                    i += 1;
                }
                let text = bytes.get(start..=i.min(bytes.len() - 1)).unwrap_or(b"");
                if let Some(Frame::Object { key, expecting_key }) = stack.last_mut() {
                    if *expecting_key {
                        *key = serde_json::from_slice::<String>(text).ok();
                    }
                }
            }
            b':' => {
                if let Some(Frame::Object { expecting_key, .. }) = stack.last_mut() {
                    *expecting_key = false;
                }
            }
            b',' => match stack.last_mut() {
                Some(Frame::Object { key, expecting_key }) => {
                    *key = None;
                    *expecting_key = true;
                }
                Some(Frame::Array { index }) => *index += 1,
                None => {}
            },
            b'{' => stack.push(Frame::Object {
                key: None,
                expecting_key: true,
            }),
            b'[' => stack.push(Frame::Array { index: 0 }),
            b'}' | b']' => {
                stack.pop();
            }
            _ => {}
        }
        i += 1;
    }
    let mut pointer = String::new();
    for frame in &stack {
        match frame {
            Frame::Object { key: Some(k), .. } => {
                pointer.push('/');
                pointer.push_str(&escape_pointer_token(k));
            }
            Frame::Object { key: None, .. } => {}
            Frame::Array { index } => {
                pointer.push('/');
                pointer.push_str(&index.to_string());
            }
        }
    }
    pointer
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_overflowing_number_is_located_by_pointer() {
        let body = br#"{"observations": [{"a": 1}, {"b": "x,]", "a/c": 1e999}]}"#;
        let problem = parse_json(body).expect_err("1e999 overflows");
        assert_eq!(problem.kind, Kind::NonFinite);
        assert_eq!(problem.pointer.as_deref(), Some("/observations/1/a~1c"));
    }

    #[test]
    fn a_repeated_key_is_refused_at_any_depth_with_the_pointer_of_its_second_occurrence() {
        for (body, pointer) in [
            (&br#"{"a": 1, "a": 2}"#[..], "/a"),
            (br#"{"x": [{"b": 1}, {"c": {"d": 1, "d": 1}}]}"#, "/x/1/c/d"),
            (br#"[[], {"~k": 1, "~k": 1}]"#, "/1/~0k"),
        ] {
            let problem = parse_json(body).expect_err("a repeated key");
            assert_eq!(problem.kind, Kind::DuplicateKey);
            assert_eq!(problem.pointer.as_deref(), Some(pointer));
        }
    }

    #[test]
    fn the_strict_parse_builds_the_same_value_as_serde_json() {
        let body = br#"{"a": [1, -2, 3.5, 1e300, "t", null, true, {}], "b": {"c": [[]]}}"#;
        let strict = parse_json(body).expect("well formed");
        let plain: Json = serde_json::from_slice(body).expect("well formed");
        assert_eq!(strict, plain);
        // Keys that differ only after escaping are different keys.
        assert!(parse_json(br#"{"a": 1, "\u0061b": 2, "ab": 3}"#).is_err());
        assert!(parse_json(br#"{"a": 1, "A": 2}"#).is_ok());
    }

    #[test]
    fn empty_and_byte_order_marked_bodies_are_refused_in_their_own_words() {
        let problem = parse_json(b"").expect_err("empty");
        assert_eq!(problem.kind, Kind::MalformedJson);
        assert!(problem.detail.starts_with("the body is empty"));
        for bom in [&b"\xEF\xBB\xBF{}"[..], b"\xFE\xFF{}", b"\xFF\xFE{}"] {
            let problem = parse_json(bom).expect_err("a mark");
            assert_eq!(problem.kind, Kind::UnsupportedMediaType);
        }
    }

    #[test]
    fn malformed_json_reports_line_and_column() {
        let problem = parse_json(b"{\n  \"a\": }").expect_err("malformed");
        assert_eq!(problem.kind, Kind::MalformedJson);
        assert_eq!(problem.position, Some((2, 8)));
    }
}
