//! `flipmend compare`: does correcting for the noise pay? All corrections trained on the
//! same rows with the same flip matrix, evaluated on the same holdout.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;

use super::args::PipelineArgs;

use crate::error::{Error, Result};
use crate::io::matrix_csv::load_matrix_csv;
use crate::io::{check_not_input, write_json};
use crate::timing::Stages;
use crate::workflow::compare::{
    compare, load_test, CompareInputs, CompareReport, CompareSettings, MatrixChoice,
    ALL_CORRECTIONS,
};
use crate::workflow::{self, MatrixSource};

/// Flags of `flipmend compare`.
#[derive(Debug, Clone, Args)]
pub struct CompareArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// Share of rows held out for evaluation (stratified by observed label)
    #[arg(long, value_name = "FRACTION", default_value_t = 0.2)]
    pub holdout: f64,
    /// A separately labelled table whose labels are taken as correct (same feature columns)
    #[arg(long, value_name = "FILE")]
    pub test: Option<PathBuf>,
    /// Write the comparison as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

/// Runs `compare`.
pub fn run(args: &CompareArgs, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    if let Some(json) = &args.json {
        let mut inputs = args.pipeline.inputs();
        inputs.extend(args.test.as_deref());
        check_not_input(json, &inputs)?;
    }
    if !(args.holdout > 0.0 && args.holdout < 1.0) {
        return Err(Error::Usage(format!(
            "--holdout must lie strictly between 0 and 1, not {}",
            args.holdout
        )));
    }
    let mut stages = Stages::start();
    let data = args.pipeline.table.load()?;
    stages.end("load_table");
    let test = args
        .test
        .as_deref()
        .map(|p| load_test(p, args.pipeline.table.delimiter, &data))
        .transpose()?;
    let probs = args
        .pipeline
        .probs
        .probs
        .as_deref()
        .map(|path| {
            let options = args.pipeline.probs.options(args.pipeline.table.delimiter);
            workflow::load_probabilities(&data, path, &options)
        })
        .transpose()?;
    stages.end("load_other");
    let source = args.pipeline.matrix.source(args.pipeline.probs.renormalize);
    let (given, method) = match &source {
        MatrixSource::File { path, renormalize } => (
            Some(load_matrix_csv(path, &data.classes, *renormalize)?),
            None,
        ),
        MatrixSource::Estimate(method) => (None, Some(method)),
    };
    let matrix = match (&given, method) {
        (Some((m, _)), _) => MatrixChoice::Given(m),
        (None, Some(method)) => MatrixChoice::Estimate(method),
        (None, None) => unreachable!("a matrix source is a file or an estimator"),
    };
    let inputs = CompareInputs {
        data: &data,
        probs: probs.as_ref(),
        matrix,
        test: test.as_ref().map(|(x, l)| (x, l.as_slice())),
    };
    let settings = CompareSettings {
        holdout: args.holdout,
        fit: args.pipeline.fit.oof(),
        corrections: ALL_CORRECTIONS.to_vec(),
    };
    let comparison = compare(inputs, &settings, None, &mut |_, _| true)?;
    stages.absorb(&comparison.stages);
    let mut report = comparison.report;
    if let Some((_, warnings)) = given {
        report.warnings.splice(0..0, warnings);
    }
    if let Some(json) = &args.json {
        write_json(json, &report)?;
    }
    stages.end("write");
    super::report_stages(&stages);
    super::emit(out, &render(&report))
}

fn render(r: &CompareReport) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "{} training rows, {} holdout rows; every model uses the same rows and flip matrix\n",
        r.train_rows, r.holdout_rows
    );
    let pct = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{:.2}%", 100.0 * v));
    let _ = writeln!(
        t,
        "{:<11} {:>10} {:>12} {:>10} {:>10} {:>9} {:>8}",
        "correction", "observed", "est. clean", "test", "trusted", "changed", "dropped"
    );
    for m in &r.models {
        let _ = writeln!(
            t,
            "{:<11} {:>10} {:>12} {:>10} {:>10} {:>9} {:>8}",
            m.correction,
            pct(m.holdout_accuracy_observed),
            pct(m.estimated_clean_accuracy),
            pct(m.test_accuracy),
            pct(m.trusted_accuracy),
            m.changed_vs_none,
            m.dropped_rows
        );
    }
    let _ = writeln!(
        t,
        "\nobserved: holdout accuracy against the (noisy) observed labels. est. clean: the accuracy against true labels \
         implied by it and the flip matrix, trace(N·T⁻¹) with N the joint shares of prediction and observed label \
         (assumes flips depend only on the true class). test/trusted: against labels taken as correct. changed: \
         holdout predictions that differ from 'none'."
    );
    let width = super::name_width(r.classes.iter().map(String::as_str), 5);
    let _ = writeln!(t, "\nrecall per class (against {}):", r.reference);
    let _ = write!(t, "{:<width$}", "class");
    for m in &r.models {
        let _ = write!(t, " {:>10}", m.correction);
    }
    let _ = writeln!(t);
    for (i, class) in r.classes.iter().enumerate() {
        let _ = write!(t, "{class:<width$}");
        for m in &r.models {
            let _ = write!(t, " {:>10}", pct(m.per_class_recall[i]));
        }
        let _ = writeln!(t);
    }
    gains(&mut t, r);
    for w in &r.warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    t
}

/// Each correction's accuracy with its 90 % interval, and its gain over `none` on the
/// same rows.
fn gains(t: &mut String, r: &CompareReport) {
    let (against, rows) = if r.models.iter().any(|m| m.test_accuracy.is_some()) {
        ("test", "test rows")
    } else {
        ("trusted", "randomly audited holdout rows")
    };
    let _ = writeln!(
        t,
        "
accuracy on the {rows}, with 90 % intervals, and the gain over 'none':"
    );
    for m in &r.models {
        let (value, interval) = match against {
            "test" => (m.test_accuracy, m.test_accuracy_interval),
            _ => (m.trusted_accuracy, m.trusted_accuracy_interval),
        };
        let (Some(v), Some([low, high])) = (value, interval) else {
            continue;
        };
        let gain = match m.gain_vs_none.filter(|_| m.correction != "none") {
            Some([gl, g, gh]) => format!(
                "  {:+.2} points ({:+.2} to {:+.2})",
                100.0 * g,
                100.0 * gl,
                100.0 * gh
            ),
            None => String::new(),
        };
        let _ = writeln!(
            t,
            "  {:<11} {:.2}% ({:.2}–{:.2}%){gain}",
            m.correction,
            100.0 * v,
            100.0 * low,
            100.0 * high
        );
    }
}
