//! `flipmend estimate`: the flip matrix, its noise summary and warnings.

use std::fmt::Write as _;
use std::io::{IsTerminal, Write};
use std::path::PathBuf;

use clap::Args;
use ndarray::Array2;
use serde::Serialize;

use super::args::{not_streamed, streamed_probs, PipelineArgs, StreamArgs};
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::columnar::Format;
use crate::io::matrix_csv::write_matrix_csv;
use crate::io::probs_csv::write_probs;
use crate::io::{check_not_input, write_atomic, write_json};
use crate::noise::diagnostics::ReliabilityBin;
use crate::noise::Method;
use crate::workflow::consensus::Consensual;
use crate::workflow::estimate::{estimate, EstimateParams, Estimated};
use crate::workflow::streamed::{estimate_from, open_local, OpenRows, StreamInput};
use crate::workflow::{self, MatrixSource, RowProbabilities};

/// Flags of `flipmend estimate`.
#[derive(Debug, Clone, Args)]
pub struct EstimateArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// Resample rows B ≥ 2 times (seeded), refit, and report a 90 % interval for each entry:
    /// for joint the estimate ± (1.645 × the bootstrap standard deviation + the shift that
    /// doubling λ causes, the penalty's bias), else ± 1.645 × 1.1 standard deviations
    #[arg(long, value_name = "B", default_value_t = 0)]
    pub bootstrap: usize,
    /// Write the matrix as CSV (header class,<classes>; one row per true class)
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Write the out-of-fold probabilities (id, one column per class; Parquet when FILE ends
    /// in .parquet, else CSV) for reuse with --probs
    #[arg(long, value_name = "FILE")]
    pub probs_out: Option<PathBuf>,
    /// Write the report as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// With --labels: write each row's consensus (CSV: id, consensus, consensus_prob,
    /// majority)
    #[arg(long, value_name = "FILE")]
    pub consensus_out: Option<PathBuf>,
    #[command(flatten)]
    /// When to stream the table.
    pub stream: StreamArgs,
}

/// The JSON report; its keys are stable (other tools parse them).
#[derive(Debug, Serialize)]
struct EstimateReport<'a> {
    classes: &'a [String],
    method: String,
    /// The joint fit's λ and why: `given`, `default` or `random audits`.
    #[serde(skip_serializing_if = "Option::is_none")]
    volume_weight: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    volume_weight_chosen_by: Option<&'static str>,
    probabilities: String,
    matrix: Vec<Vec<f64>>,
    observed_prior: &'a [f64],
    clean_prior: &'a [f64],
    noise_rate: &'a [f64],
    expected_mislabeled: f64,
    expected_mislabeled_share: f64,
    /// `null` when the matrix is singular (JSON has no infinity).
    condition_number: Option<f64>,
    calibration_error: f64,
    reliability: &'a [ReliabilityBin],
    warnings: Vec<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    matrix_low: Option<Vec<Vec<f64>>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    matrix_high: Option<Vec<Vec<f64>>>,
    /// The label-source column, when one was named.
    #[serde(skip_serializing_if = "Option::is_none")]
    source_column: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    sources: Option<Vec<super::sources::SourceReport>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    sources_test: Option<super::sources::TestReport>,
    /// With several annotators' columns: each annotator.
    #[serde(skip_serializing_if = "Option::is_none")]
    annotators: Option<Vec<super::annotators::AnnotatorJson>>,
}

/// Refuses a bootstrap that cannot be run.
fn check_bootstrap(args: &EstimateArgs) -> Result<()> {
    if args.bootstrap == 1 {
        return Err(Error::Usage(
            "--bootstrap needs at least 2 resamples (their spread is the interval's width)".into(),
        ));
    }
    if args.bootstrap > 0 && args.pipeline.matrix.matrix.is_some() {
        return Err(Error::Usage(
            "--bootstrap re-estimates the matrix, so it cannot be used with --matrix".into(),
        ));
    }
    Ok(())
}

/// Runs `estimate`.
pub fn run(args: &EstimateArgs, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    check_outputs(args)?;
    check_bootstrap(args)?;
    let probs_path = args.pipeline.probs.probs.as_deref();
    if args.stream.streams(&args.pipeline.table.data, probs_path) {
        return run_streamed(args, &open_local, out);
    }
    let data = args.pipeline.table.load()?;
    if args.consensus_out.is_some() && data.annotations.is_none() {
        return Err(Error::Usage(
            "--consensus-out writes each row's consensus of several annotators: give --labels \
             or --annotations"
                .into(),
        ));
    }
    let probs = workflow::probabilities(
        &data,
        args.pipeline.probs.probs.as_deref(),
        &args.pipeline.probs.options(args.pipeline.table.delimiter),
        &args.pipeline.fit.oof(),
        &mut progress_line,
    )?;
    let prior = args.pipeline.table.consensus_prior;
    let (data, consensus) =
        super::annotators::relabel(data, &probs, prior, args.bootstrap, args.pipeline.fit.seed)?;
    let params = EstimateParams {
        matrix: args.pipeline.matrix.source(args.pipeline.probs.renormalize),
        resamples: args.bootstrap,
        seed: args.pipeline.fit.seed,
    };
    let found = estimate(&data, &probs, &params)?;
    write_outputs(
        args,
        &data,
        &probs,
        &found,
        &params.matrix,
        consensus.as_ref(),
    )?;
    let mut text = String::new();
    if let Some(consensus) = &consensus {
        super::annotators::render(&mut text, consensus, prior);
    }
    text.push_str(&render(&data, &probs, &found, &params.matrix));
    super::emit(out, &text)
}

fn check_outputs(args: &EstimateArgs) -> Result<()> {
    let inputs = args.pipeline.inputs();
    for output in [&args.out, &args.probs_out, &args.json, &args.consensus_out]
        .into_iter()
        .flatten()
    {
        check_not_input(output, &inputs)?;
    }
    Ok(())
}

/// Fold progress on standard error, only when a person is watching.
fn progress_line(fold: usize, folds: usize) -> bool {
    let mut err = std::io::stderr();
    if err.is_terminal() {
        let end = if fold == folds { "\n" } else { "" };
        let _ = write!(
            err,
            "\rout-of-fold probabilities: fold {}/{folds} done{end}",
            fold
        );
    }
    true
}

fn rows_of(t: &Array2<f64>) -> Vec<Vec<f64>> {
    t.rows().into_iter().map(|r| r.to_vec()).collect()
}

/// Runs `estimate` streamed, on the rows `open` gives (an engine's, for the distributed
/// runner): the same flags, checks and outputs as [`run`].
pub fn run_on(args: &EstimateArgs, open: &OpenRows, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    check_outputs(args)?;
    check_bootstrap(args)?;
    run_streamed(args, open, out)
}

/// `estimate` over a table too large to hold.
fn run_streamed(args: &EstimateArgs, open: &OpenRows, out: &mut dyn Write) -> Result<()> {
    let probs = streamed_probs(args.pipeline.probs.probs.as_deref())?;
    let refuse = |what: &str| Err(not_streamed(what));
    let table = &args.pipeline.table;
    if table.labels.is_some() || table.annotations.is_some() || args.consensus_out.is_some() {
        return refuse("several annotators' labels");
    }
    if table.source.is_some() {
        return refuse("--source (one matrix per label source)");
    }
    if args.probs_out.is_some() {
        return refuse("--probs-out (the probabilities are already a file)");
    }
    let options = table.options();
    let input = StreamInput {
        table: &table.data,
        options: &options,
        probs,
        renormalize: args.pipeline.probs.renormalize,
        sample_rows: args.stream.sample_rows,
    };
    let params = EstimateParams {
        matrix: args.pipeline.matrix.source(args.pipeline.probs.renormalize),
        resamples: args.bootstrap,
        seed: args.pipeline.fit.seed,
    };
    let source = open(&input)?;
    let found = estimate_from(source.as_ref(), input.sample_rows, &params)?;
    let (data, probs) = (&found.sample, &found.sample_probs);
    write_outputs(args, data, probs, &found.estimated, &params.matrix, None)?;
    let mut text = format!(
        "streamed: {} rows read in passes; {} rows in the seeded sample (--sample-rows)\n",
        found.rows,
        data.rows()
    );
    text.push_str(&render(data, probs, &found.estimated, &params.matrix));
    super::emit(out, &text)
}

fn write_outputs(
    args: &EstimateArgs,
    data: &Dataset,
    probs: &RowProbabilities,
    found: &Estimated,
    source: &MatrixSource,
    consensus: Option<&Consensual>,
) -> Result<()> {
    let (estimate, interval) = (&found.estimate, found.interval.as_ref());
    if let (Some(path), Some(consensus)) = (&args.consensus_out, consensus) {
        write_atomic(path, |w| super::annotators::write_rows(w, data, consensus))?;
    }
    if let Some(path) = &args.out {
        write_atomic(path, |w| {
            write_matrix_csv(w, &estimate.matrix, &data.classes)
        })?;
    }
    if let Some(path) = &args.probs_out {
        write_atomic(path, |w| {
            write_probs(w, Format::of(path), data, &probs.values)
        })?;
    }
    if let Some(path) = &args.json {
        let d = &estimate.diagnostics;
        let (sources, sources_test) = match &estimate.by_source {
            Some(by_source) => {
                let (sources, test) =
                    super::sources::report(data, by_source, found.source_intervals.as_ref());
                (Some(sources), test)
            }
            None => (None, None),
        };
        let report = EstimateReport {
            classes: &data.classes,
            method: source.describe(),
            volume_weight: estimate.volume.map(|v| v.weight),
            volume_weight_chosen_by: estimate.volume.map(|v| v.chosen_by.name()),
            probabilities: probs.source.describe(),
            matrix: rows_of(&estimate.matrix),
            observed_prior: &d.observed_prior,
            clean_prior: &d.clean_prior,
            noise_rate: &d.noise_rate,
            expected_mislabeled: d.expected_mislabeled,
            expected_mislabeled_share: d.expected_mislabeled_share,
            condition_number: d.condition_number.is_finite().then_some(d.condition_number),
            calibration_error: d.calibration_error,
            reliability: &d.reliability,
            warnings: found.warnings.clone(),
            matrix_low: interval.map(|i| rows_of(&i.low)),
            matrix_high: interval.map(|i| rows_of(&i.high)),
            source_column: data.sources.as_ref().map(|s| s.column.as_str()),
            sources,
            sources_test,
            annotators: consensus.map(super::annotators::report),
        };
        write_json(path, &report)?;
    }
    Ok(())
}

fn render(
    data: &Dataset,
    probs: &RowProbabilities,
    found: &Estimated,
    source: &MatrixSource,
) -> String {
    let (estimate, interval) = (&found.estimate, found.interval.as_ref());
    let mut t = String::new();
    let d = &estimate.diagnostics;
    let _ = writeln!(
        t,
        "flip matrix: {}; probabilities: {}",
        source.describe(),
        probs.source.describe()
    );
    if let MatrixSource::Estimate(Method::Joint { .. }) = source {
        let _ = writeln!(
            t,
            "joint: T and a clean classifier fitted together on the probabilities, with a \
             minimum-volume penalty (the default: the closest to the truth on simulated tables \
             with a known matrix; README, 'How close the estimates are to the truth')"
        );
    }
    if let Some(volume) = &estimate.volume {
        let _ = writeln!(t, "{}", volume.describe(data.classes.len()));
    }
    let [audit, review, control] = data.trusted_by_origin();
    if audit + review + control > 0 {
        let _ = writeln!(
            t,
            "trusted rows: {audit} from random audits, {review} reviewed suspects, {control} \
             control rows (joint uses all; trusted uses random audits only)"
        );
    }
    matrix_table(&mut t, data, &estimate.matrix);
    class_table(&mut t, data, d, interval);
    if let Some(by_source) = &estimate.by_source {
        super::sources::render(&mut t, data, by_source, found.source_intervals.as_ref());
    }
    let _ = writeln!(
        t,
        "\nexpected mislabelled rows: {:.1} of {} ({:.1}%)",
        d.expected_mislabeled,
        data.rows(),
        100.0 * d.expected_mislabeled_share
    );
    let _ = writeln!(
        t,
        "condition number of T (1-norm): {:.3}",
        d.condition_number
    );
    let _ = writeln!(
        t,
        "calibration error against observed labels (ECE, 15 bins): {:.4}",
        d.calibration_error
    );
    for w in &found.warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    let _ = writeln!(
        t,
        "\nThese figures are estimates for qualified human review, not corrections; where labels concern health, \
         safety or people, follow your local rules and licensed practice."
    );
    t
}

/// T as a table, rows = true class.
fn matrix_table(t: &mut String, data: &Dataset, matrix: &ndarray::Array2<f64>) {
    let k = data.classes.len();
    let _ = writeln!(
        t,
        "rows = true class, columns = observed label, T[i][j] = P(observed j | true i)\n"
    );
    let name_width = super::name_width(
        data.classes.iter().map(String::as_str),
        "true \\ observed".len(),
    );
    let cell = super::name_width(data.classes.iter().map(String::as_str), 6);
    let _ = write!(t, "{:<name_width$}", "true \\ observed");
    for c in &data.classes {
        let _ = write!(t, "  {c:>cell$}");
    }
    let _ = writeln!(t);
    for i in 0..k {
        let _ = write!(t, "{:<name_width$}", data.classes[i]);
        for j in 0..k {
            let _ = write!(t, "  {:>cell$.3}", matrix[[i, j]]);
        }
        let _ = writeln!(t);
    }
}

/// Noise rate, observed and clean share of each class, with the noise interval.
fn class_table(
    t: &mut String,
    data: &Dataset,
    d: &crate::noise::Diagnostics,
    interval: Option<&crate::noise::bootstrap::Interval>,
) {
    let k = data.classes.len();
    let name_width = super::name_width(
        data.classes.iter().map(String::as_str),
        "true \\ observed".len(),
    );
    let _ = writeln!(
        t,
        "\n{:<name_width$}  {:>7}  {:>9}  {:>7}{}",
        "class",
        "noise",
        "observed",
        "clean",
        if interval.is_some() {
            "  noise 90% interval"
        } else {
            ""
        }
    );
    for i in 0..k {
        let band = interval.map_or(String::new(), |b| {
            format!(
                "  {:.1}%–{:.1}%",
                100.0 * (1.0 - b.high[[i, i]]),
                100.0 * (1.0 - b.low[[i, i]])
            )
        });
        let _ = writeln!(
            t,
            "{:<name_width$}  {:>6.1}%  {:>8.2}%  {:>6.2}%{band}",
            data.classes[i],
            100.0 * d.noise_rate[i],
            100.0 * d.observed_prior[i],
            100.0 * d.clean_prior[i]
        );
    }
}
