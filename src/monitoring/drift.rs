//! Input and prediction drift: the population stability index (PSI) between each covariate's
//! training distribution (from the model file) and a sliding window of the observations a model
//! version recently scored, and the same for its predicted probabilities against the training
//! distribution of fitted probabilities (`fitted_probabilities` in the model file).
//!
//! ```text
//! PSI = Σᵢ (aᵢ − eᵢ) · ln(aᵢ / eᵢ)
//!       aᵢ = max(share of the window in bin i,   SHARE_FLOOR)
//!       eᵢ = max(share of the training data in bin i, SHARE_FLOOR)     SHARE_FLOOR = 1e-4
//! ```
//!
//! The floor keeps an empty bin from making the index infinite; the shares are not renormalised
//! after flooring, so a window that matches training exactly has PSI 0 and a bin empty on one
//! side contributes at most (share − 1e-4)·ln(share / 1e-4). The bands 0.1 (moderate) and 0.25
//! (major) are common practice, not a statistical test; with a small window the index is noisy,
//! so each version also exports how many observations its window holds, and the report reads a
//! window of fewer than [`MIN_DRIFT_OBSERVATIONS`] as [`DriftBand::Insufficient`] rather than
//! banding its PSI: with no drift at all a window of n observations over B bins shows a PSI of
//! about (B − 1)/n (to first order the PSI is the chi-square statistic over n, whose
//! expectation is B − 1), 0.01 for 10 bins and 1,000 observations but 0.09, nearly the moderate
//! band, for 100, and anything at all for one. The fleet rules and alerts use the same minimum.
//!
//! Bins, per covariate kind:
//!
//! ```text
//! continuous, count  the training histogram's bins: [edges[i], edges[i+1]), the last closed;
//!                    a value below the first edge counts in the first bin, one above the last
//!                    edge in the last bin (the out-of-range warning metric counts those apart)
//! binary             its training histogram if the file has one, else two bins {0, 1} with
//!                    training shares (1 − mean, mean)
//! categorical        one bin per level, training shares from level_counts
//! probability        the bins of fitted_probabilities, values outside counted at the ends
//! ```
//!
//! A covariate without training bins (no histogram, no level counts, all-zero counts, or more
//! than 65,535 bins) is not tracked, and the report says why.
//!
//! Memory and cost: each model version keeps `window` rows in all, one `u16` bin index per
//! tracked covariate plus one for the probability, the running count of every bin and (per
//! shard) the cumulative count of every bin for the fleet counters, so a
//! window of 10,000 observations of 10 covariates costs about 220 kB. Recording an observation
//! finds each bin (a binary search over the edges), overwrites the oldest row and moves the
//! running counts: O(covariates · log bins). The PSI reads the running counts: O(bins).
//!
//! Concurrency: the request path never waits. A version's window is split into `shards`
//! (the service uses one per worker thread), each holding `window / shards` rows behind its own
//! std mutex on its own cache lines. A thread records into its home shard, taking the lock only
//! if it is free; if it is busy (another thread, or a scrape reading its counts) it tries the
//! other shards, and if all are busy the sample is dropped and counted in
//! `ogive_drift_samples_dropped_total`. Dropping under contention keeps the window a sample of
//! the traffic rather than all of it, which is all a PSI needs. Because each thread keeps to its
//! own shard, the window is the most recent `window` observations when traffic is spread over
//! the workers, and the most recent `window / shards` of a lone busy worker otherwise (the
//! exported window size says which). Versions are found through an atomically swapped map, so
//! a lookup takes no lock and no reference count; the map is rebuilt only when a version is
//! seen for the first time, and a request looks its version up once
//! ([`DriftMonitor::record_many`]). The costs are measured by `cargo bench --bench monitoring`
//! and, over HTTP, by `benches/monitoring_cost.sh`.
//!
//! Fleet-wide drift: a window's PSI is one process's. So each version also counts, since the
//! process first saw it, the observations that entered its window in each bin
//! (`ogive_input_bin_observations_total`, `ogive_prediction_bin_observations_total`) and
//! exports each bin's training share as a gauge; the recording rules in
//! `deploy/prometheus/ogive-rules.yml` sum the counts over the fleet and a time window and take
//! the PSI of those shares, with the same floor. The counts leave out the samples dropped under
//! contention (they are a sample of the traffic, which is all a share needs). A bin's label is
//! its range, `[lower,upper)` (the last `[lower,upper]`), or its level.
//!
//! This module does not parse observations (the service hands it the engine's values), does not
//! know HTTP, and does not decide when drift is alarming (the alert rules in `deploy/prometheus`
//! do).

use std::collections::HashMap;
use std::sync::atomic::{AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, PoisonError, TryLockError};

use arc_swap::ArcSwap;
use prometheus::core::{Collector, Desc};
use prometheus::proto::{MetricFamily, MetricType};
use prometheus::{GaugeVec, IntCounter, IntCounterVec, IntGaugeVec, Opts, Registry};
use schemars::JsonSchema;
use serde::Serialize;

use super::families::{self, Family};

use crate::model::file::{CovariateSpec, Histogram};
use crate::model::{CovariateKind, Model, Value};

/// Observations kept per model version unless configured otherwise.
pub const DEFAULT_WINDOW: usize = 10_000;

/// The smallest share a bin is given in the PSI, on both sides (see the module formula).
pub const SHARE_FLOOR: f64 = 1e-4;

/// The common-practice PSI level from which drift is called moderate.
pub const MODERATE_DRIFT: f64 = 0.1;

/// The common-practice PSI level from which drift is called major.
pub const MAJOR_DRIFT: f64 = 0.25;

/// The fewest observations in a window whose PSI is read against the bands (see the module
/// docs); the `ogive-fleet` recording rules and the drift alerts use the same number.
pub const MIN_DRIFT_OBSERVATIONS: usize = 1_000;

/// The most bins a tracked distribution may have (bin indices are stored as `u16`).
const MAX_BINS: usize = u16::MAX as usize;

/// The population stability index between training shares `expected` and window shares
/// `actual` (same length), each share floored at [`SHARE_FLOOR`]:
///
/// ```text
/// PSI = Σᵢ (max(aᵢ, 1e-4) − max(eᵢ, 1e-4)) · ln(max(aᵢ, 1e-4) / max(eᵢ, 1e-4))
/// ```
///
/// Every term is ≥ 0, so the index is ≥ 0, and 0 only when the floored shares agree.
pub fn population_stability_index(expected: &[f64], actual: &[f64]) -> f64 {
    expected
        .iter()
        .zip(actual)
        .map(|(&e, &a)| {
            let (e, a) = (e.max(SHARE_FLOOR), a.max(SHARE_FLOOR));
            (a - e) * (a / e).ln()
        })
        .sum()
}

/// The bin of `x` among a histogram's `edges`: bin i holds `[edges[i], edges[i+1])`, the last bin
/// is closed, and values outside the edges fall in the first or last bin.
///
/// ```text
/// bin(x) = #{ interior edges e : e ≤ x },   interior edges = edges[1 .. len−1]
/// ```
pub fn bin_of(edges: &[f64], x: f64) -> usize {
    match edges.len() {
        0..=2 => 0,
        n => edges[1..n - 1].partition_point(|&e| e <= x),
    }
}

/// The common-practice reading of a PSI value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum DriftBand {
    /// Fewer than 1,000 observations in the window: too few to read the PSI (it is still
    /// given).
    Insufficient,
    /// PSI below 0.1.
    Stable,
    /// PSI from 0.1 up to 0.25.
    Moderate,
    /// PSI of 0.25 or more.
    Major,
}

impl DriftBand {
    /// The reading of a PSI over a window of `observations`: [`DriftBand::Insufficient`] below
    /// [`MIN_DRIFT_OBSERVATIONS`], else its band.
    pub fn reading(psi: f64, observations: usize) -> DriftBand {
        if observations < MIN_DRIFT_OBSERVATIONS {
            DriftBand::Insufficient
        } else {
            DriftBand::of(psi)
        }
    }

    /// The band a PSI value falls in, however many observations it was computed from.
    pub fn of(psi: f64) -> DriftBand {
        if psi >= MAJOR_DRIFT {
            DriftBand::Major
        } else if psi >= MODERATE_DRIFT {
            DriftBand::Moderate
        } else {
            DriftBand::Stable
        }
    }
}

/// How a tracked value is put in a bin.
#[derive(Debug, Clone)]
enum Binning {
    /// A numeric value among histogram edges.
    Edges(Vec<f64>),
    /// A binary covariate's 0 or 1.
    ZeroOne,
    /// A categorical covariate's level index.
    Levels,
}

/// What a bin covers, for the report.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum BinRange {
    /// A numeric bin `[lower, upper)` (the last one closed).
    Numeric {
        /// The bin's lower edge.
        lower: f64,
        /// The bin's upper edge.
        upper: f64,
    },
    /// A categorical level, or `0` / `1` of a binary covariate.
    Level {
        /// The level's name (for a binary covariate `0` or `1`).
        level: String,
    },
}

/// One tracked distribution: a covariate's, or the predicted probability's.
#[derive(Debug, Clone)]
struct Channel {
    /// The covariate's index in the model, or `None` for the predicted probability.
    covariate: Option<usize>,
    /// The covariate's name (empty for the probability).
    name: String,
    binning: Binning,
    /// Training share of each bin.
    expected: Vec<f64>,
    /// Where this channel's bins start in the running counts.
    offset: usize,
    ranges: Vec<BinRange>,
}

impl Channel {
    fn bins(&self) -> usize {
        self.expected.len()
    }

    fn bin(&self, values: &[Value], probability: f64) -> usize {
        let value = match self.covariate {
            Some(j) => values[j],
            None => Value::Number(probability),
        };
        let bin = match (&self.binning, value) {
            (Binning::Edges(edges), v) => bin_of(edges, v.number()),
            (Binning::ZeroOne, v) => usize::from(v.number() >= 0.5),
            (Binning::Levels, Value::Level(l)) => l,
            // Shares never reach the request path; a categorical value is always a level.
            (Binning::Levels, _) => 0,
        };
        bin.min(self.bins() - 1)
    }
}

/// Why a covariate's drift is not tracked.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Untracked {
    /// The covariate, or `probability` for prediction drift.
    pub covariate: String,
    /// Why its drift is not tracked, in a sentence (for one, no training histogram or level
    /// counts in the model file).
    pub reason: String,
}

fn shares(counts: &[u64]) -> Option<Vec<f64>> {
    let total: u64 = counts.iter().sum();
    (total > 0).then(|| counts.iter().map(|&c| c as f64 / total as f64).collect())
}

/// A bin's label in the exported series: `[lower,upper)`, the last bin `[lower,upper]`, or the
/// level.
fn bin_label(range: &BinRange, last: bool) -> String {
    match range {
        BinRange::Numeric { lower, upper } if last => format!("[{lower},{upper}]"),
        BinRange::Numeric { lower, upper } => format!("[{lower},{upper})"),
        BinRange::Level { level } => level.clone(),
    }
}

fn numeric_ranges(edges: &[f64]) -> Vec<BinRange> {
    edges
        .windows(2)
        .map(|w| BinRange::Numeric {
            lower: w[0],
            upper: w[1],
        })
        .collect()
}

fn histogram_channel(
    covariate: Option<usize>,
    name: &str,
    h: &Histogram,
) -> Result<Channel, String> {
    if h.counts.len() > MAX_BINS {
        return Err(format!(
            "the training histogram has {} bins; at most {MAX_BINS} are tracked",
            h.counts.len()
        ));
    }
    let expected = shares(&h.counts)
        .ok_or_else(|| "the training histogram's counts are all zero".to_string())?;
    Ok(Channel {
        covariate,
        name: name.to_string(),
        binning: Binning::Edges(h.edges.clone()),
        expected,
        offset: 0,
        ranges: numeric_ranges(&h.edges),
    })
}

fn covariate_channel(j: usize, spec: &CovariateSpec, model: &Model) -> Result<Channel, String> {
    let training = &spec.training;
    match spec.kind {
        CovariateKind::Continuous | CovariateKind::Count => match &training.histogram {
            Some(h) => histogram_channel(Some(j), &spec.name, h),
            None => Err("the model file has no training histogram for it".into()),
        },
        CovariateKind::Binary => match (&training.histogram, training.mean) {
            (Some(h), _) => histogram_channel(Some(j), &spec.name, h),
            (None, Some(mean)) => Ok(Channel {
                covariate: Some(j),
                name: spec.name.clone(),
                binning: Binning::ZeroOne,
                expected: vec![1.0 - mean, mean],
                offset: 0,
                ranges: ["0", "1"]
                    .into_iter()
                    .map(|l| BinRange::Level { level: l.into() })
                    .collect(),
            }),
            (None, None) => Err("the model file has neither a histogram nor a mean for it".into()),
        },
        CovariateKind::Categorical => {
            let levels = &model.covariates[j].levels;
            let Some(counts) = &training.level_counts else {
                return Err("the model file has no training level counts for it".into());
            };
            if levels.len() > MAX_BINS {
                return Err(format!(
                    "it has {} levels; at most {MAX_BINS} are tracked",
                    levels.len()
                ));
            }
            let counts: Vec<u64> = levels
                .iter()
                .map(|l| counts.get(l).copied().unwrap_or(0))
                .collect();
            let expected = shares(&counts)
                .ok_or_else(|| "its training level counts are all zero".to_string())?;
            Ok(Channel {
                covariate: Some(j),
                name: spec.name.clone(),
                binning: Binning::Levels,
                expected,
                offset: 0,
                ranges: levels
                    .iter()
                    .map(|l| BinRange::Level { level: l.clone() })
                    .collect(),
            })
        }
    }
}

/// The tracked distributions of one model version, built once from its model file.
#[derive(Debug, Clone)]
struct Layout {
    /// Covariate channels first, then (if the file has fitted probabilities) the probability.
    channels: Vec<Channel>,
    /// Whether the last channel is the predicted probability.
    tracks_probability: bool,
    untracked: Vec<Untracked>,
    total_bins: usize,
}

impl Layout {
    fn new(model: &Model) -> Layout {
        let mut channels = Vec::new();
        let mut untracked = Vec::new();
        for (j, spec) in model.file.covariates.iter().enumerate() {
            match covariate_channel(j, spec, model) {
                Ok(c) => channels.push(c),
                Err(reason) => untracked.push(Untracked {
                    covariate: spec.name.clone(),
                    reason,
                }),
            }
        }
        let tracks_probability = match &model.file.fitted_probabilities {
            Some(h) => match histogram_channel(None, "", h) {
                Ok(c) => {
                    channels.push(c);
                    true
                }
                Err(reason) => {
                    untracked.push(Untracked {
                        covariate: "probability".into(),
                        reason,
                    });
                    false
                }
            },
            None => {
                untracked.push(Untracked {
                    covariate: "probability".into(),
                    reason: "the model file has no fitted_probabilities histogram".into(),
                });
                false
            }
        };
        let mut offset = 0;
        for c in &mut channels {
            c.offset = offset;
            offset += c.bins();
        }
        Layout {
            channels,
            tracks_probability,
            untracked,
            total_bins: offset,
        }
    }
}

/// The sliding window: a ring of rows of bin indices and the running count of every bin.
#[derive(Debug)]
struct Window {
    capacity: usize,
    width: usize,
    /// Rows of `width` bin indices; grows to `capacity` rows, then is overwritten in place.
    ring: Vec<u16>,
    /// The row the next observation overwrites, once the ring is full.
    next: usize,
    counts: Vec<u32>,
    /// Every observation this shard took since it was made, per bin (never decreases).
    hits: Vec<u64>,
}

impl Window {
    fn new(capacity: usize, layout: &Layout) -> Window {
        Window {
            capacity,
            width: layout.channels.len(),
            ring: Vec::new(),
            next: 0,
            counts: vec![0; layout.total_bins],
            hits: vec![0; layout.total_bins],
        }
    }

    fn len(&self) -> usize {
        self.ring.len().checked_div(self.width).unwrap_or(0)
    }

    fn record(&mut self, layout: &Layout, values: &[Value], probability: f64) {
        if self.width == 0 {
            return;
        }
        if self.len() < self.capacity {
            for c in &layout.channels {
                let bin = c.bin(values, probability);
                self.ring.push(bin as u16);
                self.counts[c.offset + bin] += 1;
                self.hits[c.offset + bin] += 1;
            }
            return;
        }
        let row = &mut self.ring[self.next * self.width..(self.next + 1) * self.width];
        for (slot, c) in row.iter_mut().zip(&layout.channels) {
            let bin = c.bin(values, probability);
            self.counts[c.offset + usize::from(*slot)] -= 1;
            *slot = bin as u16;
            self.counts[c.offset + bin] += 1;
            self.hits[c.offset + bin] += 1;
        }
        self.next = (self.next + 1) % self.capacity;
    }
}

/// One model version's drift state.
#[derive(Debug)]
struct VersionDrift {
    layout: Layout,
    shards: Box<[Shard]>,
    dropped: AtomicU64,
    dropped_counter: IntCounter,
}

/// One shard of a version's window, on its own cache lines so that threads recording into
/// different shards do not disturb each other.
#[derive(Debug)]
#[repr(align(128))]
struct Shard(Mutex<Window>);

/// Numbers the threads that record, so that each has a home shard.
static NEXT_THREAD: AtomicUsize = AtomicUsize::new(0);

thread_local! {
    static THREAD_NUMBER: usize = NEXT_THREAD.fetch_add(1, Ordering::Relaxed);
}

/// The PSI of one tracked distribution and the shares behind it.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct DistributionDrift {
    /// The covariate (absent for prediction drift).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub covariate: Option<String>,
    /// The population stability index; absent while the window is empty.
    pub psi: Option<f64>,
    /// The common-practice band of the PSI, or `insufficient` when the window holds fewer
    /// than `minimum_observations`.
    pub band: Option<DriftBand>,
    /// Each bin with its training share and its share of the window.
    pub bins: Vec<BinShares>,
}

/// One bin's shares.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct BinShares {
    /// What the bin covers.
    #[serde(flatten)]
    pub range: BinRange,
    /// Its share of the training data.
    pub training_share: f64,
    /// Its share of the window (0 while the window is empty).
    pub window_share: f64,
}

/// Drift of one model version: every tracked covariate and the predicted probability.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct VersionDriftReport {
    /// The version's label, as the model directory stores it.
    pub version: String,
    /// Observations in the window now.
    pub window_observations: usize,
    /// The most observations the window holds (`--drift-window`); older ones leave it.
    pub window_capacity: usize,
    /// The fewest observations whose PSI is read against the bands
    /// ([`MIN_DRIFT_OBSERVATIONS`]); below it every band reads `insufficient`.
    pub minimum_observations: usize,
    /// Observations not recorded because the window was busy (see the module notes).
    pub dropped_samples: u64,
    /// Input drift, per tracked covariate, in model order.
    pub covariates: Vec<DistributionDrift>,
    /// Prediction drift, when the model file has fitted probabilities.
    pub prediction: Option<DistributionDrift>,
    /// Covariates (or the probability) whose drift is not tracked, and why.
    pub untracked: Vec<Untracked>,
}

impl VersionDrift {
    /// Record one observation into the calling thread's home shard, or the first free one; drop
    /// and count it if every shard is busy.
    fn record(&self, values: &[Value], probability: f64) {
        let shards = self.shards.len();
        let home = THREAD_NUMBER.with(|n| *n) % shards;
        for shard in (0..shards).map(|i| &self.shards[(home + i) % shards]) {
            let mut window = match shard.0.try_lock() {
                Ok(window) => window,
                Err(TryLockError::Poisoned(poisoned)) => poisoned.into_inner(),
                Err(TryLockError::WouldBlock) => continue,
            };
            window.record(&self.layout, values, probability);
            return;
        }
        self.dropped.fetch_add(1, Ordering::Relaxed);
        self.dropped_counter.inc();
    }

    /// The observations every shard took per bin since the version was first seen.
    fn hits(&self) -> Vec<u64> {
        let mut hits = vec![0_u64; self.layout.total_bins];
        for shard in self.shards.iter() {
            let window = shard.0.lock().unwrap_or_else(PoisonError::into_inner);
            for (total, n) in hits.iter_mut().zip(&window.hits) {
                *total += n;
            }
        }
        hits
    }

    /// Copy the counts out under the lock (O(bins)) and compute the PSI outside it.
    fn report(&self, version: &str) -> VersionDriftReport {
        let mut counts = vec![0_u32; self.layout.total_bins];
        let (mut observations, mut capacity) = (0, 0);
        for shard in self.shards.iter() {
            let window = shard.0.lock().unwrap_or_else(PoisonError::into_inner);
            observations += window.len();
            capacity += window.capacity;
            for (total, n) in counts.iter_mut().zip(&window.counts) {
                *total += n;
            }
        }
        let distribution = |c: &Channel| {
            let counts = &counts[c.offset..c.offset + c.bins()];
            let actual: Vec<f64> = counts
                .iter()
                .map(|&n| {
                    if observations == 0 {
                        0.0
                    } else {
                        f64::from(n) / observations as f64
                    }
                })
                .collect();
            let psi = (observations > 0).then(|| population_stability_index(&c.expected, &actual));
            DistributionDrift {
                covariate: c.covariate.map(|_| c.name.clone()),
                psi,
                band: psi.map(|psi| DriftBand::reading(psi, observations)),
                bins: c
                    .ranges
                    .iter()
                    .zip(&c.expected)
                    .zip(actual)
                    .map(|((range, &training_share), window_share)| BinShares {
                        range: range.clone(),
                        training_share,
                        window_share,
                    })
                    .collect(),
            }
        };
        let mut covariates: Vec<DistributionDrift> =
            self.layout.channels.iter().map(distribution).collect();
        let prediction = if self.layout.tracks_probability {
            covariates.pop()
        } else {
            None
        };
        VersionDriftReport {
            version: version.to_string(),
            window_observations: observations,
            window_capacity: capacity,
            minimum_observations: MIN_DRIFT_OBSERVATIONS,
            dropped_samples: self.dropped.load(Ordering::Relaxed),
            covariates,
            prediction,
            untracked: self.layout.untracked.clone(),
        }
    }
}

type VersionMap = HashMap<String, HashMap<String, Arc<VersionDrift>>>;

/// The Prometheus series this module exports.
#[derive(Debug, Clone)]
struct DriftMetrics {
    input_psi: GaugeVec,
    prediction_psi: GaugeVec,
    window_observations: IntGaugeVec,
    dropped: IntCounterVec,
}

/// Drift windows of every model version seen, with their Prometheus gauges.
#[derive(Debug)]
pub struct DriftMonitor {
    window: usize,
    shards: usize,
    versions: ArcSwap<VersionMap>,
    /// Serialises the (rare) addition of a version, and scrapes, which reset and refill gauges.
    writer: Mutex<()>,
    metrics: DriftMetrics,
}

/// The window size is zero.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("a drift window must hold at least one observation, got {0}")]
pub struct EmptyWindow(pub usize);

/// Why the drift monitor could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum DriftSetupError {
    /// The window size is zero.
    #[error(transparent)]
    Window(#[from] EmptyWindow),
    /// The metrics could not be registered (a name already taken in the registry).
    #[error("registering the drift metrics: {0}")]
    Metrics(#[from] prometheus::Error),
}

impl DriftMonitor {
    /// A monitor keeping `window` observations per model version in `shards` shards (at least
    /// one; one per worker thread keeps threads apart), its series registered in `registry`:
    ///
    /// ```text
    /// ogive_input_psi{model,version,covariate}            gauge
    /// ogive_prediction_psi{model,version}                 gauge
    /// ogive_drift_window_observations{model,version}      gauge
    /// ogive_drift_samples_dropped_total{model,version}    counter
    /// ogive_input_bin_observations_total{model,version,covariate,bin}   counter
    /// ogive_input_training_share{model,version,covariate,bin}           gauge
    /// ogive_prediction_bin_observations_total{model,version,bin}        counter
    /// ogive_prediction_training_share{model,version,bin}                gauge
    /// ```
    ///
    /// The PSI gauges are computed when scraped, from the running counts, and are absent for a
    /// version whose window is still empty. The bin counters and training shares of a version
    /// appear when it is first seen (its first scored observation, or [`DriftMonitor::prepare`]).
    pub fn new(
        window: usize,
        shards: usize,
        registry: &Registry,
    ) -> Result<Arc<DriftMonitor>, DriftSetupError> {
        if window == 0 {
            return Err(EmptyWindow(window).into());
        }
        let shards = shards.clamp(1, window);
        let metrics = DriftMetrics {
            input_psi: GaugeVec::new(
                Opts::new(
                    "ogive_input_psi",
                    "Population stability index of a covariate: the recent window against the training histogram.",
                ),
                &["model", "version", "covariate"],
            )?,
            prediction_psi: GaugeVec::new(
                Opts::new(
                    "ogive_prediction_psi",
                    "Population stability index of the predicted probabilities: the recent window against the training fitted probabilities.",
                ),
                &["model", "version"],
            )?,
            window_observations: IntGaugeVec::new(
                Opts::new(
                    "ogive_drift_window_observations",
                    "Observations in a model version's drift window.",
                ),
                &["model", "version"],
            )?,
            dropped: IntCounterVec::new(
                Opts::new(
                    "ogive_drift_samples_dropped_total",
                    "Observations left out of a drift window because it was busy.",
                ),
                &["model", "version"],
            )?,
        };
        let monitor = Arc::new(DriftMonitor {
            window,
            shards,
            versions: ArcSwap::from_pointee(VersionMap::new()),
            writer: Mutex::new(()),
            metrics,
        });
        registry.register(Box::new(
            DriftCollector {
                monitor: Arc::clone(&monitor),
                descs: Vec::new(),
            }
            .with_descs()?,
        ))?;
        Ok(monitor)
    }

    /// The window size per model version.
    pub fn window(&self) -> usize {
        self.window
    }

    /// Create `model`'s drift state if it does not exist yet, so that its bin counters are
    /// exported at zero (and a rate over them is defined) before the first observation.
    pub fn prepare(&self, model: &Model) {
        let _ = self.version_state(model);
    }

    /// Record one scored observation of `model`: its covariate values (as the engine took them)
    /// and its predicted probability. Never waits: a sample finding every shard busy is dropped
    /// and counted.
    pub fn record(&self, model: &Model, values: &[Value], probability: f64) {
        self.record_many(model, std::iter::once((values, probability)));
    }

    /// Record the scored observations of one request, looking the version up once. The lookup
    /// holds the version map through a guard, so it takes no reference count: nothing on this
    /// path writes to memory that other threads read, except the home shard.
    pub fn record_many<'a>(
        &self,
        model: &Model,
        observations: impl IntoIterator<Item = (&'a [Value], f64)>,
    ) {
        let versions = self.versions.load();
        if let Some(state) = versions
            .get(model.name())
            .and_then(|m| m.get(model.version()))
        {
            for (values, probability) in observations {
                state.record(values, probability);
            }
            return;
        }
        drop(versions);
        let state = self.version_state(model);
        for (values, probability) in observations {
            state.record(values, probability);
        }
    }

    /// The state of `model`'s version, created the first time the version is seen.
    fn version_state(&self, model: &Model) -> Arc<VersionDrift> {
        if let Some(v) = self
            .versions
            .load()
            .get(model.name())
            .and_then(|m| m.get(model.version()))
        {
            return Arc::clone(v);
        }
        let _writer = self.writer.lock().unwrap_or_else(PoisonError::into_inner);
        let current = self.versions.load_full();
        if let Some(v) = current
            .get(model.name())
            .and_then(|m| m.get(model.version()))
        {
            return Arc::clone(v);
        }
        let layout = Layout::new(model);
        let state = Arc::new(VersionDrift {
            shards: (0..self.shards)
                .map(|_| {
                    Shard(Mutex::new(Window::new(
                        self.window.div_ceil(self.shards),
                        &layout,
                    )))
                })
                .collect(),
            layout,
            dropped: AtomicU64::new(0),
            dropped_counter: self
                .metrics
                .dropped
                .with_label_values(&[model.name(), model.version()]),
        });
        let mut next = VersionMap::clone(&current);
        next.entry(model.name().to_string())
            .or_default()
            .insert(model.version().to_string(), Arc::clone(&state));
        self.versions.store(Arc::new(next));
        state
    }

    /// Drift of every version of `model_name` seen so far, versions in label order.
    pub fn report(&self, model_name: &str) -> Vec<VersionDriftReport> {
        let versions = self.versions.load();
        let Some(by_version) = versions.get(model_name) else {
            return Vec::new();
        };
        let mut reports: Vec<VersionDriftReport> = by_version
            .iter()
            .map(|(version, state)| state.report(version))
            // A version only prepared (its counters made at zero) has nothing to report yet.
            .filter(|r| r.window_observations > 0 || r.dropped_samples > 0)
            .collect();
        reports.sort_by(|a, b| a.version.cmp(&b.version));
        reports
    }

    /// Reset the gauges and fill them from the current windows.
    fn refresh_gauges(&self) {
        let m = &self.metrics;
        m.input_psi.reset();
        m.prediction_psi.reset();
        m.window_observations.reset();
        let versions = self.versions.load();
        for (model, by_version) in versions.iter() {
            for (version, state) in by_version {
                let report = state.report(version);
                m.window_observations
                    .with_label_values(&[model, version])
                    .set(i64::try_from(report.window_observations).unwrap_or(i64::MAX));
                for d in &report.covariates {
                    if let (Some(psi), Some(covariate)) = (d.psi, &d.covariate) {
                        m.input_psi
                            .with_label_values(&[model, version, covariate])
                            .set(psi);
                    }
                }
                if let Some(psi) = report.prediction.as_ref().and_then(|d| d.psi) {
                    m.prediction_psi
                        .with_label_values(&[model, version])
                        .set(psi);
                }
            }
        }
    }
}

const INPUT_HITS: (&str, &str) = (
    "ogive_input_bin_observations_total",
    "Observations that entered a model version's drift window, by covariate and training bin.",
);
const INPUT_SHARE: (&str, &str) = (
    "ogive_input_training_share",
    "Share of the training data in a covariate's bin, from the model file.",
);
const PREDICTION_HITS: (&str, &str) = (
    "ogive_prediction_bin_observations_total",
    "Observations that entered a model version's drift window, by bin of the predicted probability.",
);
const PREDICTION_SHARE: (&str, &str) = (
    "ogive_prediction_training_share",
    "Share of the training fitted probabilities in a bin, from the model file.",
);

fn bin_descs() -> Result<Vec<Desc>, prometheus::Error> {
    let input = ["model", "version", "covariate", "bin"];
    let prediction = ["model", "version", "bin"];
    Ok(vec![
        families::desc(INPUT_HITS.0, INPUT_HITS.1, &input)?,
        families::desc(INPUT_SHARE.0, INPUT_SHARE.1, &input)?,
        families::desc(PREDICTION_HITS.0, PREDICTION_HITS.1, &prediction)?,
        families::desc(PREDICTION_SHARE.0, PREDICTION_SHARE.1, &prediction)?,
    ])
}

/// The bin counters and training shares of every version seen.
fn bin_families(versions: &VersionMap) -> Vec<MetricFamily> {
    let mut input_hits = Family::new(INPUT_HITS.0, INPUT_HITS.1, MetricType::COUNTER);
    let mut input_share = Family::new(INPUT_SHARE.0, INPUT_SHARE.1, MetricType::GAUGE);
    let mut prediction_hits =
        Family::new(PREDICTION_HITS.0, PREDICTION_HITS.1, MetricType::COUNTER);
    let mut prediction_share =
        Family::new(PREDICTION_SHARE.0, PREDICTION_SHARE.1, MetricType::GAUGE);
    for (model, by_version) in versions {
        for (version, state) in by_version {
            let hits = state.hits();
            for c in &state.layout.channels {
                let last = c.bins() - 1;
                for (i, (range, &share)) in c.ranges.iter().zip(&c.expected).enumerate() {
                    let bin = bin_label(range, i == last);
                    let count = hits[c.offset + i] as f64;
                    if c.covariate.is_some() {
                        let labels = [
                            ("model", model.as_str()),
                            ("version", version.as_str()),
                            ("covariate", c.name.as_str()),
                            ("bin", bin.as_str()),
                        ];
                        input_hits.counter(&labels, count);
                        input_share.gauge(&labels, share);
                    } else {
                        let labels = [
                            ("model", model.as_str()),
                            ("version", version.as_str()),
                            ("bin", bin.as_str()),
                        ];
                        prediction_hits.counter(&labels, count);
                        prediction_share.gauge(&labels, share);
                    }
                }
            }
        }
    }
    [input_hits, input_share, prediction_hits, prediction_share]
        .into_iter()
        .map(Family::finish)
        .collect()
}

/// Exposes a [`DriftMonitor`]'s series to a Prometheus registry, refreshing them on each scrape.
struct DriftCollector {
    monitor: Arc<DriftMonitor>,
    descs: Vec<Desc>,
}

impl DriftCollector {
    fn with_descs(mut self) -> Result<Self, prometheus::Error> {
        let m = &self.monitor.metrics;
        self.descs = m
            .input_psi
            .desc()
            .into_iter()
            .chain(m.prediction_psi.desc())
            .chain(m.window_observations.desc())
            .chain(m.dropped.desc())
            .cloned()
            .chain(bin_descs()?)
            .collect();
        Ok(self)
    }
}

impl Collector for DriftCollector {
    fn desc(&self) -> Vec<&Desc> {
        self.descs.iter().collect()
    }

    fn collect(&self) -> Vec<MetricFamily> {
        let monitor = &self.monitor;
        let _writer = monitor
            .writer
            .lock()
            .unwrap_or_else(PoisonError::into_inner);
        monitor.refresh_gauges();
        let m = &monitor.metrics;
        m.input_psi
            .collect()
            .into_iter()
            .chain(m.prediction_psi.collect())
            .chain(m.window_observations.collect())
            .chain(m.dropped.collect())
            .chain(bin_families(&monitor.versions.load()))
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_follow_the_histogram_rule_and_clamp_outside_values() {
        let edges = [0.0, 1.0, 2.0, 3.0];
        assert_eq!(bin_of(&edges, -5.0), 0);
        assert_eq!(bin_of(&edges, 0.0), 0);
        assert_eq!(bin_of(&edges, 0.999), 0);
        assert_eq!(bin_of(&edges, 1.0), 1);
        assert_eq!(bin_of(&edges, 2.5), 2);
        assert_eq!(bin_of(&edges, 3.0), 2, "the last bin is closed");
        assert_eq!(bin_of(&edges, 9.0), 2);
        assert_eq!(bin_of(&[0.0, 1.0], 7.0), 0);
    }

    #[test]
    fn psi_is_zero_for_equal_shares_and_symmetric() {
        let e = [0.2, 0.3, 0.5];
        let a = [0.4, 0.4, 0.2];
        assert_eq!(population_stability_index(&e, &e), 0.0);
        let forward = population_stability_index(&e, &a);
        let backward = population_stability_index(&a, &e);
        assert!(forward > 0.0);
        assert!((forward - backward).abs() < 1e-15);
    }

    #[test]
    fn bands_split_at_the_common_practice_levels() {
        assert_eq!(DriftBand::of(0.0999), DriftBand::Stable);
        assert_eq!(DriftBand::of(0.1), DriftBand::Moderate);
        assert_eq!(DriftBand::of(0.2499), DriftBand::Moderate);
        assert_eq!(DriftBand::of(0.25), DriftBand::Major);
        assert_eq!(DriftBand::reading(0.91, 999), DriftBand::Insufficient);
        assert_eq!(DriftBand::reading(0.0, 1), DriftBand::Insufficient);
        assert_eq!(DriftBand::reading(0.91, 1_000), DriftBand::Major);
    }
}
