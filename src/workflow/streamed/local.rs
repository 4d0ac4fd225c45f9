//! The rows of a table file (CSV, Parquet or Arrow IPC) read here part by part
//! ([`TableStream`]), one pass at a time.

use std::cell::OnceCell;
use std::path::Path;

use ndarray::Array2;
use rayon::prelude::*;

use super::kept::{Kept, KeptRow, Smallest};
use super::source::{Draws, Gathered, RowSource, ScoreJob, Scored};
use super::StreamInput;
use crate::data::origin::Origin;
use crate::data::roles::ColumnPlan;
use crate::error::{Error, Location, Problem, Result};
use crate::io::arrow_cells::Text;
use crate::io::stream::{StreamPart, TableStream};
use crate::noise::estimators::passes::{Passes, Rows};
use crate::noise::scores::rank_key;
use crate::workflow::ranking::ScoreTally;
use crate::workflow::worklist::{draw_key, CONTROL_STREAM, SAMPLE_STREAM};

/// Rows scored per parallel block in pass 2.
const BLOCK_ROWS: usize = 16_384;

/// A table file and its probabilities, read in passes.
pub(super) struct LocalSource<'a> {
    stream: TableStream<'a>,
    /// Fixed by pass 1.
    classes: OnceCell<ClassMap>,
}

/// Where the classes are: the label codes' classes and the probability fields.
struct ClassMap {
    /// The class of each label code.
    code_class: Vec<u32>,
    /// The probability field of each class, in class order.
    fields: Vec<usize>,
}

impl<'a> LocalSource<'a> {
    pub(super) fn open(input: &StreamInput<'a>) -> Result<Self> {
        Ok(LocalSource {
            stream: TableStream::open(input.table, input.options, input.probs, input.renormalize)?,
            classes: OnceCell::new(),
        })
    }

    fn class_map(&self) -> Result<&ClassMap> {
        self.classes
            .get()
            .ok_or_else(|| Error::Internal("a streamed pass before the classes were read".into()))
    }
}

impl RowSource for LocalSource<'_> {
    fn table_path(&self) -> &Path {
        self.stream.table_path()
    }

    fn probs_path(&self) -> &Path {
        self.stream.probs_path()
    }

    fn plan(&self) -> &ColumnPlan {
        self.stream.plan()
    }

    fn gather(&self, draws: &Draws) -> Result<Gathered> {
        let read = self.stream.class_candidates();
        let found = gather(&self.stream, &read, draws)?;
        let classes = super::class_order(&found.names);
        let fields = class_fields(&self.stream, &read, &classes)?;
        let code_class = super::code_classes(&found.names, &classes);
        let k = classes.len();
        let sample = Kept::new(&found.sample, k, &code_class, &read, &fields);
        let candidates = Kept::new(&found.candidates, k, &code_class, &read, &fields);
        let _ = self.classes.set(ClassMap { code_class, fields });
        Ok(Gathered {
            rows: found.rows,
            classes,
            sample,
            candidates,
        })
    }

    fn estimator_pass(&self, passes: &mut Passes) -> Result<()> {
        let map = self.class_map()?;
        self.stream.for_each_part(&map.fields, None, |part| {
            let rows = PartRows::new(&part, &map.code_class);
            passes.rows(&rows.view(&part));
            Ok(())
        })
    }

    fn score(&self, job: &ScoreJob) -> Result<Scored> {
        score_pass(&self.stream, self.class_map()?, job)
    }
}

/// Pass 1's rows, with label codes.
struct Found {
    rows: usize,
    names: Vec<String>,
    sample: Vec<KeptRow>,
    candidates: Vec<KeptRow>,
}

fn draw(seed: u64, stream: u64, row: usize) -> u128 {
    ((draw_key(seed, stream, row) as u128) << 64) | row as u128
}

/// Pass 1: the row count, the label names, the sample and the control candidates.
fn gather(stream: &TableStream, fields: &[usize], draws: &Draws) -> Result<Found> {
    let Draws {
        sample_rows,
        candidates,
        seed,
    } = *draws;
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
    let mut sample: Vec<KeptRow> = sample.into_sorted().into_iter().map(|(_, r)| r).collect();
    sample.sort_by_key(|r| r.row);
    // Candidates stay in draw order: the control draw takes the first unlisted ones.
    let candidates = control.into_sorted().into_iter().map(|(_, r)| r).collect();
    Ok(Found {
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
        return Err(missing_classes(stream.probs_path(), &missing));
    }
    Ok(fields)
}

/// The refusal of probabilities without a column for every class.
pub fn missing_classes(path: &Path, missing: &[String]) -> Error {
    Error::input(
        Location::file(path),
        Problem::StreamRows {
            detail: format!(
                "the probabilities need one column per class, named by class; missing: {}",
                missing.join(", ")
            ),
        },
    )
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

/// Pass 2: every row scored; the top rows, the tally and the control ranks.
fn score_pass(stream: &TableStream, map: &ClassMap, job: &ScoreJob) -> Result<Scored> {
    let mut ranks = job.ranks.share();
    let mut tally = ScoreTally::new(job.rule.kind());
    let mut top = Smallest::new(job.suspects);
    stream.for_each_part(&map.fields, None, |part| {
        let labels: Vec<usize> = part
            .labels
            .iter()
            .map(|&c| map.code_class.get(c as usize).copied().unwrap_or(0) as usize)
            .collect();
        let blocks: Vec<(Array2<f32>, Vec<f64>, _)> = (0..part.rows())
            .into_par_iter()
            .step_by(BLOCK_ROWS)
            .map(|start| {
                let end = (start + BLOCK_ROWS).min(part.rows());
                let noisy = part
                    .probs
                    .slice_axis(ndarray::Axis(0), ndarray::Slice::from(start..end));
                let (inputs, scores) = job.rule.scores(noisy, &labels[start..end]);
                let mut share = job.ranks.share();
                for (i, &s) in scores.iter().enumerate() {
                    share.add(rank_key(s, part.first_row + start + i));
                }
                (inputs, scores, share)
            })
            .collect();
        let mut ids = None;
        for (b, (inputs, scores, share)) in blocks.into_iter().enumerate() {
            let start = b * BLOCK_ROWS;
            tally.add(&scores);
            ranks.merge(&share);
            for (i, &s) in scores.iter().enumerate() {
                if job.threshold.is_some_and(|t| s < t) {
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
    let top: Vec<KeptRow> = top.into_sorted().into_iter().map(|(_, r)| r).collect();
    // Pass 2 keeps classes as the label codes, and the probabilities in class order.
    let k = map.fields.len();
    let identity: Vec<u32> = (0..k as u32).collect();
    let all: Vec<usize> = (0..k).collect();
    Ok(Scored {
        top: Kept::new(&top, k, &identity, &all, &all),
        ranks,
        tally,
    })
}
