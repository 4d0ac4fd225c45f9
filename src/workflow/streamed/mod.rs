//! The suspects job over a table too large to hold, in two passes with bounded memory.
//!
//! Pass 1 reads the role columns and the probabilities once and keeps a seeded uniform
//! sample of rows (the rows with the smallest keys of [`draw_key`]: any number of rows,
//! one at a time, without knowing the count) plus the candidates of the control draw.
//! The flip matrix (and the joint fit's clean classifier) is estimated on the sample,
//! exactly as on a loaded table. Pass 2 scores every row under it, keeps the running
//! histogram and expected count ([`ScoreTally`], bit for bit the in-memory sums), the
//! most suspect rows in a bounded heap, and counts how many rows outrank each control
//! candidate, so that every rank in the key is exact.
//!
//! Memory is the sample, the heap and one part of the file at a time, not the table.
//! With a sample as large as the table the result is the in-memory job's, row for row
//! (tested in `tests/streamed.rs`).

use std::path::Path;

use ndarray::Array2;

use super::estimate::{EstimateParams, Estimated};
use super::ranking::Histogram;
use super::suspects::{SuspectsParams, UsedMatrix};
use super::worklist::{blind_items, split_budget};
use super::{diagnose_matrix, matrix_intervals, matrix_only};
use super::{FlipEstimate, MatrixSource, ProbSource, RowProbabilities};
use crate::data::natural::natural_cmp;
use crate::data::origin::Origin;
use crate::data::roles::TableOptions;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::worklist::{Item, Slice};
use crate::noise::estimators::estimate_in_passes;
use crate::noise::scores::{rank_key, RowScore, ScoreKind};
use crate::noise::Estimate;
use crate::timing::Stages;

mod kept;
mod local;
mod scoring;
mod source;

pub use kept::Kept;
pub use scoring::{ControlRanks, ScoreRule};
pub use source::{Draws, Gathered, RowSource, ScoreJob, Scored};

pub use local::missing_classes;
use local::LocalSource;

/// Rows the matrix is estimated on when no size is given. Measured on a 2,000,000-row
/// table (`benches/stream_sample.py`, two seeds): the full-data matrix lies inside the
/// sample's 90 % interval in 96-100 % of cells from 25,000 rows up, while the largest
/// cell difference falls from 0.014 (25,000) to 0.004-0.007 (200,000); the fit on
/// 200,000 rows took 0.6 s of a 19 s run on 100,000,000 rows. See the README.
pub const DEFAULT_SAMPLE_ROWS: usize = 200_000;

/// The files of a streamed run and how to read them.
#[derive(Debug, Clone)]
pub struct StreamInput<'a> {
    /// The table (CSV, Parquet or Arrow IPC).
    pub table: &'a Path,
    /// Its roles.
    pub options: &'a TableOptions,
    /// The probabilities, by position (may be the table's own file).
    pub probs: &'a Path,
    /// Rescale probability rows that do not sum to 1.
    pub renormalize: bool,
    /// Rows of the fitting sample.
    pub sample_rows: usize,
}

/// What a streamed suspects run found.
#[derive(Debug, Clone)]
pub struct StreamedSuspects {
    /// Rows in the table.
    pub rows: usize,
    /// Rows the matrix was estimated on.
    pub sample_rows: usize,
    /// The score.
    pub kind: ScoreKind,
    /// The matrix, for the posterior score (estimated on the sample).
    pub matrix: Option<UsedMatrix>,
    /// The worklist's rows only (listed first, then control rows), as a table; the
    /// listed and item rows below index it.
    pub worklist_rows: Dataset,
    /// The table row of each row of `worklist_rows`.
    pub table_rows: Vec<usize>,
    /// The listed suspects in rank order.
    pub listed: Vec<RowScore>,
    /// The worklist's items (shuffled with the control rows, as in memory).
    pub items: Vec<Item>,
    /// The histogram of every row's score as shown.
    pub histogram: Histogram,
    /// The expected number of mislabelled rows (probability scores).
    pub expected_errors: Option<f64>,
    /// Everything the user should know.
    pub warnings: Vec<String>,
}

impl StreamedSuspects {
    /// Control rows on the worklist.
    pub fn control_rows(&self) -> usize {
        self.items.len() - self.listed.len()
    }
}

/// How a streamed run's rows are opened: the table file read here ([`open_local`]), or
/// an engine's (the distributed runner's).
pub type OpenRows = dyn for<'a> Fn(&StreamInput<'a>) -> Result<Box<dyn RowSource + 'a>>;

/// The table file of `input`, read here part by part.
pub fn open_local<'a>(input: &StreamInput<'a>) -> Result<Box<dyn RowSource + 'a>> {
    Ok(Box::new(LocalSource::open(input)?))
}

/// Refuses the settings a streamed run cannot honour.
fn check(params: &SuspectsParams) -> Result<usize> {
    params.check()?;
    let refuse = |what: &str| Err(Error::Usage(format!("a streamed run {what}")));
    if params.classes.is_some() {
        return refuse("does not take --classes yet (every rank would need a third pass)");
    }
    if params.per_class_cap.is_some() {
        return refuse("does not take --per-class-cap yet (every rank would need a third pass)");
    }
    match params.budget {
        Some(budget) => Ok(budget),
        None => refuse("needs a budget (--budget N): it keeps the listed rows in memory"),
    }
}

/// Scores, ranks and lists the rows of a table too large to hold.
pub fn suspects_streamed(
    input: &StreamInput,
    params: &SuspectsParams,
    stages: &mut Stages,
) -> Result<StreamedSuspects> {
    check(params)?;
    let source = LocalSource::open(input)?;
    suspects_from(&source, input.sample_rows, params, stages)
}

/// [`suspects_streamed`] over any source of rows, with a fitting sample of `sample_rows`.
pub fn suspects_from(
    source: &dyn RowSource,
    sample_rows: usize,
    params: &SuspectsParams,
    stages: &mut Stages,
) -> Result<StreamedSuspects> {
    let budget = check(params)?;
    let (suspects, control) = split_budget(budget, params.control_share);
    let first = FirstPass::read(source, sample_rows, suspects + control, params.seed)?;
    stages.end("pass_1");
    let matrix = estimated(source, &first, params)?;
    let mut warnings = Vec::new();
    if let Some(m) = &matrix {
        warnings.extend(m.estimate.warnings.iter().cloned());
        let d = diagnose_matrix(
            &first.sample_data,
            &first.sample_probs,
            &m.estimate.matrix,
            m.estimate.clean.as_ref(),
        );
        warnings.extend(d.warnings);
        warnings.extend(first.sample_note(&m.estimate));
    }
    stages.end("matrix");
    let rule = ScoreRule::new(params.score, matrix.as_ref().map(|m| &m.estimate));
    let control_set = &first.gathered.candidates;
    let (_, control_scores) = rule.scores(control_set.probs.view(), &control_set.labels);
    let candidate_keys: Vec<u128> = control_scores
        .iter()
        .zip(&control_set.rows)
        .map(|(&s, &r)| rank_key(s, r))
        .collect();
    let mut sorted: Vec<(u128, usize)> = candidate_keys
        .iter()
        .enumerate()
        .map(|(i, &k)| (k, i))
        .collect();
    sorted.sort_unstable();
    let ranks = ControlRanks::new(sorted.iter().map(|&(k, _)| k).collect());
    let job = ScoreJob {
        rule: &rule,
        ranks: &ranks,
        suspects,
        threshold: params.threshold.map(|t| params.score.from_shown(t)),
    };
    let scored = source.score(&job)?;
    stages.end("pass_2");
    // Rows outranking each candidate, in candidate order.
    let mut above = vec![0usize; sorted.len()];
    for (&(_, candidate), count) in sorted.iter().zip(scored.ranks.above()) {
        above[candidate] = count;
    }
    let (worklist, chosen) = assemble(source, scored, &above, &first, &rule, params, control);
    Ok(StreamedSuspects {
        rows: first.gathered.rows,
        sample_rows: first.sample_data.rows(),
        kind: params.score,
        matrix,
        worklist_rows: worklist.data,
        table_rows: worklist.rows,
        listed: chosen.listed,
        items: chosen.items,
        histogram: chosen.histogram,
        expected_errors: chosen.expected,
        warnings,
    })
}

/// Pass 1 and what follows from it: the classes and the sample as a table.
struct FirstPass {
    gathered: Gathered,
    sample_data: Dataset,
    sample_probs: RowProbabilities,
}

impl FirstPass {
    /// Reads the table once, keeping the sample and `candidates` control candidates.
    fn read(
        source: &dyn RowSource,
        sample_rows: usize,
        candidates: usize,
        seed: u64,
    ) -> Result<Self> {
        let draws = Draws {
            sample_rows,
            candidates,
            seed,
        };
        let mut gathered = source.gather(&draws)?;
        let sample = std::mem::take(&mut gathered.sample);
        let sample_data = sample.dataset(source.table_path(), source.plan(), &gathered.classes);
        let sample_probs = RowProbabilities {
            values: sample.probs,
            source: ProbSource::File(source.probs_path().to_path_buf()),
            warnings: Vec::new(),
        };
        Ok(FirstPass {
            gathered,
            sample_data,
            sample_probs,
        })
    }

    /// The matrix: the estimators that read every row run in passes over the table
    /// (their in-memory result exactly); the joint fit is fitted on the sample; a matrix
    /// file is read.
    fn estimate(&self, source: &dyn RowSource, matrix: &MatrixSource) -> Result<Estimate> {
        if let MatrixSource::Estimate(method) = matrix {
            let classes = &self.gathered.classes;
            let exact =
                estimate_in_passes(method, classes, |passes| source.estimator_pass(passes))?;
            if let Some(estimate) = exact {
                return Ok(estimate);
            }
        }
        matrix_only(&self.sample_data, &self.sample_probs, matrix)
    }

    /// The warning that a matrix fitted on the sample (the joint fit's) saw only it.
    fn sample_note(&self, estimate: &Estimate) -> Option<String> {
        let (rows, sample) = (self.gathered.rows, self.sample_data.rows());
        (estimate.model.is_some() && rows > sample).then(|| {
            format!(
                "the flip matrix was fitted on a seeded uniform sample of {sample} of the {rows} \
                 rows (--sample-rows); audited rows outside the sample were not used"
            )
        })
    }
}

/// What a streamed estimate found: the estimate (the matrix of every row for the
/// estimators that read every row; the joint fit's on the sample), with its diagnostics
/// and intervals measured on the sample, and the sample itself.
#[derive(Debug, Clone)]
pub struct StreamedEstimate {
    /// Rows in the table.
    pub rows: usize,
    /// The sample as a table (no features).
    pub sample: Dataset,
    /// The sample's probabilities.
    pub sample_probs: RowProbabilities,
    /// The estimate, diagnostics and intervals.
    pub estimated: Estimated,
}

/// The estimate job over a table too large to hold.
pub fn estimate_streamed(input: &StreamInput, params: &EstimateParams) -> Result<StreamedEstimate> {
    params.check()?;
    let source = LocalSource::open(input)?;
    estimate_from(&source, input.sample_rows, params)
}

/// [`estimate_streamed`] over any source of rows, with a fitting sample of `sample_rows`.
pub fn estimate_from(
    source: &dyn RowSource,
    sample_rows: usize,
    params: &EstimateParams,
) -> Result<StreamedEstimate> {
    params.check()?;
    let first = FirstPass::read(source, sample_rows, 0, params.seed)?;
    let estimate = first.estimate(source, &params.matrix)?;
    let (data, probs) = (&first.sample_data, &first.sample_probs);
    let diagnostics = diagnose_matrix(data, probs, &estimate.matrix, estimate.clean.as_ref());
    let interval = match &params.matrix {
        MatrixSource::Estimate(method) if params.resamples > 0 => Some(matrix_intervals(
            data,
            probs,
            &estimate.pinned(method),
            params.resamples,
            params.seed,
            None,
        )?),
        _ => None,
    };
    let mut warnings = estimate.warnings.clone();
    warnings.extend(diagnostics.warnings.iter().cloned());
    warnings.extend(first.sample_note(&estimate));
    if first.gathered.rows > data.rows() {
        warnings.push(format!(
            "streamed: the diagnostics{} describe a seeded uniform sample of {} of the {} rows",
            if interval.is_some() {
                " and the intervals"
            } else {
                ""
            },
            data.rows(),
            first.gathered.rows
        ));
    }
    let estimated = Estimated {
        estimate: FlipEstimate {
            matrix: estimate.matrix,
            clean: estimate.clean,
            diagnostics,
            warnings: estimate.warnings,
            by_source: None,
            volume: estimate.volume,
        },
        interval,
        source_intervals: None,
        warnings,
    };
    Ok(StreamedEstimate {
        rows: first.gathered.rows,
        sample: first.sample_data,
        sample_probs: first.sample_probs,
        estimated,
    })
}

/// The matrix for the posterior score.
fn estimated(
    source: &dyn RowSource,
    first: &FirstPass,
    params: &SuspectsParams,
) -> Result<Option<UsedMatrix>> {
    if params.score != ScoreKind::Posterior {
        return Ok(None);
    }
    Ok(Some(UsedMatrix {
        description: params.matrix.describe(),
        estimate: first.estimate(source, &params.matrix)?,
    }))
}

/// Class names in natural order, as a loaded table orders them.
pub fn class_order(names: &[String]) -> Vec<String> {
    let mut classes = names.to_vec();
    classes.sort_by(|a, b| natural_cmp(a, b));
    classes
}

/// The class of each label code.
pub(super) fn code_classes(names: &[String], classes: &[String]) -> Vec<u32> {
    names
        .iter()
        .map(|n| classes.iter().position(|c| c == n).unwrap_or(0) as u32)
        .collect()
}

/// The worklist's rows as a small table, and their table rows.
struct WorklistRows {
    data: Dataset,
    rows: Vec<usize>,
}

struct Chosen {
    listed: Vec<RowScore>,
    items: Vec<Item>,
    histogram: Histogram,
    expected: Option<f64>,
}

/// The listed rows, the control rows drawn from the candidates, their verdicts and the
/// worklist's items; `above` counts the rows outranking each candidate.
fn assemble(
    source: &dyn RowSource,
    scored: Scored,
    above: &[usize],
    first: &FirstPass,
    rule: &ScoreRule,
    params: &SuspectsParams,
    control_count: usize,
) -> (WorklistRows, Chosen) {
    let (top, control, classes) = (
        &scored.top,
        &first.gathered.candidates,
        &first.gathered.classes,
    );
    let is_listed: rustc_hash::FxHashSet<usize> = top.rows.iter().copied().collect();
    let chosen: Vec<usize> = (0..control.len())
        .filter(|&i| !is_listed.contains(&control.rows[i]))
        .take(control_count)
        .collect();
    let k = classes.len();
    let n = top.len() + chosen.len();
    let mut inputs = Array2::zeros((n, k));
    for (i, row) in top.probs.rows().into_iter().enumerate() {
        inputs.row_mut(i).assign(&row);
    }
    let mut labels = top.labels.clone();
    let mut ids = top.ids.clone();
    let mut rows = top.rows.clone();
    let control_inputs = rule.inputs(control.probs.view());
    for (j, &c) in chosen.iter().enumerate() {
        inputs.row_mut(top.len() + j).assign(&control_inputs.row(c));
        labels.push(control.labels[c]);
        ids.push(control.ids[c].clone());
        rows.push(control.rows[c]);
    }
    let all: Vec<usize> = (0..n).collect();
    let verdicts = rule
        .flips()
        .selected(params.score, inputs.view(), &labels, &all);
    let listed: Vec<RowScore> = verdicts[..top.len()].to_vec();
    let with_rank = |(i, s): (usize, &RowScore)| (*s, i + 1);
    let listed_ranked: Vec<(RowScore, usize)> = listed.iter().enumerate().map(with_rank).collect();
    let control_ranked: Vec<(RowScore, usize)> = chosen
        .iter()
        .enumerate()
        .map(|(j, &c)| (verdicts[top.len() + j], above[c] + 1))
        .collect();
    let items = if control_ranked.is_empty() {
        listed_ranked
            .iter()
            .map(|&(score, rank)| Item {
                score,
                rank,
                slice: Slice::Listed,
            })
            .collect()
    } else {
        blind_items(&listed_ranked, &control_ranked, params.seed)
    };
    let worklist = Kept {
        rows: rows.clone(),
        labels,
        trusted: vec![None; n],
        origins: vec![Origin::Audit; n],
        ids,
        probs: inputs,
    };
    let mut data = worklist.dataset(source.table_path(), source.plan(), classes);
    data.trusted = None;
    data.trusted_origins = None;
    let (histogram, expected) = scored.tally.finish();
    let chosen_result = Chosen {
        listed,
        items,
        histogram,
        expected,
    };
    (WorklistRows { data, rows }, chosen_result)
}
