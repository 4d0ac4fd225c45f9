//! Per-row clean posterior under a flip matrix.
//!
//! The noisy posterior is p̃(j | x) = Σ_k T[k][j]·p(k | x), i.e. p̃ = Tᵀ·p (Patrini et al.
//! 2017, Eq. 2), so the clean posterior is recovered as p = (Tᵀ)⁻¹·p̃, clipped at 0 and
//! renormalised. Given the observed label j, Bayes' rule gives
//! P(true = k | x, observed = j) ∝ T[k][j]·p(k | x).

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

use super::linalg::inverse_and_condition;

/// Above this 1-norm condition number, inverting Tᵀ amplifies probability noise too much
/// to trust the recovered clean posterior; the noisy probabilities are used instead.
pub const MAX_CONDITION_FOR_INVERSION: f64 = 1e6;

/// Width of the fixed-size chunks of the per-row accumulation.
const LANES: usize = 4;
/// Up to this many classes the accumulators live on the stack. Above it they are the
/// output slice itself: with 100 classes, a 256-class stack array made scoring 1,000,000
/// rows take 8.2 s instead of 4.7 s (measured with `flipmend suspects`).
const MAX_STACK_CLASSES: usize = 16;

/// out = Σ_j noisy_j · (row j of `inv`), with `CHUNKS` chunks of LANES accumulators on
/// the stack (`padded` ≤ CHUNKS·LANES).
fn accumulate<const CHUNKS: usize>(inv: &[f64], noisy: &[f32], padded: usize, out: &mut [f64]) {
    let mut acc = [[0.0f64; LANES]; CHUNKS];
    let acc = &mut acc[..padded / LANES];
    for (row, &p) in inv.chunks_exact(padded).zip(noisy) {
        let p = p as f64;
        for (a, r) in acc.iter_mut().zip(row.chunks_exact(LANES)) {
            for l in 0..LANES {
                a[l] += r[l] * p;
            }
        }
    }
    out.iter_mut()
        .zip(acc.iter().flatten())
        .for_each(|(o, &a)| *o = a);
}

/// The flip matrix prepared for per-row posteriors. Matrices are kept as flat row-major
/// vectors so the per-row loops run over plain slices (this runs for every row after
/// every matrix edit in the desktop app).
#[derive(Debug, Clone)]
pub struct Posterior {
    k: usize,
    /// T's columns, one after another: `t_columns[j·k + i] = T[i][j]`, so the column of
    /// the observed class is one contiguous slice.
    t_columns: Vec<f64>,
    /// T⁻¹ row-major, or `None` when T is too ill-conditioned to invert. Since
    /// (Tᵀ)⁻¹p̃ = Σ_j p̃_j·(row j of T⁻¹), the clean posterior is a sum of scaled rows,
    /// whose per-class accumulators are independent (no chain of dependent additions,
    /// which made the dot-product form about four times slower).
    inv: Option<Vec<f64>>,
}

impl Posterior {
    /// Prepares `t` (validated, row-stochastic).
    pub fn new(t: &Array2<f64>) -> Self {
        // (Tᵀ)⁻¹ = (T⁻¹)ᵀ, so one elimination gives both the inverse and the condition.
        let (inv, condition) = inverse_and_condition(t);
        let padded = t.nrows().next_multiple_of(LANES);
        let inv = inv
            .filter(|_| condition <= MAX_CONDITION_FOR_INVERSION)
            .map(|i| {
                // Rows padded with zeros to a multiple of LANES, so the accumulation runs
                // in fixed-width chunks the compiler turns into vector instructions.
                let mut flat = vec![0.0; t.nrows() * padded];
                for (dst, src) in flat.chunks_exact_mut(padded).zip(i.rows()) {
                    dst[..src.len()]
                        .iter_mut()
                        .zip(src)
                        .for_each(|(d, &s)| *d = s);
                }
                flat
            });
        Posterior {
            k: t.nrows(),
            t_columns: t.t().iter().copied().collect(),
            inv,
        }
    }

    /// False when T could not be inverted and the noisy probabilities stand in for the
    /// clean posterior (the caller should warn).
    pub fn inverts(&self) -> bool {
        self.inv.is_some()
    }

    /// Clean posterior of one row into `out`.
    pub fn clean(&self, noisy: &[f32], out: &mut [f64]) {
        if self.unnormalised_clean(noisy, out) {
            let total: f64 = out.iter().sum();
            out.iter_mut().for_each(|o| *o /= total);
        }
    }

    /// (Tᵀ)⁻¹p̃ clipped at 0, not yet normalised; returns false (and copies the noisy
    /// probabilities) when there is no inverse or nothing positive is left.
    fn unnormalised_clean(&self, noisy: &[f32], out: &mut [f64]) -> bool {
        let k = self.k;
        if let Some(inv) = &self.inv {
            let padded = k.next_multiple_of(LANES);
            // Few classes: fixed-size stack accumulators the compiler keeps in vector
            // registers. Many: accumulate in the output slice (see MAX_STACK_CLASSES).
            if padded <= MAX_STACK_CLASSES {
                accumulate::<{ MAX_STACK_CLASSES / LANES }>(inv, noisy, padded, out);
            } else {
                out.fill(0.0);
                for (row, &p) in inv.chunks_exact(padded).zip(noisy) {
                    let p = p as f64;
                    for (o, &a) in out.iter_mut().zip(row) {
                        *o += a * p;
                    }
                }
            }
            let mut total = 0.0;
            for o in out.iter_mut() {
                *o = o.max(0.0);
                total += *o;
            }
            if total > 0.0 {
                return true;
            }
        }
        out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64);
        false
    }

    /// P(true = k | x, observed) for every k, into `out` (`clean` is scratch space).
    pub fn given_observed(
        &self,
        noisy: &[f32],
        observed: usize,
        clean: &mut [f64],
        out: &mut [f64],
    ) {
        // The clean posterior's normalisation cancels in Bayes' rule, so it is skipped.
        self.unnormalised_clean(noisy, clean);
        let column = &self.t_columns[observed * self.k..(observed + 1) * self.k];
        let mut total = 0.0;
        for ((o, &t), &c) in out.iter_mut().zip(column).zip(clean.iter()) {
            *o = t * c;
            total += *o;
        }
        if total > 0.0 {
            // Division, not multiplication by 1/total: a certain label then scores
            // exactly 0, and such rows tie (and keep row order) instead of scattering
            // by rounding error.
            out.iter_mut().for_each(|o| *o /= total);
        } else {
            out.iter_mut().for_each(|o| *o = 0.0);
            out[observed] = 1.0;
        }
    }

    /// P(true = observed | x, observed) alone: the same number, bit for bit, as
    /// `out[observed]` after [`Posterior::given_observed`], without normalising the other
    /// classes (ten divisions a row for ten classes, a good part of re-ranking's time).
    pub fn observed_share(&self, noisy: &[f32], observed: usize, clean: &mut [f64]) -> f64 {
        self.unnormalised_clean(noisy, clean);
        let column = &self.t_columns[observed * self.k..(observed + 1) * self.k];
        let mut total = 0.0;
        for (&t, &c) in column.iter().zip(clean.iter()) {
            total += t * c;
        }
        if total > 0.0 {
            column[observed] * clean[observed] / total
        } else {
            1.0
        }
    }

    /// Σ over rows of 1 − P(true = observed | x, observed): the expected number of
    /// mislabelled rows.
    pub fn expected_mislabeled(&self, probs: ArrayView2<f32>, labels: &[usize]) -> f64 {
        let k = probs.ncols();
        let rows: Vec<usize> = (0..labels.len()).collect();
        let parts: Vec<f64> = rows
            .par_chunks(8192)
            .map(|chunk| {
                let (mut clean, mut noisy) = (vec![0.0; k], vec![0.0f32; k]);
                chunk
                    .iter()
                    .map(|&r| {
                        noisy
                            .iter_mut()
                            .zip(probs.row(r))
                            .for_each(|(dst, &src)| *dst = src);
                        1.0 - self.observed_share(&noisy, labels[r], &mut clean)
                    })
                    .sum()
            })
            .collect();
        parts.iter().sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn clean_and_observed_posteriors_by_hand() {
        // T = [[0.8, 0.2], [0.3, 0.7]] and clean p = (0.5, 0.5) give the noisy
        // p̃ = Tᵀp = (0.8·0.5 + 0.3·0.5, 0.2·0.5 + 0.7·0.5) = (0.55, 0.45);
        // recovering from p̃ must give back (0.5, 0.5).
        let t = array![[0.8, 0.2], [0.3, 0.7]];
        let post = Posterior::new(&t);
        let mut clean = [0.0; 2];
        post.clean(&[0.55, 0.45], &mut clean);
        assert!(
            (clean[0] - 0.5).abs() < 1e-7 && (clean[1] - 0.5).abs() < 1e-7,
            "{clean:?}"
        );
        // Observed class 1: P(true = k | x, obs = 1) ∝ T[k][1]·p(k) = (0.2·0.5, 0.7·0.5) → (2/9, 7/9).
        let mut out = [0.0; 2];
        post.given_observed(&[0.55, 0.45], 1, &mut clean, &mut out);
        assert!(
            (out[0] - 2.0 / 9.0).abs() < 1e-6 && (out[1] - 7.0 / 9.0).abs() < 1e-6,
            "{out:?}"
        );
        let probs = array![[0.55f32, 0.45]];
        assert!((post.expected_mislabeled(probs.view(), &[1]) - 2.0 / 9.0).abs() < 1e-6);
    }

    #[test]
    fn singular_matrices_fall_back_to_the_noisy_probabilities() {
        let t = array![[0.5, 0.5], [0.5, 0.5]];
        let post = Posterior::new(&t);
        assert!(!post.inverts());
        let mut clean = [0.0; 2];
        post.clean(&[0.3, 0.7], &mut clean);
        assert!((clean[0] - 0.3).abs() < 1e-7);
    }
}
