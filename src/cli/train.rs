//! `flipmend train`: fit a softmax regression with a noise correction and save it.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;
use ndarray::Array2;

use super::args::PipelineArgs;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::matrix_csv::load_matrix_csv;
use crate::io::model::{write_model, FitSummary, ModelFile, Provenance, TrainingSettings};
use crate::io::{check_not_input, write_atomic};
use crate::learn::train::{train, Correction, TrainInputs, Trained};
use crate::workflow::{self, MatrixSource};

/// Flags of `flipmend train`.
#[derive(Debug, Clone, Args)]
pub struct TrainArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// none (plain cross-entropy), forward or backward (loss corrected by the flip matrix),
    /// prune (drop the most suspect rows, as many as the expected number of mislabelled
    /// rows, then plain cross-entropy)
    #[arg(long, value_enum)]
    pub correction: CorrectionName,
    /// With --correction backward: use the faithful loss, which is unbounded below when the
    /// inverse flip matrix has negative entries (by default each per-class loss is bounded
    /// by −ln 1e-4, a smooth floor on the probabilities, to keep the fit from exploiting them)
    #[arg(long)]
    pub faithful: bool,
    /// Where to save the model (JSON)
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

/// Correction names on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum CorrectionName {
    /// Cross-entropy on the observed labels.
    None,
    /// Forward correction.
    Forward,
    /// Backward correction.
    Backward,
    /// Drop the most suspect rows, then cross-entropy.
    Prune,
}

impl TrainArgs {
    fn correction(&self) -> Correction {
        match self.correction {
            CorrectionName::None => Correction::None,
            CorrectionName::Forward => Correction::Forward,
            CorrectionName::Backward => Correction::Backward {
                guarded: !self.faithful,
            },
            CorrectionName::Prune => Correction::Prune,
        }
    }
}

/// Runs `train`.
pub fn run(args: &TrainArgs, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    let inputs = args.pipeline.inputs();
    check_not_input(&args.out, &inputs)?;
    if args.faithful && args.correction != CorrectionName::Backward {
        return Err(Error::Usage(
            "--faithful applies to --correction backward only".into(),
        ));
    }
    let correction = args.correction();
    let data = Dataset::load(&args.pipeline.table.data, &args.pipeline.table.options())?;
    let params = args.pipeline.fit.oof().model;
    params.check()?;
    let (matrix, probs, matrix_source, mut warnings) = matrix_and_probs(args, &data, correction)?;
    let rows: Vec<usize> = (0..data.rows()).collect();
    let trained = train(
        data.features.view(),
        &rows,
        &data.labels,
        data.classes.len(),
        correction,
        TrainInputs {
            matrix: matrix.as_ref(),
            probs: probs.as_ref().map(|p| p.view()),
            start: None,
            cancel: None,
        },
        &params,
    )?;
    warnings.extend(trained.warnings.iter().cloned());
    let file = model_file(
        args,
        &data,
        &trained,
        correction,
        matrix.as_ref(),
        matrix_source,
        &rows,
    );
    write_atomic(&args.out, |w| write_model(w, &file))?;
    super::emit(out, &render(args, &data, &file, &trained, &warnings))
}

type MatrixAndProbs = (
    Option<Array2<f64>>,
    Option<Array2<f32>>,
    Option<String>,
    Vec<String>,
);

/// The flip matrix (read, or estimated from probabilities) and, for prune, the
/// probabilities; nothing for `none`.
fn matrix_and_probs(
    args: &TrainArgs,
    data: &Dataset,
    correction: Correction,
) -> Result<MatrixAndProbs> {
    if !correction.needs_matrix() {
        return Ok((None, None, None, Vec::new()));
    }
    let source = args.pipeline.matrix.source(args.pipeline.probs.renormalize);
    if let (MatrixSource::File { path, renormalize }, false) =
        (&source, correction == Correction::Prune)
    {
        let (t, notes) = load_matrix_csv(path, &data.classes, *renormalize)?;
        return Ok((
            Some(t),
            None,
            Some(format!("file {}", path.display())),
            notes,
        ));
    }
    let probs = workflow::probabilities(
        data,
        args.pipeline.probs.probs.as_deref(),
        &args.pipeline.probs.options(args.pipeline.table.delimiter),
        &args.pipeline.fit.oof(),
        &mut |_, _| true,
    )?;
    let estimate = workflow::flip_matrix(data, &probs, &source)?;
    let name = source.describe();
    let mut warnings = estimate.notes;
    warnings.extend(estimate.diagnostics.warnings);
    Ok((
        Some(estimate.matrix),
        Some(probs.values),
        Some(name),
        warnings,
    ))
}

fn model_file(
    args: &TrainArgs,
    data: &Dataset,
    trained: &Trained,
    correction: Correction,
    matrix: Option<&Array2<f64>>,
    matrix_source: Option<String>,
    rows: &[usize],
) -> ModelFile {
    let provenance = Provenance {
        data,
        rows,
        correction: correction.name(),
        matrix,
        fit: FitSummary {
            objective: trained.report.objective,
            iterations: trained.report.iterations,
            converged: trained.report.converged,
            dropped_rows: trained.dropped.len(),
        },
    };
    let settings = TrainingSettings {
        l2: args.pipeline.fit.l2,
        max_iter: args.pipeline.fit.max_iter,
        seed: args.pipeline.fit.seed,
        matrix_source,
    };
    ModelFile::describe(&trained.model, provenance, settings)
}

fn render(
    args: &TrainArgs,
    data: &Dataset,
    file: &ModelFile,
    trained: &Trained,
    warnings: &[String],
) -> String {
    let mut t = String::new();
    let m = &file.metrics;
    let _ = writeln!(
        t,
        "{}: softmax regression, correction {}",
        args.out.display(),
        file.correction
    );
    if let Some(source) = &file.settings.matrix_source {
        let _ = writeln!(t, "flip matrix: {source}");
    }
    let _ = writeln!(
        t,
        "rows: {} of {} ({} dropped as most suspect)",
        m.rows,
        data.rows(),
        m.dropped_rows
    );
    let _ = writeln!(
        t,
        "training objective {:.6} after {} iterations ({}), gradient {:.2e}",
        m.objective,
        m.iterations,
        if m.converged {
            "converged"
        } else {
            "not converged"
        },
        trained.report.grad_norm
    );
    let _ = writeln!(
        t,
        "accuracy on the training rows against observed labels: {:.2}%",
        100.0 * m.accuracy_observed
    );
    if let Some(a) = m.accuracy_trusted {
        let _ = writeln!(
            t,
            "accuracy on the training rows with a trusted label, against it: {:.2}%",
            100.0 * a
        );
    }
    for w in warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    t
}
