//! The steps every front end (command line, desktop app) chains: get out-of-sample
//! probabilities, then a flip matrix, then its diagnostics.

pub mod compare;
pub mod consensus;
pub mod estimate;
pub mod overview;
pub mod ranking;
pub mod review;
pub mod streamed;
pub mod streamed_review;
pub mod suspects;
pub mod train;
pub mod worklist;

use std::path::{Path, PathBuf};

use ndarray::Array2;

use crate::data::sources::LabelSources;
use crate::data::{Dataset, ProbOptions, Probabilities};
use crate::error::Result;
use crate::io::matrix_csv::load_matrix_csv;
use crate::learn::{out_of_fold, OofParams};
use crate::noise::bootstrap::{bootstrap, bootstrap_by_source, Interval, SourceIntervals};
use crate::noise::diagnostics::diagnose_with_expected;
use crate::noise::fit_check::audit_disagreements;
use crate::noise::posterior::{Flip, Posterior};
use crate::noise::scores::ScoreKind;
use crate::noise::sources::{estimate_by_source, SourceSample, Testing};
use crate::noise::{estimate, Diagnostics, Estimate, Method, Sample};

/// Where the probabilities came from.
#[derive(Debug, Clone, PartialEq)]
pub enum ProbSource {
    /// A file the user gave (which may be in-sample; diagnostics check for it).
    File(PathBuf),
    /// flipmend's own k-fold cross-validation.
    OutOfFold {
        /// Folds used.
        folds: usize,
        /// Seed of the fold assignment.
        seed: u64,
    },
}

impl ProbSource {
    /// True for flipmend's own out-of-fold probabilities (see `Sample::own_probabilities`).
    pub fn is_own(&self) -> bool {
        matches!(self, ProbSource::OutOfFold { .. })
    }

    /// How reports name the source.
    pub fn describe(&self) -> String {
        match self {
            ProbSource::File(path) => path.display().to_string(),
            ProbSource::OutOfFold { folds, seed } => {
                format!("out-of-fold ({folds} folds, seed {seed})")
            }
        }
    }
}

/// Probabilities aligned with the dataset's rows, and their source.
#[derive(Debug, Clone)]
pub struct RowProbabilities {
    /// `rows × classes`.
    pub values: Array2<f32>,
    /// Where they came from.
    pub source: ProbSource,
    /// Warnings from loading (e.g. rows renormalised).
    pub warnings: Vec<String>,
}

/// Loads `path`, or computes out-of-fold probabilities when there is none. `progress`
/// hears (fold, folds) and may return false to cancel.
pub fn probabilities(
    data: &Dataset,
    path: Option<&Path>,
    options: &ProbOptions,
    oof: &OofParams,
    progress: &mut dyn FnMut(usize, usize) -> bool,
) -> Result<RowProbabilities> {
    match path {
        Some(path) => load_probabilities(data, path, options),
        None => {
            let values = out_of_fold(
                data.features.view(),
                &data.labels,
                data.classes.len(),
                oof,
                progress,
            )?
            .probs;
            Ok(RowProbabilities {
                values,
                source: ProbSource::OutOfFold {
                    folds: oof.folds,
                    seed: oof.seed,
                },
                warnings: Vec::new(),
            })
        }
    }
}

/// Reads a probability file for `data`'s rows.
pub fn load_probabilities(
    data: &Dataset,
    path: &Path,
    options: &ProbOptions,
) -> Result<RowProbabilities> {
    let loaded = Probabilities::load(path, data, options)?;
    Ok(RowProbabilities {
        values: loaded.values,
        source: ProbSource::File(path.to_path_buf()),
        warnings: loaded.warnings,
    })
}

/// How the flip matrix is obtained.
#[derive(Debug, Clone, PartialEq)]
pub enum MatrixSource {
    /// Estimated from the probabilities.
    Estimate(Method),
    /// Read from a matrix CSV (rows rescaled when `renormalize`).
    File {
        /// The file.
        path: PathBuf,
        /// Rescale rows that do not sum to 1.
        renormalize: bool,
    },
}

impl MatrixSource {
    /// How reports name the source (`quantile (q = 0.97)`, `counting`, `file m.csv`, …).
    pub fn describe(&self) -> String {
        match self {
            MatrixSource::File { path, .. } => format!("file {}", path.display()),
            MatrixSource::Estimate(Method::Quantile { q }) => format!("quantile (q = {q})"),
            MatrixSource::Estimate(method) => method.name().to_string(),
        }
    }
}

/// A flip matrix with its diagnostics.
#[derive(Debug, Clone)]
pub struct FlipEstimate {
    /// The matrix.
    pub matrix: Array2<f64>,
    /// Every row's clean posterior, when the estimator fitted one (joint).
    pub clean: Option<Array2<f32>>,
    /// What it says about the data.
    pub diagnostics: Diagnostics,
    /// Warnings from estimation or reading.
    pub warnings: Vec<String>,
    /// One matrix per label source (see [`crate::noise::Estimate::by_source`]).
    pub by_source: Option<crate::noise::sources::BySource>,
    /// The joint fit's volume weight and why it was used.
    pub volume: Option<crate::noise::estimators::volume::VolumeChoice>,
}

/// The data's rows as an estimator sample.
pub fn sample<'a>(data: &'a Dataset, probs: &'a RowProbabilities, rows: &'a [usize]) -> Sample<'a> {
    Sample {
        probs: probs.values.view(),
        labels: &data.labels,
        trusted: data.trusted.as_deref(),
        origins: data.trusted_origins.as_deref(),
        rows,
        own_probabilities: probs.source.is_own(),
    }
}

/// [`sample`] with `trusted` (when given) in place of the table's trusted labels and
/// their origins.
pub fn sample_trusting<'a>(
    data: &'a Dataset,
    probs: &'a RowProbabilities,
    rows: &'a [usize],
    trusted: Option<&'a review::TrustedLabels>,
) -> Sample<'a> {
    let mut sample = sample(data, probs, rows);
    if let Some(t) = trusted {
        sample.trusted = Some(&t.labels);
        sample.origins = Some(&t.origins);
    }
    sample
}

/// Runs `method` on every row: the matrix, the clean posteriors (joint) and the
/// estimator's warnings.
pub fn estimate_on_all_rows(
    data: &Dataset,
    probs: &RowProbabilities,
    method: &Method,
) -> Result<Estimate> {
    estimate_with_trusted(data, probs, method, None)
}

/// [`estimate_on_all_rows`] with `trusted` in place of the table's own trusted labels
/// and origins (the app's verdicts added to them, [`review::with_verdicts`]), so a
/// review counts without writing and reloading the table.
pub fn estimate_with_trusted(
    data: &Dataset,
    probs: &RowProbabilities,
    method: &Method,
    trusted: Option<&review::TrustedLabels>,
) -> Result<Estimate> {
    let rows: Vec<usize> = (0..data.rows()).collect();
    let sample = sample_trusting(data, probs, &rows, trusted);
    let overall = estimate(method, &sample, &data.classes)?;
    match &data.sources {
        Some(sources) => with_sources(method, sample, sources, &data.classes, overall),
        None => Ok(overall),
    }
}

/// `overall` with one matrix per source: its matrix and clean posteriors become the
/// sources' mix and their shared clean posterior.
pub fn with_sources<'a>(
    method: &Method,
    sample: Sample<'a>,
    sources: &'a LabelSources,
    classes: &[String],
    overall: Estimate,
) -> Result<Estimate> {
    let data = SourceSample {
        sample,
        of_row: &sources.of_row,
        names: &sources.names,
    };
    let method = overall.pinned(method);
    let (by_source, clean) = estimate_by_source(&method, &data, classes, &overall, Testing::Run)?;
    let mut warnings = overall.warnings;
    warnings.extend(by_source.warnings.iter().cloned());
    Ok(Estimate {
        matrix: by_source.overall.clone(),
        clean: Some(clean),
        // The sources' shared classifier is not kept: streamed runs take no source column.
        model: None,
        warnings,
        by_source: Some(by_source),
        volume: overall.volume,
    })
}

/// What the posterior score reads and how: a joint fit's clean posteriors under
/// `matrix` when there are some, else the noisy probabilities, inverted through it.
/// Other scores read the noisy probabilities and need no matrix.
pub fn score_inputs<'a>(
    kind: ScoreKind,
    probs: &'a RowProbabilities,
    clean: Option<&'a Array2<f32>>,
    matrix: Option<&'a Array2<f64>>,
) -> (ndarray::ArrayView2<'a, f32>, Option<Flip<'a>>) {
    match (kind, matrix, clean) {
        (ScoreKind::Posterior, Some(m), Some(c)) => (c.view(), Some(Flip::clean(m))),
        (ScoreKind::Posterior, Some(m), None) => (probs.values.view(), Some(Flip::noisy(m))),
        _ => (probs.values.view(), None),
    }
}

/// What `matrix` says about the data; probabilities from a file are checked for being
/// in-sample, flipmend's own out-of-fold ones are not.
pub fn diagnose_matrix(
    data: &Dataset,
    probs: &RowProbabilities,
    matrix: &Array2<f64>,
    clean: Option<&Array2<f32>>,
) -> Diagnostics {
    let expected = clean
        .map(|c| Posterior::for_clean_inputs(matrix).expected_mislabeled(c.view(), &data.labels));
    diagnose_matrix_given(data, probs, matrix, expected)
}

/// [`diagnose_matrix`] with the expected number of mislabelled rows when the caller
/// already has it (see [`diagnose_with_expected`]), so no row's posterior is computed twice.
pub fn diagnose_matrix_given(
    data: &Dataset,
    probs: &RowProbabilities,
    matrix: &Array2<f64>,
    expected_mislabeled: Option<f64>,
) -> Diagnostics {
    let external = matches!(probs.source, ProbSource::File(_));
    let mut diagnostics = diagnose_with_expected(
        matrix,
        probs.values.view(),
        &data.labels,
        &data.classes,
        external,
        expected_mislabeled,
    );
    diagnostics.warnings.extend(audit_warnings(data, matrix));
    diagnostics
}

/// A warning for each true class whose randomly audited rows contradict `matrix`.
fn audit_warnings(data: &Dataset, matrix: &Array2<f64>) -> Vec<String> {
    let Some(audited) = data.randomly_audited() else {
        return Vec::new();
    };
    audit_disagreements(matrix, &data.labels, &audited)
        .into_iter()
        .map(|d| {
            let (worst, seen, model) = d.worst;
            format!(
                "the {} randomly audited rows of true class '{}' disagree with the matrix \
                 (G = {:.1}, p = {:.1e}): {:.1} % of them are labelled '{}', the matrix says \
                 {:.1} %. Audit more rows of this class, or check the probabilities",
                d.audited,
                data.classes[d.class],
                d.g,
                d.p_value,
                100.0 * seen,
                data.classes[worst],
                100.0 * model
            )
        })
        .collect()
}

/// Estimates (or reads) the flip matrix, without diagnosing it: the matrix, the clean
/// posteriors of a joint fit, and the warnings from estimation, reading and loading the
/// probabilities.
pub fn matrix_only(
    data: &Dataset,
    probs: &RowProbabilities,
    source: &MatrixSource,
) -> Result<Estimate> {
    let mut estimate = match source {
        MatrixSource::Estimate(method) => estimate_on_all_rows(data, probs, method)?,
        MatrixSource::File { path, renormalize } => {
            let (matrix, mut warnings) = load_matrix_csv(path, &data.classes, *renormalize)?;
            if data.sources.is_some() {
                warnings.push(
                    "a matrix file holds one matrix: the source column is not used for it".into(),
                );
            }
            Estimate::from_matrix(matrix, warnings)
        }
    };
    estimate.warnings.extend(probs.warnings.iter().cloned());
    Ok(estimate)
}

/// Estimates (or reads) the flip matrix and diagnoses it.
pub fn flip_matrix(
    data: &Dataset,
    probs: &RowProbabilities,
    source: &MatrixSource,
) -> Result<FlipEstimate> {
    let Estimate {
        matrix,
        clean,
        model: _,
        warnings,
        by_source,
        volume,
    } = matrix_only(data, probs, source)?;
    let diagnostics = diagnose_matrix(data, probs, &matrix, clean.as_ref());
    Ok(FlipEstimate {
        matrix,
        clean,
        diagnostics,
        warnings,
        by_source,
        volume,
    })
}

/// Bootstrap intervals of `method` on all rows, one matrix per source.
pub fn source_intervals(
    data: &Dataset,
    sources: &LabelSources,
    probs: &RowProbabilities,
    method: &Method,
    resamples: usize,
    seed: u64,
    trusted: Option<&review::TrustedLabels>,
) -> Result<SourceIntervals> {
    let rows: Vec<usize> = (0..data.rows()).collect();
    let base = SourceSample {
        sample: sample_trusting(data, probs, &rows, trusted),
        of_row: &sources.of_row,
        names: &sources.names,
    };
    bootstrap_by_source(method, &base, &data.classes, resamples, seed)
}

/// Bootstrap intervals of `method` on all rows.
pub fn matrix_intervals(
    data: &Dataset,
    probs: &RowProbabilities,
    method: &Method,
    resamples: usize,
    seed: u64,
    trusted: Option<&review::TrustedLabels>,
) -> Result<Interval> {
    let rows: Vec<usize> = (0..data.rows()).collect();
    bootstrap(
        method,
        &sample_trusting(data, probs, &rows, trusted),
        &data.classes,
        resamples,
        seed,
    )
}
