//! Every row scored and ranked for one matrix, with the histogram of the scores and the
//! expected number of mislabelled rows, and the filtered list a table shows. The app
//! ranks here after each matrix edit (the head first, then the rest, off the UI thread);
//! filtering is one pass over the ranking, cheap enough for the UI thread. The suspects
//! job ([`super::suspects`]) sums the expected count with the same [`score_summaries`].

use std::sync::Arc;

use ndarray::{Array2, ArrayView2};

use rayon::prelude::*;

use crate::noise::posterior::{Flip, SUM_CHUNK_ROWS};
use crate::noise::scores::{rank, rank_values, score_rows, RowFlips, RowScore, ScoreKind};

/// Rows put in order first after a matrix edit; the table shows them while the rest is
/// sorted (a screenful scrolled many times over).
pub const HEAD_ROWS: usize = 20_000;

/// Bins of the score histogram.
pub const HISTOGRAM_BINS: usize = 40;

/// Counts of scores in equal bins over `[low, high]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Histogram {
    /// Left edge of the first bin.
    pub low: f64,
    /// Right edge of the last bin.
    pub high: f64,
    /// Rows per bin.
    pub counts: Vec<usize>,
}

impl Histogram {
    /// Width of one bin.
    pub fn bin_width(&self) -> f64 {
        (self.high - self.low) / self.counts.len() as f64
    }
}

/// The histogram of every row's score as shown ([`ScoreKind::shown`]: [0, 1] for the
/// probabilities of a wrong label, [−1, 1] for the margin) and, for the probability
/// scores, the expected number of mislabelled rows: Σ of those probabilities, summed in
/// [`SUM_CHUNK_ROWS`] chunks by [`crate::noise::posterior::sum_in_chunks`], as every expected count is, so the
/// app's figure is the command line's bit for bit. One pass and one logistic per row:
/// after a matrix edit this runs over every row before the table redraws.
pub fn score_summaries(scores: &[f64], kind: ScoreKind) -> (Histogram, Option<f64>) {
    let mut tally = ScoreTally::new(kind);
    tally.add(scores);
    tally.finish()
}

/// [`score_summaries`] over scores that come in pieces (a pass over a table too large to
/// hold): the pieces are cut into the same [`SUM_CHUNK_ROWS`] runs, so the histogram and
/// the expected count are those of the whole score vector, bit for bit.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct ScoreTally {
    kind: ScoreKind,
    /// Scores not yet in a full run.
    pending: Vec<f64>,
    total: f64,
    counts: Vec<usize>,
}

impl ScoreTally {
    /// An empty tally of `kind` scores.
    pub fn new(kind: ScoreKind) -> Self {
        ScoreTally {
            kind,
            pending: Vec::new(),
            total: 0.0,
            counts: vec![0; HISTOGRAM_BINS],
        }
    }

    /// Adds the next scores in row order.
    pub fn add(&mut self, scores: &[f64]) {
        let mut rest = scores;
        if !self.pending.is_empty() {
            let take = (SUM_CHUNK_ROWS - self.pending.len()).min(rest.len());
            self.pending.extend_from_slice(&rest[..take]);
            rest = &rest[take..];
            if self.pending.len() < SUM_CHUNK_ROWS {
                return;
            }
            let full = std::mem::take(&mut self.pending);
            self.absorb(&full);
        }
        let whole = rest.len() / SUM_CHUNK_ROWS * SUM_CHUNK_ROWS;
        self.absorb(&rest[..whole]);
        self.pending.extend_from_slice(&rest[whole..]);
    }

    /// Takes in the tally of another share of the rows (a worker's, on a distributed
    /// engine, merged in any order): the histogram is the whole one exactly, the expected
    /// count equal up to rounding (its runs add in another order).
    pub fn merge(&mut self, mut other: ScoreTally) {
        let (mine, theirs) = (
            std::mem::take(&mut self.pending),
            std::mem::take(&mut other.pending),
        );
        self.absorb(&mine);
        other.absorb(&theirs);
        self.total += other.total;
        self.counts
            .iter_mut()
            .zip(&other.counts)
            .for_each(|(a, b)| *a += b);
    }

    /// The histogram and, for the probability scores, the expected number of
    /// mislabelled rows.
    pub fn finish(mut self) -> (Histogram, Option<f64>) {
        let last = std::mem::take(&mut self.pending);
        self.absorb(&last);
        let (low, high) = self.kind.shown_range();
        let histogram = Histogram {
            low,
            high,
            counts: self.counts,
        };
        (histogram, self.kind.is_probability().then_some(self.total))
    }

    /// Whole runs (and the last, short one), each summed in order, the runs in order.
    fn absorb(&mut self, scores: &[f64]) {
        let kind = self.kind;
        let (low, high) = kind.shown_range();
        let width = (high - low) / HISTOGRAM_BINS as f64;
        let chunk = |values: &[f64]| {
            let mut counts = [0usize; HISTOGRAM_BINS];
            let mut sum = 0.0;
            for &s in values {
                let shown = kind.shown(s);
                sum += shown;
                let bin = ((shown - low) / width).floor();
                let bin = if bin.is_finite() {
                    bin.max(0.0) as usize
                } else {
                    0
                };
                counts[bin.min(HISTOGRAM_BINS - 1)] += 1;
            }
            (sum, counts)
        };
        // The order of `sum_in_chunks`: each run's sum added to the running total in turn.
        let runs: Vec<(f64, [usize; HISTOGRAM_BINS])> =
            scores.par_chunks(SUM_CHUNK_ROWS).map(chunk).collect();
        for (sum, c) in runs {
            self.total += sum;
            self.counts.iter_mut().zip(c).for_each(|(a, b)| *a += b);
        }
    }
}

/// The matrices a ranking scored its rows under, kept so that the rest of a head ranking
/// is scored the same way.
#[derive(Debug, Clone)]
pub enum Matrices {
    /// One matrix for every row.
    One(Array2<f64>),
    /// Row r under `matrices[of_row[r]]`: each row under its own label source's matrix,
    /// as the command line's suspects scores them.
    BySource {
        /// One per source.
        matrices: Vec<Array2<f64>>,
        /// The source of every row.
        of_row: Arc<[u32]>,
    },
}

impl Matrices {
    /// The matrices as the scores read them (`clean_inputs`: the rows are clean
    /// posteriors).
    pub fn flips(&self, clean_inputs: bool) -> RowFlips<'_> {
        let flip = |matrix| Flip {
            matrix,
            clean_inputs,
        };
        match self {
            Matrices::One(m) => RowFlips::One(Some(flip(m))),
            Matrices::BySource { matrices, of_row } => RowFlips::BySource {
                flips: matrices.iter().map(flip).collect(),
                of_row,
            },
        }
    }
}

/// Every row scored for one matrix (or one per source), most suspect first: all rows, or (right after an
/// edit) only the first rows while the rest is ranked.
#[derive(Debug, Clone)]
pub struct Ranking {
    /// The ranked rows: all of them, or the head in final order.
    pub ranked: Vec<RowScore>,
    /// Rows of the data.
    pub rows: usize,
    /// Which score.
    pub kind: ScoreKind,
    /// The score histogram (of all rows).
    pub histogram: Histogram,
    /// Sum of the probabilities of a wrong label (expected mislabelled rows), for the
    /// probability scores.
    pub expected_errors: Option<f64>,
    /// The matrices it was computed from.
    pub matrices: Matrices,
    /// Version of `matrices` (the app's matrix version).
    pub matrix_version: u64,
    /// True when the rows were scored from clean posteriors (a joint fit's).
    pub clean_inputs: bool,
    /// Seconds it took.
    pub duration_secs: f64,
}

impl Ranking {
    /// `ranked` (all rows, or the head) with the summaries of every row's score in
    /// `scores`.
    fn new(
        ranked: Vec<RowScore>,
        scores: &[f64],
        under: Under,
        started: std::time::Instant,
    ) -> Self {
        let (histogram, expected_errors) = score_summaries(scores, under.kind);
        Ranking {
            ranked,
            rows: scores.len(),
            kind: under.kind,
            histogram,
            expected_errors,
            matrices: under.matrices,
            matrix_version: under.version,
            clean_inputs: under.clean_inputs,
            duration_secs: started.elapsed().as_secs_f64(),
        }
    }

    /// True once every row is ranked.
    pub fn is_complete(&self) -> bool {
        self.ranked.len() == self.rows
    }
}

/// What a ranking is computed under: the score, the matrices and what the rows are.
#[derive(Debug, Clone)]
pub struct Under {
    /// Which score.
    pub kind: ScoreKind,
    /// The matrices.
    pub matrices: Matrices,
    /// True when the rows handed in are clean posteriors (a joint fit's).
    pub clean_inputs: bool,
    /// The matrices' version, carried into the ranking.
    pub version: u64,
}

impl Under {
    /// One matrix for every row, as `flip` says.
    pub fn one(flip: Flip, kind: ScoreKind, version: u64) -> Self {
        Under {
            kind,
            matrices: Matrices::One(flip.matrix.clone()),
            clean_inputs: flip.clean_inputs,
            version,
        }
    }
}

/// Scores and ranks every row.
/// `probs` are what `flip` says they are: noisy probabilities or clean posteriors.
pub fn rank_rows(
    probs: ArrayView2<f32>,
    labels: &[usize],
    flip: Flip,
    kind: ScoreKind,
    matrix_version: u64,
) -> Ranking {
    rank_all(probs, labels, Under::one(flip, kind, matrix_version))
}

/// Scores and ranks every row under `under`'s matrices.
pub fn rank_all(probs: ArrayView2<f32>, labels: &[usize], under: Under) -> Ranking {
    let started = std::time::Instant::now();
    let flips = under.matrices.flips(under.clean_inputs);
    let mut ranked = match &flips {
        RowFlips::One(flip) => score_rows(under.kind, probs, labels, *flip),
        RowFlips::BySource { .. } => {
            let all: Vec<usize> = (0..labels.len()).collect();
            flips.selected(under.kind, probs, labels, &all)
        }
    };
    drop(flips);
    let scores: Vec<f64> = ranked.par_iter().map(|s| s.score).collect();
    rank(&mut ranked);
    Ranking::new(ranked, &scores, under, started)
}

/// Ranks only the `head` most suspect rows (the same rows, in the same order, as the
/// first `head` of [`rank_rows`]): scores alone for every row, a selection of the head
/// on packed keys, then full scores for the head only. About half the work of a full
/// ranking, which [`finish_ranking`] then does in the background.
pub fn rank_rows_head(
    probs: ArrayView2<f32>,
    labels: &[usize],
    flip: Flip,
    kind: ScoreKind,
    matrix_version: u64,
    head: usize,
) -> Ranking {
    rank_head(probs, labels, Under::one(flip, kind, matrix_version), head)
}

/// [`rank_rows_head`] under `under`'s matrices (one, or one per source).
pub fn rank_head(probs: ArrayView2<f32>, labels: &[usize], under: Under, head: usize) -> Ranking {
    if head >= labels.len() {
        return rank_all(probs, labels, under);
    }
    let started = std::time::Instant::now();
    let flips = under.matrices.flips(under.clean_inputs);
    let scores = flips.values(under.kind, probs, labels);
    let rows = rank_values(&scores, head);
    let head = flips.selected(under.kind, probs, labels, &rows);
    drop(flips);
    Ranking::new(head, &scores, under, started)
}

/// The complete ranking behind a head ranking (same matrices, score and version).
pub fn finish_ranking(partial: &Ranking, probs: ArrayView2<f32>, labels: &[usize]) -> Ranking {
    let under = Under {
        kind: partial.kind,
        matrices: partial.matrices.clone(),
        clean_inputs: partial.clean_inputs,
        version: partial.matrix_version,
    };
    rank_all(probs, labels, under)
}

/// What the table shows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Filter {
    /// Only rows observed as this class.
    pub observed: Option<usize>,
    /// Only rows whose suggested class is this.
    pub suggested: Option<usize>,
    /// Only rows of this label source (an index into the sources' names).
    pub source: Option<u32>,
    /// Only rows scoring at least this, as shown ([`ScoreKind::shown`]).
    pub min_score: f64,
}

impl Filter {
    /// True when row `row` passes the source filter (`of_row`: every row's source).
    pub fn keeps_source(&self, of_row: Option<&[u32]>, row: usize) -> bool {
        match (self.source, of_row) {
            (None, _) => true,
            (Some(s), Some(of_row)) => of_row.get(row) == Some(&s),
            (Some(_), None) => false,
        }
    }
}

/// Positions in the ranking (its rows in final order) of the rows `filter` keeps, in
/// rank order. Because the ranking is sorted by score, the threshold ends the scan.
/// `of_row` is every row's label source; a source filter without it keeps no row.
pub fn filter_rows(
    ranking: &Ranking,
    labels: &[usize],
    of_row: Option<&[u32]>,
    filter: &Filter,
) -> Vec<u32> {
    // The threshold on the score's own scale, once: no logistic per row on the UI thread.
    let threshold = ranking.kind.from_shown(filter.min_score);
    let mut kept = Vec::new();
    for (i, s) in ranking.ranked.iter().enumerate() {
        if s.score < threshold {
            break;
        }
        if filter.observed.is_some_and(|c| labels[s.row] != c)
            || filter.suggested.is_some_and(|c| s.suggested != c)
            || !filter.keeps_source(of_row, s.row)
        {
            continue;
        }
        kept.push(i as u32);
    }
    kept
}

#[cfg(test)]
mod tests;
