//! `flipmend suspects`: the rows most likely mislabelled, as a worklist for annotators.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use super::args::PipelineArgs;
use crate::data::text_column::read_text_column;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::worklist::{key_path, write_worklist_files};
use crate::io::{check_not_input, write_json};
use crate::noise::posterior::expected_from_scores;
use crate::noise::scores::{
    auroc, rank_values, score_selected, score_values, select_rows, RowScore, ScoreKind, Selection,
};
use crate::timing::Stages;
use crate::workflow;
use crate::workflow::worklist::{
    ranks_of, split_budget, valid_control_share, with_control, DEFAULT_CONTROL_SHARE,
};

/// Flags of `flipmend suspects`.
#[derive(Debug, Clone, Args)]
pub struct SuspectsArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// Score: posterior (P(true ≠ observed | x, observed) under the flip matrix), self
    /// (1 − p(observed | x)) or margin (best other class's probability − the observed one's).
    /// The worklist's `score` column holds the two probabilities as log-odds (they do not
    /// round to a tie at 1) and `p_wrong` the probability
    #[arg(long, value_enum, default_value_t = ScoreName::Posterior)]
    pub score: ScoreName,
    /// List the N most suspect rows [default: 100 unless --threshold or --all]
    #[arg(long, value_name = "N", conflicts_with_all = ["threshold", "all"])]
    pub top: Option<usize>,
    /// List every row scoring at least S (for posterior and self: a probability that the
    /// label is wrong, in [0, 1]; for margin: a margin, in [−1, 1])
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
    /// (rank,row,id,observed,suggested,score,p_wrong,alt,alt_prob,review)
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Write the summary as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// For synthetic benchmarks only: a column with the real labels; prints the AUROC and
    /// precision of the score against the rows whose observed label differs from it
    #[arg(long, value_name = "COL")]
    pub truth: Option<String>,
}

/// Score names on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ScoreName {
    /// Posterior probability that the observed label is wrong, under the flip matrix.
    Posterior,
    /// One minus the probability of the observed label.
    #[value(name = "self")]
    SelfConfidence,
    /// Normalized margin of the best other class over the observed one.
    Margin,
}

impl ScoreName {
    fn kind(self) -> ScoreKind {
        match self {
            ScoreName::Posterior => ScoreKind::Posterior,
            ScoreName::SelfConfidence => ScoreKind::SelfConfidence,
            ScoreName::Margin => ScoreKind::Margin,
        }
    }
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
    let data = Dataset::load(&args.pipeline.table.data, &options)?;
    stages.end("load_table");
    let kind = args.score.kind();
    let selection = selection(args, kind, &data)?;
    let probs = workflow::probabilities(
        &data,
        args.pipeline.probs.probs.as_deref(),
        &args.pipeline.probs.options(args.pipeline.table.delimiter),
        &args.pipeline.fit.oof(),
        &mut |_, _| true,
    )?;
    stages.end("probabilities");
    let mut warnings = data.warnings.clone();
    warnings.extend(probs.notices.iter().cloned());
    let matrix = match kind {
        ScoreKind::Posterior => {
            let source = args.pipeline.matrix.source(args.pipeline.probs.renormalize);
            Some((
                source.describe(),
                workflow::matrix_only(&data, &probs, &source)?,
            ))
        }
        _ => None,
    };
    stages.end("matrix");
    // Scores alone for every row; the full verdict (suggested class, runner-up) only for
    // the rows listed.
    let (t, clean) = match &matrix {
        Some((_, e)) => (Some(&e.matrix), e.clean.as_ref()),
        None => (None, None),
    };
    let (score_probs, flip) = workflow::score_inputs(kind, &probs, clean, t);
    let scores = score_values(kind, score_probs, &data.labels, flip);
    stages.end("scores");
    if let Some((_, e)) = &matrix {
        // The scores are the posteriors under t: their sum is the expected number of
        // mislabelled rows, so the diagnosis does not compute every posterior again.
        let expected = expected_from_scores(&scores);
        let diagnostics = workflow::diagnose_matrix_given(&data, &probs, &e.matrix, Some(expected));
        warnings.extend(e.notes.iter().cloned());
        warnings.extend(diagnostics.warnings);
    }
    stages.end("diagnose");
    let truth = match &args.truth {
        Some(column) => Some(truth_flags(
            &data,
            column,
            args.pipeline
                .table
                .options()
                .delimiter_for(&args.pipeline.table.data),
        )?),
        None => None,
    };
    let truth_auroc = truth.as_ref().map(|flipped| {
        (
            auroc(&scores, flipped),
            flipped.iter().filter(|&&f| f).count(),
        )
    });
    let order = rank_values(&scores, scores.len());
    let (rows, control) = choose_rows(args, &data, &order, &scores, &selection);
    let listed = score_selected(kind, score_probs, &data.labels, flip, &rows);
    stages.end("rank");
    let (control, key) = write_lists(
        args,
        &data,
        (kind, &selection),
        &order,
        &listed,
        control,
        (score_probs, flip),
    )?;
    let truth_check = match (&args.truth, &truth, truth_auroc) {
        (Some(column), Some(flipped), Some((auc, flipped_rows))) => {
            let hits = listed.iter().filter(|s| flipped[s.row]).count();
            let precision = (!listed.is_empty()).then(|| hits as f64 / listed.len() as f64);
            Some(TruthCheck {
                truth_column: column.clone(),
                flipped_rows,
                auroc: auc,
                precision_at_n: precision,
                n: listed.len(),
            })
        }
        _ => None,
    };
    let report = summary(
        kind,
        &data,
        (&listed, control, key),
        matrix.map(|(name, _)| name),
        &probs,
        warnings,
        truth_check,
    );
    if let Some(path) = &args.json {
        write_json(path, &report)?;
    }
    stages.end("write");
    super::report_stages(&stages);
    super::emit(out, &render(&report, kind, &data, &listed))
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

/// The suspects to list (in rank order) and how many control rows to add: a budget
/// (`--top`) is split between them; otherwise the control rows come on top of the list.
fn choose_rows(
    args: &SuspectsArgs,
    data: &Dataset,
    order: &[usize],
    scores: &[f64],
    selection: &Selection,
) -> (Vec<usize>, usize) {
    let mut for_list = selection.clone();
    let budget_control = selection.top.map(|top| {
        let (suspects, control) = split_budget(top, args.control);
        for_list.top = Some(suspects);
        control
    });
    let listed = select_rows(
        order.iter().map(|&r| (r, scores[r])),
        &data.labels,
        data.classes.len(),
        &for_list,
    );
    let count =
        budget_control.unwrap_or_else(|| (listed.len() as f64 * args.control).ceil() as usize);
    (listed, count)
}

/// Writes the worklist (`--out`): ranked, or blind with its key when there are control
/// rows to add; returns the number of control rows and where the key went.
fn write_lists(
    args: &SuspectsArgs,
    data: &Dataset,
    (kind, selection): (ScoreKind, &Selection),
    order: &[usize],
    listed: &[RowScore],
    control: usize,
    (probs, flip): (
        ndarray::ArrayView2<f32>,
        Option<crate::noise::posterior::Flip>,
    ),
) -> Result<(usize, Option<PathBuf>)> {
    let Some(path) = &args.out else {
        return Ok((0, None));
    };
    let ranks = ranks_of(
        order.iter().copied(),
        &listed.iter().map(|s| s.row).collect::<Vec<_>>(),
    );
    let listed: Vec<(RowScore, usize)> = listed.iter().copied().zip(ranks).collect();
    let classes = selection.classes.as_deref();
    let items = with_control(
        &listed,
        data.rows(),
        control,
        args.pipeline.fit.seed,
        |r| classes.is_none_or(|c| c.contains(&data.labels[r])),
        |rows| score_selected(kind, probs, &data.labels, flip, rows),
        |rows| ranks_of(order.iter().copied(), rows),
    );
    let key = write_worklist_files(path, data, kind, &items, args.with_features)?;
    Ok((items.len() - listed.len(), key))
}

fn selection(args: &SuspectsArgs, kind: ScoreKind, data: &Dataset) -> Result<Selection> {
    let classes = match &args.classes {
        Some(names) => Some(
            names
                .iter()
                .map(|n| {
                    data.classes.iter().position(|c| c == n).ok_or_else(|| {
                        Error::Usage(format!(
                            "--classes names '{n}', which is not a class; classes: {}",
                            data.classes.join(", ")
                        ))
                    })
                })
                .collect::<Result<Vec<usize>>>()?,
        ),
        None => None,
    };
    let (low, high) = if kind.is_probability() {
        (0.0, 1.0)
    } else {
        (-1.0, 1.0)
    };
    if let Some(t) = args.threshold.filter(|t| !(low..=high).contains(t)) {
        return Err(Error::Usage(format!(
            "--threshold must be a number from {low} to {high} for the {} score, not {t}",
            kind.name()
        )));
    }
    let top = if args.all || args.threshold.is_some() {
        args.top
    } else {
        Some(args.top.unwrap_or(100))
    };
    Ok(Selection {
        top,
        threshold: args.threshold.map(|t| kind.from_shown(t)),
        per_class_cap: args.per_class_cap,
        classes,
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
    kind: ScoreKind,
    data: &Dataset,
    (listed, control, key): (&[RowScore], usize, Option<PathBuf>),
    matrix: Option<String>,
    probs: &workflow::RowProbabilities,
    warnings: Vec<String>,
    truth: Option<TruthCheck>,
) -> SuspectsReport {
    let expected = |rows: &mut dyn Iterator<Item = &RowScore>| {
        kind.is_probability()
            .then(|| rows.filter_map(|s| kind.probability(s.score)).sum())
    };
    let per_class = data
        .classes
        .iter()
        .enumerate()
        .map(|(c, name)| {
            let rows: Vec<&RowScore> = listed.iter().filter(|s| data.labels[s.row] == c).collect();
            ClassCount {
                class: name.clone(),
                listed: rows.len(),
                expected_errors: expected(&mut rows.iter().copied()),
            }
        })
        .collect();
    SuspectsReport {
        score: kind.name(),
        matrix,
        probabilities: probs.source.describe(),
        rows: data.rows(),
        listed: listed.len(),
        control,
        key: key.map(|k| k.display().to_string()),
        expected_errors: expected(&mut listed.iter()),
        per_class,
        warnings,
        truth,
    }
}

fn render(r: &SuspectsReport, kind: ScoreKind, data: &Dataset, listed: &[RowScore]) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "{} suspect rows listed of {} (score: {}; probabilities: {})",
        r.listed, r.rows, r.score, r.probabilities
    );
    if let Some(m) = &r.matrix {
        let _ = writeln!(t, "flip matrix: {m}");
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
                s.row,
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
