//! Training with a noise correction: the same optimiser, standardisation and penalty as
//! the uncorrected fit, with the row loss swapped.

use std::sync::atomic::{AtomicBool, Ordering};

use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};

use super::loss::DEFAULT_BACKWARD_CAP;
use super::loss::{Backward, CrossEntropy, Forward, ForwardBySource, RowLoss};
use super::softmax::{
    fit_from, fit_standardized, FitReport, SoftmaxModel, SoftmaxParams, Standardized,
};
use crate::error::{Error, Result};
use crate::noise::diagnostics::ILL_CONDITIONED;
use crate::noise::linalg::{condition_number, inverse};
use crate::noise::posterior::expected_from_scores;
use crate::noise::posterior::Flip;
use crate::noise::scores::{rank, score_rows, ScoreKind};

/// How the loss accounts for label noise: the command line's `--correction`, the
/// compare list of a session and the app's checkboxes list these values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum Correction {
    /// Cross-entropy on the observed labels.
    None,
    /// Forward correction (Patrini et al. 2017).
    Forward,
    /// Backward correction (Patrini et al. 2017) with each per-class loss bounded by
    /// −ln 1e-4 (see [`Backward`]), so the fit cannot exploit the negative entries of T⁻¹.
    Backward,
    /// Backward correction with the published loss, unbounded below when T⁻¹ has
    /// negative entries (earlier named `backward-faithful`).
    #[serde(alias = "backward-faithful")]
    #[value(alias = "backward-faithful")]
    BackwardUnbounded,
    /// Drop the most suspect rows (as many as the expected number of mislabelled rows),
    /// then train with cross-entropy.
    Prune,
}

impl Correction {
    /// The name used on the command line and in files.
    pub fn name(self) -> &'static str {
        match self {
            Correction::None => "none",
            Correction::Forward => "forward",
            Correction::Backward => "backward",
            Correction::BackwardUnbounded => "backward-unbounded",
            Correction::Prune => "prune",
        }
    }

    /// Every correction, in the order pickers list them.
    pub fn all() -> &'static [Correction] {
        <Correction as clap::ValueEnum>::value_variants()
    }

    /// The correction a name stands for (the current names and the earlier ones).
    pub fn named(name: &str) -> Option<Correction> {
        <Correction as clap::ValueEnum>::from_str(name, true).ok()
    }

    /// True when the correction needs a flip matrix.
    pub fn needs_matrix(self) -> bool {
        !matches!(self, Correction::None)
    }
}

/// A trained model and how the training went.
#[derive(Debug, Clone)]
pub struct Trained {
    /// The model.
    pub model: SoftmaxModel,
    /// The optimiser's report.
    pub report: FitReport,
    /// Rows dropped by `prune` (data row numbers).
    pub dropped: Vec<usize>,
    /// Things to know (e.g. an ill-conditioned matrix).
    pub warnings: Vec<String>,
}

/// What training needs besides the features and labels.
#[derive(Debug, Clone, Copy)]
pub struct TrainInputs<'a> {
    /// The flip matrix (required unless `Correction::None`).
    pub matrix: Option<&'a Array2<f64>>,
    /// Out-of-sample probabilities of every data row (required for `Prune`).
    pub probs: Option<ArrayView2<'a, f32>>,
    /// A model to start the optimiser from (e.g. the uncorrected fit on the same rows);
    /// the optimum does not depend on it, the iteration count does.
    pub start: Option<&'a SoftmaxModel>,
    /// Set from another thread to stop the fit (it then returns [`Error::Cancelled`]).
    pub cancel: Option<&'a AtomicBool>,
    /// One flip matrix per label source: the forward correction then scores each row
    /// against its own source's matrix (`matrix` is their mix).
    pub by_source: Option<SourceFlips<'a>>,
    /// Every row of `x`, in order, already standardised: used when the fit takes all of
    /// them (several corrections on the same rows standardise once).
    pub standardized: Option<&'a Standardized>,
}

/// One flip matrix per label source and the source of every data row.
#[derive(Debug, Clone, Copy)]
pub struct SourceFlips<'a> {
    /// Row-stochastic, one per source.
    pub matrices: &'a [Array2<f64>],
    /// The source of every data row (indexed like the labels).
    pub of_row: &'a [u32],
}

/// Trains on the rows `rows` of `x` (labels indexed by data row).
pub fn train(
    x: ArrayView2<f64>,
    rows: &[usize],
    labels: &[usize],
    classes: usize,
    correction: Correction,
    inputs: TrainInputs,
    params: &SoftmaxParams,
) -> Result<Trained> {
    let mut warnings = Vec::new();
    let matrix = match (correction.needs_matrix(), inputs.matrix) {
        (true, None) => {
            return Err(Error::Usage(format!(
                "the {} correction needs a flip matrix",
                correction.name()
            )))
        }
        (_, m) => m,
    };
    let loss: Box<dyn RowLoss> = match correction {
        Correction::None | Correction::Prune => Box::new(CrossEntropy),
        Correction::Forward => {
            let overall = matrix.cloned().unwrap_or_else(|| Array2::eye(classes));
            match inputs.by_source {
                Some(flips) => Box::new(ForwardBySource::new(
                    flips.matrices,
                    rows.iter().map(|&r| flips.of_row[r]).collect(),
                    overall,
                )),
                None => Box::new(Forward::new(overall)),
            }
        }
        Correction::Backward | Correction::BackwardUnbounded => {
            let guarded = correction == Correction::Backward;
            let t = matrix.cloned().unwrap_or_else(|| Array2::eye(classes));
            let cond = condition_number(&t);
            if cond > ILL_CONDITIONED {
                warnings.push(format!(
                    "the flip matrix is ill-conditioned (1-norm condition number {cond:.3e}); backward correction \
                     amplifies noise{}",
                    if guarded { "" } else { " and this loss is unbounded below" }
                ));
            }
            let t_inv = inverse(&t).ok_or_else(|| {
                Error::Usage(
                    "backward correction needs an invertible flip matrix; this one is singular"
                        .into(),
                )
            })?;
            Box::new(Backward::new(
                t_inv,
                guarded.then_some(DEFAULT_BACKWARD_CAP),
            ))
        }
    };
    let (kept, dropped) = match correction {
        Correction::Prune => prune(rows, labels, inputs, matrix)?,
        _ => (rows.to_vec(), Vec::new()),
    };
    let mut keep_going = |_| !inputs.cancel.is_some_and(|c| c.load(Ordering::Relaxed));
    let every_row_in_order = kept.len() == x.nrows()
        && labels.len() == x.nrows()
        && kept.iter().enumerate().all(|(i, &r)| i == r);
    let (model, report) = match inputs.standardized {
        Some(prepared) if every_row_in_order && prepared.rows() == x.nrows() => fit_standardized(
            prepared,
            labels,
            classes,
            loss.as_ref(),
            params,
            inputs.start,
            &mut keep_going,
        )?,
        _ => fit_from(
            x,
            Some(&kept),
            labels,
            classes,
            loss.as_ref(),
            params,
            inputs.start,
            &mut keep_going,
        )?,
    };
    if !report.converged {
        warnings.push(format!(
            "the fit stopped after {} iterations with gradient {:.2e} (not below the tolerance)",
            report.iterations, report.grad_norm
        ));
    }
    Ok(Trained {
        model,
        report,
        dropped,
        warnings,
    })
}

/// Keeps all but the round(E) most suspect rows, E = Σ P(wrong) of the rows (the
/// posterior scores are odds: summing them as they are dropped nearly every row).
fn prune(
    rows: &[usize],
    labels: &[usize],
    inputs: TrainInputs,
    matrix: Option<&Array2<f64>>,
) -> Result<(Vec<usize>, Vec<usize>)> {
    let probs = inputs.probs.ok_or_else(|| {
        Error::Usage("the prune correction needs out-of-sample probabilities".into())
    })?;
    let sub_probs = probs.select(ndarray::Axis(0), rows);
    let sub_labels: Vec<usize> = rows.iter().map(|&r| labels[r]).collect();
    let mut scores = score_rows(
        ScoreKind::Posterior,
        sub_probs.view(),
        &sub_labels,
        matrix.map(Flip::noisy),
    );
    let odds: Vec<f64> = scores.iter().map(|s| s.score).collect();
    let expected = expected_from_scores(&odds);
    rank(&mut scores);
    let drop_count = (expected.round() as usize).min(rows.len().saturating_sub(1));
    let mut dropped: Vec<usize> = scores[..drop_count].iter().map(|s| rows[s.row]).collect();
    dropped.sort_unstable();
    let kept = rows
        .iter()
        .copied()
        .filter(|r| dropped.binary_search(r).is_err())
        .collect();
    Ok((kept, dropped))
}

/// Index of each row's most probable class.
pub fn predict_classes(probs: &Array2<f64>) -> Vec<usize> {
    probs
        .rows()
        .into_iter()
        .map(|r| {
            r.iter()
                .enumerate()
                .fold(0, |best, (i, &v)| if v > r[best] { i } else { best })
        })
        .collect()
}
