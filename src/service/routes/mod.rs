//! The public routes, one file per route family, and the one place that mounts them
//! ([`configure`]). Each resource answers a method it does not take with 405 and an `Allow`
//! header; a path that matches no route gets 404, both as problem details.

pub(crate) mod curve;
pub(crate) mod health;
pub(crate) mod models;
pub(crate) mod openapi;
pub(crate) mod outcomes;
pub(crate) mod probability;

use actix_web::{web, HttpResponse};

use super::middleware::{Guarded, RouteTemplate};
use super::problem::{echo, Kind, Problem};

/// The handler of a resource's other methods: 405 with `Allow: allow` (the admin routes use
/// it too).
pub fn method_not_allowed(
    allow: &'static str,
) -> impl Fn() -> std::future::Ready<Result<HttpResponse, Problem>> + Clone {
    move || {
        let mut problem = Problem::new(Kind::MethodNotAllowed, format!("this route takes {allow}"));
        problem.allow = Some(allow);
        std::future::ready(Err(problem))
    }
}

/// The answer to a path that matches no route.
pub async fn not_found(req: actix_web::HttpRequest) -> Result<HttpResponse, Problem> {
    Err(Problem::new(
        Kind::NotFound,
        format!("there is no route {}", echo(req.path())),
    ))
}

/// A resource labelled with its route template (see [`RouteTemplate`]).
pub fn resource(path: &'static str) -> actix_web::Resource {
    web::resource(path).app_data(RouteTemplate(path))
}

fn get<F, Args>(path: &'static str, handler: F) -> actix_web::Resource
where
    F: actix_web::Handler<Args>,
    Args: actix_web::FromRequest + 'static,
    F::Output: actix_web::Responder + 'static,
{
    resource(path)
        .route(web::get().to(Guarded(handler)))
        .default_service(web::to(method_not_allowed("GET")))
}

/// A resource answering GET and HEAD with `handler` (actix strips a HEAD answer's body and
/// keeps its headers): for the probes, which load balancers often send as HEAD.
fn get_and_head<F, Args>(path: &'static str, handler: F) -> actix_web::Resource
where
    F: actix_web::Handler<Args> + Clone,
    Args: actix_web::FromRequest + 'static,
    F::Output: actix_web::Responder + 'static,
{
    resource(path)
        .route(web::get().to(Guarded(handler.clone())))
        .route(web::head().to(Guarded(handler)))
        .default_service(web::to(method_not_allowed("GET, HEAD")))
}

/// Mount every public route. The model routes come first, the busiest first: the router tries
/// templated paths in order, each a pattern match.
pub fn configure(cfg: &mut web::ServiceConfig) {
    cfg.service(
        resource("/models/{name}/probability")
            .route(web::post().to(Guarded(probability::probability)))
            .default_service(web::to(method_not_allowed("POST"))),
    )
    .service(get("/models/{name}/curve", curve::curve))
    .service(
        resource("/models/{name}/versions/{version}/probability")
            .route(web::post().to(Guarded(probability::version_probability)))
            .default_service(web::to(method_not_allowed("POST"))),
    )
    .service(
        resource("/models/{name}/outcomes")
            .route(web::post().to(Guarded(outcomes::report)))
            .default_service(web::to(method_not_allowed("POST"))),
    )
    .service(get("/models/{name}", models::describe))
    .service(get_and_head("/livez", health::livez))
    .service(get_and_head("/readyz", health::readyz))
    .service(get("/metrics", health::metrics))
    .service(get("/openapi.json", openapi::document_route))
    .service(get("/models", models::list));
}
