//! The ranking built from the scores (deterministic: equal scores keep row order), the
//! selection of a worklist's rows from it, and the AUROC of a score against known errors.

use rayon::prelude::*;

use super::RowScore;

/// The order-preserving key of a score for ranking: ascending keys are descending
/// scores under `f64::total_cmp`, then ascending rows.
pub fn rank_key(score: f64, row: usize) -> u128 {
    ((descending_key(score) as u128) << 64) | row as u128
}

/// Sorts scores from most to least suspect; equal scores keep row order, so the ranking
/// is the same on every run.
///
/// The sort runs on 16-byte keys (an order-preserving encoding of the score's bits, the
/// row, and the position) instead of comparing 40-byte scores through a closure; the
/// order is that of `f64::total_cmp` on the score, then row. Measured on 1,000,000 rows:
/// about 2× faster than the comparator sort, and faster than an LSD radix sort, which
/// is memory-bound here. Rows or lengths beyond 32 bits fall back to the comparator.
pub fn rank(scores: &mut [RowScore]) {
    let fits = |n: usize| n <= u32::MAX as usize;
    if !fits(scores.len()) || !scores.iter().all(|s| fits(s.row)) {
        scores.par_sort_unstable_by(|a, b| b.score.total_cmp(&a.score).then(a.row.cmp(&b.row)));
        return;
    }
    let mut keys: Vec<u128> = scores
        .par_iter()
        .enumerate()
        .map(|(i, s)| {
            ((descending_key(s.score) as u128) << 64) | ((s.row as u128) << 32) | i as u128
        })
        .collect();
    keys.par_sort_unstable();
    let sorted: Vec<RowScore> = keys
        .par_iter()
        .map(|&key| scores[(key & 0xffff_ffff) as usize])
        .collect();
    scores.copy_from_slice(&sorted);
}

/// Maps a score to a u64 that sorts ascending as the scores sort descending under
/// `f64::total_cmp` (the usual order-preserving map of IEEE bits, then inverted).
fn descending_key(score: f64) -> u64 {
    let bits = score.to_bits();
    let ordered = if bits >> 63 == 1 {
        !bits
    } else {
        bits | (1 << 63)
    };
    !ordered
}

/// Which ranked rows go on the worklist.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Selection {
    /// At most this many rows (`None`: no limit).
    pub top: Option<usize>,
    /// Only rows scoring at least this.
    pub threshold: Option<f64>,
    /// At most this many rows per observed class.
    pub per_class_cap: Option<usize>,
    /// Only rows observed as one of these classes.
    pub classes: Option<Vec<usize>>,
}

/// The rows `selection` keeps from `(row, score)` pairs in rank order, in that order.
pub fn select_rows(
    ranked: impl Iterator<Item = (usize, f64)>,
    labels: &[usize],
    classes: usize,
    selection: &Selection,
) -> Vec<usize> {
    let mut per_class = vec![0usize; classes];
    let mut kept = Vec::new();
    for (row, score) in ranked {
        if selection.top.is_some_and(|top| kept.len() >= top)
            || selection.threshold.is_some_and(|t| score < t)
        {
            break;
        }
        let observed = labels[row];
        if selection
            .classes
            .as_ref()
            .is_some_and(|only| !only.contains(&observed))
        {
            continue;
        }
        if selection
            .per_class_cap
            .is_some_and(|cap| per_class[observed] >= cap)
        {
            continue;
        }
        per_class[observed] += 1;
        kept.push(row);
    }
    kept
}

/// The `head` most suspect rows (all of them when `head` ≥ the row count), from most to
/// least suspect, given every row's score (as [`score_values`] gives them): the order of
/// [`rank`], sorted on 16-byte keys without building a full [`RowScore`] for every row.
/// A short head is first selected, then only it is sorted.
pub fn rank_values(scores: &[f64], head: usize) -> Vec<usize> {
    let head = head.min(scores.len());
    let mut keys: Vec<u128> = scores
        .par_iter()
        .enumerate()
        .map(|(r, &s)| rank_key(s, r))
        .collect();
    if head > 0 && head < keys.len() {
        keys.select_nth_unstable(head - 1);
    }
    keys.truncate(head);
    keys.par_sort_unstable();
    keys.par_iter()
        .map(|&k| (k & u64::MAX as u128) as usize)
        .collect()
}

/// Area under the ROC curve of `score` for telling `positive` rows from the others
/// (Mann–Whitney U, ties counted half), or `None` when one side is empty.
pub fn auroc(scores: &[f64], positive: &[bool]) -> Option<f64> {
    let mut order: Vec<usize> = (0..scores.len()).collect();
    order.sort_by(|&a, &b| scores[a].total_cmp(&scores[b]));
    let (mut rank_sum, mut positives) = (0.0f64, 0usize);
    let mut i = 0;
    while i < order.len() {
        let mut j = i;
        while j + 1 < order.len() && scores[order[j + 1]] == scores[order[i]] {
            j += 1;
        }
        let mid_rank = (i + j) as f64 / 2.0 + 1.0;
        for &idx in &order[i..=j] {
            if positive[idx] {
                rank_sum += mid_rank;
                positives += 1;
            }
        }
        i = j + 1;
    }
    let negatives = scores.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let u = rank_sum - (positives * (positives + 1)) as f64 / 2.0;
    Some(u / (positives as f64 * negatives as f64))
}
