//! The one support tree of the integration tests. Every test binary that needs help takes
//! `mod support;` and uses the parts it needs; each binary uses a different subset, hence the
//! `dead_code` allowance.
//!
//! - [`close`]: comparing numbers, with tolerances from [`tolerances`] (the only place a
//!   tolerance is written).
//! - [`reference`]: the committed fixtures of `tests/reference/` and models built from them.
//! - [`fit`]: what the fit tests share (`use support::fit::*;`).
//! - [`cli`]: models and a runner for the tests of the `ogive` commands.
//! - [`models`]: valid model files built in code, for the model directory, the gate and the
//!   follower.
//! - [`server`]: the one test server (the real application on port 0) and its client;
//!   [`http_models`]: the committed HTTP test models it serves.
//! - [`contract`]: the one OpenAPI contract checker.
//! - [`process`]: `ogive serve` as a real process: free ports, a child killed when dropped,
//!   plain GETs, copying a folder, stand-in tools for the scripts tests run.
#![allow(dead_code)]

pub mod cli;
pub mod close;
pub mod contract;
pub mod fit;
pub mod http_models;
pub mod models;
pub mod process;
pub mod reference;
pub mod server;
pub mod tolerances;
