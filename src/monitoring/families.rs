//! Metric families written by hand at scrape time, for series whose values are read from
//! monitoring state under its lock, so that every series of one model version comes from one
//! consistent reading (a ratio of two of them never mixes two moments).
//!
//! This module only shapes values into the exposition's data model; the monitoring modules
//! decide what the series are.

use std::collections::HashMap;

use prometheus::core::Desc;
use prometheus::proto::{
    Bucket, Counter, Gauge, Histogram, LabelPair, Metric, MetricFamily, MetricType,
};

/// The description of a family, for a collector's `desc()`.
pub fn desc(name: &str, help: &str, labels: &[&str]) -> Result<Desc, prometheus::Error> {
    Desc::new(
        name.to_string(),
        help.to_string(),
        labels.iter().map(|l| l.to_string()).collect(),
        HashMap::new(),
    )
}

/// One family being filled: a name, a help text, a type and its series.
#[derive(Debug)]
pub struct Family(MetricFamily);

impl Family {
    /// An empty family.
    pub fn new(name: &str, help: &str, kind: MetricType) -> Family {
        let mut family = MetricFamily::default();
        family.set_name(name.to_string());
        family.set_help(help.to_string());
        family.set_field_type(kind);
        Family(family)
    }

    fn push(&mut self, labels: &[(&str, &str)], fill: impl FnOnce(&mut Metric)) {
        let mut pairs: Vec<LabelPair> = labels
            .iter()
            .map(|(name, value)| {
                let mut pair = LabelPair::default();
                pair.set_name(name.to_string());
                pair.set_value(value.to_string());
                pair
            })
            .collect();
        pairs.sort_by(|a, b| a.name().cmp(b.name()));
        let mut metric = Metric::default();
        metric.set_label(pairs);
        fill(&mut metric);
        self.0.mut_metric().push(metric);
    }

    /// A counter series.
    pub fn counter(&mut self, labels: &[(&str, &str)], value: f64) {
        self.push(labels, |m| {
            let mut counter = Counter::default();
            counter.set_value(value);
            m.set_counter(counter);
        });
    }

    /// A gauge series.
    pub fn gauge(&mut self, labels: &[(&str, &str)], value: f64) {
        self.push(labels, |m| {
            let mut gauge = Gauge::default();
            gauge.set_value(value);
            m.set_gauge(gauge);
        });
    }

    /// A histogram series: `cumulative[i]` observations at most `upper_bounds[i]`, `count` in
    /// all (the `+Inf` bucket) and their `sum`.
    pub fn histogram(
        &mut self,
        labels: &[(&str, &str)],
        upper_bounds: &[f64],
        cumulative: &[u64],
        count: u64,
        sum: f64,
    ) {
        self.push(labels, |m| {
            let mut histogram = Histogram::default();
            histogram.set_sample_count(count);
            histogram.set_sample_sum(sum);
            histogram.set_bucket(
                upper_bounds
                    .iter()
                    .zip(cumulative)
                    .map(|(&upper, &c)| {
                        let mut bucket = Bucket::default();
                        bucket.set_upper_bound(upper);
                        bucket.set_cumulative_count(c);
                        bucket
                    })
                    .collect(),
            );
            m.set_histogram(histogram);
        });
    }

    /// The family, ready for the registry.
    pub fn finish(self) -> MetricFamily {
        self.0
    }
}
