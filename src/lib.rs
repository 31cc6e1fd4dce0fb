//! ogive: serve logit, probit, cloglog and cauchit models with marginal effects, delta-method
//! intervals, extrapolation warnings and monitoring.
//!
//! ```text
//! link      F, f, f′ for each link, accurate in both tails
//! model     the model file, its validation, covariates and terms
//! engine    probability, effects, intervals, warnings, contributions, averages
//! evaluate  discrimination and calibration on labelled rows; paired comparison of two models
//! fit       maximum-likelihood estimation and the model file it writes
//! registry  the model directory, live versions, promotion, rollback, history, watching
//!           and the atomic snapshot
//! batch     streaming CSV scoring for `ogive score`: columns, shards, error policy
//! report    the reviewer's report and plots of `ogive describe`
//! service   the public and admin HTTP listeners: routes, problem details, limits, shutdown
//! metrics   the Prometheus registry and the request and scoring series
//! monitoring drift, outcomes by receipt, calibration and the shadow comparison, per version
//! receipt   the sealed receipt on every answer: keys, sealing, opening
//! cli       the subcommands of the binary, one file each
//! json_text JSON text written by hand for the hot paths: escaped strings, shortest doubles
//! ```
#![warn(missing_docs)]

pub mod batch;
pub mod cli;
pub mod engine;
pub mod evaluate;
pub mod fit;
pub(crate) mod json_text;
pub mod link;
pub mod metrics;
pub mod model;
pub mod monitoring;
pub mod receipt;
pub mod registry;
pub mod report;
pub mod service;
pub mod timestamp;
