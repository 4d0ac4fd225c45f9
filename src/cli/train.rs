//! `flipmend train`: fit a softmax regression with a noise correction and save it.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;

use super::args::PipelineArgs;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::model::{write_model, ModelFile};
use crate::io::{check_not_input, write_atomic};
use crate::learn::train::{Correction, Trained};
use crate::workflow;
use crate::workflow::train::{train_model, TrainParams};

/// Flags of `flipmend train`.
#[derive(Debug, Clone, Args)]
pub struct TrainArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// none (plain cross-entropy), forward or backward (loss corrected by the flip matrix;
    /// backward bounds each per-class loss by −ln 1e-4 so the fit cannot exploit the
    /// negative entries of the inverse), backward-unbounded (the published backward loss,
    /// unbounded below when the inverse has negative entries), prune (drop the most suspect
    /// rows, as many as the expected number of mislabelled rows, then plain cross-entropy)
    #[arg(long, value_enum)]
    pub correction: Correction,
    /// The earlier spelling of `--correction backward-unbounded`, still accepted
    #[arg(long, hide = true)]
    pub faithful: bool,
    /// Where to save the model (JSON)
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

impl TrainArgs {
    /// The correction, with the earlier `--faithful` flag read as backward-unbounded.
    fn correction(&self) -> Result<Correction> {
        match (self.faithful, self.correction) {
            (false, c) => Ok(c),
            (true, Correction::Backward | Correction::BackwardUnbounded) => {
                Ok(Correction::BackwardUnbounded)
            }
            (true, _) => Err(Error::Usage(
                "--faithful applies to --correction backward only".into(),
            )),
        }
    }
}

/// Runs `train`.
pub fn run(args: &TrainArgs, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    let inputs = args.pipeline.inputs();
    check_not_input(&args.out, &inputs)?;
    let correction = args.correction()?;
    let data = args.pipeline.table.load()?;
    let params = TrainParams {
        correction,
        matrix: args.pipeline.matrix.source(args.pipeline.probs.renormalize),
        fit: args.pipeline.fit.oof(),
    };
    let made = train_model(&data, &params, &mut || {
        workflow::probabilities(
            &data,
            args.pipeline.probs.probs.as_deref(),
            &args.pipeline.probs.options(args.pipeline.table.delimiter),
            &args.pipeline.fit.oof(),
            &mut |_, _| true,
        )
    })?;
    write_atomic(&args.out, |w| write_model(w, &made.file))?;
    super::emit(
        out,
        &render(args, &data, &made.file, &made.trained, &made.warnings),
    )
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
