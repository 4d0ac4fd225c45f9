//! The training objective of softmax regression: the mean row loss plus (l2/2)·‖W‖²
//! (biases unpenalised) and its gradient, through the fused kernel when the loss has a
//! fused form and a row at a time otherwise (the reference the kernel is tested against).

use ndarray::{Array2, ArrayView2, Axis, Slice};
use rayon::prelude::*;

use super::kernel;
use super::loss::RowLoss;

/// Rows per parallel work item of the row-at-a-time path. Large enough that each block's
/// two matrix products run near the machine's speed, small enough to balance two or more
/// cores.
const BLOCK_ROWS: usize = 2048;

/// The rows a fit sees: standardised features, labels, class count.
pub(crate) struct Problem<'a> {
    pub(crate) x: ArrayView2<'a, f64>,
    pub(crate) labels: &'a [usize],
    pub(crate) classes: usize,
    pub(crate) loss: &'a dyn RowLoss,
    pub(crate) l2: f64,
}

impl Problem<'_> {
    /// Objective at `theta` (weights row-major, then biases); gradient into `grad`.
    pub(crate) fn evaluate(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let (k, d) = (self.classes, self.x.ncols());
        let Ok(weights) = ArrayView2::from_shape((k, d), &theta[..k * d]) else {
            return f64::NAN;
        };
        let bias = &theta[k * d..];
        let n = self.x.nrows();
        let fused = self.loss.fused().and_then(|loss| {
            kernel::summed_loss_and_grad(self.x, self.labels, loss, &theta[..k * d], bias, grad)
        });
        let total = match fused {
            Some(total) => total,
            None => self.summed_by_rows(weights, bias, grad),
        };
        let scale = 1.0 / n.max(1) as f64;
        grad.iter_mut().for_each(|g| *g *= scale);
        let mut penalty = 0.0;
        for (g, w) in grad[..k * d].iter_mut().zip(&theta[..k * d]) {
            *g += self.l2 * w;
            penalty += w * w;
        }
        total * scale + 0.5 * self.l2 * penalty
    }

    /// The summed row losses and their summed gradient, a row at a time through the
    /// loss's `loss_and_grad_at` and two matrix products per block: the path for losses
    /// the fused kernel does not know, and the reference the kernel is tested against.
    fn summed_by_rows(&self, weights: ArrayView2<f64>, bias: &[f64], grad: &mut [f64]) -> f64 {
        let (k, d) = (self.classes, self.x.ncols());
        let n = self.x.nrows();
        let parts: Vec<(f64, Array2<f64>, Vec<f64>)> = (0..n.div_ceil(BLOCK_ROWS))
            .into_par_iter()
            .map(|block| {
                self.block(
                    block * BLOCK_ROWS,
                    ((block + 1) * BLOCK_ROWS).min(n),
                    weights,
                    bias,
                )
            })
            .collect();
        // Summed in block order, so the result does not depend on the thread count.
        let mut total = 0.0;
        grad.iter_mut().for_each(|g| *g = 0.0);
        for (loss, grad_w, grad_b) in &parts {
            total += loss;
            for (g, v) in grad[..k * d].iter_mut().zip(grad_w.iter()) {
                *g += v;
            }
            for (g, v) in grad[k * d..].iter_mut().zip(grad_b) {
                *g += v;
            }
        }
        total
    }

    fn block(
        &self,
        start: usize,
        end: usize,
        weights: ArrayView2<f64>,
        bias: &[f64],
    ) -> (f64, Array2<f64>, Vec<f64>) {
        let xb = self.x.slice_axis(Axis(0), Slice::from(start..end));
        let mut z = xb.dot(&weights.t());
        let mut loss = 0.0;
        let mut grad_b = vec![0.0; self.classes];
        for (r, mut row) in z.axis_iter_mut(Axis(0)).enumerate() {
            let Some(logits) = row.as_slice_mut() else {
                continue;
            };
            logits.iter_mut().zip(bias).for_each(|(v, b)| *v += b);
            loss += self
                .loss
                .loss_and_grad_at(logits, self.labels[start + r], start + r);
            grad_b
                .iter_mut()
                .zip(logits.iter())
                .for_each(|(g, v)| *g += v);
        }
        (loss, z.t().dot(&xb), grad_b)
    }
}

/// The training objective at `theta` (weights row-major, then biases) on already
/// standardised rows, with its gradient written into `grad`: the function the optimiser
/// calls. Public for benchmarks and checks.
pub fn objective(
    x: ArrayView2<f64>,
    labels: &[usize],
    classes: usize,
    loss: &dyn RowLoss,
    l2: f64,
    theta: &[f64],
    grad: &mut [f64],
) -> f64 {
    Problem {
        x: x.view(),
        labels,
        classes,
        loss,
        l2,
    }
    .evaluate(theta, grad)
}
