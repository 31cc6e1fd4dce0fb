//! Many concurrent clients, mixing single observations, batches and malformed requests: every
//! good answer is exactly the engine's, and the bad requests disturb none of them.

use ogive::engine::{Options, Scorer};
use serde_json::{json, Value as Json};

use crate::routes::check_answer;
use crate::support::http_models::{lease_file, model};
use crate::support::server::TestServer;

const CLIENTS: usize = 12;
const REQUESTS_PER_CLIENT: usize = 30;

fn observation(client: usize, request: usize) -> Json {
    let sectors = ["retail", "construction", "transport", "services"];
    json!({
        "annual_revenue": 25.0 + (client * 131 + request * 17) as f64,
        "years_trading": ((client + request) % 41) as f64 * 0.97,
        "prior_arrears": (client * request) % 5,
        "guarantor": (client + request) % 2,
        "sector": sectors[(client * 3 + request) % 4],
    })
}

#[test]
fn concurrent_clients_get_exactly_the_engines_answers() {
    let server = TestServer::start();
    let base = server.public.clone();
    let threads: Vec<_> = (0..CLIENTS)
        .map(|client| {
            let base = base.clone();
            std::thread::spawn(move || {
                let agent = ureq::AgentBuilder::new()
                    .timeout(std::time::Duration::from_secs(30))
                    .build();
                let m = model(&lease_file());
                let mut scorer = Scorer::new(&m);
                let url = format!("{base}/models/lease-test/probability");
                let mut checked = 0usize;
                for request in 0..REQUESTS_PER_CLIENT {
                    if request % 5 == 4 {
                        // A malformed request between good ones.
                        let reply = agent
                            .post(&url)
                            .set("Content-Type", "application/json")
                            .send_string("{\"observation\": {\"sector\": \"mining\"");
                        match reply {
                            Err(ureq::Error::Status(400, _)) => {}
                            other => {
                                panic!("client {client}: malformed request answered {other:?}")
                            }
                        }
                        continue;
                    }
                    let batch = request % 2 == 1;
                    let observations: Vec<Json> = if batch {
                        (0..7)
                            .map(|k| observation(client, request * 10 + k))
                            .collect()
                    } else {
                        vec![observation(client, request)]
                    };
                    let body = if batch {
                        json!({"observations": observations, "level": 0.9})
                    } else {
                        json!({"observation": observations[0], "level": 0.9})
                    };
                    let got: Json = agent
                        .post(&url)
                        .set("Content-Type", "application/json")
                        .send_string(&body.to_string())
                        .unwrap_or_else(|e| panic!("client {client} request {request}: {e}"))
                        .into_json()
                        .expect("JSON answer");
                    let options = Options::new(0.9).expect("level");
                    let mut values = Vec::new();
                    for (i, o) in observations.iter().enumerate() {
                        m.parse_observation(o.as_object().expect("object"), &mut values)
                            .expect("valid");
                        let expected = scorer.score(&m, &values, &options).clone();
                        let answer = if batch { &got["results"][i] } else { &got };
                        check_answer(&m, answer, &expected, &options);
                        checked += 1;
                    }
                }
                checked
            })
        })
        .collect();
    let checked: usize = threads
        .into_iter()
        .map(|t| t.join().expect("client thread"))
        .sum();
    let good_requests = CLIENTS * (REQUESTS_PER_CLIENT - REQUESTS_PER_CLIENT / 5);
    assert!(checked > good_requests, "checked {checked} answers");
    let metrics = server.get("/metrics").text;
    let scored = format!(
        "ogive_observations_scored_total{{model=\"lease-test\",version=\"2026-01\"}} {checked}"
    );
    assert!(metrics.contains(&scored), "expected {scored}");
}
