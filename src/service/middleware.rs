//! The one middleware around every route of both listeners: it assigns the request id, refuses
//! oversized headers, records the request metrics (an admin route's label is prefixed `admin:`),
//! closes the connection after each answer while the process drains (`Connection: close`, so
//! that keep-alive clients move to another replica instead of meeting a closed socket), and
//! writes the request's single JSON log line (`service::access_log`). Beside it,
//! [`Guarded`] wraps every handler so that a panic answers that one request with a 500 instead
//! of taking down a worker and the connections it carries.
//!
//! ```text
//! log line fields: request_id route method status latency_ms [model version] [observations]
//! ```
//!
//! `model` and `version` come from the handler through [`Scored`] in the request extensions;
//! `observations` (the covariate values as sent) only when `--log-observations` is on.

use std::future::Future;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::task::Poll;
use std::time::Instant;

use actix_web::body::{BoxBody, MessageBody};
use actix_web::dev::{ServiceRequest, ServiceResponse};
use actix_web::http::header::{HeaderName, HeaderValue};
use actix_web::http::ConnectionType;
use actix_web::middleware::Next;
use actix_web::{web, Error, HttpMessage, ResponseError};

use super::access_log::{self, RequestLine};
use super::problem::{Kind, Problem};
use super::request_id::{RequestId, HEADER};
use super::state::AppState;

/// Which model version answered, for the log line (set by scoring handlers).
#[derive(Debug, Clone)]
pub struct Scored {
    /// The model's name.
    pub model: String,
    /// The version that answered.
    pub version: String,
    /// The observations as sent, when observation logging is on.
    pub observations: Option<String>,
}

/// A resource's route template, registered as the resource's app data: the middleware reads it
/// from the answered request to label metrics and logs, instead of matching the path against
/// every route a second time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RouteTemplate(pub &'static str);

/// The route label for requests that matched no route.
pub const UNMATCHED_ROUTE: &str = "unmatched";

/// The prefix of the admin listener's route labels (see [`AdminListener`]).
pub const ADMIN_ROUTE_PREFIX: &str = "admin:";

/// App data of the admin listener: its requests are counted with route labels prefixed
/// [`ADMIN_ROUTE_PREFIX`], so that they never mix with the public traffic of the same path.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct AdminListener;

/// Methods get their own metric label; anything else is counted as `OTHER`, so a client
/// cannot grow the label set.
fn method_label(method: &actix_web::http::Method) -> &'static str {
    match method.as_str() {
        "GET" => "GET",
        "POST" => "POST",
        "PUT" => "PUT",
        "DELETE" => "DELETE",
        "HEAD" => "HEAD",
        "OPTIONS" => "OPTIONS",
        "PATCH" => "PATCH",
        _ => "OTHER",
    }
}

fn header_bytes(req: &ServiceRequest) -> usize {
    req.headers()
        .iter()
        .map(|(name, value)| name.as_str().len() + value.len() + 4)
        .sum()
}

fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_string()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "a panic without a message".to_string()
    }
}

/// Poll `future`, turning a panic during any poll into an error value.
async fn catching_panics<F: Future>(future: F) -> Result<F::Output, String> {
    let mut future = Box::pin(future);
    std::future::poll_fn(move |cx| {
        match catch_unwind(AssertUnwindSafe(|| future.as_mut().poll(cx))) {
            Ok(Poll::Pending) => Poll::Pending,
            Ok(Poll::Ready(output)) => Poll::Ready(Ok(output)),
            Err(payload) => Poll::Ready(Err(panic_message(payload.as_ref()))),
        }
    })
    .await
}

/// A handler wrapper that turns a panic while handling a request into a logged 500 problem, so a
/// bug answers one request instead of unwinding through the worker and the connections it
/// carries. Every route is mounted through it (see `routes::configure`).
#[derive(Clone)]
pub struct Guarded<H>(pub H);

impl<H, Args> actix_web::Handler<Args> for Guarded<H>
where
    H: actix_web::Handler<Args>,
    Args: 'static,
    H::Future: 'static,
    H::Output: 'static,
{
    type Output = Result<H::Output, Problem>;
    type Future = std::pin::Pin<Box<dyn Future<Output = Self::Output>>>;

    fn call(&self, args: Args) -> Self::Future {
        let handler = AssertUnwindSafe(&self.0);
        let started = catch_unwind(AssertUnwindSafe(move || handler.0.call(args)));
        Box::pin(async move {
            let outcome = match started {
                Ok(future) => catching_panics(future).await,
                Err(payload) => Err(panic_message(payload.as_ref())),
            };
            outcome.map_err(|message| {
                tracing::error!(panic = %message, "handler panicked; answered 500");
                Problem::new(
                    Kind::Internal,
                    "the service could not answer this request; the cause has been logged",
                )
            })
        })
    }
}

/// The middleware function (mounted with `actix_web::middleware::from_fn`).
pub async fn observe(
    req: ServiceRequest,
    next: Next<impl MessageBody + 'static>,
) -> Result<ServiceResponse<BoxBody>, Error> {
    let started = Instant::now();
    let state = req.app_data::<web::Data<AppState>>().cloned();
    let request_id = RequestId::from_header(req.headers().get(HEADER));
    req.extensions_mut().insert(request_id.clone());
    let method = method_label(req.method());
    let max_header_bytes = state
        .as_ref()
        .map_or(usize::MAX, |s| s.settings.limits.max_header_bytes);

    let size = header_bytes(&req);
    let result = if size > max_header_bytes {
        let problem = Problem::new(
            Kind::HeadersTooLarge,
            format!("the request headers take {size} bytes; the limit is {max_header_bytes}"),
        )
        .limit(max_header_bytes as u64);
        Ok(req
            .into_response(problem.error_response())
            .map_into_boxed_body())
    } else {
        next.call(req)
            .await
            .map(ServiceResponse::map_into_boxed_body)
            .map(super::body::close_after_refused_body)
    };
    let seconds = started.elapsed().as_secs_f64();
    let mut response = match result {
        Ok(response) => response,
        Err(error) => {
            let status = error.as_response_error().status_code().as_u16();
            record(
                state.as_ref(),
                &request_id,
                UNMATCHED_ROUTE,
                method,
                status,
                seconds,
                None,
            );
            return Err(error);
        }
    };

    if let Ok(value) = HeaderValue::from_str(request_id.as_str()) {
        response
            .headers_mut()
            .insert(HeaderName::from_static(HEADER), value);
    }
    if state.as_ref().is_some_and(|s| s.health.draining()) {
        response
            .response_mut()
            .head_mut()
            .set_connection_type(ConnectionType::Close);
    }
    let status = response.status().as_u16();
    let request = response.request();
    let mut route: std::borrow::Cow<'static, str> = match request.app_data::<RouteTemplate>() {
        Some(template) => template.0.into(),
        None => request
            .match_pattern()
            .map_or(UNMATCHED_ROUTE.into(), Into::into),
    };
    if request.app_data::<AdminListener>().is_some() {
        route = format!("{ADMIN_ROUTE_PREFIX}{route}").into();
    }
    let extensions = request.extensions();
    record(
        state.as_ref(),
        &request_id,
        &route,
        method,
        status,
        seconds,
        extensions.get::<Scored>(),
    );
    drop(extensions);
    Ok(response)
}

/// Count the request and write its log line.
fn record(
    state: Option<&web::Data<AppState>>,
    request_id: &RequestId,
    route: &str,
    method: &str,
    status: u16,
    seconds: f64,
    scored: Option<&Scored>,
) {
    if let Some(state) = state {
        state.metrics.record_request(route, method, status, seconds);
    }
    // To the microsecond: finer digits are clock noise and made lines like 0.010655999999999999.
    let latency_ms = (seconds * 1e6).round() / 1e3;
    match access_log::installed() {
        Some(Some(sink)) => sink.request(&RequestLine {
            request_id: request_id.as_str(),
            route,
            method,
            status,
            latency_ms,
            model: scored.map(|s| s.model.as_str()),
            version: scored.map(|s| s.version.as_str()),
            observations: scored.and_then(|s| s.observations.as_deref()),
        }),
        Some(None) => {}
        None => tracing::info!(
            request_id = request_id.as_str(),
            route,
            method,
            status,
            latency_ms,
            model = scored.map(|s| s.model.as_str()),
            version = scored.map(|s| s.version.as_str()),
            observations = scored.and_then(|s| s.observations.as_deref()),
            "request"
        ),
    }
}

#[cfg(test)]
mod tests {
    use actix_web::{test, App};

    use super::*;

    #[actix_web::test]
    async fn a_panicking_handler_answers_500_and_the_next_request_is_served() {
        let app = test::init_service(
            App::new()
                .route(
                    "/panic",
                    web::get().to(Guarded(|| async {
                        if true {
                            panic!("deliberate panic for the test");
                        }
                        "unreachable"
                    })),
                )
                .route("/fine", web::get().to(Guarded(|| async { "fine" }))),
        )
        .await;
        for _ in 0..3 {
            let request = test::TestRequest::get().uri("/panic").to_request();
            let response = test::call_service(&app, request).await;
            assert_eq!(response.status().as_u16(), 500);
            let body = test::read_body(response).await;
            let text = String::from_utf8_lossy(&body);
            assert!(text.contains("urn:ogive:problem:internal"), "{text}");
            assert!(
                !text.contains("deliberate"),
                "the cause must not reach the client: {text}"
            );
            let request = test::TestRequest::get().uri("/fine").to_request();
            assert_eq!(test::call_service(&app, request).await.status(), 200);
        }
    }
}
