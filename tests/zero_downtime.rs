//! Zero downtime: under continuous, bounded loopback load (four client threads, each with one
//! request in flight at a time, plus a readiness prober), the live version of a model is
//! promoted and rolled back 200 times, one change every 100 ms at most, alternately through the admin listener and
//! through the lifecycle functions the CLI uses (so the directory watcher carries half of the
//! swaps). A shadow candidate scores every request meanwhile.
//!
//! Checked: no request fails and readiness never drops; every answer's probability equals,
//! bit for bit, what the engine computes with the version the answer names (a batch names one
//! version for all its observations, so a batch that straddled a swap would show); both
//! versions answered; every promotion and rollback succeeded; the shadow report counts every
//! answered observation, and its mean difference and disagreements are those of the versions
//! that answered; at the end the process serves what the pointer names.
//!
//! Nothing here is timed: the pacing only spreads the changes over the load, and the final wait
//! is a bound on a poll, generous enough for a loaded machine. How fast swaps can go is a
//! benchmark's question, not this test's.
//!
//! The models are invented inputs (`support::models`); the engine is the reference.

mod support;

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::thread;
use std::time::{Duration, Instant};

use ogive::monitoring::shadow::Share;
use ogive::registry::lifecycle;
use serde_json::{json, Value as Json};
use support::models::model_bytes;
use support::server::{engine_probability, model_of, observations, seed, TestServer};

const NAME: &str = "steady";
const CLIENTS: usize = 4;
const CHANGES: usize = 200;
const EVERY: Duration = Duration::from_millis(100);
/// How long the process may take to serve what the pointer names after the last change.
const SETTLE: Duration = Duration::from_secs(30);
const OBSERVATIONS: usize = 12;

/// One answered observation: the version that answered, the observation's index, the
/// probability.
type Answered = (String, usize, f64);

/// What one client thread saw.
#[derive(Default)]
struct Seen {
    answered: Vec<Answered>,
    failures: Vec<String>,
}

fn client(base: String, thread_index: usize, stop: Arc<AtomicBool>) -> Seen {
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(10))
        .build();
    let all = observations(OBSERVATIONS);
    let url = format!("{base}/models/{NAME}/probability");
    let mut seen = Seen::default();
    let mut round = thread_index;
    while !stop.load(Ordering::Relaxed) {
        round += 1;
        let first = round % OBSERVATIONS;
        let batch = round.is_multiple_of(2);
        let indices: Vec<usize> = if batch {
            (0..3).map(|k| (first + k) % OBSERVATIONS).collect()
        } else {
            vec![first]
        };
        let body = if batch {
            json!({"observations": indices.iter().map(|&i| all[i].clone()).collect::<Vec<_>>()})
        } else {
            json!({"observation": all[first]})
        };
        let response = agent
            .post(&url)
            .set("Content-Type", "application/json")
            .send_string(&body.to_string());
        let answer: Json = match response {
            Ok(r) => match r.into_json() {
                Ok(answer) => answer,
                Err(e) => {
                    seen.failures.push(format!("unreadable answer: {e}"));
                    continue;
                }
            },
            Err(e) => {
                seen.failures.push(format!("{e}"));
                continue;
            }
        };
        let version = answer["version"].as_str().unwrap_or("?").to_string();
        let probabilities: Vec<Option<f64>> = if batch {
            answer["results"]
                .as_array()
                .map(|r| r.iter().map(|a| a["probability"].as_f64()).collect())
                .unwrap_or_default()
        } else {
            vec![answer["probability"].as_f64()]
        };
        if probabilities.len() != indices.len() {
            seen.failures
                .push(format!("answer of the wrong size: {answer}"));
            continue;
        }
        for (&i, p) in indices.iter().zip(probabilities) {
            match p {
                Some(p) => seen.answered.push((version.clone(), i, p)),
                None => seen.failures.push(format!("no probability: {answer}")),
            }
        }
    }
    seen
}

fn prober(base: String, stop: Arc<AtomicBool>) -> Vec<String> {
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(10))
        .build();
    let mut failures = Vec::new();
    while !stop.load(Ordering::Relaxed) {
        match agent.get(&format!("{base}/readyz")).call() {
            Ok(r) if r.status() == 200 => {}
            Ok(r) => failures.push(format!("readiness {}", r.status())),
            Err(e) => failures.push(format!("readiness: {e}")),
        }
        thread::sleep(Duration::from_millis(50));
    }
    failures
}

#[test]
fn two_hundred_promotions_and_rollbacks_under_load_fail_no_request() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let bytes: BTreeMap<&str, Vec<u8>> = ["v1", "v2", "v3"]
        .into_iter()
        .map(|v| (v, model_bytes(NAME, v)))
        .collect();
    let versions: Vec<(&str, Vec<u8>)> = bytes.iter().map(|(v, b)| (*v, b.clone())).collect();
    seed(dir.path(), NAME, &versions, Some("v1"));
    let d = TestServer::serve(dir, Share::ALL);
    d.set_shadow(NAME, "v3").expect(200);

    let all = observations(OBSERVATIONS);
    let expected: BTreeMap<&str, Vec<f64>> = bytes
        .iter()
        .map(|(v, b)| {
            let model = model_of(b);
            (
                *v,
                all.iter().map(|o| engine_probability(&model, o)).collect(),
            )
        })
        .collect();

    let stop = Arc::new(AtomicBool::new(false));
    let clients: Vec<_> = (0..CLIENTS)
        .map(|i| {
            let (base, stop) = (d.public.clone(), Arc::clone(&stop));
            thread::spawn(move || client(base, i, stop))
        })
        .collect();
    let readiness = {
        let (base, stop) = (d.public.clone(), Arc::clone(&stop));
        thread::spawn(move || prober(base, stop))
    };

    let started = Instant::now();
    let mut changes = 0usize;
    let mut refused = Vec::new();
    while changes < CHANGES {
        let outcome = match changes % 4 {
            0 => {
                let reply = d.promote(NAME, "v2", false);
                (reply.status == 200).then_some(()).ok_or(reply.text)
            }
            1 => {
                let reply = d.rollback(NAME);
                (reply.status == 200).then_some(()).ok_or(reply.text)
            }
            2 => lifecycle::promote(d.root(), NAME, "v2", false, "cli:load", None)
                .map(|_| ())
                .map_err(|e| e.to_string()),
            _ => lifecycle::rollback(d.root(), NAME, "cli:load", None)
                .map(|_| ())
                .map_err(|e| e.to_string()),
        };
        if let Err(why) = outcome {
            refused.push(format!("change {changes}: {why}"));
        }
        changes += 1;
        let next = EVERY * changes as u32;
        if let Some(wait) = next.checked_sub(started.elapsed()) {
            thread::sleep(wait);
        }
    }
    let took = started.elapsed();
    stop.store(true, Ordering::Relaxed);
    let seen: Vec<Seen> = clients
        .into_iter()
        .map(|c| c.join().expect("a client thread"))
        .collect();
    let readiness_failures = readiness.join().expect("the prober");

    assert!(refused.is_empty(), "refused changes: {refused:?}");
    let failures: Vec<&String> = seen.iter().flat_map(|s| &s.failures).collect();
    assert!(
        failures.is_empty(),
        "{} failed requests, first: {:?}",
        failures.len(),
        failures.iter().take(5).collect::<Vec<_>>()
    );
    assert!(
        readiness_failures.is_empty(),
        "readiness failed: {readiness_failures:?}"
    );

    let answered: Vec<&Answered> = seen.iter().flat_map(|s| &s.answered).collect();
    let mut by_version: BTreeMap<&str, usize> = BTreeMap::new();
    for (version, i, p) in &answered {
        let Some(probabilities) = expected.get(version.as_str()).filter(|_| version != "v3") else {
            panic!("an answer names version {version:?}");
        };
        assert_eq!(
            *p, probabilities[*i],
            "{version} answered {p} for observation {i}; the engine computes {}",
            probabilities[*i]
        );
        *by_version.entry(version.as_str()).or_default() += 1;
    }
    assert!(
        by_version.get("v1").is_some_and(|&n| n > 0)
            && by_version.get("v2").is_some_and(|&n| n > 0),
        "both versions should have answered: {by_version:?}"
    );
    eprintln!(
        "{changes} changes over {:.1?}, {} observations answered ({by_version:?})",
        took,
        answered.len()
    );

    // The shadow compared every answer with the version that gave it.
    let report = d.shadow_report(NAME).expect(200);
    assert_eq!(report["scored"], answered.len() as u64, "{report}");
    let (mut sum, mut disagreements) = (0.0, 0u64);
    for (_, i, p) in &answered {
        let q = expected["v3"][*i];
        sum += (q - p).abs();
        disagreements += u64::from((*p >= 0.5) != (q >= 0.5));
    }
    let mean = sum / answered.len() as f64;
    let reported = report["mean_abs_difference"].as_f64().expect("a mean");
    // The same differences summed in another order: relative 1e-12.
    assert!(
        (reported - mean).abs() <= 1e-12 * mean,
        "{reported} vs {mean}"
    );
    assert_eq!(report["disagreements"], disagreements);

    let history = d
        .admin("GET", &format!("/models/{NAME}/history"), None)
        .expect(200);
    let pointer = history["live"]
        .as_str()
        .expect("a live version")
        .to_string();
    assert!(
        d.wait_for_version(NAME, &pointer, SETTLE),
        "the pointer names {pointer} but {} serves",
        d.public_version(NAME)
    );
    let moves = history["records"]
        .as_array()
        .expect("records")
        .iter()
        .filter(|r| r["action"] == "promote" || r["action"] == "rollback")
        .count();
    assert_eq!(
        moves,
        changes + 1,
        "one record per change, plus the first promotion"
    );
    d.stop();
}
