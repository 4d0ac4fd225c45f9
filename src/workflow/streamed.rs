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

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

use super::estimate::{EstimateParams, Estimated};
use super::ranking::{Histogram, ScoreTally};
use super::suspects::{SuspectsParams, UsedMatrix};
use super::worklist::{blind_items, draw_key, split_budget, CONTROL_STREAM, SAMPLE_STREAM};
use super::{diagnose_matrix, matrix_intervals, matrix_only};
use super::{FlipEstimate, MatrixSource, ProbSource, RowProbabilities};
use crate::data::natural::natural_cmp;
use crate::data::origin::Origin;
use crate::data::roles::TableOptions;
use crate::data::table::StringColumn;
use crate::data::Dataset;
use crate::error::{Error, Problem, Result};
use crate::io::arrow_cells::Text;
use crate::io::stream::{StreamPart, TableStream};
use crate::io::worklist::{Item, Slice};
use crate::noise::estimators::estimate_in_passes;
use crate::noise::estimators::passes::Rows;
use crate::noise::posterior::Flip;
use crate::noise::scores::{rank_key, RowFlips, RowScore, ScoreKind};
use crate::noise::Estimate;
use crate::timing::Stages;

/// Rows the matrix is estimated on when no size is given. Measured on a 2,000,000-row
/// table (`benches/stream_sample.py`, two seeds): the full-data matrix lies inside the
/// sample's 90 % interval in 96-100 % of cells from 25,000 rows up, while the largest
/// cell difference falls from 0.014 (25,000) to 0.004-0.007 (200,000); the fit on
/// 200,000 rows took 0.6 s of a 19 s run on 100,000,000 rows. See the README.
pub const DEFAULT_SAMPLE_ROWS: usize = 200_000;

/// Rows scored per parallel block in pass 2.
const BLOCK_ROWS: usize = 16_384;

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

/// One row kept from pass 1 (sample or control candidate) or pass 2 (the heap).
#[derive(Debug, Clone)]
struct KeptRow {
    row: usize,
    /// Label code (pass 1) or class (pass 2).
    label: u32,
    trusted: u32,
    origin: Origin,
    id: String,
    /// Probabilities, in the order of the fields read.
    probs: Box<[f32]>,
}

/// The rows with the smallest keys seen, at most `capacity` of them. Rows are collected
/// until there are twice as many, then cut back to the smallest `capacity` (a linear
/// selection), whose largest key becomes the bound a new row must beat: constant work per
/// kept row, where a binary heap spent 7 % of a 10,000,000-row run popping (perf).
struct Smallest {
    capacity: usize,
    kept: Vec<(u128, KeptRow)>,
    /// Keys from here up are not kept.
    bound: Option<u128>,
}

impl Smallest {
    fn new(capacity: usize) -> Self {
        Smallest {
            capacity,
            kept: Vec::new(),
            bound: None,
        }
    }

    /// True when a row with `key` would be kept.
    fn wants(&self, key: u128) -> bool {
        self.capacity > 0 && self.bound.is_none_or(|b| key < b)
    }

    fn offer(&mut self, key: u128, row: impl FnOnce() -> KeptRow) {
        if !self.wants(key) {
            return;
        }
        self.kept.push((key, row()));
        if self.kept.len() >= 2 * self.capacity {
            self.cut();
        }
    }

    /// Keeps the `capacity` smallest keys.
    fn cut(&mut self) {
        if self.kept.len() <= self.capacity {
            return;
        }
        self.kept
            .select_nth_unstable_by_key(self.capacity - 1, |(k, _)| *k);
        self.kept.truncate(self.capacity);
        self.bound = self.kept.iter().map(|(k, _)| *k).max();
    }

    /// The kept rows, smallest key first.
    fn into_sorted(mut self) -> Vec<(u128, KeptRow)> {
        self.cut();
        self.kept.sort_unstable_by_key(|(k, _)| *k);
        self.kept
    }
}

fn draw(seed: u64, stream: u64, row: usize) -> u128 {
    ((draw_key(seed, stream, row) as u128) << 64) | row as u128
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

/// Pass 1's findings.
struct Gathered {
    rows: usize,
    names: Vec<String>,
    sample: Vec<KeptRow>,
    candidates: Vec<KeptRow>,
}

/// Scores, ranks and lists the rows of a table too large to hold.
pub fn suspects_streamed(
    input: &StreamInput,
    params: &SuspectsParams,
    stages: &mut Stages,
) -> Result<StreamedSuspects> {
    let budget = check(params)?;
    let (suspects, control) = split_budget(budget, params.control_share);
    let stream = TableStream::open(input.table, input.options, input.probs, input.renormalize)?;
    let first = FirstPass::read(&stream, input, suspects + control, params.seed)?;
    stages.end("pass_1");
    let inputs = first.matrix_inputs(&stream);
    let matrix = estimated(&inputs, params)?;
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
    let scorer = Scorer::new(params.score, matrix.as_ref().map(|m| &m.estimate));
    let control_set = Kept::new(
        &first.gathered.candidates,
        &first.classes,
        &first.code_class,
        &first.candidates,
        &first.fields,
    );
    let scored = score_pass(
        &stream,
        &first.fields,
        &first.code_class,
        &scorer,
        &control_set,
        params,
        suspects,
    )?;
    stages.end("pass_2");
    let (worklist, chosen) = assemble(
        &stream,
        scored,
        &control_set,
        &scorer,
        &first.classes,
        params,
        control,
    );
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

/// Pass 1 and what follows from it: the classes, where their probabilities are, and
/// the sample as a table.
struct FirstPass {
    gathered: Gathered,
    /// Probability fields read in pass 1 (the possible classes).
    candidates: Vec<usize>,
    classes: Vec<String>,
    /// The probability field of each class.
    fields: Vec<usize>,
    code_class: Vec<u32>,
    sample_data: Dataset,
    sample_probs: RowProbabilities,
}

impl FirstPass {
    /// Reads the table once, keeping the sample and `candidates` control candidates.
    fn read(
        stream: &TableStream,
        input: &StreamInput,
        candidates: usize,
        seed: u64,
    ) -> Result<Self> {
        let fields_read = stream.class_candidates();
        let gathered = gather(stream, &fields_read, input.sample_rows, candidates, seed)?;
        let classes = class_order(&gathered.names);
        let fields = class_fields(stream, &fields_read, &classes)?;
        let code_class = code_classes(&gathered.names, &classes);
        let sample = Kept::new(
            &gathered.sample,
            &classes,
            &code_class,
            &fields_read,
            &fields,
        );
        let sample_data = sample.dataset(stream, &classes);
        let sample_probs = RowProbabilities {
            values: sample.probs,
            source: ProbSource::File(input.probs.to_path_buf()),
            warnings: Vec::new(),
        };
        Ok(FirstPass {
            gathered,
            candidates: fields_read,
            classes,
            fields,
            code_class,
            sample_data,
            sample_probs,
        })
    }

    fn matrix_inputs<'s, 'a>(&'s self, stream: &'s TableStream<'a>) -> MatrixInputs<'s, 'a> {
        MatrixInputs {
            stream,
            fields: &self.fields,
            code_class: &self.code_class,
            classes: &self.classes,
            sample_data: &self.sample_data,
            sample_probs: &self.sample_probs,
        }
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
    let stream = TableStream::open(input.table, input.options, input.probs, input.renormalize)?;
    let first = FirstPass::read(&stream, input, 0, params.seed)?;
    let estimate = first.matrix_inputs(&stream).estimate(&params.matrix)?;
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

/// What the matrix of a streamed run is estimated from.
struct MatrixInputs<'s, 'a> {
    stream: &'s TableStream<'a>,
    /// The probability fields of the classes, in class order.
    fields: &'s [usize],
    code_class: &'s [u32],
    classes: &'s [String],
    sample_data: &'s Dataset,
    sample_probs: &'s RowProbabilities,
}

impl MatrixInputs<'_, '_> {
    /// The estimators that read every row run in passes over the table (their in-memory
    /// result exactly); the joint fit is fitted on the sample; a matrix file is read.
    fn estimate(&self, source: &MatrixSource) -> Result<Estimate> {
        if let MatrixSource::Estimate(method) = source {
            let exact = estimate_in_passes(method, self.classes, |passes| {
                self.stream.for_each_part(self.fields, None, |part| {
                    let rows = PartRows::new(&part, self.code_class);
                    passes.rows(&rows.view(&part));
                    Ok(())
                })
            })?;
            if let Some(estimate) = exact {
                return Ok(estimate);
            }
        }
        matrix_only(self.sample_data, self.sample_probs, source)
    }
}

/// A part's labels, trusted labels and audit origins in class terms.
struct PartRows {
    labels: Vec<usize>,
    trusted: Option<Vec<Option<usize>>>,
    at_random: Option<Vec<bool>>,
}

impl PartRows {
    fn new(part: &StreamPart, code_class: &[u32]) -> Self {
        let class = |c: u32| code_class.get(c as usize).copied().unwrap_or(0) as usize;
        PartRows {
            labels: part.labels.iter().map(|&c| class(c)).collect(),
            trusted: (!part.trusted.is_empty()).then(|| {
                (0..part.rows())
                    .map(|i| part.trusted_at(i).map(class))
                    .collect()
            }),
            at_random: (!part.origins.is_empty())
                .then(|| part.origins.iter().map(|o| o.is_random_sample()).collect()),
        }
    }

    fn view<'p>(&'p self, part: &'p StreamPart) -> Rows<'p> {
        Rows {
            first_row: part.first_row,
            probs: part.probs.view(),
            labels: &self.labels,
            trusted: self.trusted.as_deref(),
            at_random: self.at_random.as_deref(),
        }
    }
}

/// The matrix for the posterior score.
fn estimated(inputs: &MatrixInputs, params: &SuspectsParams) -> Result<Option<UsedMatrix>> {
    if params.score != ScoreKind::Posterior {
        return Ok(None);
    }
    Ok(Some(UsedMatrix {
        description: params.matrix.describe(),
        estimate: inputs.estimate(&params.matrix)?,
    }))
}

/// Pass 1: the row count, the label names, the sample and the control candidates.
fn gather(
    stream: &TableStream,
    fields: &[usize],
    sample_rows: usize,
    candidates: usize,
    seed: u64,
) -> Result<Gathered> {
    let mut sample = Smallest::new(sample_rows);
    let mut control = Smallest::new(candidates);
    let mut rows = 0;
    let mut names = Vec::new();
    // With the row count known, the rows that can be kept are known before reading:
    // only their probabilities are copied.
    let select = stream.known_rows().map(|n| {
        needed_rows(
            n,
            &[(sample_rows, SAMPLE_STREAM), (candidates, CONTROL_STREAM)],
            seed,
        )
    });
    stream.for_each_part(fields, select.as_deref(), |part| {
        let mut ids = None;
        let places: Vec<(usize, usize)> = match &part.selected {
            Some(selected) => selected.iter().enumerate().map(|(j, &i)| (i, j)).collect(),
            None => (0..part.rows()).map(|i| (i, i)).collect(),
        };
        for (i, j) in places {
            let row = part.first_row + i;
            let (a, b) = (
                draw(seed, SAMPLE_STREAM, row),
                draw(seed, CONTROL_STREAM, row),
            );
            let (to_sample, to_control) = (sample.wants(a), control.wants(b));
            if !(to_sample || to_control) {
                continue;
            }
            let ids = ids.get_or_insert_with(|| part.id_text());
            if to_sample {
                sample.offer(a, || kept(&part, i, j, ids));
            }
            if to_control {
                control.offer(b, || kept(&part, i, j, ids));
            }
        }
        rows = part.first_row + part.rows();
        names = part.names;
        Ok(())
    })?;
    let in_order = |s: Smallest| {
        let mut kept: Vec<KeptRow> = s.into_sorted().into_iter().map(|(_, r)| r).collect();
        kept.sort_by_key(|r| r.row);
        kept
    };
    let sample = in_order(sample);
    // Candidates stay in draw order: the control draw takes the first unlisted ones.
    let candidates = control.into_sorted().into_iter().map(|(_, r)| r).collect();
    Ok(Gathered {
        rows,
        names,
        sample,
        candidates,
    })
}

/// Row `i` of `part`, whose probabilities are the part's row `j`.
fn kept(part: &StreamPart, i: usize, j: usize, ids: &Option<Text>) -> KeptRow {
    KeptRow {
        row: part.first_row + i,
        label: part.labels[i],
        trusted: part.trusted_at(i).unwrap_or(u32::MAX),
        origin: part.origins.get(i).copied().unwrap_or(Origin::Audit),
        id: StreamPart::id(ids, i),
        probs: part.probs.row(j).to_vec().into_boxed_slice(),
    }
}

/// The rows of a table of `rows` rows that a pass keeping the `count` smallest keys of
/// each `(count, stream)` can keep, ascending. Keys are uniform, so the count-th
/// smallest lies near count / rows of the key range: rows below a bound a few standard
/// deviations above that are collected (on every core), and the bound is raised in the
/// rare case that too few fall below it.
fn needed_rows(rows: usize, draws: &[(usize, u64)], seed: u64) -> Vec<usize> {
    let mut needed = Vec::new();
    for &(count, stream) in draws {
        if count >= rows {
            return (0..rows).collect();
        }
        let mut share = (count as f64 + 10.0 * (count as f64).sqrt() + 64.0) / rows as f64;
        loop {
            let bound = (share.min(1.0) * u64::MAX as f64) as u64;
            let mut below: Vec<(u64, usize)> = (0..rows)
                .into_par_iter()
                .filter_map(|r| {
                    let key = draw_key(seed, stream, r);
                    (key <= bound).then_some((key, r))
                })
                .collect();
            if below.len() >= count || share >= 1.0 {
                let count = count.min(below.len());
                if count > 0 && count < below.len() {
                    below.select_nth_unstable(count - 1);
                }
                needed.extend(below[..count].iter().map(|&(_, r)| r));
                break;
            }
            share *= 2.0;
        }
    }
    needed.sort_unstable();
    needed.dedup();
    needed
}

/// Class names in natural order, as a loaded table orders them.
pub(super) fn class_order(names: &[String]) -> Vec<String> {
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

/// The probability file's field of each class, in class order.
fn class_fields(
    stream: &TableStream,
    candidates: &[usize],
    classes: &[String],
) -> Result<Vec<usize>> {
    let header = stream.probs_header();
    let mut fields = Vec::with_capacity(classes.len());
    let mut missing = Vec::new();
    for class in classes {
        match candidates.iter().find(|&&f| header[f] == *class) {
            Some(&f) => fields.push(f),
            None => missing.push(class.clone()),
        }
    }
    if !missing.is_empty() {
        return Err(Error::input(
            crate::error::Location::file(stream.probs_path()),
            Problem::StreamRows {
                detail: format!(
                    "the probabilities need one column per class, named by class; missing: {}",
                    missing.join(", ")
                ),
            },
        ));
    }
    Ok(fields)
}

/// Rows kept from pass 1, in class terms.
struct Kept {
    rows: Vec<usize>,
    labels: Vec<usize>,
    trusted: Vec<Option<usize>>,
    origins: Vec<Origin>,
    ids: Vec<String>,
    /// Probabilities in class order.
    probs: Array2<f32>,
}

impl Kept {
    fn new(
        kept: &[KeptRow],
        classes: &[String],
        code_class: &[u32],
        candidates: &[usize],
        fields: &[usize],
    ) -> Self {
        let position: Vec<usize> = fields
            .iter()
            .map(|f| candidates.iter().position(|c| c == f).unwrap_or(0))
            .collect();
        let mut probs = Array2::zeros((kept.len(), classes.len()));
        for (i, r) in kept.iter().enumerate() {
            for (c, &p) in position.iter().enumerate() {
                probs[(i, c)] = r.probs[p];
            }
        }
        let class = |code: u32| code_class[code as usize] as usize;
        Kept {
            rows: kept.iter().map(|r| r.row).collect(),
            labels: kept.iter().map(|r| class(r.label)).collect(),
            trusted: kept
                .iter()
                .map(|r| (r.trusted != u32::MAX).then(|| class(r.trusted)))
                .collect(),
            origins: kept.iter().map(|r| r.origin).collect(),
            ids: kept.iter().map(|r| r.id.clone()).collect(),
            probs,
        }
    }

    /// The kept rows as a table without features.
    fn dataset(&self, stream: &TableStream, classes: &[String]) -> Dataset {
        let plan = stream.plan();
        let name = |f: Option<usize>| f.map(|i| plan.header[i].clone());
        let mut ids = StringColumn::default();
        if plan.id.is_some() {
            let text: String = self.ids.concat();
            let mut ends = Vec::with_capacity(self.ids.len());
            let mut end = 0;
            for id in &self.ids {
                end += id.len();
                ends.push(end);
            }
            ids.append(&text, &ends);
        }
        Dataset {
            path: stream.table_path().to_path_buf(),
            header: plan.header.clone(),
            label_column: name(plan.label),
            id_column: name(plan.id),
            trusted_column: name(plan.trusted),
            origin_column: name(plan.origin),
            feature_names: Vec::new(),
            features: Array2::zeros((self.rows.len(), 0)),
            classes: classes.to_vec(),
            labels: self.labels.clone(),
            trusted: plan.trusted.map(|_| self.trusted.clone()),
            trusted_origins: plan.origin.map(|_| self.origins.clone()),
            annotations: None,
            sources: None,
            ids: plan.id.map(|_| ids),
            ignored: Vec::new(),
            missing: Vec::new(),
            warnings: Vec::new(),
        }
    }
}

/// How rows are scored: the clean classifier (joint) or the noisy probabilities, under
/// the matrix, as [`super::score_inputs`] decides for a loaded table.
struct Scorer<'e> {
    kind: ScoreKind,
    estimate: Option<&'e Estimate>,
}

impl<'e> Scorer<'e> {
    fn new(kind: ScoreKind, estimate: Option<&'e Estimate>) -> Self {
        Scorer { kind, estimate }
    }

    /// The probabilities the score reads (clean posteriors, or the noisy ones).
    fn inputs(&self, noisy: ArrayView2<f32>) -> Array2<f32> {
        match (self.kind, self.estimate.and_then(|e| e.model.as_ref())) {
            (ScoreKind::Posterior, Some(model)) => model.posteriors(noisy),
            _ => noisy.to_owned(),
        }
    }

    fn flips(&self) -> RowFlips<'e> {
        let flip = match (self.kind, self.estimate) {
            (ScoreKind::Posterior, Some(e)) if e.model.is_some() => Some(Flip::clean(&e.matrix)),
            (ScoreKind::Posterior, Some(e)) => Some(Flip::noisy(&e.matrix)),
            _ => None,
        };
        RowFlips::One(flip)
    }

    /// Scores of rows with noisy probabilities `noisy` and classes `labels`.
    fn scores(&self, noisy: ArrayView2<f32>, labels: &[usize]) -> (Array2<f32>, Vec<f64>) {
        let inputs = self.inputs(noisy);
        let scores = self.flips().values(self.kind, inputs.view(), labels);
        (inputs, scores)
    }
}

/// Pass 2's findings.
struct Scored {
    top: Vec<(u128, KeptRow)>,
    /// Rows outranking each control candidate (in candidate order).
    above: Vec<usize>,
    histogram: Histogram,
    expected: Option<f64>,
}

/// Pass 2: every row scored; the top rows, the tally and the control ranks.
fn score_pass(
    stream: &TableStream,
    fields: &[usize],
    code_class: &[u32],
    scorer: &Scorer,
    control: &Kept,
    params: &SuspectsParams,
    suspects: usize,
) -> Result<Scored> {
    let (_, control_scores) = scorer.scores(control.probs.view(), &control.labels);
    let candidate_keys: Vec<u128> = control_scores
        .iter()
        .zip(&control.rows)
        .map(|(&s, &r)| rank_key(s, r))
        .collect();
    let mut sorted: Vec<(u128, usize)> = candidate_keys
        .iter()
        .enumerate()
        .map(|(i, &k)| (k, i))
        .collect();
    sorted.sort_unstable();
    let sorted_keys: Vec<u128> = sorted.iter().map(|&(k, _)| k).collect();
    let mut bumps = vec![0usize; sorted_keys.len() + 1];
    let mut tally = ScoreTally::new(params.score);
    let threshold = params.threshold.map(|t| params.score.from_shown(t));
    let mut top = Smallest::new(suspects);
    stream.for_each_part(fields, None, |part| {
        let labels: Vec<usize> = part
            .labels
            .iter()
            .map(|&c| code_class.get(c as usize).copied().unwrap_or(0) as usize)
            .collect();
        let blocks: Vec<(Array2<f32>, Vec<f64>, Vec<usize>)> = (0..part.rows())
            .into_par_iter()
            .step_by(BLOCK_ROWS)
            .map(|start| {
                let end = (start + BLOCK_ROWS).min(part.rows());
                let noisy = part
                    .probs
                    .slice_axis(ndarray::Axis(0), ndarray::Slice::from(start..end));
                let (inputs, scores) = scorer.scores(noisy, &labels[start..end]);
                let mut bump = vec![0usize; sorted_keys.len() + 1];
                for (i, &s) in scores.iter().enumerate() {
                    let key = rank_key(s, part.first_row + start + i);
                    bump[sorted_keys.partition_point(|&k| k <= key)] += 1;
                }
                (inputs, scores, bump)
            })
            .collect();
        let mut ids = None;
        for (b, (inputs, scores, bump)) in blocks.into_iter().enumerate() {
            let start = b * BLOCK_ROWS;
            tally.add(&scores);
            bumps.iter_mut().zip(bump).for_each(|(a, x)| *a += x);
            for (i, &s) in scores.iter().enumerate() {
                if threshold.is_some_and(|t| s < t) {
                    continue;
                }
                let key = rank_key(s, part.first_row + start + i);
                if !top.wants(key) {
                    continue;
                }
                let ids = ids.get_or_insert_with(|| part.id_text());
                top.offer(key, || KeptRow {
                    row: part.first_row + start + i,
                    label: labels[start + i] as u32,
                    trusted: u32::MAX,
                    origin: Origin::Audit,
                    id: StreamPart::id(ids, start + i),
                    probs: inputs.row(i).to_vec().into_boxed_slice(),
                });
            }
        }
        Ok(())
    })?;
    // Rows outranking sorted candidate j: those whose key is below it.
    let mut above = vec![0usize; sorted_keys.len()];
    let mut running = 0;
    for (j, &(_, candidate)) in sorted.iter().enumerate() {
        running += bumps[j];
        above[candidate] = running;
    }
    let (histogram, expected) = tally.finish();
    Ok(Scored {
        top: top.into_sorted(),
        above,
        histogram,
        expected,
    })
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
/// worklist's items.
fn assemble(
    stream: &TableStream,
    scored: Scored,
    control: &Kept,
    scorer: &Scorer,
    classes: &[String],
    params: &SuspectsParams,
    control_count: usize,
) -> (WorklistRows, Chosen) {
    let listed_rows: Vec<usize> = scored.top.iter().map(|(_, r)| r.row).collect();
    let is_listed: rustc_hash::FxHashSet<usize> = listed_rows.iter().copied().collect();
    let chosen: Vec<usize> = (0..control.rows.len())
        .filter(|&i| !is_listed.contains(&control.rows[i]))
        .take(control_count)
        .collect();
    let k = classes.len();
    let n = listed_rows.len() + chosen.len();
    let mut inputs = Array2::zeros((n, k));
    let mut labels = Vec::with_capacity(n);
    let mut ids = Vec::with_capacity(n);
    let mut rows = Vec::with_capacity(n);
    for (i, (_, r)) in scored.top.iter().enumerate() {
        inputs
            .row_mut(i)
            .assign(&ndarray::ArrayView1::from(&r.probs[..]));
        labels.push(r.label as usize);
        ids.push(r.id.clone());
        rows.push(r.row);
    }
    let control_inputs = scorer.inputs(control.probs.view());
    for (j, &c) in chosen.iter().enumerate() {
        inputs
            .row_mut(listed_rows.len() + j)
            .assign(&control_inputs.row(c));
        labels.push(control.labels[c]);
        ids.push(control.ids[c].clone());
        rows.push(control.rows[c]);
    }
    let all: Vec<usize> = (0..n).collect();
    let verdicts = scorer
        .flips()
        .selected(params.score, inputs.view(), &labels, &all);
    let listed: Vec<RowScore> = verdicts[..listed_rows.len()].to_vec();
    let with_rank = |(i, s): (usize, &RowScore)| (*s, i + 1);
    let listed_ranked: Vec<(RowScore, usize)> = listed.iter().enumerate().map(with_rank).collect();
    let control_ranked: Vec<(RowScore, usize)> = chosen
        .iter()
        .enumerate()
        .map(|(j, &c)| (verdicts[listed_rows.len() + j], scored.above[c] + 1))
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
    let mut data = worklist.dataset(stream, classes);
    data.trusted = None;
    data.trusted_origins = None;
    let chosen_result = Chosen {
        listed,
        items,
        histogram: scored.histogram,
        expected: scored.expected,
    };
    (WorklistRows { data, rows }, chosen_result)
}
