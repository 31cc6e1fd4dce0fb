//! ogive: serve logit, probit, cloglog and cauchit models with marginal effects, delta-method
//! intervals, extrapolation warnings and monitoring.
//!
//! ```text
//! link      F, f, f′ for each link, accurate in both tails
//! model     the model file, its validation, covariates and terms
//! engine    probability, effects, intervals, warnings, contributions, averages
//! registry  the model directory, live versions, promotion, hot swap
//! service   the HTTP listener: routes, problem details, limits, shutdown
//! metrics   the Prometheus registry and the request and scoring metrics
//! batch     streaming CSV scoring for `ogive score`: columns, shards, error policy
//! report    the reviewer's report and plots of `ogive describe`
//! cli       the subcommands of the binary, one file each
//! ```
#![warn(missing_docs)]

pub mod batch;
pub mod cli;
pub mod engine;
pub mod fit;
pub mod link;
pub mod metrics;
pub mod model;
pub mod registry;
pub mod report;
pub mod service;
