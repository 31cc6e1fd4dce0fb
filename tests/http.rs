//! The service over real HTTP: one test binary that starts the real server on 127.0.0.1:0 and
//! talks to it with a real client (ureq). Submodules in `tests/http/`:
//!
//! ```text
//! fixture.rs      test models (the server and its client: tests/support/server.rs)
//! routes.rs       every route and every option, answers compared with the engine
//! catalogue.rs    the catalogue of malformed requests: status, problem type, field
//! malformed.rs    the catalogue sent through the client, and related refusals
//! faulty.rs       batches sent with "on_error": "keep": faults answered in their places
//! concurrency.rs  many concurrent clients get exactly the engine's answers
//! contract.rs     live answers validated against the served OpenAPI document; metric names
//! dashboards.rs   CORS for listed origins, ETags on the model listings, stored versions
//! operation.rs    request ids, panics, header limits, draining and shutdown, the binary itself
//! strict.rs       strict body reading (repeated keys, empty, BOM, compression) and the echo rule
//! ```

#[path = "http/catalogue.rs"]
mod catalogue;
#[path = "http/concurrency.rs"]
mod concurrency;
#[path = "http/contract.rs"]
mod contract;
#[path = "http/dashboards.rs"]
mod dashboards;
#[path = "http/faulty.rs"]
mod faulty;
#[path = "http/malformed.rs"]
mod malformed;
#[path = "http/operation.rs"]
mod operation;
#[path = "http/routes.rs"]
mod routes;
#[path = "http/strict.rs"]
mod strict;
mod support;
