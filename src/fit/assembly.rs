//! Assembly: from an estimate to the complete model file and the printed summary. The prior
//! correction of the intercept, the fitted index and probabilities, the covariates' training
//! summaries and joint block, the report, the notes, the provenance, and the check cases the
//! engine scores.
//!
//! This module estimates nothing; what it is given is final.

use crate::model::file::{
    CovariateKind, CovariateSpec, JointSpec, ModelFile, Outcome, Provenance, TermSpec, Weighting,
};
use crate::model::{FORMAT_NAME, FORMAT_VERSION};

use crate::link::Link;

use super::design::reduce_rows;
use super::error::FitError;
use super::estimation::{indices, Prepared};
use super::newton::Estimate;
use super::options::{Checked, CovarianceType, FitRequest};
use super::reader::ColumnData;
use super::report::{Counting, FitReport};
use super::sample::Sample;
use super::terms::CovariateShape;
use super::{check_cases, likelihood, summaries, weighting, Fitted};

/// Everything a fit has found, to be written out.
pub(crate) struct Parts<'a> {
    pub request: &'a FitRequest,
    pub checked: &'a Checked,
    pub sample: Sample,
    pub shapes: Vec<CovariateShape>,
    pub prepared: Prepared,
    pub estimate: Estimate,
    pub covariance: Vec<f64>,
    pub covariance_type: CovarianceType,
}

/// The model file and the summary of a finished fit.
pub(crate) fn assemble(parts: Parts<'_>) -> Result<Fitted, FitError> {
    let (request, checked, sample, shapes) =
        (parts.request, parts.checked, parts.sample, parts.shapes);
    let (prepared, mut estimate) = (parts.prepared, parts.estimate);
    let (covariance, covariance_type) = (parts.covariance, parts.covariance_type);
    let weights = sample.weights();
    let weighting_record = weighting::record(&checked.weighting, sample.outcome(), weights);
    let beta = served_coefficients(&estimate, &prepared.labels, weighting_record.as_ref());

    // Fitted index and probabilities, then the design is no longer needed. The last Newton
    // pass kept the index at the estimate; a shifted intercept needs it anew.
    let index = if beta == estimate.coefficients && estimate.index.len() == sample.rows() {
        std::mem::take(&mut estimate.index)
    } else {
        indices(&prepared.design, &beta)
    };
    let Prepared {
        design,
        labels,
        collinearity,
        ..
    } = prepared;
    drop(design);
    let probabilities = probabilities(request.link, &index);

    let mut remarks: Vec<String> = collinearity.into_iter().collect();
    if let Some(w) = &weighting_record {
        remarks.push(w.summary());
    }
    let (covariates, joint) = covariate_specs(request, &shapes, &sample, &mut remarks);
    let report = report(
        request,
        checked,
        &sample,
        &estimate,
        Summary {
            labels: &labels,
            beta: &beta,
            covariance: &covariance,
            covariance_type,
            remarks,
        },
    );
    let notes = notes(
        request,
        &sample,
        &shapes,
        &report,
        covariance_type,
        weighting_record.as_ref(),
    );
    let k = labels.len();
    let file = ModelFile {
        format: FORMAT_NAME.to_string(),
        format_version: FORMAT_VERSION,
        name: request.name.clone(),
        version: request.version.clone(),
        description: request.description.clone(),
        outcome: Outcome {
            name: request.outcome.clone(),
            meaning: request
                .outcome_meaning
                .clone()
                .unwrap_or_else(|| format!("{} = 1", request.outcome)),
        },
        link: request.link,
        covariates,
        terms: labels
            .iter()
            .zip(&beta)
            .map(|(term, &coefficient)| TermSpec {
                term: term.clone(),
                coefficient,
            })
            .collect(),
        covariance: Some(covariance.chunks(k).map(<[f64]>::to_vec).collect()),
        covariance_type: Some(covariance_type.name().to_string()),
        joint,
        fitted_probabilities: Some(summaries::probability_histogram(&probabilities)),
        check_cases: Vec::new(),
        decision: request.decision.clone(),
        announces: request.announces.clone(),
        provenance: Provenance {
            fitted_by: format!("ogive {}", env!("CARGO_PKG_VERSION")),
            fitted_at: match request.fitted_at_unix {
                Some(s) => crate::timestamp::rfc3339_seconds(s),
                None => crate::timestamp::now_rfc3339_seconds(),
            },
            observations: sample.rows() as u64,
            log_likelihood: Some(estimate.log_likelihood),
            null_log_likelihood: Some(report.null_log_likelihood),
            iterations: Some(estimate.iterations),
            data: Some(request.data.display().to_string()),
            notes: Some(notes),
            weighting: weighting_record,
        },
    };
    let kinds: Vec<CovariateKind> = shapes.iter().map(|s| s.kind).collect();
    let observations = check_cases::spread_rows(&index, check_cases::CHECK_CASES)
        .into_iter()
        .map(|i| check_cases::observation(&checked.names, &kinds, &sample.table.columns, i))
        .collect();
    let file = check_cases::attach(file, observations)?;
    Ok(Fitted { file, report })
}

/// `F(zᵢ)` for every row, on the worker threads.
fn probabilities(link: Link, index: &[f64]) -> Vec<f64> {
    reduce_rows(
        index.len(),
        Vec::new,
        |part: &mut Vec<f64>, range| part.extend(index[range].iter().map(|&z| link.probability(z))),
        |total, part| {
            if total.is_empty() {
                total.reserve(index.len());
            }
            total.extend(part)
        },
    )
}

/// The coefficients the model file serves: the estimate, with the intercept shifted by the
/// prior correction when there is one, so that probabilities are at the population's rate.
fn served_coefficients(
    estimate: &Estimate,
    labels: &[String],
    weighting: Option<&Weighting>,
) -> Vec<f64> {
    let mut beta = estimate.coefficients.clone();
    if let Some(shift) = weighting.and_then(|w| w.intercept_shift) {
        if let Some(j) = labels.iter().position(|l| l == "intercept") {
            beta[j] -= shift;
        }
    }
    beta
}

/// Each covariate's specification with its training summary, and the joint block of the
/// continuous covariates (with a remark when their covariance is singular).
fn covariate_specs(
    request: &FitRequest,
    shapes: &[CovariateShape],
    sample: &Sample,
    remarks: &mut Vec<String>,
) -> (Vec<CovariateSpec>, Option<JointSpec>) {
    let mut covariates = Vec::with_capacity(shapes.len());
    let mut joint_names = Vec::new();
    let mut joint_columns: Vec<&[f64]> = Vec::new();
    let mut joint_means = Vec::new();
    for (shape, column) in shapes.iter().zip(&sample.table.columns) {
        let training = match column {
            ColumnData::Numeric(values) => summaries::numeric_summary(values),
            ColumnData::Categorical { codes, levels } => summaries::level_summary(codes, levels),
        };
        if let (ColumnData::Numeric(values), true) = (column, summaries::in_joint(shape.kind)) {
            joint_names.push(shape.name.clone());
            joint_columns.push(values);
            joint_means.push(training.mean.unwrap_or(0.0));
        }
        let categorical = shape.kind == CovariateKind::Categorical;
        covariates.push(CovariateSpec {
            name: shape.name.clone(),
            kind: shape.kind,
            unit: request
                .units
                .iter()
                .find(|(c, _)| *c == shape.name)
                .map(|(_, u)| u.clone()),
            description: None,
            levels: categorical.then(|| shape.levels.clone()),
            reference: categorical.then(|| shape.levels[shape.reference].clone()),
            training,
        });
    }
    let joint = if joint_columns.is_empty() {
        None
    } else {
        let joint = summaries::joint(&joint_names, &joint_columns, &joint_means);
        if joint.is_none() {
            remarks.push(
                "the continuous covariates' training covariance is singular, so the file has no joint extrapolation check".to_string(),
            );
        }
        joint
    };
    (covariates, joint)
}

/// The estimate as the summary shows it.
struct Summary<'a> {
    labels: &'a [String],
    beta: &'a [f64],
    covariance: &'a [f64],
    covariance_type: CovarianceType,
    remarks: Vec<String>,
}

/// The printed summary, with the rows counted as the weights say.
fn report(
    request: &FitRequest,
    checked: &Checked,
    sample: &Sample,
    estimate: &Estimate,
    summary: Summary<'_>,
) -> FitReport {
    let k = summary.labels.len();
    let n = sample.rows();
    let counting = match &checked.weighting {
        plan if plan.sampling() => Counting::Sampling,
        weighting::Plan::Column(_) => Counting::Frequency {
            observations: sample.weights().map_or(n as f64, |w| w.iter().sum()),
        },
        _ => Counting::Rows,
    };
    FitReport {
        link: request.link,
        covariance_type: summary.covariance_type.name().to_string(),
        observations: n as u64,
        counting,
        dropped: sample.table.dropped,
        iterations: estimate.iterations,
        fisher_steps: estimate.fisher_steps,
        halvings: estimate.halvings,
        log_likelihood: estimate.log_likelihood,
        null_log_likelihood: likelihood::null_log_likelihood(sample.outcome(), sample.weights()),
        terms: summary.labels.to_vec(),
        coefficients: summary.beta.to_vec(),
        std_errors: (0..k)
            .map(|j| summary.covariance[j * k + j].max(0.0).sqrt())
            .collect(),
        remarks: summary.remarks,
    }
}

/// The provenance's notes: link, covariance, fit figures, rows, reference levels, weighting.
fn notes(
    request: &FitRequest,
    sample: &Sample,
    shapes: &[CovariateShape],
    report: &FitReport,
    covariance_type: CovarianceType,
    weighting: Option<&Weighting>,
) -> String {
    let references: Vec<String> = shapes
        .iter()
        .filter(|s| s.kind == CovariateKind::Categorical)
        .map(|s| format!("{} = {}", s.name, s.levels[s.reference]))
        .collect();
    let weighting_note = match weighting {
        None => String::new(),
        Some(w) => format!("; {}", w.summary()),
    };
    format!(
        "{} link; {} covariance ({}); {}; {} rows in the file, {} dropped for missing values{}{weighting_note}",
        request.link,
        covariance_type.name(),
        match covariance_type {
            CovarianceType::Classical => "inverse of the observed information",
            CovarianceType::Robust => "HC0 sandwich",
        },
        report.figures(),
        sample.table.rows_in_file,
        sample.table.dropped,
        if references.is_empty() {
            String::new()
        } else {
            format!("; reference levels: {}", references.join(", "))
        }
    )
}
