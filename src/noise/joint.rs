//! Joint maximum-likelihood estimate of the flip matrix and a clean classifier.
//!
//! The observed label follows the forward model p(observed = j | x) = Σ_k T[k][j]·q_k(x)
//! with q(x) = softmax(A·z(x) + b) the clean posterior (Patrini et al. 2017, Eq. 2). The
//! likelihood alone cannot tell T from T·M with q moved by M⁻¹, so a minimum-volume
//! penalty λ·ln det T picks the smallest simplex of noisy posteriors that explains the
//! data (Li et al., ICML 2021): no anchor points are needed. Audited rows add their known
//! clean class: −ln q_{y*}(x) − ln T[y*][observed], the complete-data likelihood.
//!
//! The classifier's inputs z(x) are the logarithms of out-of-sample noisy probabilities
//! (flipmend's own or a user's model's), so whatever model produced them stays the
//! evidence and the fit has only K² + K classifier parameters: with as many rows as
//! flipmend sees, q is out-of-sample in all but a K²/N share, and the fit takes a few
//! milliseconds a thousand rows.
//!
//! Why audited rows may be any rows, even ones reviewed because they looked suspicious:
//! their term is P(y* | x, observed), and choosing rows by (x, observed) does not change
//! that conditional (the labels are missing at random given what was seen). Averaging
//! their probability vectors per class, as the trusted estimator does, would be biased.
//!
//! T is parametrised row by row as softmax(U[i]), so every iterate is row-stochastic with
//! positive entries; ln det T is guarded by refusing (infinite objective) any step whose
//! determinant falls below [`MIN_DET`].

use ndarray::{Array2, ArrayView2, Axis, Slice};
use rayon::prelude::*;

use super::estimators::Sample;
use super::linalg::inverse_and_ln_det;
use crate::error::{Error, Result};
use crate::learn::kernel::{summed_loss_and_grad, FusedLoss};
use crate::learn::lbfgs::{minimize, LbfgsOptions, Stop};
use crate::learn::loss::softmax;

/// Smallest probability whose logarithm becomes a classifier input (a user's file may
/// hold exact zeros).
const MIN_INPUT_PROB: f64 = 1e-6;
/// Smallest entry of the starting matrix (ln 0 has no softmax parameter).
const MIN_START_ENTRY: f64 = 1e-4;
/// Steps to a flip matrix with a smaller determinant are refused: the penalty's
/// logarithm is unbounded below as T becomes singular.
pub const MIN_DET: f64 = 1e-8;
/// Rows per parallel work item, summed in block order (thread-count independent).
const BLOCK_ROWS: usize = 4096;

/// Settings of the joint fit, checked by [`JointParams::check`] before use.
#[derive(Debug, Clone, PartialEq)]
pub struct JointParams {
    /// λ, the weight of ln det T against the mean negative log-likelihood.
    pub volume_weight: f64,
    /// L2 penalty on A's distance from its start (the map that gives q = p̃).
    pub l2: f64,
    /// L-BFGS iteration limit.
    pub max_iter: usize,
}

/// The default λ is this over the number of classes. Chosen by measurement on the
/// validity report's cases (`../shared/bench/validity.py`, out-of-fold probabilities of
/// flipmend's own model, with and without audited rows): c = 0, 0.01, 0.02, 0.04 gave
/// worst flip-matrix errors of 1.68, 1.80, 2.42 and 5.36 × the oracle's, c = 0.01 the
/// lowest mean apart from 0. λ = 0 is not used: with perfectly calibrated probabilities
/// (the exact noisy posterior of the generating model) the likelihood alone cannot move
/// T from the identity, and only the volume penalty does (errors 1.3–23 × the oracle's at
/// c = 0.01, 15–33 × at c = 0).
pub const DEFAULT_VOLUME_SCALE: f64 = 0.01;

impl Default for JointParams {
    fn default() -> Self {
        JointParams {
            volume_weight: DEFAULT_VOLUME_SCALE / 2.0,
            l2: 1e-4,
            max_iter: 500,
        }
    }
}

impl JointParams {
    /// Refuses settings that cannot work.
    pub fn check(&self) -> Result<()> {
        if !(self.volume_weight.is_finite() && self.volume_weight >= 0.0) {
            return Err(Error::Setting {
                setting: "volume weight",
                problem: format!(
                    "must be a finite number of at least 0, not {}",
                    self.volume_weight
                ),
            });
        }
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::Usage(format!(
                "the joint fit's L2 penalty must be at least 0, not {}",
                self.l2
            )));
        }
        if self.max_iter == 0 {
            return Err(Error::Usage(
                "the joint fit needs at least one iteration".into(),
            ));
        }
        Ok(())
    }
}

/// The joint fit's result.
#[derive(Debug, Clone, PartialEq)]
pub struct JointFit {
    /// Row-stochastic flip matrix, rows = true class.
    pub matrix: Array2<f64>,
    /// Clean posterior q(x) of every row of the probabilities (not only the fitted rows).
    pub clean: Array2<f32>,
    /// L-BFGS iterations.
    pub iterations: usize,
    /// False when the iteration limit stopped the fit.
    pub converged: bool,
    /// The fitted parameters, to start a related fit from ([`Start::Parameters`]).
    pub parameters: Vec<f64>,
    /// The clean classifier alone, for rows the fit did not see.
    pub model: CleanModel,
}

/// The fitted clean classifier q(x) = softmax(A·z(x) + b), with the standardisation of
/// its inputs z measured on the fitted rows: what it takes to give rows the fit never saw
/// their clean posteriors (a pass over a table too large to fit whole, whose sample was
/// fitted). On the fitted probabilities it gives [`JointFit::clean`] exactly.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct CleanModel {
    /// Mean of each centred log-probability column over the fitted rows.
    mean: Vec<f64>,
    /// Its standard deviation (floored).
    scale: Vec<f64>,
    /// A (K × K, row-major) then b (K).
    weights: Vec<f64>,
}

impl CleanModel {
    /// Number of classes.
    pub fn classes(&self) -> usize {
        self.mean.len()
    }

    /// q(x) of every row of `probs` (noisy probabilities, rows × K), a block at a time.
    pub fn posteriors(&self, probs: ArrayView2<f32>) -> Array2<f32> {
        let mut z = centred_logs(probs);
        standardise(&mut z, &self.mean, &self.scale);
        posteriors_in_blocks(z.view(), &self.weights, self.classes())
    }
}

/// Where a fit starts.
#[derive(Debug, Clone, Copy)]
pub enum Start<'a> {
    /// The classifier that gives q = p̃, and this flip matrix (for every group).
    Matrix(&'a Array2<f64>),
    /// The parameters of an earlier fit on the same rows and groups (a warm start: a fit
    /// with another λ, or with more audited rows, converges in fewer iterations).
    Parameters(&'a [f64]),
}

/// Fits T and the clean classifier, starting from the flip matrix `start`.
pub fn fit_joint(
    data: &Sample,
    start: &Array2<f64>,
    params: &JointParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<JointFit> {
    fit_joint_from(data, Start::Matrix(start), params, keep_going)
}

/// [`fit_joint`] from any [`Start`].
pub fn fit_joint_from(
    data: &Sample,
    start: Start,
    params: &JointParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<JointFit> {
    let groups = Groups::one();
    let fit = fit_grouped(data, &groups, start, params, keep_going)?;
    let GroupedFit {
        mut matrices,
        clean,
        iterations,
        converged,
        parameters,
        model,
    } = fit;
    Ok(JointFit {
        matrix: matrices.swap_remove(0),
        clean,
        iterations,
        converged,
        parameters,
        model,
    })
}

/// Rows in groups (label sources), each with its own flip matrix and one shared clean
/// classifier: p(observed | x, g) = T_gᵀ q(x).
#[derive(Debug, Clone, Copy)]
pub struct Groups<'a> {
    /// The group of every row of the probabilities (empty: every row in group 0).
    pub of_row: &'a [u32],
    /// Number of groups.
    pub count: usize,
    /// Shrinkage toward a common matrix: a Dirichlet prior on each row of every T_g
    /// centred on the matrix's row, worth the given number of rows per class.
    pub prior: Option<(&'a Array2<f64>, f64)>,
}

impl Groups<'_> {
    /// One group (the plain joint fit).
    fn one() -> Groups<'static> {
        Groups {
            of_row: &[],
            count: 1,
            prior: None,
        }
    }

    fn of(&self, row: usize) -> usize {
        self.of_row.get(row).map_or(0, |&g| g as usize)
    }
}

/// The grouped fit's result.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupedFit {
    /// One row-stochastic flip matrix per group.
    pub matrices: Vec<Array2<f64>>,
    /// Clean posterior q(x) of every row of the probabilities.
    pub clean: Array2<f32>,
    /// L-BFGS iterations.
    pub iterations: usize,
    /// False when the iteration limit stopped the fit.
    pub converged: bool,
    /// The fitted parameters (A, b, then each group's U).
    pub parameters: Vec<f64>,
    /// The clean classifier alone, for rows the fit did not see.
    pub model: CleanModel,
}

/// Fits one flip matrix per group and the shared clean classifier, every group started
/// from `start`. Each group's volume penalty is weighted by its share of the rows, so a
/// group is penalised as it would be alone.
pub fn fit_grouped(
    data: &Sample,
    groups: &Groups,
    start: Start,
    params: &JointParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<GroupedFit> {
    params.check()?;
    let k = data.probs.ncols();
    if data.rows.is_empty() {
        return Err(Error::Usage("no rows for the joint fit".into()));
    }
    let (inputs, mean, scale) = log_inputs(data.probs, data.rows);
    // Counted, then divided once: one group's share is exactly 1, so the plain fit is
    // the one-group fit bit for bit.
    let mut count = vec![0usize; groups.count];
    for &r in data.rows {
        count[groups.of(r)] += 1;
    }
    let share: Vec<f64> = count
        .iter()
        .map(|&c| c as f64 / data.rows.len() as f64)
        .collect();
    let problem = Problem {
        inputs: inputs.view(),
        fit: FitRows::gather(inputs.view(), data, groups),
        k,
        params,
        scale: &scale,
        groups,
        share: &share,
    };
    let theta0 = match start {
        Start::Matrix(matrix) => {
            let mut theta = initial_parameters(matrix, &mean, &scale);
            let first_u = theta[k * k + k..].to_vec();
            for _ in 1..groups.count {
                theta.extend_from_slice(&first_u);
            }
            theta
        }
        Start::Parameters(theta) if theta.len() == problem.theta_len() => theta.to_vec(),
        Start::Parameters(theta) => {
            return Err(Error::Internal(format!(
                "a joint fit of {} parameters cannot start from {}",
                problem.theta_len(),
                theta.len()
            )))
        }
    };
    let options = LbfgsOptions {
        max_iter: params.max_iter,
        grad_tol: 1e-5,
        rel_decrease_tol: 2.2e-9,
        ..Default::default()
    };
    let outcome = minimize(
        |t, g| problem.evaluate(t, g),
        theta0,
        &options,
        &mut *keep_going,
    );
    if outcome.stop == Stop::Cancelled {
        return Err(Error::Cancelled);
    }
    let matrices = (0..groups.count)
        .map(|g| flip_of(&outcome.x, k, g))
        .collect();
    let clean = problem.clean_posteriors(&outcome.x);
    let model = CleanModel {
        mean,
        scale,
        weights: outcome.x[..k * k + k].to_vec(),
    };
    Ok(GroupedFit {
        matrices,
        clean,
        iterations: outcome.iterations,
        converged: outcome.stop != Stop::MaxIter,
        parameters: outcome.x,
        model,
    })
}

/// The classifier's inputs: ln p̃ floored at [`MIN_INPUT_PROB`], centred within each row
/// (softmax ignores a shift, and the centred log-ratios drop the direction all classes
/// share), then each column standardised over `rows`. The standardisation is returned:
/// logits = mean + scale·z reproduce p̃ exactly, the fit's starting point. Without it the
/// columns' strong correlation slowed L-BFGS to hundreds of iterations.
fn log_inputs(probs: ArrayView2<f32>, rows: &[usize]) -> (Array2<f64>, Vec<f64>, Vec<f64>) {
    let k = probs.ncols();
    let mut z = centred_logs(probs);
    let n = rows.len().max(1) as f64;
    let mut mean = vec![0.0; k];
    let mut square = vec![0.0; k];
    for &r in rows {
        for (c, &v) in z.row(r).iter().enumerate() {
            mean[c] += v;
            square[c] += v * v;
        }
    }
    let scale: Vec<f64> = (0..k)
        .map(|c| {
            mean[c] /= n;
            (square[c] / n - mean[c] * mean[c])
                .max(0.0)
                .sqrt()
                .max(1e-6)
        })
        .collect();
    standardise(&mut z, &mean, &scale);
    (z, mean, scale)
}

/// ln p̃ floored at [`MIN_INPUT_PROB`], centred within each row.
fn centred_logs(probs: ArrayView2<f32>) -> Array2<f64> {
    let k = probs.ncols();
    let mut z = probs.mapv(|p| (p as f64).max(MIN_INPUT_PROB).ln());
    for mut row in z.rows_mut() {
        let centre = row.sum() / k as f64;
        row.mapv_inplace(|v| v - centre);
    }
    z
}

/// Each column of `z` standardised by `mean` and `scale`.
fn standardise(z: &mut Array2<f64>, mean: &[f64], scale: &[f64]) {
    for mut row in z.rows_mut() {
        for (c, v) in row.iter_mut().enumerate() {
            *v = (*v - mean[c]) / scale[c];
        }
    }
}

/// A = diag(scale), b = mean (so q starts as p̃), U[i][j] = ln T₀[i][j] (floored).
fn initial_parameters(start: &Array2<f64>, mean: &[f64], scale: &[f64]) -> Vec<f64> {
    let k = mean.len();
    let mut theta = vec![0.0; k * k + k + k * k];
    for c in 0..k {
        theta[c * k + c] = scale[c];
        theta[k * k + c] = mean[c];
    }
    let u = &mut theta[k * k + k..];
    for i in 0..k {
        for j in 0..k {
            u[i * k + j] = start[[i, j]].max(MIN_START_ENTRY).ln();
        }
    }
    theta
}

/// Group `g`'s T from the parameter vector: each row the softmax of its row of U_g.
fn flip_of(theta: &[f64], k: usize, g: usize) -> Array2<f64> {
    let mut t = Array2::zeros((k, k));
    let u = &theta[k * k + k + g * k * k..k * k + k + (g + 1) * k * k];
    for i in 0..k {
        let mut row = u[i * k..(i + 1) * k].to_vec();
        softmax(&mut row);
        for j in 0..k {
            t[[i, j]] = row[j];
        }
    }
    t
}

struct Problem<'a> {
    /// The classifier's inputs for every row of the probabilities.
    inputs: ArrayView2<'a, f64>,
    /// The fitted rows, gathered.
    fit: FitRows,
    k: usize,
    params: &'a JointParams,
    /// The starting map's diagonal, toward which A is shrunk.
    scale: &'a [f64],
    groups: &'a Groups<'a>,
    /// Each group's share of `rows`.
    share: &'a [f64],
}

/// The fitted rows gathered once, contiguous and in the sample's order (a bootstrap's
/// repeats included), as the fused kernel reads them: inputs (`None` when the rows are
/// every row in order, the inputs themselves), observed labels, known clean classes and
/// groups.
struct FitRows {
    x: Option<Array2<f64>>,
    labels: Vec<usize>,
    clean: Option<Vec<Option<usize>>>,
    group: Option<Vec<u32>>,
}

impl FitRows {
    fn gather(inputs: ArrayView2<f64>, data: &Sample, groups: &Groups) -> FitRows {
        let rows = data.rows;
        let every_row =
            rows.len() == inputs.nrows() && rows.iter().enumerate().all(|(i, &r)| i == r);
        FitRows {
            x: (!every_row).then(|| {
                inputs
                    .select(Axis(0), rows)
                    .as_standard_layout()
                    .into_owned()
            }),
            labels: rows.iter().map(|&r| data.labels[r]).collect(),
            clean: data.trusted.map(|t| rows.iter().map(|&r| t[r]).collect()),
            group: (groups.count > 1).then(|| rows.iter().map(|&r| groups.of(r) as u32).collect()),
        }
    }
}

impl Problem<'_> {
    fn theta_len(&self) -> usize {
        (1 + self.groups.count) * self.k * self.k + self.k
    }

    /// Objective and gradient: mean negative log-likelihood + Σ_g share_g·λ ln det T_g +
    /// (l2/2)‖A − I‖² (+ the groups' shrinkage prior).
    fn evaluate(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let k = self.k;
        let flips: Vec<Array2<f64>> = (0..self.groups.count)
            .map(|g| flip_of(theta, k, g))
            .collect();
        let nll = self.nll_and_grad(theta, &flips, grad);
        // grad currently holds ∂/∂A, ∂/∂b and ∂/∂T_g (in U_g's place); add the penalties.
        let (ga, rest) = grad.split_at_mut(k * k);
        let mut ridge = 0.0;
        for i in 0..k {
            for j in 0..k {
                let a = theta[i * k + j] - if i == j { self.scale[i] } else { 0.0 };
                ridge += a * a;
                ga[i * k + j] += self.params.l2 * a;
            }
        }
        let mut penalty = 0.5 * self.params.l2 * ridge;
        for (g, t) in flips.iter().enumerate() {
            let gt = &mut rest[k + g * k * k..k + (g + 1) * k * k];
            match self.matrix_penalty(t, self.share[g], gt) {
                Some(value) => penalty += value,
                None => return f64::INFINITY,
            }
            // Through the row softmax: ∂/∂U[i][j] = T[i][j]·(g[i][j] − Σ_l T[i][l]·g[i][l]).
            for i in 0..k {
                let row = &mut gt[i * k..(i + 1) * k];
                let mean: f64 = (0..k).map(|l| t[[i, l]] * row[l]).sum();
                for (j, g) in row.iter_mut().enumerate() {
                    *g = t[[i, j]] * (*g - mean);
                }
            }
        }
        nll + penalty
    }

    /// One group's penalties on its T: share·λ·ln det T, and the shrinkage prior
    /// −(m/N)·Σ T̄[i][j]·ln T[i][j] (m rows per class, in the mean likelihood's units).
    /// Adds their gradient to `gt`; `None` when T is too close to singular.
    fn matrix_penalty(&self, t: &Array2<f64>, share: f64, gt: &mut [f64]) -> Option<f64> {
        let k = self.k;
        let (t_inv, log_det) = inverse_and_ln_det(t).filter(|(_, d)| *d >= MIN_DET.ln())?;
        let lambda = self.params.volume_weight * share;
        let mut value = lambda * log_det;
        for i in 0..k {
            for j in 0..k {
                // ∂ ln det T / ∂T[i][j] = (T⁻¹)[j][i].
                gt[i * k + j] += lambda * t_inv[[j, i]];
            }
        }
        if let Some((centre, rows_per_class)) = self.groups.prior {
            let weight = rows_per_class / self.fit.labels.len() as f64;
            for i in 0..k {
                for j in 0..k {
                    let c = centre[[i, j]];
                    if c > 0.0 {
                        value -= weight * c * t[[i, j]].ln();
                        gt[i * k + j] -= weight * c / t[[i, j]];
                    }
                }
            }
        }
        Some(value)
    }

    /// Mean negative log-likelihood; `grad` receives its gradient with respect to A, b
    /// and each T_g (in U_g's place, before the chain through the row softmax). The fused
    /// kernel computes it in one pass over the gathered rows (`learn::kernel`): on
    /// 200,000 × 10 classes it replaced row blocks copied on every evaluation, a matrix
    /// product for the logits and another for ∂/∂A, and a softmax a row at a time.
    fn nll_and_grad(&self, theta: &[f64], flips: &[Array2<f64>], grad: &mut [f64]) -> f64 {
        let k = self.k;
        // Each T's columns, one after another: the observed class's column is one slice.
        let columns: Vec<f64> = flips
            .iter()
            .flat_map(|t| t.t().iter().copied().collect::<Vec<_>>())
            .collect();
        let loss = FusedLoss::Joint {
            columns: &columns,
            group_of_row: self.fit.group.as_deref(),
            clean: self.fit.clean.as_deref(),
        };
        let (weights, rest) = theta.split_at(k * k);
        let fit = &self.fit;
        let x = match &fit.x {
            Some(x) => x.view(),
            None => self.inputs.view(),
        };
        let total = summed_loss_and_grad(x, &fit.labels, loss, weights, &rest[..k], grad)
            .expect("gathered rows are contiguous");
        let scale = 1.0 / fit.labels.len() as f64;
        grad.iter_mut().for_each(|g| *g *= scale);
        total * scale
    }

    /// q(x) of every row of the inputs.
    fn clean_posteriors(&self, theta: &[f64]) -> Array2<f32> {
        posteriors_in_blocks(self.inputs, theta, self.k)
    }
}

/// q(x) of every row of the standardised `inputs`, a block at a time on every core.
fn posteriors_in_blocks(inputs: ArrayView2<f64>, theta: &[f64], k: usize) -> Array2<f32> {
    let n = inputs.nrows();
    let blocks: Vec<Array2<f64>> = (0..n.div_ceil(BLOCK_ROWS))
        .into_par_iter()
        .map(|block| {
            let end = ((block + 1) * BLOCK_ROWS).min(n);
            let zb = inputs.slice_axis(Axis(0), Slice::from(block * BLOCK_ROWS..end));
            clean_of(zb, theta, k)
        })
        .collect();
    let mut out = Array2::<f32>::zeros((n, k));
    for (block, q) in blocks.iter().enumerate() {
        out.slice_axis_mut(
            Axis(0),
            Slice::from(block * BLOCK_ROWS..block * BLOCK_ROWS + q.nrows()),
        )
        .zip_mut_with(q, |o, &v| *o = v as f32);
    }
    out
}

/// q = softmax(A·z + b) of each row of `inputs`, the logits as one product (block × Aᵀ)
/// through matrixmultiply.
fn clean_of(inputs: ArrayView2<f64>, theta: &[f64], k: usize) -> Array2<f64> {
    let a = ArrayView2::from_shape((k, k), &theta[..k * k]).expect("k × k weights");
    let b = &theta[k * k..k * k + k];
    let mut q = inputs.dot(&a.t());
    for mut row in q.rows_mut() {
        let row = row.as_slice_mut().expect("standard layout");
        row.iter_mut().zip(b).for_each(|(v, bias)| *v += bias);
        softmax(row);
    }
    q
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn toy() -> (Array2<f32>, Vec<usize>, Vec<Option<usize>>) {
        let probs = array![
            [0.7f32, 0.2, 0.1],
            [0.1, 0.8, 0.1],
            [0.2, 0.3, 0.5],
            [0.4, 0.4, 0.2],
            [0.05, 0.15, 0.8],
        ];
        let labels = vec![0, 1, 2, 1, 2];
        let trusted = vec![None, Some(0), None, Some(1), None];
        (probs, labels, trusted)
    }

    /// Every row in order is read from the inputs in place; any other order is gathered.
    /// Both must give the same likelihood (a sum over the same rows).
    #[test]
    fn rows_read_in_place_and_gathered_give_the_same_likelihood() {
        let (probs, labels, trusted) = toy();
        let params = JointParams::default();
        let evaluate = |rows: &[usize]| {
            let (inputs, mean, scale) = log_inputs(probs.view(), &[0, 1, 2, 3, 4]);
            let sample = Sample {
                probs: probs.view(),
                labels: &labels,
                trusted: Some(&trusted),
                origins: None,
                rows,
                own_probabilities: false,
            };
            let groups = Groups::one();
            let fit = FitRows::gather(inputs.view(), &sample, &groups);
            let gathered = fit.x.is_some();
            let problem = Problem {
                inputs: inputs.view(),
                fit,
                k: 3,
                params: &params,
                scale: &scale,
                groups: &groups,
                share: &[1.0],
            };
            let theta = initial_parameters(
                &Array2::<f64>::eye(3).mapv(|v| 0.1 + 0.7 * v),
                &mean,
                &scale,
            );
            let mut grad = vec![0.0; theta.len()];
            (problem.evaluate(&theta, &mut grad), grad, gathered)
        };
        let (in_place, grad_in_place, gathered) = evaluate(&[0, 1, 2, 3, 4]);
        assert!(!gathered, "every row in order is read in place");
        let (reordered, grad_reordered, gathered) = evaluate(&[4, 2, 0, 3, 1]);
        assert!(gathered, "another order is gathered");
        assert!(
            (in_place - reordered).abs() < 1e-12,
            "{in_place} vs {reordered}"
        );
        for (a, b) in grad_in_place.iter().zip(&grad_reordered) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
    }

    #[test]
    fn gradient_matches_finite_differences() {
        // Central differences of the whole objective (likelihood, audited rows, volume
        // penalty, ridge) at an arbitrary point: one group, then two groups (label
        // sources) with the shrinkage prior.
        let centre = array![[0.7, 0.2, 0.1], [0.1, 0.8, 0.1], [0.1, 0.1, 0.8]];
        let of_row = [0u32, 1, 1, 0, 1];
        let cases = [
            Groups::one(),
            Groups {
                of_row: &of_row,
                count: 2,
                prior: Some((&centre, 3.0)),
            },
        ];
        for groups in &cases {
            check_gradient(groups);
        }
    }

    fn check_gradient(groups: &Groups) {
        let (probs, labels, trusted) = toy();
        let rows: Vec<usize> = (0..5).chain([2, 4]).collect();
        let (inputs, mean, scale) = log_inputs(probs.view(), &rows);
        let params = JointParams {
            volume_weight: 0.05,
            l2: 0.01,
            max_iter: 10,
        };
        let share = [4.0 / 7.0, 3.0 / 7.0];
        let sample = Sample {
            probs: probs.view(),
            labels: &labels,
            trusted: Some(&trusted),
            origins: None,
            rows: &rows,
            own_probabilities: false,
        };
        let problem = Problem {
            inputs: inputs.view(),
            fit: FitRows::gather(inputs.view(), &sample, groups),
            k: 3,
            params: &params,
            scale: &scale,
            groups,
            share: &share[..groups.count],
        };
        let mut theta = initial_parameters(
            &array![[0.8, 0.1, 0.1], [0.2, 0.7, 0.1], [0.05, 0.15, 0.8]],
            &mean,
            &scale,
        );
        let first_u = theta[12..].to_vec();
        for _ in 1..groups.count {
            theta.extend_from_slice(&first_u);
        }
        for (i, v) in theta.iter_mut().enumerate() {
            *v += 0.03 * ((i * 7 % 5) as f64 - 2.0);
        }
        let mut grad = vec![0.0; theta.len()];
        let f0 = problem.evaluate(&theta, &mut grad);
        assert!(f0.is_finite());
        let h = 1e-6;
        let mut scratch = vec![0.0; theta.len()];
        for i in 0..theta.len() {
            let mut up = theta.clone();
            up[i] += h;
            let mut down = theta.clone();
            down[i] -= h;
            let numeric = (problem.evaluate(&up, &mut scratch)
                - problem.evaluate(&down, &mut scratch))
                / (2.0 * h);
            assert!(
                (numeric - grad[i]).abs() < 1e-6 * (1.0 + numeric.abs()),
                "{} groups, parameter {i}: analytic {} vs numeric {numeric}",
                groups.count,
                grad[i]
            );
        }
    }

    #[test]
    fn the_clean_model_gives_unseen_rows_the_posteriors_of_the_fit() {
        // Fitted on rows 0–2 only; the fit's own clean posteriors cover all five rows, so
        // the portable model must reproduce rows 3 and 4 (never fitted) bit for bit.
        let (probs, labels, trusted) = toy();
        let rows = [0, 1, 2];
        let sample = Sample {
            probs: probs.view(),
            labels: &labels,
            trusted: Some(&trusted),
            origins: None,
            rows: &rows,
            own_probabilities: false,
        };
        let start = Array2::from_shape_fn((3, 3), |(i, j)| if i == j { 0.8 } else { 0.1 });
        let fit = fit_joint(&sample, &start, &JointParams::default(), &mut |_| true).unwrap();
        assert_eq!(fit.model.classes(), 3);
        assert_eq!(fit.model.posteriors(probs.view()), fit.clean);
        let unseen = probs.slice_axis(Axis(0), Slice::from(3..));
        let alone = fit.model.posteriors(unseen);
        assert_eq!(alone, fit.clean.slice_axis(Axis(0), Slice::from(3..)));
        assert!(alone
            .rows()
            .into_iter()
            .all(|q| (q.sum() - 1.0).abs() < 1e-5));

        // Beyond one block of rows, cut where the fit's blocks are not.
        let n = 10_000;
        let big = Array2::from_shape_fn((n, 3), |(r, c)| {
            let raw = [1.0 + (r % 7) as f32, 1.0 + (r % 5) as f32, 0.5 + c as f32];
            raw[c] / raw.iter().sum::<f32>()
        });
        let labels: Vec<usize> = (0..n).map(|r| (r * 7 + r / 3) % 3).collect();
        let rows: Vec<usize> = (0..n / 2).collect();
        let sample = Sample {
            probs: big.view(),
            labels: &labels,
            trusted: None,
            origins: None,
            rows: &rows,
            own_probabilities: false,
        };
        let fit = fit_joint(&sample, &start, &JointParams::default(), &mut |_| true).unwrap();
        let tail = fit
            .model
            .posteriors(big.slice_axis(Axis(0), Slice::from(4_999..)));
        assert_eq!(tail, fit.clean.slice_axis(Axis(0), Slice::from(4_999..)));
    }

    #[test]
    fn bad_settings_are_refused() {
        let base = JointParams::default();
        assert!(JointParams {
            volume_weight: -1.0,
            ..base.clone()
        }
        .check()
        .is_err());
        assert!(JointParams {
            l2: f64::NAN,
            ..base.clone()
        }
        .check()
        .is_err());
        assert!(JointParams {
            max_iter: 0,
            ..base
        }
        .check()
        .is_err());
    }
}
