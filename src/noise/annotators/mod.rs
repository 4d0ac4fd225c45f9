//! Each annotator's confusion matrix and each item's consensus class, by the
//! EM algorithm of Dawid & Skene (1979, Applied Statistics 28(1):20–28),
//! optionally with a per-item prior on the true class taken from a
//! classifier's probabilities (Raykar et al., JMLR 11, 2010).
//!
//! Why: when several people label the same items, their disagreements carry
//! the information needed to estimate how each of them errs. The confusion
//! matrix of annotator a, `π_a[k][l] = P(a says l | true class k)`, is the
//! same kind of flip matrix flipmend estimates elsewhere (rows = true class),
//! and the consensus posterior weights good annotators above poor ones, which
//! a majority vote cannot.
//!
//! The model: true classes are independent with prior ρ; given the true
//! class, annotators label independently. EM alternates
//! * M-step: `ρ_k ∝ s + Σ_r T_rk`, `π_a[k][l] ∝ s + Σ_r T_rk·[a labels r as l]`
//!   (s = Dirichlet pseudo-count `smoothing`; s = 0 gives DS's eqs. 2.3–2.4);
//! * E-step: `T_rk ∝ ρ_k·Π_a π_a[k][label_a(r)]` (DS eq. 2.5), in log space.
//!
//! EM starts from the per-item label proportions (DS's own start, a soft
//! majority vote). This start also keeps classes from being permuted ("label
//! switching"): EM on weak annotators has a mirror optimum with the classes
//! relabelled, and starting at the majority vote puts EM in the basin where
//! class k means class k whenever most annotators beat chance. A warning is
//! given when an annotator's estimated accuracy falls below chance.

use crate::error::{Error, Result};
use crate::learn::metrics::Z_90;
use ndarray::{Array, Array1, Array2, ArrayView1, ArrayView2, Axis, Dimension};

/// Default Dirichlet pseudo-count added to every confusion cell and class
/// count. Measured (`measure_smoothing`: 20 seeds, K = 4, 5 annotators of
/// accuracy 0.55–0.95, 2–4 per item). Matrix mean absolute error at
/// s = 0 / 0.1 / 0.5 / 1: 100 items 0.079 / 0.073 / 0.069 / 0.082; 300 items
/// 0.047 / 0.044 / 0.043 / 0.046; 2,000 items 0.0168 / 0.0167 / 0.0166 /
/// 0.0169. But smoothing shrinks the diagonal, so the accuracy is biased:
/// at 100 items −0.002 / −0.016 / −0.067 / −0.122, at 1,000 items −0.001 /
/// −0.002 / −0.008 / −0.016. s = 0.1 keeps most of the matrix gain, keeps
/// never-seen cells estimable, and keeps the accuracy bias small next to its
/// interval.
pub const DEFAULT_SMOOTHING: f64 = 0.1;

/// Factor applied to the bootstrap half-width `Z_90·sd`, because the plain
/// normal interval undercovers. Measured (`measure_coverage`: 20 seeds × 5
/// annotators per design, K = 3–5, accuracies 0.55–0.95, 100 resamples;
/// designs 500 / 1,000 / 2,000 items with 2–4 annotators per item and 1,000
/// items with 3–5): coverage of the true accuracies at factor 1.0 was
/// 0.87 / 0.91 / 0.86 / 0.87 (pooled 0.878 of 400 intervals), at 1.1 it was
/// 0.90 / 0.95 / 0.89 / 0.92 (pooled 0.915).
pub const BOOTSTRAP_WIDENING: f64 = 1.1;

/// Without resamples the Wilson interval uses n = items labelled divided by
/// this, because the true classes are themselves estimated, which a plain
/// binomial count ignores. Same designs as above: coverage at n/1 was
/// 0.78 / 0.81 / 0.81 / 0.82 (pooled 0.805), at n/1.5 0.83 / 0.87 / 0.86 /
/// 0.91 (0.868), at n/1.75 0.85 / 0.91 / 0.88 / 0.95 (0.898), at n/2
/// 0.90 / 0.93 / 0.90 / 0.96 (0.923).
pub const WILSON_DESIGN_EFFECT: f64 = 1.75;

/// Classifier probabilities are floored here before renormalising, so one
/// overconfident zero cannot veto every annotator (Raykar et al. 2010 use
/// the classifier's probability as a prior, never as a hard constraint).
const PRIOR_FLOOR: f64 = 1e-6;

/// Largest gap allowed between a prior row's sum and 1 (f32 rounding).
const PRIOR_SUM_TOLERANCE: f64 = 1e-3;

/// Fewer resamples than this give a meaningless spread.
const MIN_RESAMPLES: usize = 10;

/// Resamples run between two calls of `keep_going`.
const RESAMPLE_BATCH: usize = 8;

/// Labels given by several annotators. Cell (item r, annotator a) holds
/// `Some(class)` or `None` when a did not label r; this dense layout is what a
/// table with one label column per annotator gives directly. Annotators are
/// named by their 0-based column index in messages.
pub struct AnnotatorLabels<'a> {
    /// Number of classes K; labels must be below it.
    pub classes: usize,
    /// Items × annotators.
    pub labels: ArrayView2<'a, Option<u32>>,
}

/// Settings of [`estimate_consensus`].
#[derive(Clone, Debug)]
pub struct ConsensusParams {
    /// Most EM iterations, so a slow fit cannot run forever.
    pub max_iter: usize,
    /// Stop when the penalised log-likelihood improves by less than this
    /// share of its size.
    pub tolerance: f64,
    /// Dirichlet pseudo-count added to every confusion cell and class count
    /// (MAP estimate), so cells never observed stay estimable.
    pub smoothing: f64,
    /// Bootstrap resamples of items for intervals; 0 = Wilson intervals.
    pub resamples: usize,
    /// Seed of the bootstrap, so results are reproducible.
    pub seed: u64,
}

impl Default for ConsensusParams {
    fn default() -> Self {
        ConsensusParams {
            max_iter: 200,
            tolerance: 1e-8,
            smoothing: DEFAULT_SMOOTHING,
            resamples: 0,
            seed: 0,
        }
    }
}

impl ConsensusParams {
    /// Refuses settings the fit cannot honour, before any work is done.
    /// (NaN fails every range test, so it is refused too.)
    pub fn check(&self) -> Result<()> {
        let (iterations, resamples) = (self.max_iter, self.resamples);
        if !(1..=100_000).contains(&iterations) {
            return refuse("max_iter", format!("must be 1 to 100000, not {iterations}"));
        }
        if !(0.0..1.0).contains(&self.tolerance) {
            let problem = format!("must be at least 0 and below 1, not {}", self.tolerance);
            return refuse("tolerance", problem);
        }
        if !(0.0..=1e6).contains(&self.smoothing) {
            return refuse(
                "smoothing",
                format!("must be 0 to 1e6, not {}", self.smoothing),
            );
        }
        if resamples != 0 && !(MIN_RESAMPLES..=100_000).contains(&resamples) {
            let allowed = format!("0 (Wilson intervals) or {MIN_RESAMPLES} to 100000");
            return refuse("resamples", format!("must be {allowed}, not {resamples}"));
        }
        Ok(())
    }
}

fn refuse(setting: &'static str, problem: String) -> Result<()> {
    Err(Error::Setting { setting, problem })
}

/// What the fit says about one annotator.
#[derive(Clone, Debug)]
pub struct AnnotatorReport {
    /// Items this annotator labelled.
    pub items: usize,
    /// Expected share of this annotator's labels that are right:
    /// `Σ_k ρ̂_k·π[k][k]`, ρ̂ = mean posterior over the items it labelled.
    pub accuracy: f64,
    /// Lower end of the 90 % interval of `accuracy`.
    pub accuracy_low: f64,
    /// Upper end of the 90 % interval of `accuracy`.
    pub accuracy_high: f64,
    /// Confusion matrix K×K, rows = true class, each row sums to 1.
    pub matrix: Array2<f64>,
    /// Cell-wise 90 % lower bounds (bootstrap only).
    pub matrix_low: Option<Array2<f64>>,
    /// Cell-wise 90 % upper bounds (bootstrap only).
    pub matrix_high: Option<Array2<f64>>,
}

/// Result of [`estimate_consensus`].
#[derive(Clone, Debug)]
pub struct Consensus {
    /// One report per annotator column.
    pub annotators: Vec<AnnotatorReport>,
    /// Estimated ρ; with a classifier prior ρ is not estimated and this is
    /// the mean posterior over all items instead.
    pub class_prior: Vec<f64>,
    /// Items × K: P(true class | all labels [, classifier prior]).
    pub posterior: Array2<f64>,
    /// Argmax of each posterior row, ties to the lowest class index.
    pub consensus: Vec<usize>,
    /// EM iterations of the main fit.
    pub iterations: usize,
    /// Whether EM met `tolerance` before `max_iter`.
    pub converged: bool,
    /// Log-likelihood of the observed labels at the final fit (without the
    /// smoothing penalty).
    pub log_likelihood: f64,
    /// Things the user should know that do not stop the fit.
    pub warnings: Vec<String>,
}

/// The labels kept as per-item lists of (annotator, class), which is what
/// every EM sum iterates over, plus the classifier's per-item log prior.
pub(super) struct Problem {
    pub(super) classes: usize,
    pub(super) annotators: usize,
    pub(super) item_start: Vec<usize>,
    pub(super) entries: Vec<(usize, usize)>,
    pub(super) log_prior: Option<Array2<f64>>,
}

impl Problem {
    pub(super) fn items(&self) -> usize {
        self.item_start.len() - 1
    }

    pub(super) fn item(&self, r: usize) -> &[(usize, usize)] {
        &self.entries[self.item_start[r]..self.item_start[r + 1]]
    }

    /// Items each annotator labelled.
    pub(super) fn labelled(&self) -> Vec<usize> {
        let mut count = vec![0; self.annotators];
        self.entries.iter().for_each(|&(a, _)| count[a] += 1);
        count
    }
}

/// Model parameters after an M-step, named as in Dawid & Skene.
pub(super) struct Fit {
    /// Class prior ρ_k.
    pub(super) rho: Vec<f64>,
    /// Confusion π_a[k][l] per annotator, rows = true class.
    pub(super) pi: Vec<Array2<f64>>,
}

/// Outcome of one EM run.
pub(super) struct EmRun {
    pub(super) fit: Fit,
    pub(super) log_likelihood: f64,
    pub(super) iterations: usize,
    pub(super) converged: bool,
}

/// One bootstrap fit: each annotator's accuracy and confusion matrix.
pub(super) type Draw = (Array1<f64>, Vec<Array2<f64>>);

pub(super) fn usage<T>(message: String) -> Result<T> {
    Err(Error::Usage(message))
}

mod em;
mod intervals;
mod problem;
#[cfg(test)]
mod tests;

use self::em::{accuracies, argmax, run_em, start_posterior};
use self::intervals::{bootstrap, reports, warnings};
use self::problem::{check_annotators, compile, read_prior};

/// Estimates each annotator's confusion matrix and each item's consensus
/// class by Dawid–Skene EM. With `prior` (items × K classifier
/// probabilities, rows summing to 1), each item's class prior is its
/// classifier probability (floored at 1e-6, renormalised) instead of a
/// shared ρ, as in Raykar et al. (2010) with the classifier held fixed; ρ is
/// then not estimated and `class_prior` is the mean posterior.
/// `keep_going` is called after each EM iteration of the main fit with the
/// iteration number, then after each batch of resamples with iterations +
/// resamples done; returning false gives `Error::Cancelled`.
///
/// Refused with `Error::Usage`: fewer than 2 classes or annotators, no
/// items, a label ≥ classes, an annotator with no label (drop the column:
/// nothing can be learnt about it), annotators that never share an item
/// with the others, a prior of the wrong shape or with rows not summing to
/// 1; bad settings give `Error::Setting`. Items nobody labelled keep the
/// prior (ρ or the classifier's) and are counted in one warning.
pub fn estimate_consensus(
    labels: &AnnotatorLabels,
    prior: Option<ArrayView2<f32>>,
    params: &ConsensusParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<Consensus> {
    params.check()?;
    let mut p = compile(labels)?;
    check_annotators(&p)?;
    if let Some(prior) = prior {
        p.log_prior = Some(read_prior(prior, p.items(), p.classes)?);
    }
    let ones = vec![1.0; p.items()];
    let mut posterior = start_posterior(&p);
    let run = run_em(&p, &mut posterior, &ones, params, keep_going)?;
    let accuracy = accuracies(&p, &posterior, &ones, &run.fit);
    let draws = bootstrap(&p, &posterior, params, keep_going, run.iterations)?;
    let annotators = reports(&p, &run.fit, &accuracy, &draws);
    let class_prior = match p.log_prior {
        Some(_) => posterior.mean_axis(Axis(0)).map(|m| m.to_vec()),
        None => Some(run.fit.rho.clone()),
    };
    Ok(Consensus {
        warnings: warnings(&p, &run, &annotators),
        consensus: posterior.outer_iter().map(argmax).collect(),
        annotators,
        class_prior: class_prior.ok_or_else(|| Error::Internal("no items".into()))?,
        posterior,
        iterations: run.iterations,
        converged: run.converged,
        log_likelihood: run.log_likelihood,
    })
}

/// Plurality vote per item, ties to the lowest class index; `None` for items
/// nobody labelled. The baseline consensus is judged against. Labels outside
/// `0..classes` are ignored here ([`estimate_consensus`] refuses them).
pub fn majority_vote(labels: &AnnotatorLabels) -> Vec<Option<usize>> {
    let mut out = Vec::with_capacity(labels.labels.nrows());
    for row in labels.labels.outer_iter() {
        let mut counts = Array1::<f64>::zeros(labels.classes);
        for class in row.iter().flatten().map(|&c| c as usize) {
            if class < labels.classes {
                counts[class] += 1.0;
            }
        }
        let best = argmax(counts.view());
        out.push(counts.get(best).is_some_and(|&n| n > 0.0).then_some(best));
    }
    out
}
