//! Entity tags for the read routes (RFC 9110 §8.8.3): a page that polls `GET /models`,
//! `GET /models/{name}` or a curve sends back the tag it was given in `If-None-Match` and gets
//! `304 Not Modified`, with no body, until the answer changes.
//!
//! `/models` and `/models/{name}` carry a strong tag of the answer's bytes (the first 128 bits
//! of their SHA-256): it changes exactly when any byte would, a hot swap or a new shadow
//! included. A curve's tag is derived from the live version instead (`service::curve::etag`),
//! since its answer depends only on that version and the query.

use actix_web::http::header;
use actix_web::{HttpRequest, HttpResponse};
use sha2::{Digest, Sha256};

/// The strong entity tag of `bytes`, quoted: 32 hexadecimal digits.
pub fn of_bytes(bytes: &[u8]) -> String {
    let digest = Sha256::digest(bytes);
    let mut tag = String::with_capacity(34);
    tag.push('"');
    for byte in &digest[..16] {
        tag.push_str(&format!("{byte:02x}"));
    }
    tag.push('"');
    tag
}

/// Whether an `If-None-Match` header value matches `etag` (weak comparison, as RFC 9110
/// §13.1.2 requires for this header).
pub fn if_none_match(header: &str, etag: &str) -> bool {
    header.split(',').map(str::trim).any(|candidate| {
        candidate == "*" || candidate.strip_prefix("W/").unwrap_or(candidate) == etag
    })
}

/// Whether `req` says, through `If-None-Match`, that it already holds the answer tagged `etag`.
pub fn already_held(req: &HttpRequest, etag: &str) -> bool {
    req.headers()
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| if_none_match(v, etag))
}

/// `304 Not Modified` with the tag (and the caching rule the full answer carries).
pub fn not_modified(etag: &str) -> HttpResponse {
    HttpResponse::NotModified()
        .insert_header((header::ETAG, etag))
        .insert_header((header::CACHE_CONTROL, "no-cache"))
        .finish()
}

/// The JSON answer `body` tagged `etag`, or 304 when `req` already holds it. `no-cache`: a
/// cache may keep the answer but must ask again before each use.
pub fn json_tagged(req: &HttpRequest, etag: &str, body: Vec<u8>) -> HttpResponse {
    if already_held(req, etag) {
        return not_modified(etag);
    }
    HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .insert_header((header::ETAG, etag))
        .insert_header((header::CACHE_CONTROL, "no-cache"))
        .body(body)
}

/// The JSON answer `body`, tagged with the strong tag of its bytes (see [`json_tagged`]).
pub fn json_tagged_by_bytes(req: &HttpRequest, body: Vec<u8>) -> HttpResponse {
    let etag = of_bytes(&body);
    json_tagged(req, &etag, body)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_tag_is_quoted_and_follows_the_bytes() {
        let a = of_bytes(b"{\"models\":[]}");
        assert_eq!(a.len(), 34);
        assert!(a.starts_with('"') && a.ends_with('"'));
        assert_eq!(a, of_bytes(b"{\"models\":[]}"));
        assert_ne!(a, of_bytes(b"{\"models\":[1]}"));
        // SHA-256("abc") begins ba7816bf8f01cfea414140de5dae2223 (FIPS 180-2, appendix B.1).
        assert_eq!(of_bytes(b"abc"), "\"ba7816bf8f01cfea414140de5dae2223\"");
    }

    #[test]
    fn if_none_match_compares_weakly_and_takes_lists() {
        let tag = "\"0123\"";
        assert!(if_none_match("\"0123\"", tag));
        assert!(if_none_match("W/\"0123\"", tag));
        assert!(if_none_match("\"x\", \"0123\"", tag));
        assert!(if_none_match("*", tag));
        assert!(!if_none_match("\"0124\"", tag));
        assert!(!if_none_match("0123", tag));
    }
}
