//! Adding a covariate without a hard cut-over, over real HTTP on real files: a stored version
//! announces the covariate (`announces` in its model file), the live version then accepts the
//! field, ignores it for scoring and says so in `notes`; a shadow of the announcing version
//! is scored on the calls that send it; and its promotion passes the gate without
//! `allow_breaking`. Throughout, a caller that sends the new field once the announcement shows
//! in `GET /models/{name}` never gets a failed call.
//!
//! Identity tests: answers are compared with the engine on the version that answered. The
//! models are invented inputs (`support::models`), never reference values.

mod support;

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use ogive::model::CovariateKind;
use ogive::monitoring::shadow::Share;
use serde_json::{json, Value as Json};
use support::models::{base, bytes_of, model_bytes, numeric, with_covariate};
use support::server::{engine_probability, model_of, observations, seed, TestServer};

const NAME: &str = "uptake";
const NEW: &str = "employees";

/// Version v2: v1's covariates and `employees`, announced.
fn announcing() -> Vec<u8> {
    let mut file = with_covariate(base(NAME, "v2"), numeric(NEW, CovariateKind::Count));
    file.announces = vec![NEW.to_string()];
    bytes_of(file)
}

fn with_new_field(mut observation: Json, i: usize) -> Json {
    observation[NEW] = json!(i % 9);
    observation
}

/// Wait until the public listener lists `NEW` as announced (the follower polls every 500 ms).
fn wait_for_announcement(d: &TestServer) -> Json {
    let started = Instant::now();
    loop {
        let detail = d.get(&format!("/models/{NAME}")).expect(200);
        if detail["announced"].is_array() {
            return detail;
        }
        assert!(
            started.elapsed() < Duration::from_secs(10),
            "never announced: {detail}"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
}

/// A deployment serving `uptake` v1 alone.
fn serving_v1() -> TestServer {
    let dir = tempfile::tempdir().expect("a temporary directory");
    seed(
        dir.path(),
        NAME,
        &[("v1", model_bytes(NAME, "v1"))],
        Some("v1"),
    );
    TestServer::serve(dir, Share::ALL)
}

#[test]
fn announce_shadow_promote_with_no_failed_call() {
    let d = serving_v1();
    let v1 = model_of(&model_bytes(NAME, "v1"));
    let route = format!("/models/{NAME}/probability");

    // Before any announcement the field is refused, naming it.
    let early = d.post(
        &route,
        &json!({"observation": with_new_field(observations(1)[0].clone(), 1)}),
    );
    early.expect_problem(422, "unknown-field");

    // 1. Announce: the upload passes the gate without allow_breaking, listing the change.
    let stored = d.upload(NAME, "v2", &announcing(), "").expect(201);
    let changes = stored["changes"].as_array().expect("changes");
    assert!(
        changes
            .iter()
            .any(|c| c["change"] == json!("announced") && c["covariate"] == json!(NEW)),
        "{stored}"
    );
    let detail = wait_for_announcement(&d);
    assert_eq!(detail["version"], json!("v1"));
    assert_eq!(
        detail["announced"],
        json!([{"covariate": NEW, "version": "v2"}])
    );

    // Callers may now send the field: the live version ignores it and says so.
    for (i, observation) in observations(6).into_iter().enumerate() {
        let sent = with_new_field(observation.clone(), i);
        let answer = d.post(&route, &json!({"observation": sent})).expect(200);
        assert_eq!(answer["version"], json!("v1"));
        let p = answer["probability"].as_f64().expect("p");
        let expected = engine_probability(&v1, &observation);
        assert!(
            (p - expected).abs() <= 4e-16 * expected,
            "ignored for scoring: {p} vs {expected}"
        );
        let notes = answer["notes"].as_array().expect("notes");
        let note = notes
            .iter()
            .find(|n| n["code"] == json!("announced_ignored"))
            .unwrap_or_else(|| panic!("no announced_ignored note: {notes:?}"));
        let message = note["message"].as_str().expect("message");
        assert!(
            message.contains("'employees'") && message.contains("'v2'"),
            "{message}"
        );
        // A caller that does not send it yet is answered as before, without the note.
        let plain = d
            .post(&route, &json!({"observation": observation}))
            .expect(200);
        assert!(!plain["notes"]
            .as_array()
            .expect("notes")
            .iter()
            .any(|n| n["code"] == json!("announced_ignored")));
    }

    // 2. Shadow: scored on the calls that send the field; the others are counted unscored.
    d.set_shadow(NAME, "v2").expect(200);
    let v2 = model_of(&announcing());
    let batch: Vec<Json> = observations(10)
        .into_iter()
        .enumerate()
        .map(|(i, o)| if i < 7 { with_new_field(o, i) } else { o })
        .collect();
    let answer = d.post(&route, &json!({"observations": batch})).expect(200);
    assert_eq!(answer["count"], json!(10));
    let report = d.shadow_report(NAME).expect(200);
    assert_eq!(report["scored"], json!(7), "{report}");
    assert_eq!(report["unscored"], json!(3), "{report}");
    let mean: f64 = batch[..7]
        .iter()
        .zip(observations(7))
        .map(|(o, without)| (engine_probability(&v2, o) - engine_probability(&v1, &without)).abs())
        .sum::<f64>()
        / 7.0;
    let reported = report["mean_abs_difference"].as_f64().expect("mean");
    assert!((reported - mean).abs() <= 1e-12, "{reported} vs {mean}");

    // 3. Promote, while callers that send the field keep calling: none fails.
    let stop = Arc::new(AtomicBool::new(false));
    let (answered, failed) = (Arc::new(AtomicUsize::new(0)), Arc::new(AtomicUsize::new(0)));
    let callers: Vec<_> = (0..2)
        .map(|c| {
            let (stop, answered, failed) = (stop.clone(), answered.clone(), failed.clone());
            let url = format!("{}{route}", d.public);
            std::thread::spawn(move || {
                let agent = ureq::AgentBuilder::new()
                    .timeout(Duration::from_secs(10))
                    .build();
                let mut i = c;
                let started = Instant::now();
                while !stop.load(Ordering::SeqCst) && started.elapsed() < Duration::from_secs(30) {
                    let observation = with_new_field(observations(i % 50 + 1)[i % 50].clone(), i);
                    match agent
                        .post(&url)
                        .send_json(json!({"observation": observation}))
                    {
                        Ok(_) => answered.fetch_add(1, Ordering::SeqCst),
                        Err(_) => failed.fetch_add(1, Ordering::SeqCst),
                    };
                    i += 2;
                }
            })
        })
        .collect();
    std::thread::sleep(Duration::from_millis(200));
    let promoted = d.promote(NAME, "v2", false).expect(200);
    assert!(
        promoted["changes"]
            .as_array()
            .is_some_and(|c| c.iter().any(|c| c["change"] == json!("announced"))),
        "{promoted}"
    );
    assert!(d.wait_for_version(NAME, "v2", Duration::from_secs(10)));
    std::thread::sleep(Duration::from_millis(300));
    stop.store(true, Ordering::SeqCst);
    for caller in callers {
        caller.join().expect("caller");
    }
    assert_eq!(
        failed.load(Ordering::SeqCst),
        0,
        "failed calls during the promotion"
    );
    assert!(answered.load(Ordering::SeqCst) > 0);

    // v2 is live: it uses the field, and nothing is announced any more.
    let observation = with_new_field(observations(1)[0].clone(), 4);
    let answer = d
        .post(&route, &json!({"observation": observation}))
        .expect(200);
    assert_eq!(answer["version"], json!("v2"));
    let p = answer["probability"].as_f64().expect("p");
    let expected = engine_probability(&v2, &observation);
    assert!(
        (p - expected).abs() <= 4e-16 * expected,
        "{p} vs {expected}"
    );
    assert!(!answer["notes"]
        .as_array()
        .expect("notes")
        .iter()
        .any(|n| n["code"] == json!("announced_ignored")));
    let started = Instant::now();
    while d.get(&format!("/models/{NAME}")).expect(200)["announced"].is_array() {
        assert!(
            started.elapsed() < Duration::from_secs(10),
            "still announced"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    d.stop();
}

#[test]
fn a_covariate_added_without_announcing_it_is_still_breaking() {
    let d = serving_v1();
    let silent = bytes_of(with_covariate(
        base(NAME, "v2"),
        numeric(NEW, CovariateKind::Count),
    ));
    let refused = d
        .upload(NAME, "v2", &silent, "")
        .expect_problem(422, "breaking-change");
    let detail = refused["detail"].as_str().expect("detail");
    assert!(detail.contains("--announce employees"), "{detail}");
    d.stop();
}
