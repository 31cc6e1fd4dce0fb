//! Identity: a fit on one thread and on several gives the same model. The reader joins its
//! blocks in file order and every pass over the data reduces fixed blocks of rows combined in
//! block order, so the agreement is expected to be exact; the check allows relative 1e-10
//! (the tolerance the fit promises) on every number of the model file.
//!
//! The data are simulated (Rust `rand`, fixed seed) only as input: the check compares the fit
//! with itself, not with a value.

mod support;

use std::fmt::Write;

use ogive::link::Link;
use rand::{Rng, SeedableRng};
use support::fit::*;

/// 70,000 rows: more than four 16,384-row reduction blocks and several 1 MiB reading blocks,
/// with a categorical column whose levels first appear in different blocks.
fn simulated_csv(rows: usize) -> String {
    let mut rng = rand::rngs::StdRng::seed_from_u64(42);
    let regions = ["north", "south", "east", "west", "centre"];
    let mut text = String::from("y,x,w,count,region\n");
    for i in 0..rows {
        let x: f64 = rng.gen_range(-2.0..2.0);
        let w: f64 = rng.gen_range(0.5..3.0);
        let count: u32 = rng.gen_range(0..6);
        // Later levels appear only in later blocks.
        let region = regions[(i * regions.len() / rows + rng.gen_range(0..2)) % regions.len()];
        let z = -0.3 + 0.8 * x - 0.4 * w.ln() + 0.15 * f64::from(count);
        let p = 1.0 / (1.0 + (-z).exp());
        let y = u8::from(rng.gen::<f64>() < p);
        writeln!(text, "{y},{x},{w},{count},{region}").unwrap();
    }
    text
}

fn numbers_of(fitted: &ogive::fit::Fitted) -> Vec<(String, f64)> {
    let file = &fitted.file;
    let mut out: Vec<(String, f64)> = file
        .terms
        .iter()
        .map(|t| (format!("coefficient {}", t.term), t.coefficient))
        .collect();
    for (r, row) in file
        .covariance
        .as_ref()
        .expect("covariance")
        .iter()
        .enumerate()
    {
        for (c, v) in row.iter().enumerate() {
            out.push((format!("covariance[{r}][{c}]"), *v));
        }
    }
    let p = &file.provenance;
    out.push((
        "log-likelihood".into(),
        p.log_likelihood.expect("log-likelihood"),
    ));
    out.push((
        "null log-likelihood".into(),
        p.null_log_likelihood.expect("null"),
    ));
    for covariate in &file.covariates {
        let t = &covariate.training;
        for (what, value) in [("min", t.min), ("max", t.max), ("mean", t.mean)] {
            if let Some(v) = value {
                out.push((format!("{} training {what}", covariate.name), v));
            }
        }
    }
    out
}

#[test]
fn one_thread_and_many_fit_the_same_model() {
    let csv = temp_csv(&simulated_csv(70_000));
    for link in [Link::Logit, Link::Probit] {
        for covariance in [
            ogive::fit::CovarianceType::Classical,
            ogive::fit::CovarianceType::Robust,
        ] {
            let mut request = request(&csv.path, "y", "x, log(w), count, region");
            request.categorical = vec!["region".parse().unwrap()];
            request.link = link;
            request.covariance = covariance;
            request.threads = Some(1);
            let one = fit_request(&request).expect("fit on one thread");
            request.threads = Some(4);
            let many = fit_request(&request).expect("fit on four threads");
            assert_eq!(one.file.check_cases.len(), many.file.check_cases.len());
            let (a, b) = (numbers_of(&one), numbers_of(&many));
            assert_eq!(a.len(), b.len());
            assert!(a.len() > 30, "the comparison should cover the whole model");
            for ((what, x), (_, y)) in a.iter().zip(&b) {
                assert_relative(*y, *x, THREADS_AGREE, format!("{link} {what}"));
            }
            assert_eq!(one.report.iterations, many.report.iterations, "{link}");
        }
    }
}
