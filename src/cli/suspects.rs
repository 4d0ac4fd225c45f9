//! `flipmend suspects`: the rows most likely mislabelled, as a worklist for annotators.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use super::args::{not_streamed, streamed_probs, PipelineArgs, StreamArgs};
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::text_column::read_text_column;
use crate::io::worklist::{key_path, write_worklist_files, Extras};
use crate::io::{check_not_input, write_json};
use crate::noise::scores::{auroc, RowScore, ScoreKind};
use crate::timing::Stages;
use crate::workflow;
use crate::workflow::streamed::{
    open_local, suspects_from, OpenRows, StreamInput, StreamedSuspects,
};
use crate::workflow::suspects::{expected_among, suspects, Suspects, SuspectsParams, DEFAULT_TOP};
use crate::workflow::worklist::{valid_control_share, DEFAULT_CONTROL_SHARE};

/// Flags of `flipmend suspects`.
#[derive(Debug, Clone, Args)]
pub struct SuspectsArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// Score: posterior (P(true ≠ observed | x, observed) under the flip matrix),
    /// self-confidence (1 − p(observed | x); `self` is still accepted) or margin (best other class's probability − the observed one's).
    /// The worklist's `score` column holds the two probabilities as log-odds (they do not
    /// round to a tie at 1) and `p_wrong` the probability
    #[arg(long, value_enum, default_value_t = ScoreKind::Posterior)]
    pub score: ScoreKind,
    /// At most N rows on the worklist, the most suspect first, control rows included
    /// [default: 100 unless --threshold or --all]
    #[arg(long, visible_alias = "top", value_name = "N", conflicts_with_all = ["threshold", "all"])]
    pub budget: Option<usize>,
    /// List every row scoring at least S (for posterior and self-confidence: a probability
    /// that the label is wrong, in [0, 1]; for margin: a margin, in [−1, 1])
    #[arg(long, value_name = "S", conflicts_with = "all")]
    pub threshold: Option<f64>,
    /// List every row
    #[arg(long)]
    pub all: bool,
    /// At most N rows per observed class
    #[arg(long, value_name = "N")]
    pub per_class_cap: Option<usize>,
    /// Only rows observed as one of these classes (comma-separated)
    #[arg(long, value_name = "A,B,..", value_delimiter = ',')]
    pub classes: Option<Vec<String>>,
    /// Share of the worklist given to control rows: drawn at random (with --seed) from the
    /// rows not listed and shuffled in among the suspects, so that `review` can measure
    /// what the list misses. With control rows the worklist is blind (no rank, score or
    /// suggestion; NAME.key.csv beside it says which row is which); 0 gives the ranked list
    #[arg(long, value_name = "SHARE", default_value_t = DEFAULT_CONTROL_SHARE)]
    pub control: f64,
    /// Add the feature values to the worklist
    #[arg(long)]
    pub with_features: bool,
    /// Write the worklist CSV: blind (item,row,id,observed,review) with its key NAME.key.csv
    /// when there are control rows, else ranked
    /// (rank,row,id,observed,suggested,score,p_wrong,second_choice,second_choice_prob,review);
    /// Parquet when FILE ends in .parquet (the key stays CSV)
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Write the summary as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// For synthetic benchmarks only: a column with the real labels; prints the AUROC and
    /// precision of the score against the rows whose observed label differs from it
    #[arg(long, value_name = "COL")]
    pub truth: Option<String>,
    #[command(flatten)]
    /// When to stream the table.
    pub stream: StreamArgs,
}

#[derive(Debug, Serialize)]
struct ClassCount {
    class: String,
    listed: usize,
    expected_errors: Option<f64>,
}

#[derive(Debug, Serialize)]
struct TruthCheck {
    truth_column: String,
    flipped_rows: usize,
    auroc: Option<f64>,
    precision_at_n: Option<f64>,
    n: usize,
}

#[derive(Debug, Serialize)]
struct SuspectsReport {
    score: &'static str,
    matrix: Option<String>,
    probabilities: String,
    rows: usize,
    listed: usize,
    control: usize,
    key: Option<String>,
    expected_errors: Option<f64>,
    per_class: Vec<ClassCount>,
    warnings: Vec<String>,
    truth: Option<TruthCheck>,
    /// Present when the table was streamed.
    #[serde(skip_serializing_if = "Option::is_none")]
    streamed: Option<StreamedFacts>,
}

/// What a streamed run adds to the summary.
#[derive(Debug, Serialize)]
struct StreamedFacts {
    /// Rows the flip matrix was estimated on.
    sample_rows: usize,
    /// The expected number of mislabelled rows in the whole table.
    expected_errors_all_rows: Option<f64>,
}

/// Runs `suspects`.
pub fn run(args: &SuspectsArgs, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    check_outputs(args)?;
    let mut options = args.pipeline.table.options();
    if let Some(truth) = &args.truth {
        options.exclude.push(("--truth".into(), truth.clone()));
    }
    let mut stages = Stages::start();
    let probs_path = args.pipeline.probs.probs.as_deref();
    if args.stream.streams(&args.pipeline.table.data, probs_path) {
        return run_streamed(args, &options, stages, &open_local, out);
    }
    let data = args.pipeline.table.load_with(&options)?;
    stages.end("load_table");
    let params = params(args, &data.classes)?;
    let probs = workflow::probabilities(
        &data,
        args.pipeline.probs.probs.as_deref(),
        &args.pipeline.probs.options(args.pipeline.table.delimiter),
        &args.pipeline.fit.oof(),
        &mut |_, _| true,
    )?;
    stages.end("probabilities");
    let (data, _) = super::annotators::relabel(
        data,
        &probs,
        args.pipeline.table.consensus_prior,
        0,
        args.pipeline.fit.seed,
    )?;
    let found = suspects(&data, &probs, &params, &mut stages)?;
    let key = match &args.out {
        Some(path) => write_worklist_files(
            path,
            &data,
            found.kind,
            &found.items,
            Extras {
                with_features: args.with_features,
                ..Extras::default()
            },
        )?,
        None => None,
    };
    let truth = match &args.truth {
        Some(column) => Some(truth_check(args, &data, column, &found)?),
        None => None,
    };
    let report = summary(&data, &found, key, &probs, truth);
    if let Some(path) = &args.json {
        write_json(path, &report)?;
    }
    stages.end("write");
    super::report_stages(&stages);
    super::emit(
        out,
        &render(&report, found.kind, &data, &found.listed, None),
    )
}

/// Runs `suspects` streamed, on the rows `open` gives (an engine's, for the distributed
/// runner): the same flags, checks and outputs as [`run`].
pub fn run_on(args: &SuspectsArgs, open: &OpenRows, out: &mut dyn Write) -> Result<()> {
    args.pipeline.check()?;
    check_outputs(args)?;
    let options = args.pipeline.table.options();
    run_streamed(args, &options, Stages::start(), open, out)
}

/// `suspects` over a table too large to hold: two passes, the matrix from a sample.
fn run_streamed(
    args: &SuspectsArgs,
    options: &crate::data::TableOptions,
    mut stages: Stages,
    open: &OpenRows,
    out: &mut dyn Write,
) -> Result<()> {
    let probs = streamed_probs(args.pipeline.probs.probs.as_deref())?;
    let refuse = |what: &str| Err(not_streamed(what));
    if args.with_features {
        return refuse("--with-features");
    }
    if args.truth.is_some() {
        return refuse("--truth (its AUROC needs every row's score)");
    }
    if args.pipeline.table.source.is_some() {
        return refuse("--source (one matrix per label source)");
    }
    if args.classes.is_some() {
        return refuse("--classes");
    }
    if args.per_class_cap.is_some() {
        return refuse("--per-class-cap");
    }
    let params = params(args, &[])?;
    let input = StreamInput {
        table: &args.pipeline.table.data,
        options,
        probs,
        renormalize: args.pipeline.probs.renormalize,
        sample_rows: args.stream.sample_rows,
    };
    let source = open(&input)?;
    let found = suspects_from(source.as_ref(), input.sample_rows, &params, &mut stages)?;
    let data = &found.worklist_rows;
    let key = match &args.out {
        Some(path) => write_worklist_files(
            path,
            data,
            found.kind,
            &found.items,
            Extras {
                table_rows: Some(&found.table_rows),
                ..Extras::default()
            },
        )?,
        None => None,
    };
    let report = streamed_summary(&found, key, probs);
    if let Some(path) = &args.json {
        write_json(path, &report)?;
    }
    stages.end("write");
    super::report_stages(&stages);
    super::emit(
        out,
        &render(
            &report,
            found.kind,
            data,
            &found.listed,
            Some(&found.table_rows),
        ),
    )
}

fn streamed_summary(
    found: &StreamedSuspects,
    key: Option<PathBuf>,
    probs: &std::path::Path,
) -> SuspectsReport {
    let data = &found.worklist_rows;
    let kind = found.kind;
    let listed = &found.listed;
    SuspectsReport {
        score: kind.name(),
        matrix: found.matrix.as_ref().map(|m| m.description.clone()),
        probabilities: probs.display().to_string(),
        rows: found.rows,
        listed: listed.len(),
        control: if key.is_some() {
            found.control_rows()
        } else {
            0
        },
        key: key.map(|k| k.display().to_string()),
        expected_errors: expected_among(kind, &listed.iter().collect::<Vec<_>>()),
        per_class: per_class(data, kind, listed),
        warnings: found.warnings.clone(),
        truth: None,
        streamed: Some(StreamedFacts {
            sample_rows: found.sample_rows,
            expected_errors_all_rows: found.expected_errors,
        }),
    }
}

fn check_outputs(args: &SuspectsArgs) -> Result<()> {
    if !valid_control_share(args.control) {
        return Err(Error::Usage(format!(
            "--control must be a share from 0 to below 0.5 of the worklist, not {}",
            args.control
        )));
    }
    let inputs = args.pipeline.inputs();
    let key = args.out.as_deref().map(key_path);
    for output in [&args.out, &args.json, &key].into_iter().flatten() {
        check_not_input(output, &inputs)?;
    }
    Ok(())
}

/// The flags as the suspects job's parameters; a class or threshold the flags get wrong
/// is reported by its flag.
fn params(args: &SuspectsArgs, class_names: &[String]) -> Result<SuspectsParams> {
    let classes = match &args.classes {
        Some(names) => Some(
            names
                .iter()
                .map(|n| {
                    class_names.iter().position(|c| c == n).ok_or_else(|| {
                        Error::Usage(format!(
                            "--classes names '{n}', which is not a class; classes: {}",
                            class_names.join(", ")
                        ))
                    })
                })
                .collect::<Result<Vec<usize>>>()?,
        ),
        None => None,
    };
    let (low, high) = args.score.shown_range();
    if let Some(t) = args.threshold.filter(|t| !(low..=high).contains(t)) {
        return Err(Error::Usage(format!(
            "--threshold must be a number from {low} to {high} for the {} score, not {t}",
            args.score.name()
        )));
    }
    let budget = if args.all || args.threshold.is_some() {
        args.budget
    } else {
        Some(args.budget.unwrap_or(DEFAULT_TOP))
    };
    Ok(SuspectsParams {
        score: args.score,
        matrix: args.pipeline.matrix.source(args.pipeline.probs.renormalize),
        budget,
        threshold: args.threshold,
        per_class_cap: args.per_class_cap,
        classes,
        control_share: args.control,
        seed: args.pipeline.fit.seed,
    })
}

/// `--truth`: how well the score finds the rows whose observed label differs from it.
fn truth_check(
    args: &SuspectsArgs,
    data: &Dataset,
    column: &str,
    found: &Suspects,
) -> Result<TruthCheck> {
    let delimiter = args
        .pipeline
        .table
        .options()
        .delimiter_for(&args.pipeline.table.data);
    let flipped = truth_flags(data, column, delimiter)?;
    let hits = found.listed.iter().filter(|s| flipped[s.row]).count();
    let n = found.listed.len();
    Ok(TruthCheck {
        truth_column: column.to_string(),
        flipped_rows: flipped.iter().filter(|&&f| f).count(),
        auroc: auroc(&found.scores, &flipped),
        precision_at_n: (n > 0).then(|| hits as f64 / n as f64),
        n,
    })
}

/// Rows whose observed label differs from the truth column.
fn truth_flags(data: &Dataset, column: &str, delimiter: u8) -> Result<Vec<bool>> {
    let cells = read_text_column(&data.path, delimiter, column)?;
    if cells.len() != data.rows() {
        return Err(Error::Internal(format!(
            "--truth read {} cells for {} rows",
            cells.len(),
            data.rows()
        )));
    }
    Ok(cells
        .iter()
        .zip(&data.labels)
        .map(|(t, &y)| t.as_str() != data.classes[y])
        .collect())
}

fn summary(
    data: &Dataset,
    found: &Suspects,
    key: Option<PathBuf>,
    probs: &workflow::RowProbabilities,
    truth: Option<TruthCheck>,
) -> SuspectsReport {
    let kind = found.kind;
    let listed = &found.listed;
    let per_class = per_class(data, kind, listed);
    let all: Vec<&RowScore> = listed.iter().collect();
    SuspectsReport {
        score: kind.name(),
        matrix: found.matrix.as_ref().map(|m| m.description.clone()),
        probabilities: probs.source.describe(),
        rows: data.rows(),
        listed: listed.len(),
        control: if key.is_some() {
            found.control_rows()
        } else {
            0
        },
        key: key.map(|k| k.display().to_string()),
        expected_errors: expected_among(kind, &all),
        per_class,
        warnings: found.warnings.clone(),
        truth,
        streamed: None,
    }
}

/// Listed rows and their expected errors per observed class.
fn per_class(data: &Dataset, kind: ScoreKind, listed: &[RowScore]) -> Vec<ClassCount> {
    data.classes
        .iter()
        .enumerate()
        .map(|(c, name)| {
            let rows: Vec<&RowScore> = listed.iter().filter(|s| data.labels[s.row] == c).collect();
            ClassCount {
                class: name.clone(),
                listed: rows.len(),
                expected_errors: expected_among(kind, &rows),
            }
        })
        .collect()
}

fn render(
    r: &SuspectsReport,
    kind: ScoreKind,
    data: &Dataset,
    listed: &[RowScore],
    table_rows: Option<&[usize]>,
) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "{} suspect rows listed of {} (score: {}; probabilities: {})",
        r.listed, r.rows, r.score, r.probabilities
    );
    if let Some(m) = &r.matrix {
        let _ = writeln!(t, "flip matrix: {m}");
    }
    if let Some(s) = &r.streamed {
        let _ = writeln!(
            t,
            "streamed in two passes: the matrix from a seeded sample of {} rows, every row scored",
            s.sample_rows
        );
        if let Some(e) = s.expected_errors_all_rows {
            let _ = writeln!(t, "expected mislabelled rows in the whole table: {e:.1}");
        }
    }
    if let Some(key) = &r.key {
        let _ = writeln!(
            t,
            "plus {} control rows drawn at random from the rows not listed, shuffled in among \
             them: the worklist shows no rank, score or suggestion, so reviewers judge every row \
             alike. Which row is which is in {key}; keep it from the reviewers and give it to \
             `flipmend review` with the reviewed worklist.",
            r.control
        );
    }
    match r.expected_errors {
        Some(e) => {
            let _ = writeln!(
                t,
                "expected true label errors among them: {e:.1} (sum of their p_wrong)"
            );
        }
        None => {
            let _ = writeln!(
                t,
                "(margin scores are not probabilities, so no expected count is given)"
            );
        }
    }
    let width = super::name_width(data.classes.iter().map(String::as_str), "observed".len());
    per_class_table(&mut t, r, width);
    head_of_list(&mut t, kind, data, listed, width, table_rows);
    if let Some(truth) = &r.truth {
        let auc = truth.auroc.map_or("n/a".into(), |a| format!("{a:.4}"));
        let precision = truth
            .precision_at_n
            .map_or("n/a".into(), |p| format!("{p:.4}"));
        let _ = writeln!(
            t,
            "\nagainst '{}' ({} flipped rows): AUROC {auc}, precision at {} {precision}",
            truth.truth_column, truth.flipped_rows, truth.n
        );
    }
    for w in &r.warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    let _ = writeln!(
        t,
        "\nThese are estimates to guide qualified human review, not automatic corrections: send the rows to \
         reviewers, and where labels concern health, safety or people follow your local rules and licensed practice."
    );
    t
}

/// Listed rows and expected errors per observed class.
fn per_class_table(t: &mut String, r: &SuspectsReport, width: usize) {
    let _ = writeln!(
        t,
        "\n{:<width$}  {:>7}  {:>15}",
        "observed", "listed", "expected errors"
    );
    for c in r.per_class.iter().filter(|c| c.listed > 0) {
        let e = c
            .expected_errors
            .map_or("-".to_string(), |e| format!("{e:.1}"));
        let _ = writeln!(t, "{:<width$}  {:>7}  {:>15}", c.class, c.listed, e);
    }
}

/// The first ten listed rows.
fn head_of_list(
    t: &mut String,
    kind: ScoreKind,
    data: &Dataset,
    listed: &[RowScore],
    width: usize,
    table_rows: Option<&[usize]>,
) {
    if !listed.is_empty() {
        let _ = writeln!(
            t,
            "\n{:>5}  {:>8}  {:<14}  {:<width$}  {:<width$}  {:>8}",
            "rank",
            "row",
            "id",
            "observed",
            "suggested",
            if kind.is_probability() {
                "p_wrong"
            } else {
                "margin"
            }
        );
        for (i, s) in listed.iter().take(10).enumerate() {
            let _ = writeln!(
                t,
                "{:>5}  {:>8}  {:<14}  {:<width$}  {:<width$}  {:>8.4}",
                i + 1,
                table_rows.map_or(s.row, |rows| rows[s.row]),
                data.id(s.row),
                data.classes[data.labels[s.row]],
                data.classes[s.suggested],
                kind.shown(s.score)
            );
        }
        if listed.len() > 10 {
            let _ = writeln!(t, "  … {} more (see --out)", listed.len() - 10);
        }
    }
}
