//! Per-observation cost of the engine beside a bare kernel, in the same run.
//!
//! The model: 10 covariates (7 continuous, 2 counts, 1 binary), a square and a product term
//! and the intercept (13 terms), a full coefficient covariance, and a joint-extrapolation
//! check. The bare kernel does the least any logit scorer must: a dot product of 13
//! coefficients with a precomputed term vector, then 1/(1 + e^−z).
//!
//! ```text
//! bare   dot product + logistic on precomputed term vectors
//! (i)    Scorer::probability: terms from covariate values, index, link
//! (ii)   Scorer::score: probability and every effect (no intervals, no contributions)
//! (iii)  Scorer::score with Options::default(): everything — standard errors and intervals
//!        for p and every effect, contributions, warnings
//! ```
//!
//! Criterion measures each as a group. After it, a plain timing loop runs the four round-robin
//! over many repetitions and prints each one's median per-observation time and its ratio to
//! the bare kernel's median (goals: (i) ≤ 1.3, (ii) ≤ 2, (iii) ≤ 6).
//!
//! Run: `cargo bench --bench engine`. To skip the criterion groups and print only the ratios,
//! give a filter that matches no group: `cargo bench --bench engine -- ratios-only`.

#[allow(dead_code)]
#[path = "../tests/support/reference.rs"]
mod reference;

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{Criterion, Throughput};
use ogive::engine::{Options, Scorer};
use ogive::link::Link;
use ogive::model::{CovariateKind, Model, Value};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use reference::{CovariatePart, ModelParts};

/// Observations per batch.
const BATCH: usize = 1024;
/// Repetitions of each batch in the ratio loop.
const REPETITIONS: usize = 301;

struct Bench {
    model: Model,
    batch: Vec<Vec<Value>>,
    /// Term vectors of the batch, row-major, for the bare kernel.
    term_vectors: Vec<f64>,
    coefficients: Vec<f64>,
}

fn setup() -> Bench {
    let mut rng = StdRng::seed_from_u64(7);
    let mut covariates = Vec::new();
    let mut terms = vec![("intercept".to_string(), -0.5)];
    for i in 0..7 {
        let name = format!("c{i}");
        let part = CovariatePart::numeric(&name, CovariateKind::Continuous, -3.0, 3.0, 0.0);
        covariates.push(part);
        terms.push((name, rng.gen_range(-0.5..0.5)));
    }
    for i in 0..2 {
        let name = format!("n{i}");
        covariates.push(CovariatePart::numeric(
            &name,
            CovariateKind::Count,
            0.0,
            12.0,
            2.0,
        ));
        terms.push((name, rng.gen_range(-0.2..0.2)));
    }
    covariates.push(CovariatePart::numeric(
        "b0",
        CovariateKind::Binary,
        0.0,
        1.0,
        0.4,
    ));
    terms.push(("b0".into(), 0.7));
    terms.push(("c0^2".into(), -0.1));
    terms.push(("c1*c2".into(), 0.2));
    let k = terms.len();
    let factor: Vec<Vec<f64>> = (0..k)
        .map(|_| (0..k).map(|_| rng.gen_range(-0.1..0.1)).collect())
        .collect();
    let covariance = (0..k)
        .map(|r| {
            (0..k)
                .map(|c| (0..k).map(|i| factor[r][i] * factor[c][i]).sum())
                .collect()
        })
        .collect();
    let parts = ModelParts {
        name: "bench".into(),
        link: Link::Logit,
        covariates,
        terms,
        covariance: Some(covariance),
        check_cases: Vec::new(),
        provenance: "benches/engine.rs".into(),
    };
    let mut file = parts.file();
    let continuous: Vec<String> = (0..7).map(|i| format!("c{i}")).collect();
    let identity: Vec<Vec<f64>> = (0..7)
        .map(|r| (0..7).map(|c| f64::from(u8::from(r == c))).collect())
        .collect();
    file.joint = Some(ogive::model::file::JointSpec {
        covariates: continuous,
        mean: vec![0.0; 7],
        covariance: identity,
        max_distance: 6.0,
    });
    let model = Model::from_file(file).expect("bench model");
    let batch: Vec<Vec<Value>> = (0..BATCH)
        .map(|_| {
            let mut values: Vec<Value> = (0..7)
                .map(|_| Value::Number(rng.gen_range(-2.5..2.5)))
                .collect();
            values.extend((0..2).map(|_| Value::Number(f64::from(rng.gen_range(0u8..10)))));
            values.push(Value::Number(f64::from(rng.gen_range(0u8..=1))));
            values
        })
        .collect();
    let mut term_vectors = Vec::with_capacity(BATCH * k);
    let mut t = Vec::new();
    for values in &batch {
        model.term_vector(values, &mut t);
        term_vectors.extend_from_slice(&t);
    }
    Bench {
        coefficients: model.coefficients().to_vec(),
        model,
        batch,
        term_vectors,
    }
}

/// The baseline: z = βᵀt on a precomputed term vector, then the logistic function.
#[inline(never)]
fn bare_kernel(coefficients: &[f64], term_vectors: &[f64]) -> f64 {
    let k = coefficients.len();
    let mut total = 0.0;
    for t in term_vectors.chunks_exact(k) {
        let z: f64 = coefficients.iter().zip(t).map(|(b, x)| b * x).sum();
        total += 1.0 / (1.0 + (-z).exp());
    }
    total
}

#[inline(never)]
fn probability_only(model: &Model, batch: &[Vec<Value>]) -> f64 {
    batch.iter().map(|v| Scorer::probability(model, v)).sum()
}

#[inline(never)]
fn scored(scorer: &mut Scorer, model: &Model, batch: &[Vec<Value>], options: &Options) -> f64 {
    let mut total = 0.0;
    for values in batch {
        let a = scorer.score(model, values, options);
        total += a.probability + a.effects.last().map_or(0.0, |e| e.effect);
    }
    total
}

fn effects_only() -> Options {
    let mut options = Options::default();
    options.intervals = false;
    options.contributions = false;
    options
}

/// One batch pass of a variant; returns a checksum so the work cannot be optimised away.
type Pass<'a> = Box<dyn FnMut() -> f64 + 'a>;

/// The four variants, by name, as closures over one batch pass.
fn variants(b: &Bench) -> Vec<(&'static str, Pass<'_>)> {
    let mut effects_scorer = Scorer::new(&b.model);
    let mut full_scorer = Scorer::new(&b.model);
    let effects = effects_only();
    let everything = Options::default();
    vec![
        (
            "bare kernel",
            Box::new(|| bare_kernel(&b.coefficients, &b.term_vectors)),
        ),
        (
            "(i) probability",
            Box::new(|| probability_only(&b.model, &b.batch)),
        ),
        (
            "(ii) probability and effects",
            Box::new(move || scored(&mut effects_scorer, &b.model, &b.batch, &effects)),
        ),
        (
            "(iii) everything with intervals",
            Box::new(move || scored(&mut full_scorer, &b.model, &b.batch, &everything)),
        ),
    ]
}

fn criterion_groups(c: &mut Criterion, b: &Bench) {
    let mut group = c.benchmark_group("engine");
    group.throughput(Throughput::Elements(BATCH as u64));
    group.measurement_time(Duration::from_secs(4));
    group.warm_up_time(Duration::from_secs(1));
    for (name, mut run) in variants(b) {
        group.bench_function(name, |bencher| bencher.iter(|| black_box(run())));
    }
    group.finish();
}

fn median(samples: &mut [f64]) -> f64 {
    samples.sort_by(f64::total_cmp);
    samples[samples.len() / 2]
}

/// Round-robin timing of the four variants; medians in nanoseconds per observation.
fn medians(b: &Bench) -> Vec<(&'static str, f64)> {
    let mut runs = variants(b);
    for (_, run) in runs.iter_mut() {
        for _ in 0..20 {
            black_box(run());
        }
    }
    let mut samples = vec![Vec::with_capacity(REPETITIONS); runs.len()];
    for _ in 0..REPETITIONS {
        for (i, (_, run)) in runs.iter_mut().enumerate() {
            let start = Instant::now();
            black_box(run());
            samples[i].push(start.elapsed().as_nanos() as f64 / BATCH as f64);
        }
    }
    runs.iter()
        .zip(samples.iter_mut())
        .map(|((name, _), s)| (*name, median(s)))
        .collect()
}

fn main() {
    let b = setup();
    let mut c = Criterion::default().configure_from_args();
    criterion_groups(&mut c, &b);
    c.final_summary();

    let medians = medians(&b);
    let bare = medians[0].1;
    println!();
    println!("engine: median ns per observation over {REPETITIONS} round-robin passes of {BATCH}");
    for (name, ns) in &medians {
        println!("  {name:<34} {ns:>8.2} ns");
    }
    for ((name, ns), (label, goal)) in
        medians[1..]
            .iter()
            .zip([("(i)", 1.3), ("(ii)", 2.0), ("(iii)", 6.0)])
    {
        let ratio = ns / bare;
        let verdict = if ratio <= goal { "within" } else { "MISSES" };
        println!("ratio {label} = {ratio:.2} ({name}; {verdict} the goal of {goal})");
    }
}
