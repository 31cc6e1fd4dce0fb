//! Fuzz target: the body of `POST /models/{name}/probability`, taken through the same library
//! calls as the route's general reader (JSON parse → request fields → observations → scoring →
//! drift window and receipts → answer JSON), never panics, and ends either in an answer whose probabilities
//! lie in [0, 1] or in a problem with a 4xx status whose body is well-formed JSON.
//!
//! What this does not cover: the HTTP layer itself (headers, content type, the size limit),
//! which `tests/hardening.rs` and the HTTP tests exercise over a real connection.
#![no_main]

#[path = "../support/fuzz_model.rs"]
mod support;

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, OnceLock};

use libfuzzer_sys::fuzz_target;
use ogive::metrics::Metrics;
use ogive::monitoring::monitor::{Monitor, MonitorSettings};
use ogive::receipt::ReceiptKeys;
use ogive::service::body::parse_json;
use ogive::service::dto::parse_probability_request;
use ogive::service::observations::parse;
use ogive::service::problem::Problem;
use ogive::service::scoring::score;
use ogive::service::Limits;
use serde_json::Value as Json;

struct Service {
    metrics: Metrics,
    monitor: Monitor,
    max_batch: usize,
}

static SERVICE: OnceLock<Service> = OnceLock::new();
static REQUESTS: AtomicU64 = AtomicU64::new(0);

fn service() -> &'static Service {
    SERVICE.get_or_init(|| {
        let metrics = Metrics::new().expect("metrics register");
        let keys = Arc::new(ReceiptKeys::ephemeral().expect("an ephemeral receipt key"));
        let monitor = Monitor::new(MonitorSettings::default(), keys, &metrics.registry)
            .expect("monitor registers");
        Service {
            metrics,
            monitor,
            max_batch: Limits::default().max_batch,
        }
    })
}

/// What the route does with the body once it has been read.
fn answer(body: &[u8]) -> Result<Vec<u8>, Problem> {
    let service = service();
    let model = support::fuzz_model();
    let body = parse_json(body)?;
    let (request, observations) = parse_probability_request(&body, service.max_batch)?;
    let parsed = parse(model, observations, &[], request.keep_faulty)?;
    let mut values = parsed.values;
    let request_id = format!("fuzz-{}", REQUESTS.fetch_add(1, Ordering::Relaxed));
    let mut scored = score(
        model,
        &request,
        &values,
        parsed.faults,
        &request_id,
        &service.metrics.scoring(model),
    )?;
    scored.align_values(&mut values);
    let probabilities = scored.answers().iter().map(|a| a.probability);
    let receipts = service
        .monitor
        .record_scored(model, &values, probabilities)
        .expect("receipts are sealed");
    scored.set_receipts(receipts);
    Ok(scored.to_json())
}

fn probabilities(answer: &Json) -> Vec<f64> {
    match answer.get("results").and_then(Json::as_array) {
        Some(results) => results
            .iter()
            .filter(|r| r.get("error").is_none())
            .map(|r| {
                r["probability"]
                    .as_f64()
                    .expect("a result that is not a fault has a probability")
            })
            .collect(),
        None => vec![answer["probability"]
            .as_f64()
            .expect("an answer has a probability")],
    }
}

fuzz_target!(|data: &[u8]| {
    match answer(data) {
        Ok(json) => {
            let answer: Json = serde_json::from_slice(&json).expect("the answer is JSON");
            for p in probabilities(&answer) {
                assert!((0.0..=1.0).contains(&p), "probability {p}");
            }
        }
        Err(problem) => {
            let status = problem.kind.status();
            assert!((400..500).contains(&status), "status {status}: {problem}");
            let body: Json = serde_json::from_slice(&problem.to_json()).expect("problem is JSON");
            assert_eq!(body["status"].as_u64(), Some(u64::from(status)));
        }
    }
});
