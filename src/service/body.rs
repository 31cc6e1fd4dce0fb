//! Reading a JSON request body: the content type (415), the size limit (413, checked against
//! `Content-Length` before reading and against the bytes while reading), and the parse (400 for
//! malformed JSON with line and column; 422 `non-finite` for a number too large for a double,
//! with the JSON Pointer of where it stands), all within the body timeout (408 for a body that
//! stops arriving: actix times only the request head).
//!
//! This module knows nothing of models; the routes interpret the parsed value.

use std::pin::Pin;
use std::task::{Context, Poll};
use std::time::Duration;

use actix_web::body::{BodySize, BoxBody, MessageBody};
use actix_web::dev::ServiceResponse;
use actix_web::http::header;
use actix_web::web::{self, Bytes, Payload};
use actix_web::{HttpMessage, HttpRequest};
use serde_json::Value as Json;
use tokio::time::{timeout_at, Instant};

use super::config::Limits;
use super::problem::{escape_pointer_token, Kind, Problem};

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

/// Read the body of a JSON request within `limit` bytes and the body timeout.
pub async fn read_json_body(
    req: &HttpRequest,
    payload: Payload,
    limit: usize,
) -> Result<Bytes, Problem> {
    if !is_json_content_type(req) {
        let sent = req
            .headers()
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .map(|s| format!("'{}'", s.chars().take(100).collect::<String>()))
            .unwrap_or_else(|| "no Content-Type".to_string());
        return Err(Problem::new(
            Kind::UnsupportedMediaType,
            format!("send the body as application/json; the request has {sent}"),
        ));
    }
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
        body.extend_from_slice(&chunk);
    }
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
/// [`read_json_body`] for [`close_after_refused_body`].
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

/// Parse a body as JSON.
pub fn parse_json(bytes: &[u8]) -> Result<Json, Problem> {
    serde_json::from_slice(bytes).map_err(|error| {
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
    fn malformed_json_reports_line_and_column() {
        let problem = parse_json(b"{\n  \"a\": }").expect_err("malformed");
        assert_eq!(problem.kind, Kind::MalformedJson);
        assert_eq!(problem.position, Some((2, 8)));
    }
}
