//! Per-row losses on the logits z = Wx + b. The trainer sums them over rows; a loss only
//! says what one row costs and how that cost moves with z, so corrected losses plug in
//! without touching the optimiser.

/// A loss of one row given its logits and observed label.
pub trait RowLoss: Sync {
    /// Returns the row's loss and overwrites `logits` with ∂loss/∂z.
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64;
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
}

fn max(z: &[f64]) -> f64 {
    z.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v))
}

/// Softmax of `z` in place, numerically stable (the largest logit is subtracted first).
/// Returns log Σ exp(z − max z), from which log-probabilities follow without taking the
/// logarithm of a tiny probability.
pub fn softmax(z: &mut [f64]) -> f64 {
    let max = max(z);
    let mut sum = 0.0;
    for v in z.iter_mut() {
        *v = (*v - max).exp();
        sum += *v;
    }
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

    #[test]
    fn huge_logits_stay_finite() {
        let mut z = [1000.0, -1000.0];
        let loss = CrossEntropy.loss_and_grad(&mut z, 1);
        assert!((loss - 2000.0).abs() < 1e-9);
        assert!(z.iter().all(|v| v.is_finite()));
    }
}
