//! Per-row losses on the logits z = Wx + b. The trainer sums them over rows; a loss only
//! says what one row costs and how that cost moves with z, so corrected losses plug in
//! without touching the optimiser.

use ndarray::Array2;

use super::fastmath::exp_nonpositive;
use super::kernel::FusedLoss;

/// A loss of one row given its logits and observed label.
pub trait RowLoss: Sync {
    /// Returns the row's loss and overwrites `logits` with ∂loss/∂z.
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64;

    /// The same for the fit's row `index` (0-based among the rows fitted), for losses
    /// that differ by row; the others ignore it.
    fn loss_and_grad_at(&self, logits: &mut [f64], label: usize, index: usize) -> f64 {
        let _ = index;
        self.loss_and_grad(logits, label)
    }

    /// The same loss as the fused kernel computes it for a whole block of rows, when it
    /// knows this loss; `None` (the default) evaluates it row by row.
    fn fused(&self) -> Option<FusedLoss<'_>> {
        None
    }
}

/// Softmax cross-entropy on the observed label: −log softmax(z)[label].
#[derive(Debug, Clone, Copy, Default)]
pub struct CrossEntropy;

impl RowLoss for CrossEntropy {
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64 {
        let shifted_label = logits[label] - max(logits);
        let log_sum = softmax(logits);
        logits[label] -= 1.0;
        log_sum - shifted_label
    }

    fn fused(&self) -> Option<FusedLoss<'_>> {
        Some(FusedLoss::CrossEntropy)
    }
}

/// Forward correction (Patrini et al., CVPR 2017): the model's clean posterior
/// q = softmax(z) is pushed through the flip matrix, and the observed label is scored
/// against the implied noisy posterior: −log((Tᵀq)[observed]).
///
/// Gradient: ∂/∂z_j = q_j·(1 − T[j][y] / (Tᵀq)_y).
#[derive(Debug, Clone)]
pub struct Forward {
    t: Array2<f64>,
    /// Tᵀ flattened: the column of each observed label, contiguous (the kernel's layout).
    columns: Vec<f64>,
}

impl Forward {
    /// Uses the row-stochastic flip matrix `t` (rows = true class).
    pub fn new(t: Array2<f64>) -> Self {
        let columns = t.t().iter().copied().collect();
        Forward { t, columns }
    }
}

/// Smallest noisy probability the forward loss takes the logarithm of.
const MIN_PROB: f64 = 1e-300;

impl RowLoss for Forward {
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64 {
        softmax(logits);
        let noisy: f64 = logits
            .iter()
            .enumerate()
            .map(|(k, q)| self.t[[k, label]] * q)
            .sum::<f64>()
            .max(MIN_PROB);
        for (j, q) in logits.iter_mut().enumerate() {
            *q *= 1.0 - self.t[[j, label]] / noisy;
        }
        -noisy.ln()
    }

    fn fused(&self) -> Option<FusedLoss<'_>> {
        Some(FusedLoss::Forward {
            columns: &self.columns,
            source_of_row: None,
        })
    }
}

/// Forward correction with one flip matrix per label source: row i is scored against
/// T_{s(i)}ᵀq, the forward model of `noise::sources`.
#[derive(Debug, Clone)]
pub struct ForwardBySource {
    /// One forward loss per source.
    sources: Vec<Forward>,
    /// The source of every fitted row, in fit order.
    of_fit_row: Vec<u32>,
    /// Used when no row index is given: the sources' mix.
    overall: Forward,
    /// Every source's `Forward::columns`, one after another (the kernel's layout).
    columns: Vec<f64>,
}

impl ForwardBySource {
    /// `matrices[s]` for the rows whose `of_fit_row` is s; `overall` without a row index.
    pub fn new(matrices: &[Array2<f64>], of_fit_row: Vec<u32>, overall: Array2<f64>) -> Self {
        let sources: Vec<Forward> = matrices.iter().cloned().map(Forward::new).collect();
        let columns = sources.iter().flat_map(|s| s.columns.clone()).collect();
        ForwardBySource {
            sources,
            of_fit_row,
            overall: Forward::new(overall),
            columns,
        }
    }
}

impl RowLoss for ForwardBySource {
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64 {
        self.overall.loss_and_grad(logits, label)
    }

    fn loss_and_grad_at(&self, logits: &mut [f64], label: usize, index: usize) -> f64 {
        let source = self.of_fit_row[index] as usize;
        self.sources[source].loss_and_grad(logits, label)
    }

    fn fused(&self) -> Option<FusedLoss<'_>> {
        Some(FusedLoss::Forward {
            columns: &self.columns,
            source_of_row: Some(&self.of_fit_row),
        })
    }
}

/// Backward correction (Patrini et al., CVPR 2017): the vector ℓ of per-class
/// cross-entropies ℓ_k = −log softmax(z)_k is corrected by the inverse flip matrix, and
/// the observed label's entry is the loss: (T⁻¹ℓ)[observed]. Unbiased for the clean loss,
/// but T⁻¹ has negative entries, so the published loss is unbounded below.
///
/// With `cap = Some(c)` each per-class loss is ℓ_k = −log(q_k + e^−c): a probability is
/// floored smoothly at e^−c, so ℓ_k never exceeds c and the corrected loss is bounded
/// below, which keeps the fit from driving one class's probability to zero to earn a
/// negative loss. The floor is smooth (not min(−log q_k, c)) so that the objective keeps
/// a continuous gradient: with a hard cap L-BFGS met a kink at every capped class and
/// needed about twice the iterations. Where q_k ≫ e^−c the two agree to within e^−c/q_k.
/// `cap = None` is the published (unbounded) loss.
///
/// Gradient: with r_k = q_k / (q_k + e^−c) (1 when faithful),
/// ∂/∂z_j = q_j·Σ_k T⁻¹[y][k]·r_k − T⁻¹[y][j]·r_j.
#[derive(Debug, Clone)]
pub struct Backward {
    t_inv: Array2<f64>,
    cap: Option<f64>,
}

/// Default bound on each per-class loss of the guarded backward correction: −ln(1e-4),
/// i.e. probabilities are floored (smoothly) at 1e-4.
pub const DEFAULT_BACKWARD_CAP: f64 = 9.210_340_371_976_184;

impl Backward {
    /// Uses the inverse of the flip matrix and an optional per-class loss cap.
    pub fn new(t_inv: Array2<f64>, cap: Option<f64>) -> Self {
        Backward { t_inv, cap }
    }
}

impl RowLoss for Backward {
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64 {
        let weights = self.t_inv.row(label);
        match self.cap {
            None => {
                // ℓ_k = log Σ exp(z) − z_k, from the shifted logits (no logarithm of a
                // tiny probability).
                let top = max(logits);
                let mut loss = 0.0;
                for (k, &z) in logits.iter().enumerate() {
                    loss -= weights[k] * (z - top);
                }
                loss += softmax(logits);
                let total: f64 = weights.iter().sum();
                for (j, q) in logits.iter_mut().enumerate() {
                    *q = *q * total - weights[j];
                }
                loss
            }
            Some(cap) => {
                softmax(logits);
                let floor = (-cap).exp();
                let (mut loss, mut weighted) = (0.0, 0.0);
                // The library's ln: `fastmath::ln_positive` measured slower at the
                // default target (its doc gives the figures).
                for (k, &p) in logits.iter().enumerate() {
                    loss -= weights[k] * (p + floor).ln();
                    weighted += weights[k] * (p / (p + floor));
                }
                for (j, q) in logits.iter_mut().enumerate() {
                    let p = *q;
                    *q = p * weighted - weights[j] * (p / (p + floor));
                }
                loss
            }
        }
    }

    fn fused(&self) -> Option<FusedLoss<'_>> {
        Some(FusedLoss::Backward {
            inverse: self.t_inv.as_slice()?,
            floor: self.cap.map(|cap| (-cap).exp()),
        })
    }
}

fn max(z: &[f64]) -> f64 {
    z.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v))
}

/// Softmax of `z` in place, numerically stable (the largest logit is subtracted first).
/// Returns log Σ exp(z − max z), from which log-probabilities follow without taking the
/// logarithm of a tiny probability.
pub fn softmax(z: &mut [f64]) -> f64 {
    let max = max(z);
    // A plain loop over the row: `exp_nonpositive` has no calls or branches, so the
    // compiler evaluates the logits in vector registers.
    z.iter_mut().for_each(|v| *v = exp_nonpositive(*v - max));
    let sum: f64 = z.iter().sum();
    z.iter_mut().for_each(|v| *v /= sum);
    sum.ln()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cross_entropy_value_and_gradient_by_hand() {
        // z = (1, 2, 3): softmax = e^z / (e + e² + e³) = (0.0900306, 0.2447285, 0.6652410)
        // (standard values); label 0 costs −ln 0.0900306 = 2.4076059.
        let mut z = [1.0, 2.0, 3.0];
        let loss = CrossEntropy.loss_and_grad(&mut z, 0);
        assert!((loss - 2.407_605_964).abs() < 1e-8, "{loss}");
        let expected = [0.090_030_573 - 1.0, 0.244_728_471, 0.665_240_956];
        for (g, e) in z.iter().zip(expected) {
            assert!((g - e).abs() < 1e-8);
        }
    }

    /// Central differences of a row loss against its analytic gradient.
    fn check_gradient(loss: &dyn RowLoss, z: &[f64], label: usize) {
        let mut grad = z.to_vec();
        loss.loss_and_grad(&mut grad, label);
        let h = 1e-6;
        for j in 0..z.len() {
            let (mut up, mut down) = (z.to_vec(), z.to_vec());
            up[j] += h;
            down[j] -= h;
            let numeric = (loss.loss_and_grad(&mut up, label)
                - loss.loss_and_grad(&mut down, label))
                / (2.0 * h);
            assert!(
                (numeric - grad[j]).abs() < 1e-6,
                "entry {j}: numeric {numeric} vs analytic {}",
                grad[j]
            );
        }
    }

    fn t3() -> Array2<f64> {
        ndarray::array![[0.8, 0.1, 0.1], [0.2, 0.7, 0.1], [0.0, 0.3, 0.7]]
    }

    #[test]
    fn forward_by_source_scores_each_row_under_its_sources_matrix() {
        // Row 0 from source 1 (T = t3), row 1 from source 0 (identity: plain
        // cross-entropy); without an index, the overall matrix.
        let eye = Array2::eye(3);
        let loss = ForwardBySource::new(&[eye.clone(), t3()], vec![1, 0], eye);
        let z = [1.0, 2.0, 3.0];
        let under = |l: &dyn RowLoss, index: Option<usize>| {
            let mut g = z;
            match index {
                Some(i) => l.loss_and_grad_at(&mut g, 1, i),
                None => l.loss_and_grad(&mut g, 1),
            }
        };
        let forward = under(&Forward::new(t3()), None);
        assert_eq!(under(&loss, Some(0)), forward);
        assert_eq!(under(&loss, Some(1)), under(&CrossEntropy, None));
        assert_eq!(under(&loss, None), under(&CrossEntropy, None));
    }

    #[test]
    fn forward_value_and_gradient_by_hand() {
        // z = (1, 2, 3): q = (0.0900306, 0.2447285, 0.6652410). Observed 1:
        // (Tᵀq)₁ = 0.1·0.0900306 + 0.7·0.2447285 + 0.3·0.6652410 = 0.3798853
        // (Patrini et al. 2017, forward correction), loss = −ln 0.3798853 = 0.9678860.
        let loss = Forward::new(t3());
        let mut z = [1.0, 2.0, 3.0];
        let value = loss.loss_and_grad(&mut z, 1);
        assert!((value - 0.967_886_0).abs() < 1e-6, "{value}");
        // ∂/∂z_j = q_j (1 − T[j][1] / 0.3798853): (0.0663312, −0.2062233, 0.1398921).
        for (g, e) in z.iter().zip([0.066_331_2, -0.206_223_3, 0.139_892_1]) {
            assert!((g - e).abs() < 1e-6, "{z:?}");
        }
        check_gradient(&loss, &[0.3, -1.2, 2.0], 2);
        check_gradient(&loss, &[5.0, 0.0, -5.0], 0);
    }

    #[test]
    fn backward_value_and_gradient_by_hand() {
        // T = [[0.8, 0.2], [0.3, 0.7]]: T⁻¹ = [[1.4, −0.4], [−0.6, 1.6]] (det 0.5).
        // z = (0, ln 3): q = (0.25, 0.75), ℓ = (ln 4, ln 4/3) = (1.3862944, 0.2876821).
        // Observed 0: 1.4·1.3862944 − 0.4·0.2876821 = 1.8257393 (Patrini et al. 2017).
        let t_inv = ndarray::array![[1.4, -0.4], [-0.6, 1.6]];
        let loss = Backward::new(t_inv.clone(), None);
        let mut z = [0.0, 3f64.ln()];
        let value = loss.loss_and_grad(&mut z, 0);
        assert!((value - 1.825_739_3).abs() < 1e-6, "{value}");
        // ∂/∂z_j = q_j·(1.4 − 0.4) − T⁻¹[0][j] = (0.25 − 1.4, 0.75 + 0.4) = (−1.15, 1.15).
        assert!(
            (z[0] + 1.15).abs() < 1e-9 && (z[1] - 1.15).abs() < 1e-9,
            "{z:?}"
        );
        check_gradient(&loss, &[0.4, -0.9], 1);
        let capped = Backward::new(t_inv, Some(DEFAULT_BACKWARD_CAP));
        check_gradient(&capped, &[0.4, -0.9], 1);
        // The floor is smooth: the gradient is right where a probability sits near it
        // (q₀ = 1/(1 + e⁹) ≈ 1.2e-4 against the floor 1e-4).
        check_gradient(&capped, &[0.0, 9.0], 1);
        check_gradient(&capped, &[0.0, 9.0], 0);
        // With the cap, pushing the negatively weighted class to zero stops paying:
        // the unbounded loss keeps falling, the guarded one levels off. Its bound: each
        // ℓ_k = −ln(q_k + e^−c) lies in [−ln(1 + e^−c), c], so the row's loss is at least
        // c·Σ(negative weights) − ln(1 + e^−c)·Σ(positive weights) = −0.6c − 1.6·ln(1 + 1e-4).
        let far = |l: &Backward| l.loss_and_grad(&mut [0.0, 30.0], 1);
        assert!(far(&loss) < -15.0);
        let bound = -0.6 * DEFAULT_BACKWARD_CAP - 1.6 * (1.0 + 1e-4f64).ln();
        assert!(far(&capped) >= bound - 1e-12, "{} vs {bound}", far(&capped));
        assert!(far(&capped) < bound + 1e-9, "the bound is reached far out");
    }

    #[test]
    fn binary_backward_is_the_unbiased_loss_of_natarajan_et_al() {
        // Natarajan et al. (NeurIPS 2013), Lemma 1: with flip rates ρ₊ = P(ỹ = −1 | y = +1)
        // and ρ₋ = P(ỹ = +1 | y = −1), the unbiased loss for observed +1 is
        // ((1 − ρ₋)·ℓ(t, +1) − ρ₊·ℓ(t, −1)) / (1 − ρ₊ − ρ₋). Classes (0, 1) = (−1, +1).
        let (rho_plus, rho_minus) = (0.3, 0.1);
        let t = ndarray::array![[1.0 - rho_minus, rho_minus], [rho_plus, 1.0 - rho_plus]];
        let t_inv = crate::noise::linalg::inverse(&t).unwrap();
        let loss = Backward::new(t_inv, None);
        let z = [0.2, 1.1];
        let ce = |k: usize| {
            let mut q = z;
            softmax(&mut q);
            -q[k].ln()
        };
        let unbiased =
            ((1.0 - rho_minus) * ce(1) - rho_plus * ce(0)) / (1.0 - rho_plus - rho_minus);
        let ours = loss.loss_and_grad(&mut z.clone(), 1);
        assert!((ours - unbiased).abs() < 1e-12, "{ours} vs {unbiased}");
    }

    #[test]
    fn cross_entropy_gradient_matches_finite_differences() {
        check_gradient(&CrossEntropy, &[0.3, -1.2, 2.0], 1);
    }

    #[test]
    fn huge_logits_stay_finite() {
        let mut z = [1000.0, -1000.0];
        let loss = CrossEntropy.loss_and_grad(&mut z, 1);
        assert!((loss - 2000.0).abs() < 1e-9);
        assert!(z.iter().all(|v| v.is_finite()));
    }
}
