//! Every row scored and ranked for one matrix, with the histogram of the scores and the
//! expected number of mislabelled rows, and the filtered list a table shows. The app
//! ranks here after each matrix edit (the head first, then the rest, off the UI thread);
//! filtering is one pass over the ranking, cheap enough for the UI thread. The suspects
//! job ([`super::suspects`]) sums the expected count with the same [`score_summaries`].

use ndarray::{Array2, ArrayView2};

use rayon::prelude::*;

use crate::noise::posterior::{sum_in_chunks, Flip};
use crate::noise::scores::{
    rank, rank_values, score_rows, score_selected, score_values, RowScore, ScoreKind,
};

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
/// [`SUM_CHUNK_ROWS`] chunks by [`sum_in_chunks`], as every expected count is, so the
/// app's figure is the command line's bit for bit. One pass and one logistic per row:
/// after a matrix edit this runs over every row before the table redraws.
pub fn score_summaries(scores: &[f64], kind: ScoreKind) -> (Histogram, Option<f64>) {
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
    let (total, parts) = sum_in_chunks(scores, chunk);
    let mut counts = vec![0usize; HISTOGRAM_BINS];
    for c in parts {
        counts.iter_mut().zip(c).for_each(|(a, b)| *a += b);
    }
    let histogram = Histogram { low, high, counts };
    (histogram, kind.is_probability().then_some(total))
}

/// Every row scored for one matrix, most suspect first: all rows, or (right after an
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
    /// The matrix it was computed from, and its version.
    pub matrix: Array2<f64>,
    /// Version of `matrix`.
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
        kind: ScoreKind,
        flip: Flip,
        matrix_version: u64,
        started: std::time::Instant,
    ) -> Self {
        let (histogram, expected_errors) = score_summaries(scores, kind);
        Ranking {
            ranked,
            rows: scores.len(),
            kind,
            histogram,
            expected_errors,
            matrix: flip.matrix.clone(),
            matrix_version,
            clean_inputs: flip.clean_inputs,
            duration_secs: started.elapsed().as_secs_f64(),
        }
    }

    /// True once every row is ranked.
    pub fn is_complete(&self) -> bool {
        self.ranked.len() == self.rows
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
    let started = std::time::Instant::now();
    let mut ranked = score_rows(kind, probs, labels, Some(flip));
    let scores: Vec<f64> = ranked.par_iter().map(|s| s.score).collect();
    rank(&mut ranked);
    Ranking::new(ranked, &scores, kind, flip, matrix_version, started)
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
    if head >= labels.len() {
        return rank_rows(probs, labels, flip, kind, matrix_version);
    }
    let started = std::time::Instant::now();
    let scores = score_values(kind, probs, labels, Some(flip));
    let rows = rank_values(&scores, head);
    let head = score_selected(kind, probs, labels, Some(flip), &rows);
    Ranking::new(head, &scores, kind, flip, matrix_version, started)
}

/// The complete ranking behind a head ranking (same matrix, score and version).
pub fn finish_ranking(partial: &Ranking, probs: ArrayView2<f32>, labels: &[usize]) -> Ranking {
    let flip = Flip {
        matrix: &partial.matrix,
        clean_inputs: partial.clean_inputs,
    };
    rank_rows(probs, labels, flip, partial.kind, partial.matrix_version)
}

/// What the table shows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Filter {
    /// Only rows observed as this class.
    pub observed: Option<usize>,
    /// Only rows whose suggested class is this.
    pub suggested: Option<usize>,
    /// Only rows scoring at least this, as shown ([`ScoreKind::shown`]).
    pub min_score: f64,
}

/// Positions in the ranking (its rows in final order) of the rows `filter` keeps, in
/// rank order. Because the ranking is sorted by score, the threshold ends the scan.
pub fn filter_rows(ranking: &Ranking, labels: &[usize], filter: &Filter) -> Vec<u32> {
    // The threshold on the score's own scale, once: no logistic per row on the UI thread.
    let threshold = ranking.kind.from_shown(filter.min_score);
    let mut kept = Vec::new();
    for (i, s) in ranking.ranked.iter().enumerate() {
        if s.score < threshold {
            break;
        }
        if filter.observed.is_some_and(|c| labels[s.row] != c)
            || filter.suggested.is_some_and(|c| s.suggested != c)
        {
            continue;
        }
        kept.push(i as u32);
    }
    kept
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::noise::posterior::SUM_CHUNK_ROWS;
    use ndarray::array;

    #[test]
    fn filters_keep_rank_order_and_stop_at_the_threshold() {
        // Three rows scored by self-confidence, 1 − p(observed): 0.1, 0.8, 0.6 (ranked by
        // their odds, shown and filtered as these probabilities).
        let probs = array![[0.9f32, 0.1], [0.2, 0.8], [0.6, 0.4]];
        let labels = [0, 0, 1];
        let r = rank_rows(
            probs.view(),
            &labels,
            Flip::noisy(&Array2::eye(2)),
            ScoreKind::SelfConfidence,
            3,
        );
        let order: Vec<usize> = r.ranked.iter().map(|s| s.row).collect();
        assert_eq!(order, vec![1, 2, 0]);
        assert!((r.expected_errors.unwrap() - (0.1 + 0.8 + 0.6)).abs() < 1e-6);
        let all = filter_rows(&r, &labels, &Filter::default());
        assert_eq!(all, vec![0, 1, 2]);
        let observed_zero = Filter {
            observed: Some(0),
            ..Default::default()
        };
        assert_eq!(filter_rows(&r, &labels, &observed_zero), vec![0, 2]);
        let confident = Filter {
            min_score: 0.7,
            ..Default::default()
        };
        assert_eq!(filter_rows(&r, &labels, &confident), vec![0]);
        let suggested_zero = Filter {
            suggested: Some(0),
            ..Default::default()
        };
        assert_eq!(filter_rows(&r, &labels, &suggested_zero), vec![1, 2]);
    }

    /// `rows` rows of spread probabilities over three classes, labels in turn, and a T.
    fn three_classes(rows: usize) -> (Array2<f32>, Vec<usize>, Array2<f64>) {
        let probs = Array2::from_shape_fn((rows, 3), |(r, c)| {
            ((r * 7919 + c * 104_729) % 1000) as f32 / 1000.0 + 0.01
        });
        let sums = probs.sum_axis(ndarray::Axis(1));
        let probs = &probs / &sums.insert_axis(ndarray::Axis(1));
        let labels: Vec<usize> = (0..rows).map(|r| r % 3).collect();
        let t = array![[0.8, 0.1, 0.1], [0.2, 0.7, 0.1], [0.05, 0.15, 0.8]];
        (probs, labels, t)
    }

    #[test]
    fn the_expected_count_is_the_command_lines_bit_for_bit() {
        let rows = 3 * SUM_CHUNK_ROWS + 17;
        let (probs, labels, t) = three_classes(rows);
        let kind = ScoreKind::Posterior;
        let r = rank_rows(probs.view(), &labels, Flip::noisy(&t), kind, 1);
        let scores = score_values(kind, probs.view(), &labels, Some(Flip::noisy(&t)));
        let (_, cli) = score_summaries(&scores, kind);
        assert_eq!(r.expected_errors.map(f64::to_bits), cli.map(f64::to_bits));
        // The chunked sum is the plain sum up to rounding.
        let plain: f64 = scores.iter().map(|&s| kind.shown(s)).sum();
        assert!((cli.unwrap() - plain).abs() < 1e-6 * plain);
    }

    #[test]
    fn the_histogram_counts_every_row_once() {
        let probs = array![[1.0f32, 0.0], [0.5, 0.5], [0.0, 1.0], [0.25, 0.75]];
        let labels = [0, 0, 0, 1];
        let r = rank_rows(
            probs.view(),
            &labels,
            Flip::noisy(&Array2::eye(2)),
            ScoreKind::Margin,
            0,
        );
        assert_eq!(r.histogram.counts.iter().sum::<usize>(), 4);
        assert_eq!(r.histogram.low, -1.0);
        // Margins: −1, 0, 1, −0.5 → bins 0, 20, 39 (the top edge), 10.
        for bin in [0, 10, 20, HISTOGRAM_BINS - 1] {
            assert_eq!(r.histogram.counts[bin], 1, "bin {bin}");
        }
        assert_eq!(r.expected_errors, None);
    }

    #[test]
    fn a_finished_head_ranking_is_the_full_ranking() {
        let rows = 2000;
        let (probs, labels, t) = three_classes(rows);
        for kind in [
            ScoreKind::Posterior,
            ScoreKind::SelfConfidence,
            ScoreKind::Margin,
        ] {
            let full = rank_rows(probs.view(), &labels, Flip::noisy(&t), kind, 1);
            let head = rank_rows_head(probs.view(), &labels, Flip::noisy(&t), kind, 1, 100);
            assert!(full.is_complete() && !head.is_complete());
            assert_eq!(head.ranked, full.ranked[..100], "{kind:?}");
            assert_eq!(head.histogram, full.histogram);
            assert_eq!(head.expected_errors, full.expected_errors);
            let done = finish_ranking(&head, probs.view(), &labels);
            assert_eq!(done.ranked, full.ranked);
        }
    }
}
