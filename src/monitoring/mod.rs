//! Monitoring of the served versions, in one place: what a serving process measures beside
//! scoring, per model version, and exports for Prometheus to add up across the fleet.
//!
//! ```text
//! drift.rs        input and prediction drift: sliding windows, PSI, and bin counters per
//!                 covariate with the training shares
//! outcomes.rs     an outcome matched to its answer by the receipt; the recently reported ids
//! calibration.rs  calibration windows (Brier, log loss, slope, AUC) and the additive outcome
//!                 counters
//! shadow.rs       the shadow comparison: |Δp| and disagreements of a shadow version beside
//!                 the live answer, and the admin report
//! monitor.rs      the one handle the service holds (drift, receipts, calibration) and the
//!                 report that combines them
//! families.rs     metric families written at scrape time
//! ```
//!
//! Per-version state: each part keeps its state by model name and version label, created the
//! first time a version is seen (drift and calibration in atomically swapped maps, read on
//! the request path without a lock; the shadow comparison in a map under one lock, taken once
//! per request of a shadowed model), so a promotion never mixes two versions' figures.
//! Exporting: a figure that a ratio is taken of is read under its state's lock at scrape time
//! and written as families (`monitoring::families`), so one scrape never mixes two moments: drift's bin
//! counters and training shares, calibration's outcome counters, and all four shadow series
//! (mean |Δp| is their sum over their count, the disagreement rate disagreements over scored).
//! The per-pod window figures (PSI, Brier, AUC, ...) and drift's dropped samples are kept in
//! prometheus gauges and counters that each part's collector refreshes and writes in the same
//! scrape, under the same lock; no part's series are registered on their own.
//! Every series carries `model` and `version` (the shadow's, the candidate's), and the fleet's
//! figures are sums of these over replicas (the recording rules in
//! `deploy/prometheus/ogive-rules.yml`).
//!
//! Which version shadows, and what may, is the model directory's ([`crate::registry::shadow`]);
//! the Prometheus registry and the request series are [`crate::metrics`]'s; the admin route
//! that serves the report is `service::admin::monitoring`. Nothing here knows HTTP or blocks
//! the request path.

pub mod calibration;
pub mod drift;
pub(crate) mod families;
pub mod monitor;
pub mod outcomes;
pub mod shadow;
