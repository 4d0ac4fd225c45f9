//! Flip-matrix estimators. Each returns a validated row-stochastic K×K matrix with rows =
//! true class: T[i][j] = P(observed j | true i).
//!
//! All work from out-of-sample probabilities p(observed | x) of the noisy labels; the
//! rows to use come as an index list so that bootstrap resamples need no copies.

use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};

use super::joint::{fit_joint_from, JointFit, JointParams, Start};
use super::matrix::{normalize_rows, validate};
use crate::data::origin::Origin;
use crate::error::{Error, Result};

mod anchor_passes;
mod anchors;
mod counting;
#[cfg(test)]
mod merge_tests;
pub mod passes;
#[cfg(test)]
mod tests;
mod trusted;
pub mod volume;

use self::anchors::{anchor, quantile};
pub use self::anchors::{column_quantiles, quantile_higher};
use self::counting::counting;
use self::trusted::trusted;
use self::volume::{choose_volume_weight, ChosenBy, VolumeChoice};

/// The quantile the quantile estimator uses unless told otherwise (command line and app).
pub const DEFAULT_QUANTILE: f64 = 0.97;

/// Rows per parallel work item in the row passes.
const CHUNK_ROWS: usize = 16_384;

/// The estimator a user picks: the command line's `--method`, a session's `estimator` and
/// the app's picker all list these values. [`Method`] is the same choice with its settings.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Estimator {
    /// T and a clean classifier fitted together (maximum likelihood, minimum volume),
    /// started from counting.
    #[default]
    Joint,
    /// Anchor rows just below the q-quantile of each class's probability.
    Quantile,
    /// The highest-probability row of each class.
    Anchor,
    /// Mean probabilities of the rows with a randomly audited trusted label.
    Trusted,
    /// Confident counting with per-class thresholds.
    Counting,
}

/// What the trusted estimator does for classes without randomly audited rows.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TrustedFallback {
    /// Stop with an error naming the classes.
    #[default]
    None,
    /// Estimate those classes with the quantile estimator (and say so in a warning).
    Quantile,
}

/// The settings an [`Estimator`] may read; each ignores the ones it does not use.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EstimatorSettings {
    /// Quantile of the quantile estimator and of the trusted estimator's fallback.
    pub quantile: f64,
    /// The trusted estimator's fallback.
    pub fallback: TrustedFallback,
    /// λ of the joint fit; `None` for its default.
    pub volume_weight: Option<f64>,
}

impl Default for EstimatorSettings {
    fn default() -> Self {
        EstimatorSettings {
            quantile: DEFAULT_QUANTILE,
            fallback: TrustedFallback::None,
            volume_weight: None,
        }
    }
}

impl Estimator {
    /// The name used on the command line, in files and in the app.
    pub fn name(self) -> &'static str {
        match self {
            Estimator::Anchor => "anchor",
            Estimator::Quantile => "quantile",
            Estimator::Trusted => "trusted",
            Estimator::Counting => "counting",
            Estimator::Joint => "joint",
        }
    }

    /// Every estimator, in the order pickers list them.
    pub fn all() -> &'static [Estimator] {
        <Estimator as clap::ValueEnum>::value_variants()
    }

    /// True when `quantile` matters to this estimator.
    pub fn uses_quantile(self) -> bool {
        matches!(self, Estimator::Quantile | Estimator::Trusted)
    }

    /// The estimator with its settings.
    pub fn with(self, settings: &EstimatorSettings) -> Method {
        match self {
            Estimator::Quantile => Method::Quantile {
                q: settings.quantile,
            },
            Estimator::Anchor => Method::Anchor,
            Estimator::Trusted => Method::Trusted {
                fallback_quantile: (settings.fallback == TrustedFallback::Quantile)
                    .then_some(settings.quantile),
            },
            Estimator::Counting => Method::Counting,
            Estimator::Joint => Method::Joint {
                volume_weight: settings.volume_weight,
            },
        }
    }
}

/// An estimator with its settings, as the library runs it.
#[derive(Debug, Clone, PartialEq)]
pub enum Method {
    /// Patrini et al. (CVPR 2017): the row with the highest p(observed = i | x) is taken
    /// as an anchor point of class i, and its probability vector becomes T[i].
    Anchor,
    /// The same, but the anchor of class i is the row with the largest p(observed = i | x)
    /// strictly below that column's q-quantile (numpy's "higher" interpolation), the
    /// robust choice used in Patrini et al.'s experiments.
    Quantile {
        /// The quantile, in (0, 1]. Default 0.97.
        q: f64,
    },
    /// Hendrycks et al. (NeurIPS 2018): T[i] = mean probability vector over the rows
    /// whose trusted label is i.
    Trusted {
        /// Estimate classes without trusted rows by `Quantile { q }` instead of failing.
        fallback_quantile: Option<f64>,
    },
    /// Northcutt et al. (JAIR 2021), confident counting: per-class thresholds, the
    /// confident joint, calibration to the observed class counts, then conditioned on
    /// the true class.
    Counting,
    /// Maximum likelihood of T and a clean classifier together under the forward model,
    /// with a minimum-volume penalty (Li et al., ICML 2021), started from the counting
    /// estimate ([`super::joint`]). Audited rows add their known clean class.
    Joint {
        /// λ, the weight of ln det T; `None`: chosen from the random audits
        /// ([`volume`]), [`super::joint::DEFAULT_VOLUME_SCALE`] / K unless they clearly
        /// prefer another value.
        volume_weight: Option<f64>,
    },
}

impl Method {
    /// Which estimator this is.
    pub fn estimator(&self) -> Estimator {
        match self {
            Method::Anchor => Estimator::Anchor,
            Method::Quantile { .. } => Estimator::Quantile,
            Method::Trusted { .. } => Estimator::Trusted,
            Method::Counting => Estimator::Counting,
            Method::Joint { .. } => Estimator::Joint,
        }
    }

    /// The name used on the command line and in JSON.
    pub fn name(&self) -> &'static str {
        self.estimator().name()
    }

    /// Refuses a quantile outside (0, 1] and joint-fit settings that cannot work.
    pub fn check(&self) -> Result<()> {
        match self {
            Method::Quantile { q }
            | Method::Trusted {
                fallback_quantile: Some(q),
            } if !(*q > 0.0 && *q <= 1.0) => Err(Error::Setting {
                setting: "quantile",
                problem: format!("must lie in (0, 1], not {q}"),
            }),
            Method::Joint {
                volume_weight: Some(volume_weight),
            } => JointParams {
                volume_weight: *volume_weight,
                ..JointParams::default()
            }
            .check(),
            _ => Ok(()),
        }
    }
}

/// The rows an estimator sees.
#[derive(Debug, Clone, Copy)]
pub struct Sample<'a> {
    /// `rows × classes` out-of-sample probabilities of the observed label.
    pub probs: ArrayView2<'a, f32>,
    /// Observed label of every row.
    pub labels: &'a [usize],
    /// Trusted label of every row, where audited.
    pub trusted: Option<&'a [Option<usize>]>,
    /// How each trusted label was obtained (`None`: every one by a random audit). The
    /// trusted estimator averages only random audits; the joint fit uses every one.
    pub origins: Option<&'a [Origin]>,
    /// Which rows to use (repeats allowed, as in a bootstrap resample).
    pub rows: &'a [usize],
    /// True when `probs` are flipmend's own out-of-fold probabilities. The joint fit then
    /// keeps its default λ without fitting the candidates ([`volume`]): measured, the
    /// random audits never preferred another value with these probabilities.
    pub own_probabilities: bool,
}

impl Sample<'_> {
    /// True when row `r`'s trusted label (if any) came from a random audit.
    pub fn at_random(&self, r: usize) -> bool {
        self.origins.is_none_or(|o| o[r].is_random_sample())
    }
}

/// An estimated matrix and what the user should know about it.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// The row-stochastic flip matrix.
    pub matrix: Array2<f64>,
    /// The clean posterior q(x) of every row, for estimators that fit one (joint): the
    /// scores then use it instead of inverting T.
    pub clean: Option<Array2<f32>>,
    /// The clean classifier behind `clean`, to give rows the fit never saw their clean
    /// posteriors (a streamed pass over a table whose sample was fitted).
    pub model: Option<crate::noise::joint::CleanModel>,
    /// Warnings such as fallbacks taken.
    pub warnings: Vec<String>,
    /// One matrix per label source, when the table names a source column; `matrix` and
    /// `clean` are then the sources' mix and their shared clean posterior.
    pub by_source: Option<crate::noise::sources::BySource>,
    /// The joint fit's volume weight and why it was used.
    pub volume: Option<VolumeChoice>,
}

impl Estimate {
    /// A matrix with nothing else estimated beside it: no clean posteriors, no clean
    /// model, no per-source matrices, no λ (a matrix file, a streamed pass).
    pub fn from_matrix(matrix: Array2<f64>, warnings: Vec<String>) -> Estimate {
        Estimate {
            matrix,
            clean: None,
            model: None,
            warnings,
            by_source: None,
            volume: None,
        }
    }

    /// `method` with every choice this estimate made from the data fixed (the joint fit's
    /// λ), so that bootstrap resamples and per-source fits repeat the same estimator
    /// instead of choosing again.
    pub fn pinned(&self, method: &Method) -> Method {
        match (method, self.volume) {
            (Method::Joint { .. }, Some(volume)) => Method::Joint {
                volume_weight: Some(volume.weight),
            },
            _ => method.clone(),
        }
    }
}

/// Runs `method` on `sample`; `classes` names the classes in messages.
pub fn estimate(method: &Method, sample: &Sample, classes: &[String]) -> Result<Estimate> {
    method.check()?;
    if sample.rows.is_empty() {
        return Err(Error::Usage(
            "no rows to estimate the flip matrix from".into(),
        ));
    }
    let mut warnings = Vec::new();
    let mut clean = None;
    let mut model = None;
    let mut volume = None;
    let mut matrix = match method {
        Method::Anchor => anchor(sample),
        Method::Quantile { q } => quantile(sample, *q, classes, &mut warnings),
        Method::Trusted { fallback_quantile } => {
            trusted(sample, *fallback_quantile, classes, &mut warnings)?
        }
        Method::Counting => counting(sample, classes, &mut warnings),
        Method::Joint { volume_weight } => {
            let (fit, choice) = joint(sample, *volume_weight, classes, &mut warnings)?;
            clean = Some(fit.clean);
            model = Some(fit.model);
            volume = Some(choice);
            fit.matrix
        }
    };
    finish_matrix(method, &mut matrix)?;
    Ok(Estimate {
        matrix,
        clean,
        model,
        warnings,
        by_source: None,
        volume,
    })
}

/// The joint fit started from the counting estimate, with λ as given, else chosen from
/// the random audits ([`volume`]).
fn joint(
    sample: &Sample,
    volume_weight: Option<f64>,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Result<(JointFit, VolumeChoice)> {
    let start = counting(sample, classes, warnings);
    let (choice, warm) = match volume_weight {
        Some(weight) => {
            let chosen_by = ChosenBy::Given;
            (VolumeChoice { weight, chosen_by }, None)
        }
        None => choose_volume_weight(sample, &start, &JointParams::default())?,
    };
    let params = JointParams {
        volume_weight: choice.weight,
        ..JointParams::default()
    };
    let from = warm
        .as_deref()
        .map_or(Start::Matrix(&start), Start::Parameters);
    let fit = fit_joint_from(sample, from, &params, &mut |_| true)?;
    if !fit.converged {
        warnings.push(format!(
            "the joint fit stopped at its iteration limit ({} iterations)",
            fit.iterations
        ));
    }
    Ok((fit, choice))
}

/// Runs `method` as passes over rows that come a part at a time ([`passes::Passes`]):
/// `pass` must give every row, in table order, to [`passes::Passes::rows`] once per
/// call. `None` for the joint fit, which reads a sample instead. The matrix is the
/// in-memory [`estimate`]'s on the same rows.
pub fn estimate_in_passes(
    method: &Method,
    classes: &[String],
    mut pass: impl FnMut(&mut passes::Passes) -> Result<()>,
) -> Result<Option<Estimate>> {
    method.check()?;
    let Some(mut passes) = passes::Passes::new(method, classes.len()) else {
        return Ok(None);
    };
    while passes.wants_pass() {
        pass(&mut passes)?;
        passes.end_pass();
    }
    let mut warnings = Vec::new();
    let mut matrix = passes.finish(classes, &mut warnings)?;
    finish_matrix(method, &mut matrix)?;
    Ok(Some(Estimate::from_matrix(matrix, warnings)))
}

/// Every estimator's last step, in memory or in passes: rows normalised to sum to 1,
/// then checked (a failure is ours, not the user's).
fn finish_matrix(method: &Method, matrix: &mut Array2<f64>) -> Result<()> {
    normalize_rows(matrix);
    validate(matrix).map_err(|e| Error::Internal(format!("{} estimator: {e}", method.name())))
}
