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

/// The flip matrix prepared for per-row posteriors.
#[derive(Debug, Clone)]
pub struct Posterior {
    t: Array2<f64>,
    /// (Tᵀ)⁻¹, or `None` when T is too ill-conditioned to invert.
    inv_t_transpose: Option<Array2<f64>>,
}

impl Posterior {
    /// Prepares `t` (validated, row-stochastic).
    pub fn new(t: &Array2<f64>) -> Self {
        // (Tᵀ)⁻¹ = (T⁻¹)ᵀ, so one elimination gives both the inverse and the condition.
        let (inv, condition) = inverse_and_condition(t);
        let inv_t_transpose = inv
            .filter(|_| condition <= MAX_CONDITION_FOR_INVERSION)
            .map(|i| i.t().to_owned());
        Posterior {
            t: t.clone(),
            inv_t_transpose,
        }
    }

    /// False when T could not be inverted and the noisy probabilities stand in for the
    /// clean posterior (the caller should warn).
    pub fn inverts(&self) -> bool {
        self.inv_t_transpose.is_some()
    }

    /// Clean posterior of one row into `out`.
    pub fn clean(&self, noisy: &[f32], out: &mut [f64]) {
        match &self.inv_t_transpose {
            Some(inv) => {
                for (k, o) in out.iter_mut().enumerate() {
                    *o = inv
                        .row(k)
                        .iter()
                        .zip(noisy)
                        .map(|(a, &b)| a * b as f64)
                        .sum::<f64>()
                        .max(0.0);
                }
                let total: f64 = out.iter().sum();
                if total > 0.0 {
                    out.iter_mut().for_each(|o| *o /= total);
                } else {
                    out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64);
                }
            }
            None => out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64),
        }
    }

    /// P(true = k | x, observed) for every k, into `out` (`clean` is scratch space).
    pub fn given_observed(
        &self,
        noisy: &[f32],
        observed: usize,
        clean: &mut [f64],
        out: &mut [f64],
    ) {
        self.clean(noisy, clean);
        for (k, o) in out.iter_mut().enumerate() {
            *o = self.t[[k, observed]] * clean[k];
        }
        let total: f64 = out.iter().sum();
        if total > 0.0 {
            out.iter_mut().for_each(|o| *o /= total);
        } else {
            out.iter_mut().for_each(|o| *o = 0.0);
            out[observed] = 1.0;
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
                let (mut clean, mut post, mut noisy) =
                    (vec![0.0; k], vec![0.0; k], vec![0.0f32; k]);
                chunk
                    .iter()
                    .map(|&r| {
                        noisy
                            .iter_mut()
                            .zip(probs.row(r))
                            .for_each(|(dst, &src)| *dst = src);
                        self.given_observed(&noisy, labels[r], &mut clean, &mut post);
                        1.0 - post[labels[r]]
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
