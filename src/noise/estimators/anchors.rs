//! The anchor-point estimators (Patrini et al. 2017): a row of the probabilities taken
//! as the anchor of each class, the highest one (anchor) or the highest below the
//! column's q-quantile (quantile), found without copying a column out of the array.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

use super::{Sample, CHUNK_ROWS};

/// Copies row `row` of the probabilities into T's row `class`.
pub(super) fn set_row(t: &mut Array2<f64>, class: usize, probs: ArrayView2<f32>, row: usize) {
    for (dst, &src) in t.row_mut(class).iter_mut().zip(probs.row(row)) {
        *dst = src as f64;
    }
}

/// For every class, the first row (in sample order) with the largest probability strictly
/// below `below[class]` (`f32::INFINITY` admits every row).
pub(super) fn best_rows(sample: &Sample, below: &[f32]) -> Vec<Option<usize>> {
    let k = sample.probs.ncols();
    let per_chunk: Vec<Vec<Option<(f32, usize)>>> = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut best: Vec<Option<(f32, usize)>> = vec![None; k];
            for &r in rows {
                for ((b, &v), &limit) in best.iter_mut().zip(sample.probs.row(r)).zip(below) {
                    if v < limit && b.is_none_or(|(top, _)| v > top) {
                        *b = Some((v, r));
                    }
                }
            }
            best
        })
        .collect();
    let mut best: Vec<Option<(f32, usize)>> = vec![None; k];
    for chunk in per_chunk {
        for (c, candidate) in chunk.into_iter().enumerate() {
            if let Some((v, r)) = candidate {
                if best[c].is_none_or(|(b, _)| v > b) {
                    best[c] = Some((v, r));
                }
            }
        }
    }
    best.into_iter().map(|b| b.map(|(_, r)| r)).collect()
}

pub(super) fn anchor(sample: &Sample) -> Array2<f64> {
    let k = sample.probs.ncols();
    let mut t = Array2::zeros((k, k));
    for (class, row) in best_rows(sample, &vec![f32::INFINITY; k])
        .into_iter()
        .enumerate()
    {
        match row {
            Some(row) => set_row(&mut t, class, sample.probs, row),
            None => t[[class, class]] = 1.0,
        }
    }
    t
}

/// The sorted position numpy's "higher" quantile takes among `n` ≥ 1 values: ⌈q·(n−1)⌉.
pub(super) fn higher_index(n: usize, q: f64) -> usize {
    ((q * (n - 1) as f64).ceil() as usize).min(n - 1)
}

/// numpy's `quantile(values, q, method="higher")`: the sorted value at ⌈q·(n−1)⌉.
pub fn quantile_higher(values: &mut [f32], q: f64) -> f32 {
    let index = higher_index(values.len(), q);
    *values.select_nth_unstable_by(index, f32::total_cmp).1
}

/// Bits of a value's order key that pick its histogram bucket in [`column_quantiles`]:
/// 4,096 buckets a class, 32 KiB of counts, so a worker's histograms of 100 classes stay
/// in cache.
pub(super) const BUCKET_BITS: u32 = 12;

/// A u32 that sorts as `f32::total_cmp` sorts the value (the usual map of IEEE bits).
pub(super) fn order_key(v: f32) -> u32 {
    let bits = v.to_bits();
    if bits >> 31 == 1 {
        !bits
    } else {
        bits | 1 << 31
    }
}

pub(super) fn bucket(v: f32) -> usize {
    (order_key(v) >> (32 - BUCKET_BITS)) as usize
}

/// [`quantile_higher`] of every column over the sample's rows, without copying any column
/// out of the row-major array (with 100 classes a column copy read a whole cache line per
/// value, 100 times over). Two passes over the rows in memory order: a histogram of each
/// column's values by the top bits of their order key finds the bucket holding the
/// wanted rank; the second pass keeps only that bucket's values, among which the rank is
/// selected. The result equals `quantile_higher` on the copied column exactly.
pub fn column_quantiles(probs: ArrayView2<f32>, rows: &[usize], q: f64) -> Vec<f32> {
    let k = probs.ncols();
    if rows.is_empty() {
        return vec![f32::NAN; k];
    }
    let index = higher_index(rows.len(), q);
    let buckets = 1usize << BUCKET_BITS;
    // Few, large chunks: each has histograms of k × 4,096 counts to clear and merge.
    let chunk_rows = rows.len().div_ceil(16).max(CHUNK_ROWS);
    let histogram = rows
        .par_chunks(chunk_rows)
        .map(|chunk| {
            let mut counts = vec![0u64; k * buckets];
            for &r in chunk {
                for (c, &v) in probs.row(r).iter().enumerate() {
                    counts[c * buckets + bucket(v)] += 1;
                }
            }
            counts
        })
        .reduce_with(|mut a, b| {
            a.iter_mut().zip(&b).for_each(|(x, y)| *x += y);
            a
        })
        .unwrap_or_default();
    // Per column: the bucket holding rank `index`, and how many values lie below it.
    let target: Vec<(usize, usize)> = histogram
        .chunks_exact(buckets)
        .map(|counts| {
            let mut below = 0usize;
            for (b, &count) in counts.iter().enumerate() {
                if below + count as usize > index {
                    return (b, below);
                }
                below += count as usize;
            }
            (buckets - 1, below)
        })
        .collect();
    let candidates = rows
        .par_chunks(chunk_rows)
        .map(|chunk| {
            let mut kept: Vec<Vec<f32>> = vec![Vec::new(); k];
            for &r in chunk {
                for ((c, &v), &(b, _)) in probs.row(r).iter().enumerate().zip(&target) {
                    if bucket(v) == b {
                        kept[c].push(v);
                    }
                }
            }
            kept
        })
        .reduce_with(|mut a, b| {
            a.iter_mut().zip(b).for_each(|(x, y)| x.extend(y));
            a
        })
        .unwrap_or_default();
    candidates
        .into_par_iter()
        .zip(target)
        .map(|(mut values, (_, below))| {
            *values
                .select_nth_unstable_by(index - below, f32::total_cmp)
                .1
        })
        .collect()
}

pub(super) fn quantile(
    sample: &Sample,
    q: f64,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Array2<f64> {
    let k = sample.probs.ncols();
    let thresholds = column_quantiles(sample.probs, sample.rows, q);
    let below = best_rows(sample, &thresholds);
    // The highest-probability rows are only needed for classes with nothing below, so
    // they are found the first time one is.
    let mut anchors: Option<Array2<f64>> = None;
    let mut t = Array2::zeros((k, k));
    for (class, row) in below.into_iter().enumerate() {
        match row {
            Some(row) => set_row(&mut t, class, sample.probs, row),
            None => {
                warnings.push(format!(
                    "class '{}': no row lies strictly below the {q} quantile; its highest-probability row was used",
                    classes[class]
                ));
                let anchors = anchors.get_or_insert_with(|| anchor(sample));
                t.row_mut(class).assign(&anchors.row(class));
            }
        }
    }
    t
}
