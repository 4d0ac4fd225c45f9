//! The estimate job: the flip matrix from probabilities (or a matrix file), its
//! diagnostics and, on request, bootstrap intervals. The command line runs it whole; the
//! app runs its steps ([`super::matrix_only`], [`super::diagnose_matrix`],
//! [`super::matrix_intervals`]) as separate jobs, because it diagnoses again after every
//! edit and computes intervals only when asked.

use super::{flip_matrix, matrix_intervals, source_intervals};
use super::{FlipEstimate, MatrixSource, RowProbabilities};
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::noise::bootstrap::{Interval, SourceIntervals};

/// What the estimate job computes.
#[derive(Debug, Clone, PartialEq)]
pub struct EstimateParams {
    /// The estimator with its settings, or a matrix file.
    pub matrix: MatrixSource,
    /// Bootstrap resamples for the intervals: 0 for none, else at least 2 (their spread
    /// is the interval's width). An estimator is needed: a file has nothing to resample.
    pub resamples: usize,
    /// Seed of the resampling.
    pub seed: u64,
}

impl EstimateParams {
    /// Refuses one resample and resampling a matrix read from a file.
    pub fn check(&self) -> Result<()> {
        if self.resamples == 1 {
            return Err(Error::Usage(
                "the bootstrap needs at least 2 resamples (their spread is the interval's width)"
                    .into(),
            ));
        }
        if self.resamples > 0 && matches!(self.matrix, MatrixSource::File { .. }) {
            return Err(Error::Usage(
                "the bootstrap re-estimates the matrix, so it cannot resample a matrix file".into(),
            ));
        }
        Ok(())
    }
}

/// What the estimate job found.
#[derive(Debug, Clone)]
pub struct Estimated {
    /// The matrix, the joint fit's clean posteriors and the diagnostics.
    pub estimate: FlipEstimate,
    /// 90 % intervals of every cell, when resamples were asked for.
    pub interval: Option<Interval>,
    /// 90 % intervals of every source's matrix and noise rate, when resamples were asked
    /// for and the table names a source column.
    pub source_intervals: Option<SourceIntervals>,
    /// Everything the user should know: the table's warnings, the probabilities'
    /// warnings, the estimator's warnings and the diagnostics' warnings, in that order.
    pub warnings: Vec<String>,
}

/// Estimates (or reads) the flip matrix, diagnoses it and, with resamples, bootstraps it.
pub fn estimate(
    data: &Dataset,
    probs: &RowProbabilities,
    params: &EstimateParams,
) -> Result<Estimated> {
    params.check()?;
    let estimate = flip_matrix(data, probs, &params.matrix)?;
    let (interval, source_intervals) = match (&params.matrix, &data.sources) {
        (MatrixSource::Estimate(method), Some(sources)) if params.resamples > 0 => {
            let by_source = source_intervals(
                data,
                sources,
                probs,
                method,
                params.resamples,
                params.seed,
                None,
            )?;
            (Some(by_source.overall.clone()), Some(by_source))
        }
        (MatrixSource::Estimate(method), None) if params.resamples > 0 => {
            let interval =
                matrix_intervals(data, probs, method, params.resamples, params.seed, None)?;
            (Some(interval), None)
        }
        _ => (None, None),
    };
    let mut warnings = data.warnings.clone();
    warnings.extend(estimate.warnings.iter().cloned());
    warnings.extend(estimate.diagnostics.warnings.iter().cloned());
    Ok(Estimated {
        estimate,
        interval,
        source_intervals,
        warnings,
    })
}
