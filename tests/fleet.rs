//! A fleet of three real `ogive serve` processes sharing the demo model directory and one
//! receipt key file, as replicas behind a load balancer do:
//!
//! - a receipt sealed by one replica opens on every other, and its outcome is counted once, by
//!   the replica it was reported to;
//! - the fleet counters summed over the three `/metrics` pages give the Brier score, log loss,
//!   calibration-in-the-large and outcome count of every outcome reported, computed here
//!   directly from the answers (an identity: the same figure two ways);
//! - tampering: a receipt with any character changed, cut short, of another model, or sealed
//!   by a process with another key is refused (422) by every replica; a repeat is refused (409)
//!   by the replica that took it.
//!
//! Bounded: each process must be ready within 30 s and is killed when the test ends.

mod support;

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::{json, Value as Json};
use support::process::free_port;

/// One `ogive serve` process, killed when dropped.
struct Replica {
    child: Child,
    base: String,
}

impl Drop for Replica {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn agent() -> ureq::Agent {
    ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(10))
        .build()
}

fn start(key_file: &Path) -> Replica {
    let port = free_port();
    let child = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["serve", "--models"])
        .arg(Path::new(env!("CARGO_MANIFEST_DIR")).join("model-files"))
        .args(["--listen", &format!("127.0.0.1:{port}")])
        .arg("--receipt-key-file")
        .arg(key_file)
        .args(["--workers", "1", "--drain-delay-ms", "0"])
        .args(["--monitoring", "on"])
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        .env_remove("OGIVE_ADMIN_LISTEN")
        .env("RUST_LOG", "warn")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start ogive serve");
    let mut replica = Replica {
        child,
        base: format!("http://127.0.0.1:{port}"),
    };
    let started = Instant::now();
    loop {
        if let Ok(r) = agent().get(&format!("{}/readyz", replica.base)).call() {
            if r.status() == 200 {
                return replica;
            }
        }
        if let Some(status) = replica.child.try_wait().expect("child status") {
            panic!("ogive serve exited with {status}");
        }
        assert!(
            started.elapsed() < Duration::from_secs(30),
            "{} not ready within 30 s",
            replica.base
        );
        std::thread::sleep(Duration::from_millis(50));
    }
}

fn post(replica: &Replica, path: &str, body: &Json) -> (u16, Json) {
    let response = match agent()
        .post(&format!("{}{path}", replica.base))
        .set("Content-Type", "application/json")
        .send_string(&body.to_string())
    {
        Ok(r) => r,
        Err(ureq::Error::Status(_, r)) => r,
        Err(e) => panic!("POST {path}: {e}"),
    };
    let status = response.status();
    let text = response.into_string().expect("a body");
    (status, serde_json::from_str(&text).expect("a JSON answer"))
}

/// The samples of one `/metrics` page whose name is `name` and labels include `labels`.
fn scraped(replica: &Replica, name: &str, labels: &[(&str, &str)]) -> f64 {
    let text = agent()
        .get(&format!("{}/metrics", replica.base))
        .call()
        .expect("metrics")
        .into_string()
        .expect("text");
    text.lines()
        .filter(|l| !l.starts_with('#'))
        .filter_map(|l| l.rsplit_once(' '))
        .filter(|(series, _)| {
            series.split_once('{').map_or(*series, |(n, _)| n) == name
                && labels
                    .iter()
                    .all(|(k, v)| series.contains(&format!("{k}=\"{v}\"")))
        })
        .map(|(_, value)| value.parse::<f64>().expect("a number"))
        .sum()
}

fn key_file(dir: &Path, name: &str, key: &str) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, format!("{key}\n")).expect("write key");
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o600)).expect("chmod");
    }
    path
}

/// Observations of the demo lease model: a spread of revenues, ages and sectors.
fn lease_observation(i: usize) -> Json {
    let sectors = [
        "construction",
        "hospitality",
        "logistics",
        "manufacturing",
        "retail",
    ];
    json!({
        "annual_revenue": 150.0 + 37.0 * (i % 23) as f64,
        "years_trading": 0.5 + (i % 17) as f64,
        "prior_arrears": i % 4,
        "guarantor": i % 2,
        "sector": sectors[i % sectors.len()],
    })
}

#[test]
fn three_replicas_share_receipts_and_their_counters_add_up_to_the_fleet() {
    let dir = tempfile::tempdir().expect("temp dir");
    let shared = key_file(
        dir.path(),
        "keys",
        "fleet-test-key-0123456789abcdefghijklmnopqrstuvwxyz",
    );
    let replicas: Vec<Replica> = (0..3).map(|_| start(&shared)).collect();
    let lease = "/models/lease-arrears";

    // 60 answers, a third from each replica, in batches of 20.
    let mut answers: Vec<(f64, String)> = Vec::new();
    for (r, replica) in replicas.iter().enumerate() {
        let observations: Vec<Json> = (0..20).map(|i| lease_observation(20 * r + i)).collect();
        let (status, body) = post(
            replica,
            &format!("{lease}/probability"),
            &json!({ "observations": observations }),
        );
        assert_eq!(status, 200, "{body}");
        for result in body["results"].as_array().expect("results") {
            answers.push((
                result["probability"].as_f64().expect("probability"),
                result["receipt"].as_str().expect("receipt").to_string(),
            ));
        }
    }
    assert_eq!(answers.len(), 60);

    // Each outcome goes to the replica after the one that answered (answers 0..20 came from
    // replica 0 and are reported to replica 1, and so on): no report reaches the scorer.
    let mut reported: Vec<(f64, bool)> = Vec::new();
    for (i, (p, receipt)) in answers.iter().enumerate() {
        let y = (i * 7) % 3 == 0;
        let to = &replicas[(i / 20 + 1) % 3];
        let (status, body) = post(
            to,
            &format!("{lease}/outcomes"),
            &json!({"receipt": receipt, "outcome": u8::from(y)}),
        );
        assert_eq!(status, 200, "answer {i}: {body}");
        assert_eq!(
            body["probability"].as_f64(),
            Some(*p),
            "the exact probability"
        );
        assert_eq!(body["model"], json!("lease-arrears"));
        reported.push((*p, y));
    }

    // The counters of the three replicas, summed, against the figures of all 60 outcomes
    // computed here from the answers. Relative 1e-12: the same sums in another order, and the
    // exposition prints every value with enough digits to round-trip.
    let labels = [("model", "lease-arrears"), ("version", "1.0.0")];
    let fleet = |name: &str| -> f64 { replicas.iter().map(|r| scraped(r, name, &labels)).sum() };
    let n = reported.len() as f64;
    assert_eq!(fleet("ogive_outcomes_total"), n);
    let positives = reported.iter().filter(|(_, y)| *y).count() as f64;
    assert_eq!(fleet("ogive_outcome_positives_total"), positives);
    let close = |got: f64, want: f64, what: &str| {
        assert!(
            (got - want).abs() <= 1e-12 * want.abs().max(1e-300),
            "{what}: fleet {got}, direct {want}"
        );
    };
    let brier = reported
        .iter()
        .map(|(p, y)| (p - f64::from(u8::from(*y))).powi(2))
        .sum::<f64>()
        / n;
    close(
        fleet("ogive_outcome_squared_error_total") / n,
        brier,
        "Brier score",
    );
    let log_loss = reported
        .iter()
        .map(|(p, y)| if *y { -p.ln() } else { -(-p).ln_1p() })
        .sum::<f64>()
        / n;
    close(
        fleet("ogive_outcome_log_loss_total") / n,
        log_loss,
        "log loss",
    );
    let mean_p = reported.iter().map(|(p, _)| p).sum::<f64>() / n;
    close(
        (fleet("ogive_outcome_positives_total") - fleet("ogive_outcome_predicted_total")) / n,
        positives / n - mean_p,
        "calibration-in-the-large",
    );
    // Drift: every observation was counted once, by the replica that scored it.
    let sector_bins: f64 = replicas
        .iter()
        .map(|r| {
            scraped(
                r,
                "ogive_input_bin_observations_total",
                &[
                    ("model", "lease-arrears"),
                    ("version", "1.0.0"),
                    ("covariate", "sector"),
                ],
            )
        })
        .sum();
    assert_eq!(sector_bins, 60.0);

    // Tampering. A repeat is refused by the replica that took it (409); the others cannot know
    // of it (each remembers only what was reported to it, as documented), so it is the
    // reporter's duty to report once.
    let (status, body) = post(
        &replicas[1],
        &format!("{lease}/outcomes"),
        &json!({"receipt": answers[0].1, "outcome": 1}),
    );
    assert_eq!(
        (status, body["type"].as_str()),
        (409, Some("urn:ogive:problem:outcome-already-reported"))
    );
    // Any one character changed, at a few positions across the receipt, on every replica.
    let receipt = &answers[5].1;
    let positions = [
        0,
        1,
        8,
        receipt.len() / 2,
        receipt.len() - 2,
        receipt.len() - 1,
    ];
    for at in positions {
        let mut altered = receipt.clone().into_bytes();
        altered[at] = if altered[at] == b'A' { b'B' } else { b'A' };
        let altered = String::from_utf8(altered).expect("ascii");
        for replica in &replicas {
            let (status, body) = post(
                replica,
                &format!("{lease}/outcomes"),
                &json!({"receipt": altered, "outcome": 0}),
            );
            assert_eq!(
                (status, body["type"].as_str()),
                (422, Some("urn:ogive:problem:invalid-receipt")),
                "character {at} changed: {body}"
            );
        }
    }
    // Cut short.
    let (status, body) = post(
        &replicas[2],
        &format!("{lease}/outcomes"),
        &json!({"receipt": &receipt[..receipt.len() - 4], "outcome": 0}),
    );
    assert_eq!(
        (status, body["type"].as_str()),
        (422, Some("urn:ogive:problem:invalid-receipt"))
    );
    // A lease receipt reported as an outcome of the rebate model.
    let (status, body) = post(
        &replicas[0],
        "/models/rebate-uptake/outcomes",
        &json!({"receipt": answers[7].1, "outcome": 0}),
    );
    assert_eq!(
        (status, body["type"].as_str()),
        (422, Some("urn:ogive:problem:receipt-of-another-model")),
        "{body}"
    );
    // Sealed by a process with another key: well formed, but no replica of this fleet holds
    // the key.
    let other = start(&key_file(
        dir.path(),
        "other-keys",
        "another-deployment-key-abcdefghijklmnopqrstuvwxyz0123",
    ));
    let (status, body) = post(
        &other,
        &format!("{lease}/probability"),
        &json!({"observation": lease_observation(3)}),
    );
    assert_eq!(status, 200);
    let foreign = body["receipt"].as_str().expect("receipt").to_string();
    for replica in &replicas {
        let (status, body) = post(
            replica,
            &format!("{lease}/outcomes"),
            &json!({"receipt": foreign, "outcome": 1}),
        );
        assert_eq!(
            (status, body["type"].as_str()),
            (422, Some("urn:ogive:problem:invalid-receipt")),
            "{body}"
        );
        assert!(
            body["detail"]
                .as_str()
                .is_some_and(|d| d.contains("key this server does not hold")),
            "{body}"
        );
    }
    // None of the refusals moved a counter.
    assert_eq!(fleet("ogive_outcomes_total"), n);
}
