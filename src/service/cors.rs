//! Cross-origin requests from browser pages (CORS, as the Fetch Standard defines it), for
//! the public listener only and only for origins named on an explicit allow-list
//! (`ogive serve --cors-origin`). With an empty list, the default, nothing here adds a header
//! and a preflight `OPTIONS` is answered as any other unlisted method is (405).
//!
//! ```text
//! request from a listed origin, OPTIONS with Access-Control-Request-Method
//!     → 204, Access-Control-Allow-Origin: ORIGIN, -Allow-Methods, -Allow-Headers, -Max-Age
//! request from a listed origin, any other
//!     → the route's answer, with Access-Control-Allow-Origin: ORIGIN and -Expose-Headers
//! request from an unlisted origin, or with no Origin
//!     → the route's answer, without any Access-Control header
//! every answer while the list is not empty carries Vary: Origin (caches must not hand one
//! origin's answer to another)
//! ```
//!
//! No credentials are allowed (the public routes take none), and `*` is refused as an origin:
//! the list says exactly who may call.

use actix_web::body::{BoxBody, MessageBody};
use actix_web::dev::{ServiceRequest, ServiceResponse};
use actix_web::http::header::{self, HeaderValue};
use actix_web::http::Method;
use actix_web::middleware::Next;
use actix_web::{web, Error, HttpResponse};

use super::state::AppState;

/// The methods the public routes take, as a preflight answer lists them.
pub const ALLOW_METHODS: &str = "GET, HEAD, POST";
/// The request headers a page may send beyond the CORS-safelisted ones: a JSON body's type, a
/// request id for tracing, and a cached answer's ETag.
pub const ALLOW_HEADERS: &str = "Content-Type, X-Request-Id, If-None-Match";
/// The answer headers a page may read beyond the CORS-safelisted ones.
pub const EXPOSE_HEADERS: &str = "ETag, X-Request-Id, Retry-After";
/// How long a browser may keep a preflight's answer, in seconds.
pub const MAX_AGE_SECONDS: u32 = 600;

/// The origins allowed to call the public listener from a browser page, each written as the
/// browser sends it in `Origin`: `scheme://host` or `scheme://host:port`, lower case.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct CorsOrigins(Vec<String>);

impl CorsOrigins {
    /// The allow-list of these origins, each checked by `parse_origin`.
    pub fn new<S: AsRef<str>>(origins: &[S]) -> Result<CorsOrigins, String> {
        let mut list = Vec::with_capacity(origins.len());
        for origin in origins {
            let origin = parse_origin(origin.as_ref())?;
            if !list.contains(&origin) {
                list.push(origin);
            }
        }
        Ok(CorsOrigins(list))
    }

    /// Whether the list is empty (cross-origin calls off).
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// The listed origins.
    pub fn origins(&self) -> &[String] {
        &self.0
    }

    /// Whether `origin`, as a request's `Origin` header holds it, is listed.
    pub fn allows(&self, origin: &str) -> bool {
        self.0.iter().any(|o| o.eq_ignore_ascii_case(origin))
    }
}

/// An origin as a browser serializes it: `http` or `https`, `://`, a host (a name, an IPv4
/// address or a bracketed IPv6 address) and an optional port, with no path, query, user or
/// trailing slash; returned in lower case. The error names what is wrong and shows the form.
pub fn parse_origin(text: &str) -> Result<String, String> {
    let form = "write it as the browser sends it in Origin, e.g. https://dashboard.example.org or http://127.0.0.1:3000 (scheme, host and port only)";
    let origin = text.trim().to_ascii_lowercase();
    if origin == "*" || origin == "null" {
        return Err(format!(
            "'{text}' is not allowed as a CORS origin: list each origin that may call; {form}"
        ));
    }
    let rest = origin
        .strip_prefix("https://")
        .or_else(|| origin.strip_prefix("http://"))
        .ok_or_else(|| {
            format!("the CORS origin '{text}' does not start with http:// or https://; {form}")
        })?;
    let (host, port) = match rest.strip_prefix('[') {
        Some(v6) => {
            let Some((address, after)) = v6.split_once(']') else {
                return Err(format!(
                    "the CORS origin '{text}' opens '[' without closing it; {form}"
                ));
            };
            let is_v6 = !address.is_empty()
                && address
                    .chars()
                    .all(|c| c.is_ascii_hexdigit() || c == ':' || c == '.');
            let port = match after.strip_prefix(':') {
                Some(port) => Some(port),
                None if after.is_empty() => None,
                None => {
                    return Err(format!(
                        "the CORS origin '{text}' has something after its address that is not a port; {form}"
                    ))
                }
            };
            if !is_v6 {
                return Err(format!(
                    "the CORS origin '{text}' has no IPv6 address inside [ ]; {form}"
                ));
            }
            (address, port)
        }
        None => match rest.split_once(':') {
            Some((host, port)) => (host, Some(port)),
            None => (rest, None),
        },
    };
    let host_ok = !host.is_empty()
        && host
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '.' || c == ':');
    if !host_ok {
        return Err(format!(
            "the CORS origin '{text}' has no host, or a path, user or character a host cannot hold; {form}"
        ));
    }
    if let Some(port) = port {
        if port.parse::<u16>().is_err() {
            return Err(format!(
                "the CORS origin '{text}' has a port '{port}' that is not a number from 0 to 65535; {form}"
            ));
        }
    }
    Ok(origin)
}

fn preflight(origin: &HeaderValue) -> HttpResponse {
    HttpResponse::NoContent()
        .insert_header((header::ACCESS_CONTROL_ALLOW_ORIGIN, origin.clone()))
        .insert_header((header::ACCESS_CONTROL_ALLOW_METHODS, ALLOW_METHODS))
        .insert_header((header::ACCESS_CONTROL_ALLOW_HEADERS, ALLOW_HEADERS))
        .insert_header((header::ACCESS_CONTROL_MAX_AGE, MAX_AGE_SECONDS.to_string()))
        .insert_header((header::VARY, "Origin"))
        .finish()
}

/// The middleware function (mounted on the public listener with
/// `actix_web::middleware::from_fn`, inside the observing middleware so that preflights are
/// counted and logged as every request is).
pub async fn cors(
    req: ServiceRequest,
    next: Next<impl MessageBody + 'static>,
) -> Result<ServiceResponse<BoxBody>, Error> {
    let listed = req
        .app_data::<web::Data<AppState>>()
        .map(|s| &s.settings.cors_origins)
        .filter(|list| !list.is_empty());
    let Some(list) = listed else {
        return next
            .call(req)
            .await
            .map(ServiceResponse::map_into_boxed_body);
    };
    let origin = req
        .headers()
        .get(header::ORIGIN)
        .filter(|o| o.to_str().is_ok_and(|o| list.allows(o)))
        .cloned();
    if let Some(origin) = &origin {
        let is_preflight = req.method() == Method::OPTIONS
            && req
                .headers()
                .contains_key(header::ACCESS_CONTROL_REQUEST_METHOD);
        if is_preflight {
            return Ok(req.into_response(preflight(origin)));
        }
    }
    let mut response = next
        .call(req)
        .await
        .map(ServiceResponse::map_into_boxed_body)?;
    let headers = response.headers_mut();
    headers.append(header::VARY, HeaderValue::from_static("Origin"));
    if let Some(origin) = origin {
        headers.insert(header::ACCESS_CONTROL_ALLOW_ORIGIN, origin);
        headers.insert(
            header::ACCESS_CONTROL_EXPOSE_HEADERS,
            HeaderValue::from_static(EXPOSE_HEADERS),
        );
    }
    Ok(response)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_origin_is_scheme_host_and_port() {
        assert_eq!(
            parse_origin("https://Dashboard.Example.org").as_deref(),
            Ok("https://dashboard.example.org")
        );
        assert_eq!(
            parse_origin("http://127.0.0.1:3000").as_deref(),
            Ok("http://127.0.0.1:3000")
        );
        assert_eq!(
            parse_origin("http://[::1]:8000").as_deref(),
            Ok("http://[::1]:8000")
        );
        assert_eq!(parse_origin("http://[::1]").as_deref(), Ok("http://[::1]"));
    }

    #[test]
    fn a_bad_origin_is_refused_with_its_form() {
        for bad in [
            "*",
            "null",
            "dashboard.example.org",
            "ftp://example.org",
            "https://example.org/",
            "https://example.org/app",
            "https://user@example.org",
            "https://example.org:http",
            "https://example.org:70000",
            "https://",
            "http://[::1",
            "http://[::1]x",
        ] {
            let error = parse_origin(bad).expect_err(bad);
            assert!(error.contains("http://127.0.0.1:3000"), "{bad}: {error}");
        }
    }

    #[test]
    fn the_list_matches_origins_as_browsers_send_them() {
        let list = CorsOrigins::new(&[
            "https://a.example",
            "https://A.example",
            "http://b.example:81",
        ])
        .expect("origins");
        assert_eq!(list.origins().len(), 2);
        assert!(list.allows("https://a.example"));
        assert!(list.allows("http://b.example:81"));
        assert!(!list.allows("http://b.example"));
        assert!(!list.allows("https://a.example.evil"));
        assert!(CorsOrigins::default().is_empty());
    }
}
