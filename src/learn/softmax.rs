//! Multinomial (softmax) regression: standardised features, mean row loss plus
//! (l2/2)·‖W‖² with the biases unpenalised, minimised by L-BFGS with the loss and its
//! gradient computed in parallel over row blocks.

use ndarray::{Array2, ArrayView2, Axis, Slice};
use rayon::prelude::*;
use serde::Serialize;

use super::lbfgs::{minimize, LbfgsOptions, Stop};
use super::loss::{softmax, RowLoss};
pub use super::objective::objective;
use super::objective::Problem;
use super::standardize::Standardizer;
use crate::error::{Error, Result};

/// Rows per parallel work item. Large enough that each block's two matrix products run
/// near the machine's speed, small enough to balance two or more cores.
const BLOCK_ROWS: usize = 2048;

/// The default gradient tolerance (largest entry of the mean loss's gradient):
/// scikit-learn's `LogisticRegression` default `tol`, which the reference pipeline uses
/// for its folds and its uncorrected fit. Chosen by measurement against 1e-5, which
/// every fit used before (the folds took 1e-4 first): `../shared/bench/validity.py`
/// moved in one figure, gauss8_sym40's forward accuracy 0.894 -> 0.893, and
/// `flipmend compare` on vs_peer.sh's 200,000 rows kept every test accuracy within 0.0004
/// (8 of 20,000 rows) while its four fits took 7/22/24/17 -> 4/14/13/8 iterations and the
/// whole process 1.30 -> 1.05 s. The objective then sits within about 1e-5 of its optimum,
/// relative (backward: 0.333722 against 0.333718).
pub const DEFAULT_GRAD_TOL: f64 = 1e-4;

/// Settings of a softmax-regression fit, checked by [`SoftmaxParams::check`] before use.
#[derive(Debug, Clone, PartialEq)]
pub struct SoftmaxParams {
    l2: f64,
    max_iter: usize,
    grad_tol: f64,
    min_rel_decrease: f64,
}

impl Default for SoftmaxParams {
    fn default() -> Self {
        SoftmaxParams {
            l2: 1e-3,
            max_iter: 500,
            grad_tol: DEFAULT_GRAD_TOL,
            min_rel_decrease: 2.2e-9,
        }
    }
}

impl SoftmaxParams {
    /// L2 penalty on the weights (not the biases). Default 1e-3. The objective is the
    /// mean loss + (l2/2)·‖W‖², the same optimum as scikit-learn's C = 1/(l2·n).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }

    /// Iteration limit. Default 500.
    pub fn max_iter(mut self, max_iter: usize) -> Self {
        self.max_iter = max_iter;
        self
    }

    /// Stop when every gradient entry is at most this in absolute value. Default
    /// [`DEFAULT_GRAD_TOL`] (1e-4).
    pub fn grad_tol(mut self, grad_tol: f64) -> Self {
        self.grad_tol = grad_tol;
        self
    }

    /// Stop when an iteration lowers the objective by less than this relative amount.
    /// Default 2.2e-9 (scipy's L-BFGS-B `ftol`); 0 relies on the gradient test alone.
    pub fn min_rel_decrease(mut self, min_rel_decrease: f64) -> Self {
        self.min_rel_decrease = min_rel_decrease;
        self
    }

    /// The L2 penalty.
    pub fn l2_penalty(&self) -> f64 {
        self.l2
    }

    /// The iteration limit.
    pub fn iteration_limit(&self) -> usize {
        self.max_iter
    }

    /// Refuses settings that cannot work.
    pub fn check(&self) -> Result<()> {
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::Setting {
                setting: "l2",
                problem: format!("must be a finite number of at least 0, not {}", self.l2),
            });
        }
        if self.max_iter == 0 {
            return Err(Error::Setting {
                setting: "max iter",
                problem: "must be at least 1".into(),
            });
        }
        if !(self.min_rel_decrease.is_finite() && self.min_rel_decrease >= 0.0) {
            return Err(Error::Usage(format!(
                "the relative decrease tolerance must be at least 0, not {}",
                self.min_rel_decrease
            )));
        }
        if !(self.grad_tol.is_finite() && self.grad_tol > 0.0) {
            return Err(Error::Usage(format!(
                "the gradient tolerance must be positive, not {}",
                self.grad_tol
            )));
        }
        Ok(())
    }
}

/// A fitted model: weights apply to standardised features.
#[derive(Debug, Clone, PartialEq)]
pub struct SoftmaxModel {
    /// Feature statistics of the fitting rows.
    pub standardizer: Standardizer,
    /// `classes × features` weights.
    pub weights: Array2<f64>,
    /// One bias per class.
    pub bias: Vec<f64>,
}

/// How a fit went.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FitReport {
    /// Final objective (mean loss plus penalty).
    pub objective: f64,
    /// L-BFGS iterations.
    pub iterations: usize,
    /// Largest absolute gradient entry at the end.
    pub grad_norm: f64,
    /// True when the gradient tolerance was met.
    pub converged: bool,
}

/// Fits on the rows `rows` of `x` (all rows when `None`) with `labels[r]` the label of
/// row `r` of `x`. `keep_going` is asked once per iteration (for cancelling).
pub fn fit(
    x: ArrayView2<f64>,
    rows: Option<&[usize]>,
    labels: &[usize],
    classes: usize,
    loss: &dyn RowLoss,
    params: &SoftmaxParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<(SoftmaxModel, FitReport)> {
    fit_from(x, rows, labels, classes, loss, params, None, keep_going)
}

/// [`fit`], starting the optimiser from the function that `start` computes instead of
/// from zero. The objective is strictly convex when l2 > 0, so the optimum is the same;
/// a nearby start (another fold, another correction) only saves iterations.
#[allow(clippy::too_many_arguments)]
pub fn fit_from(
    x: ArrayView2<f64>,
    rows: Option<&[usize]>,
    labels: &[usize],
    classes: usize,
    loss: &dyn RowLoss,
    params: &SoftmaxParams,
    start: Option<&SoftmaxModel>,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<(SoftmaxModel, FitReport)> {
    let prepared = Standardized::new(x, rows);
    let fit_labels: Vec<usize> = match rows {
        Some(rows) => rows.iter().map(|&r| labels[r]).collect(),
        None => labels.to_vec(),
    };
    fit_standardized(
        &prepared,
        &fit_labels,
        classes,
        loss,
        params,
        start,
        keep_going,
    )
}

/// Rows standardised with their own statistics, kept for several fits on the same rows
/// (a comparison's corrections): each fit would otherwise recompute the statistics and
/// copy the rows (20–30 ms for 160,000 × 32, most of it page faults on the fresh copy).
#[derive(Debug, Clone)]
pub struct Standardized {
    standardizer: Standardizer,
    x: Array2<f64>,
}

impl Standardized {
    /// The rows `rows` of `x` (all when `None`), standardised.
    pub fn new(x: ArrayView2<f64>, rows: Option<&[usize]>) -> Self {
        let standardizer = Standardizer::fit(x, rows);
        let x = standardizer.transform(x, rows);
        Standardized { standardizer, x }
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.x.nrows()
    }
}

/// [`fit_from`] on rows already standardised, `labels[i]` the label of its row i.
pub fn fit_standardized(
    prepared: &Standardized,
    labels: &[usize],
    classes: usize,
    loss: &dyn RowLoss,
    params: &SoftmaxParams,
    start: Option<&SoftmaxModel>,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<(SoftmaxModel, FitReport)> {
    params.check()?;
    if labels.len() != prepared.rows() {
        return Err(Error::Internal(format!(
            "{} labels for {} standardised rows",
            labels.len(),
            prepared.rows()
        )));
    }
    if labels.iter().any(|&y| y >= classes) {
        return Err(Error::Internal(
            "a label is not below the class count".into(),
        ));
    }
    let Standardized { standardizer, x } = prepared;
    let problem = Problem {
        x: x.view(),
        labels,
        classes,
        loss,
        l2: params.l2,
    };
    let d = x.ncols();
    let options = LbfgsOptions {
        max_iter: params.max_iter,
        grad_tol: params.grad_tol,
        rel_decrease_tol: params.min_rel_decrease,
        ..Default::default()
    };
    let initial = match start {
        Some(model) if model.bias.len() == classes && model.weights.ncols() == d => {
            model.parameters_for(standardizer)
        }
        _ => vec![0.0; classes * (d + 1)],
    };
    let outcome = minimize(|t, g| problem.evaluate(t, g), initial, &options, keep_going);
    if outcome.stop == Stop::Cancelled {
        return Err(Error::Cancelled);
    }
    let weights = Array2::from_shape_vec((classes, d), outcome.x[..classes * d].to_vec())
        .map_err(|e| Error::Internal(format!("weight shape: {e}")))?;
    let report = FitReport {
        objective: outcome.value,
        iterations: outcome.iterations,
        grad_norm: outcome.grad_norm,
        converged: outcome.stop == Stop::Gradient,
    };
    Ok((
        SoftmaxModel {
            standardizer: standardizer.clone(),
            weights,
            bias: outcome.x[classes * d..].to_vec(),
        },
        report,
    ))
}

impl SoftmaxModel {
    /// This model's function re-expressed for other feature statistics: with
    /// z = W(x − μ)/σ + b, the same logits under (μ′, σ′) need W′ = W·σ′/σ and
    /// b′ = b + W·(μ′ − μ)/σ. Returned flat (weights row-major, then biases).
    pub fn parameters_for(&self, other: &Standardizer) -> Vec<f64> {
        let (k, d) = self.weights.dim();
        let mut theta = vec![0.0; k * (d + 1)];
        for c in 0..k {
            let mut bias = self.bias[c];
            for j in 0..d {
                let w = self.weights[[c, j]];
                theta[c * d + j] = w * other.std[j] / self.standardizer.std[j];
                bias += w * (other.mean[j] - self.standardizer.mean[j]) / self.standardizer.std[j];
            }
            theta[k * d + c] = bias;
        }
        theta
    }

    /// Class probabilities for the rows `rows` of `x` (all when `None`), computed in
    /// parallel over row blocks.
    pub fn predict_proba(&self, x: ArrayView2<f64>, rows: Option<&[usize]>) -> Array2<f64> {
        let xs = self.standardizer.transform(x, rows);
        let classes = self.bias.len().max(1);
        let mut out = Array2::<f64>::zeros((xs.nrows(), classes));
        if let Some(flat) = out.as_slice_mut() {
            flat.par_chunks_mut(classes * BLOCK_ROWS)
                .enumerate()
                .for_each(|(block, target)| {
                    let start = block * BLOCK_ROWS;
                    let xb =
                        xs.slice_axis(Axis(0), Slice::from(start..start + target.len() / classes));
                    let z = xb.dot(&self.weights.t());
                    for (logits, zr) in target.chunks_mut(classes).zip(z.rows()) {
                        for ((v, &zv), b) in logits.iter_mut().zip(zr.iter()).zip(&self.bias) {
                            *v = zv + b;
                        }
                        softmax(logits);
                    }
                });
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::learn::loss::CrossEntropy;
    use ndarray::array;

    #[test]
    fn gradient_matches_finite_differences() {
        let x = array![
            [0.5, -1.0],
            [1.5, 0.3],
            [-0.7, 2.0],
            [0.1, 0.1],
            [2.0, -0.5]
        ];
        let labels = [0, 1, 2, 1, 0];
        let problem = Problem {
            x: x.view(),
            labels: &labels,
            classes: 3,
            loss: &CrossEntropy,
            l2: 0.1,
        };
        let theta: Vec<f64> = (0..9).map(|i| 0.3 * (i as f64 - 4.0) / 4.0).collect();
        let mut grad = vec![0.0; 9];
        problem.evaluate(&theta, &mut grad);
        let h = 1e-6;
        for i in 0..9 {
            let (mut up, mut down) = (theta.clone(), theta.clone());
            up[i] += h;
            down[i] -= h;
            let mut scratch = vec![0.0; 9];
            let numeric = (problem.evaluate(&up, &mut scratch)
                - problem.evaluate(&down, &mut scratch))
                / (2.0 * h);
            assert!(
                (numeric - grad[i]).abs() < 1e-7,
                "entry {i}: {numeric} vs {}",
                grad[i]
            );
        }
    }

    #[test]
    fn re_expressed_parameters_give_the_same_probabilities() {
        let x = array![
            [0.5, -1.0],
            [1.5, 0.3],
            [-0.7, 2.0],
            [0.1, 0.1],
            [2.0, -0.5]
        ];
        let labels = [0, 1, 2, 1, 0];
        let (model, _) = fit(
            x.view(),
            Some(&[0, 1, 2]),
            &labels,
            3,
            &CrossEntropy,
            &SoftmaxParams::default(),
            &mut |_| true,
        )
        .unwrap();
        let other = Standardizer::fit(x.view(), None);
        let theta = model.parameters_for(&other);
        let moved = SoftmaxModel {
            weights: Array2::from_shape_vec((3, 2), theta[..6].to_vec()).unwrap(),
            bias: theta[6..].to_vec(),
            standardizer: other,
        };
        let (a, b) = (
            model.predict_proba(x.view(), None),
            moved.predict_proba(x.view(), None),
        );
        assert!(a.iter().zip(b.iter()).all(|(p, q)| (p - q).abs() < 1e-12));
    }

    #[test]
    fn bad_params_are_refused() {
        assert!(SoftmaxParams::default().l2(-1.0).check().is_err());
        assert!(SoftmaxParams::default().l2(f64::NAN).check().is_err());
        assert!(SoftmaxParams::default().max_iter(0).check().is_err());
        assert!(SoftmaxParams::default().grad_tol(0.0).check().is_err());
        assert!(SoftmaxParams::default().check().is_ok());
    }

    #[test]
    fn separable_classes_are_learned() {
        let x = array![
            [0.0, 0.0],
            [0.2, 0.1],
            [5.0, 5.0],
            [5.1, 4.8],
            [0.0, 5.0],
            [0.2, 5.2]
        ];
        let labels = [0, 0, 1, 1, 2, 2];
        let (model, report) = fit(
            x.view(),
            None,
            &labels,
            3,
            &CrossEntropy,
            &SoftmaxParams::default(),
            &mut |_| true,
        )
        .unwrap();
        assert!(report.converged, "{report:?}");
        let p = model.predict_proba(x.view(), None);
        for (row, &y) in p.axis_iter(Axis(0)).zip(&labels) {
            assert!(row[y] > 0.5, "{row}");
            assert!((row.sum() - 1.0).abs() < 1e-12);
        }
    }
}
