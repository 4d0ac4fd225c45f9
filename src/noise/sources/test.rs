//! Do the sources' matrices differ? A likelihood-ratio test with the clean posterior q
//! held fixed at the shared fit: under H₀ one matrix T explains every source's observed
//! labels, p(observed | x, s) = Tᵀq(x); under H₁ each source has its own. Both are fitted
//! by maximum likelihood given q (EM, below), and G = 2·(ℓ₁ − ℓ₀) is compared with its
//! values when the source column is shuffled among the same rows (a permutation test).
//! The size under H₀ is measured in `tests.rs` on simulations with equal sources.

use ndarray::{Array2, ArrayView2};

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::SourceSample;

/// EM iterations at most; the fit stops earlier when the log-likelihood gains less than
/// [`EM_TOLERANCE`] (relative).
const EM_MAX_ITER: usize = 500;
const EM_TOLERANCE: f64 = 1e-9;

/// Permutations of the source column behind the p-value: the smallest p-value it can
/// give is 1/(B + 1) = 0.01.
pub const PERMUTATIONS: usize = 99;

/// The test of equal matrices across sources.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SourceTest {
    /// G = 2·(ℓ(one matrix per source) − ℓ(one matrix)).
    pub statistic: f64,
    /// (S − 1) × the free cells of one matrix (see [`free_cells`]); for reference only,
    /// the p-value is the permutation test's.
    pub degrees_of_freedom: usize,
    /// (1 + permutations with a G at least as large) / (1 + [`PERMUTATIONS`]).
    pub p_value: f64,
}

/// The likelihood-ratio statistic over the `fitted` sources (pooled ones are left out),
/// with its permutation p-value: the source column shuffled among the same rows
/// (seeded, one ChaCha8 stream per permutation) gives G's distribution when the sources
/// share one matrix, without the χ² approximation, which is unreliable here (most cells
/// of a flip matrix are zero, on the boundary of the parameter space; see
/// `tests.rs`, `equal_sources_are_rarely_called_different`).
pub(super) fn equal_matrices(
    data: &SourceSample,
    rows: &[Vec<usize>],
    fitted: &[usize],
    clean: &Array2<f32>,
    k: usize,
) -> SourceTest {
    let sample = &data.sample;
    let groups: Vec<&[usize]> = fitted.iter().map(|&s| rows[s].as_slice()).collect();
    let all_rows: Vec<usize> = groups.concat();
    let (pooled, together) = fit_given_clean(
        clean.view(),
        sample.labels,
        sample.trusted,
        &all_rows,
        k,
        None,
    );
    let statistic = |rows: &[usize]| {
        let mut separate = 0.0;
        let mut start = 0;
        for group in &groups {
            let part = &rows[start..start + group.len()];
            start += group.len();
            let fit = fit_given_clean(
                clean.view(),
                sample.labels,
                sample.trusted,
                part,
                k,
                Some(&pooled),
            );
            separate += fit.1;
        }
        (2.0 * (separate - together)).max(0.0)
    };
    let observed = statistic(&all_rows);
    let as_large = (0..PERMUTATIONS)
        .into_par_iter()
        .filter(|&b| {
            let mut rng = ChaCha8Rng::seed_from_u64(PERMUTATION_SEED);
            rng.set_stream(b as u64);
            let mut shuffled = all_rows.clone();
            shuffled.shuffle(&mut rng);
            statistic(&shuffled) >= observed
        })
        .count();
    SourceTest {
        statistic: observed,
        degrees_of_freedom: (fitted.len() - 1) * free_cells(&pooled),
        p_value: (1 + as_large) as f64 / (1 + PERMUTATIONS) as f64,
    }
}

/// Seed of the permutations (the test is the same on every run).
const PERMUTATION_SEED: u64 = 0x05EE_DF05;

/// Free parameters of one matrix: in each row, the cells the pooled fit leaves above
/// [`ZERO_CELL`], less one (the row sums to 1); at least one. Neither this count nor
/// K·(K − 1) made G follow χ²: on 40 tables with equal sources (`tests.rs`) χ² on the
/// free cells rejected 5 of 40 at the 5 % level, and on all cells it was far too
/// conservative (G = 18.8 on 60 degrees of freedom, p = 1.00, on a 20,000-row table
/// with 4 shuffled sources).
fn free_cells(pooled: &Array2<f64>) -> usize {
    let free: usize = pooled
        .rows()
        .into_iter()
        .map(|row| {
            row.iter()
                .filter(|&&v| v > ZERO_CELL)
                .count()
                .saturating_sub(1)
        })
        .sum();
    free.max(1)
}

/// A cell of the pooled fit at or below this is taken as a flip that does not happen.
const ZERO_CELL: f64 = 1e-3;

/// The maximum-likelihood T of the observed labels of `rows` given their clean
/// posteriors, by EM (each row's true class is the missing datum; a trusted label makes
/// it known), and the log-likelihood Σ ln Σ_c q_c·T[c][observed] it reaches (audited
/// rows: ln T[true][observed], the q term being the same under every T), started from
/// `start` or from 0.8 on the diagonal.
pub fn fit_given_clean(
    clean: ArrayView2<f32>,
    labels: &[usize],
    trusted: Option<&[Option<usize>]>,
    rows: &[usize],
    k: usize,
    start: Option<&Array2<f64>>,
) -> (Array2<f64>, f64) {
    let mut t = match start {
        // A start's zero cells would stay zero under EM: lift them a little.
        Some(start) => start.mapv(|v| v.max(1e-4)),
        None => Array2::from_shape_fn((k, k), |(i, j)| {
            if i == j {
                0.8
            } else {
                0.2 / (k - 1).max(1) as f64
            }
        }),
    };
    let mut previous = f64::NEG_INFINITY;
    let mut counts = Array2::<f64>::zeros((k, k));
    let mut weights = vec![0.0; k];
    for _ in 0..EM_MAX_ITER {
        counts.fill(0.0);
        let mut log_likelihood = 0.0;
        for &r in rows {
            let observed = labels[r];
            if let Some(truth) = trusted.and_then(|t| t[r]) {
                log_likelihood += t[[truth, observed]].max(f64::MIN_POSITIVE).ln();
                counts[[truth, observed]] += 1.0;
                continue;
            }
            let mut total = 0.0;
            for (c, w) in weights.iter_mut().enumerate() {
                *w = clean[[r, c]] as f64 * t[[c, observed]];
                total += *w;
            }
            let total = total.max(f64::MIN_POSITIVE);
            log_likelihood += total.ln();
            for (c, w) in weights.iter().enumerate() {
                counts[[c, observed]] += w / total;
            }
        }
        for (mut row, counted) in t.rows_mut().into_iter().zip(counts.rows()) {
            let sum: f64 = counted.sum();
            if sum > 0.0 {
                row.assign(&counted.mapv(|v| v / sum));
            }
        }
        if log_likelihood - previous <= EM_TOLERANCE * log_likelihood.abs() {
            return (t, log_likelihood.max(previous));
        }
        previous = log_likelihood;
    }
    (t, previous)
}
