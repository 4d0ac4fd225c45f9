//! Dawid & Skene's EM: the start, the M-step, the E-step and the loop.

use super::*;

/// DS's start: each item's label proportions; unlabelled items get the
/// classifier prior, or a uniform row (replaced by ρ after the first step).
pub(super) fn start_posterior(p: &Problem) -> Array2<f64> {
    let mut posterior = Array2::zeros((p.items(), p.classes));
    for (r, mut row) in posterior.outer_iter_mut().enumerate() {
        for &(_, class) in p.item(r) {
            row[class] += 1.0;
        }
        if let (true, Some(log_prior)) = (p.item(r).is_empty(), &p.log_prior) {
            row.assign(&log_prior.row(r).mapv(f64::exp));
        }
    }
    normalise_rows(&mut posterior);
    posterior
}

/// Divides each row by its sum; an all-zero row becomes uniform.
pub(super) fn normalise_rows(matrix: &mut Array2<f64>) {
    let columns = matrix.ncols() as f64;
    for mut row in matrix.outer_iter_mut() {
        let total: f64 = row.sum();
        if total > 0.0 {
            row /= total;
        } else {
            row.fill(1.0 / columns);
        }
    }
}

/// M-step (DS eqs. 2.3–2.4 with pseudo-count s). Unlabelled items are left
/// out of ρ: they carry no information about it. Item r counts `weights[r]`
/// times (bootstrap multiplicity). A class with no mass and s = 0 gets a
/// uniform row.
pub(super) fn m_step(p: &Problem, posterior: &Array2<f64>, weights: &[f64], smoothing: f64) -> Fit {
    let k = p.classes;
    let mut rho = vec![smoothing; k];
    let mut pi = vec![Array2::from_elem((k, k), smoothing); p.annotators];
    for (r, &weight) in weights.iter().enumerate() {
        if p.item(r).is_empty() || weight == 0.0 {
            continue;
        }
        for (class, &t) in posterior.row(r).iter().enumerate() {
            rho[class] += weight * t;
            for &(a, label) in p.item(r) {
                pi[a][[class, label]] += weight * t;
            }
        }
    }
    let total: f64 = rho.iter().sum();
    rho.iter_mut().for_each(|x| *x /= total);
    pi.iter_mut().for_each(normalise_rows);
    Fit { rho, pi }
}

/// Log of a probability, floored so a zero cell (s = 0) is very unlikely
/// rather than impossible.
pub(super) fn safe_ln(x: f64) -> f64 {
    x.max(f64::MIN_POSITIVE).ln()
}

/// E-step (DS eq. 2.5) in log space; returns the weighted log-likelihood of
/// the labels, `Σ_r w_r·ln Σ_k ρ_k·Π_a π_a[k][label]`.
pub(super) fn e_step(p: &Problem, fit: &Fit, weights: &[f64], posterior: &mut Array2<f64>) -> f64 {
    let by_label = |m: &Array2<f64>| Array2::from_shape_fn(m.dim(), |(l, k)| safe_ln(m[[k, l]]));
    let log_pi: Vec<Array2<f64>> = fit.pi.iter().map(by_label).collect();
    let log_rho = Array1::from_iter(fit.rho.iter().map(|&x| safe_ln(x)));
    let mut log_likelihood = 0.0;
    for (r, mut row) in posterior.outer_iter_mut().enumerate() {
        row.assign(&p.log_prior.as_ref().map_or(log_rho.view(), |lp| lp.row(r)));
        for &(a, label) in p.item(r) {
            row += &log_pi[a].row(label);
        }
        let top = row.fold(f64::NEG_INFINITY, |m, &x| m.max(x));
        row.mapv_inplace(|x| (x - top).exp());
        let total = row.sum();
        row /= total;
        log_likelihood += weights[r] * (top + total.ln());
    }
    log_likelihood
}

/// The Dirichlet log-prior of the parameters, so convergence is judged on
/// the objective EM actually increases.
pub(super) fn log_penalty(fit: &Fit, smoothing: f64, rho_estimated: bool) -> f64 {
    let cells: f64 = fit.pi.iter().map(|m| m.mapv(safe_ln).sum()).sum();
    let rho: f64 = fit.rho.iter().map(|&x| safe_ln(x)).sum();
    smoothing * (cells + if rho_estimated { rho } else { 0.0 })
}

/// One EM iteration: M-step from `posterior`, then E-step into it.
pub(super) fn em_step(
    p: &Problem,
    posterior: &mut Array2<f64>,
    weights: &[f64],
    s: f64,
) -> (Fit, f64) {
    let fit = m_step(p, posterior, weights, s);
    let log_likelihood = e_step(p, &fit, weights, posterior);
    (fit, log_likelihood)
}

/// Iterates EM from `posterior` until the penalised log-likelihood changes
/// by less than `tolerance` of its size; `keep_going` gets the iteration.
pub(super) fn run_em(
    p: &Problem,
    posterior: &mut Array2<f64>,
    weights: &[f64],
    params: &ConsensusParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
) -> Result<EmRun> {
    let mut previous = f64::NEG_INFINITY;
    for iterations in 1..=params.max_iter {
        let (fit, log_likelihood) = em_step(p, posterior, weights, params.smoothing);
        if !keep_going(iterations) {
            return Err(Error::Cancelled);
        }
        let penalty = log_penalty(&fit, params.smoothing, p.log_prior.is_none());
        let objective = log_likelihood + penalty;
        let converged = (objective - previous).abs() <= params.tolerance * objective.abs();
        if converged || iterations == params.max_iter {
            return Ok(EmRun {
                fit,
                log_likelihood,
                iterations,
                converged,
            });
        }
        previous = objective;
    }
    Err(Error::Internal("EM ran no iteration".into()))
}

/// `Σ_k ρ̂_k,a·π_a[k][k]` per annotator, ρ̂_·,a = weighted mean posterior
/// over the items a labelled (uniform if a has no weight in a resample).
pub(super) fn accuracies(
    p: &Problem,
    posterior: &Array2<f64>,
    weights: &[f64],
    fit: &Fit,
) -> Array1<f64> {
    let mut mass = Array2::<f64>::zeros((p.annotators, p.classes));
    for (r, &weight) in weights.iter().enumerate() {
        for &(a, _) in p.item(r) {
            mass.row_mut(a).scaled_add(weight, &posterior.row(r));
        }
    }
    normalise_rows(&mut mass);
    Array1::from_shape_fn(p.annotators, |a| mass.row(a).dot(&fit.pi[a].diag()))
}

/// Index of the largest value, ties to the lowest index.
pub(super) fn argmax(row: ArrayView1<f64>) -> usize {
    (0..row.len()).fold(0, |best, k| if row[k] > row[best] { k } else { best })
}
