//! The train job: one softmax regression with a noise correction on every row, and the
//! model file that records how it was made. (The app trains through the compare job,
//! which fits every correction on one split, and saves one of those models.)

use ndarray::Array2;

use super::{flip_matrix, MatrixSource, RowProbabilities};
use crate::data::Dataset;
use crate::error::Result;
use crate::io::matrix_csv::load_matrix_csv;
use crate::io::model::{FitSummary, ModelFile, Provenance, TrainingSettings};
use crate::learn::train::{train, Correction, SourceFlips, TrainInputs, Trained};
use crate::learn::OofParams;

/// What the train job fits.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainParams {
    /// The correction.
    pub correction: Correction,
    /// Where the flip matrix comes from (unused by `none`).
    pub matrix: MatrixSource,
    /// The model's penalty and iteration limit, and the folds and seed of probabilities
    /// computed for the matrix.
    pub fit: OofParams,
}

/// What the train job made.
#[derive(Debug, Clone)]
pub struct TrainedModel {
    /// The model and how the fit went.
    pub trained: Trained,
    /// The model file to write.
    pub file: ModelFile,
    /// Everything the user should know: the table's warnings, the matrix's warnings and
    /// diagnostics, and the fit's warnings.
    pub warnings: Vec<String>,
}

/// The matrix a correction uses, what names it, and the warnings from getting it.
struct UsedMatrix {
    matrix: Option<Array2<f64>>,
    /// One matrix per label source, when the table names a source column.
    by_source: Option<Vec<Array2<f64>>>,
    probs: Option<Array2<f32>>,
    description: Option<String>,
    warnings: Vec<String>,
}

/// Trains `params.correction` on every row. `probabilities` is called only when they are
/// needed: to estimate the matrix, or for `prune`.
pub fn train_model(
    data: &Dataset,
    params: &TrainParams,
    probabilities: &mut dyn FnMut() -> Result<RowProbabilities>,
) -> Result<TrainedModel> {
    params.fit.model.check()?;
    let used = used_matrix(data, params, probabilities)?;
    let rows: Vec<usize> = (0..data.rows()).collect();
    let trained = train(
        data.features.view(),
        &rows,
        &data.labels,
        data.classes.len(),
        params.correction,
        TrainInputs {
            matrix: used.matrix.as_ref(),
            probs: used.probs.as_ref().map(|p| p.view()),
            start: None,
            cancel: None,
            by_source: match (&used.by_source, &data.sources) {
                (Some(matrices), Some(sources)) => Some(SourceFlips {
                    matrices,
                    of_row: &sources.of_row,
                }),
                _ => None,
            },
            standardized: None,
        },
        &params.fit.model,
    )?;
    let mut warnings = data.warnings.clone();
    warnings.extend(used.warnings.iter().cloned());
    warnings.extend(trained.warnings.iter().cloned());
    let file = model_file(data, params, &trained, &used, &rows);
    Ok(TrainedModel {
        trained,
        file,
        warnings,
    })
}

/// The flip matrix (read, or estimated from probabilities) and, for prune, the
/// probabilities; nothing for `none`.
fn used_matrix(
    data: &Dataset,
    params: &TrainParams,
    probabilities: &mut dyn FnMut() -> Result<RowProbabilities>,
) -> Result<UsedMatrix> {
    let correction = params.correction;
    if !correction.needs_matrix() {
        return Ok(UsedMatrix {
            matrix: None,
            by_source: None,
            probs: None,
            description: None,
            warnings: Vec::new(),
        });
    }
    let source = &params.matrix;
    if let (MatrixSource::File { path, renormalize }, false) =
        (source, correction == Correction::Prune)
    {
        let (t, warnings) = load_matrix_csv(path, &data.classes, *renormalize)?;
        return Ok(UsedMatrix {
            matrix: Some(t),
            by_source: None,
            probs: None,
            description: Some(source.describe()),
            warnings,
        });
    }
    let probs = probabilities()?;
    let estimate = flip_matrix(data, &probs, source)?;
    let mut warnings = estimate.warnings;
    warnings.extend(estimate.diagnostics.warnings);
    let by_source = estimate
        .by_source
        .map(|b| b.sources.into_iter().map(|s| s.matrix).collect());
    Ok(UsedMatrix {
        matrix: Some(estimate.matrix),
        by_source,
        probs: Some(probs.values),
        description: Some(source.describe()),
        warnings,
    })
}

fn model_file(
    data: &Dataset,
    params: &TrainParams,
    trained: &Trained,
    used: &UsedMatrix,
    rows: &[usize],
) -> ModelFile {
    let provenance = Provenance {
        data,
        rows,
        correction: params.correction.name(),
        matrix: used.matrix.as_ref(),
        fit: FitSummary {
            objective: trained.report.objective,
            iterations: trained.report.iterations,
            converged: trained.report.converged,
            dropped_rows: trained.dropped.len(),
        },
    };
    let settings = TrainingSettings {
        l2: params.fit.model.l2_penalty(),
        max_iter: params.fit.model.iteration_limit(),
        seed: params.fit.seed,
        matrix_source: used.description.clone(),
    };
    ModelFile::describe(&trained.model, provenance, settings)
}
