//! Request ids: an incoming `X-Request-Id` is kept when it is 1 to 128 visible ASCII characters
//! (0x21–0x7E, so no spaces, controls or anything that could forge a log line), otherwise a
//! fresh UUID v4 is used. The id is echoed in the response header, put in every answer body and
//! in the request's log line.

use actix_web::http::header::HeaderValue;

/// The header that carries the id in both directions.
pub const HEADER: &str = "x-request-id";
/// The longest id accepted from a client.
pub const MAX_LENGTH: usize = 128;

/// The id of one request, kept in the request's extensions.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RequestId(pub String);

impl RequestId {
    /// The client's id if it is acceptable, otherwise a new one.
    pub fn from_header(value: Option<&HeaderValue>) -> RequestId {
        value
            .and_then(|v| v.to_str().ok())
            .filter(|s| is_acceptable(s))
            .map(|s| RequestId(s.to_string()))
            .unwrap_or_else(RequestId::generate)
    }

    /// A fresh UUID v4.
    pub fn generate() -> RequestId {
        RequestId(uuid::Uuid::new_v4().to_string())
    }

    /// The id as text.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

/// Whether a client-supplied id may be echoed and logged as it is.
pub fn is_acceptable(id: &str) -> bool {
    !id.is_empty() && id.len() <= MAX_LENGTH && id.bytes().all(|b| (0x21..=0x7e).contains(&b))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn accepts_visible_ascii_up_to_128_and_replaces_the_rest() {
        assert!(is_acceptable("abc-123_XYZ:/=+"));
        assert!(is_acceptable(&"a".repeat(128)));
        assert!(!is_acceptable(&"a".repeat(129)));
        assert!(!is_acceptable(""));
        assert!(!is_acceptable("has space"));
        assert!(!is_acceptable("tab\there"));
        assert!(!is_acceptable("é"));
        let fresh = RequestId::from_header(Some(&HeaderValue::from_static("bad id")));
        assert_eq!(fresh.as_str().len(), 36);
        assert!(uuid::Uuid::parse_str(fresh.as_str()).is_ok());
    }
}
