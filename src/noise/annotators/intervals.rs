//! Bootstrap and Wilson intervals of each annotator's accuracy, the reports and the
//! warnings.

use super::em::{accuracies, run_em};
use super::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Resample `index`: items drawn with replacement (ChaCha8 stream `index`,
/// so the draw does not depend on thread count), EM warm-started at the
/// point estimate.
pub(super) fn resample(
    p: &Problem,
    warm: &Array2<f64>,
    params: &ConsensusParams,
    i: usize,
) -> Result<Draw> {
    let mut rng = ChaCha8Rng::seed_from_u64(params.seed);
    rng.set_stream(i as u64);
    let mut weights = vec![0.0; p.items()];
    for _ in 0..p.items() {
        weights[rng.random_range(0..p.items())] += 1.0;
    }
    let mut posterior = warm.clone();
    let run = run_em(p, &mut posterior, &weights, params, &mut |_| true)?;
    Ok((accuracies(p, &posterior, &weights, &run.fit), run.fit.pi))
}

/// All resamples, in parallel batches collected in index order;
/// `keep_going` gets `steps_before` + resamples done after each batch.
pub(super) fn bootstrap(
    p: &Problem,
    start: &Array2<f64>,
    params: &ConsensusParams,
    keep_going: &mut dyn FnMut(usize) -> bool,
    steps_before: usize,
) -> Result<Vec<Draw>> {
    let mut draws = Vec::with_capacity(params.resamples);
    for batch_start in (0..params.resamples).step_by(RESAMPLE_BATCH) {
        let batch_end = (batch_start + RESAMPLE_BATCH).min(params.resamples);
        let batch: Result<Vec<Draw>> = (batch_start..batch_end)
            .into_par_iter()
            .map(|index| resample(p, start, params, index))
            .collect();
        draws.extend(batch?);
        if !keep_going(steps_before + batch_end) {
            return Err(Error::Cancelled);
        }
    }
    Ok(draws)
}

/// Half-width `Z_90·BOOTSTRAP_WIDENING·sd` of each cell across the draws
/// (summed in draw order, so the result does not depend on threads).
pub(super) fn half_width<D: Dimension>(
    point: &Array<f64, D>,
    draws: &[&Array<f64, D>],
) -> Array<f64, D> {
    let n = draws.len() as f64;
    let mut mean = Array::zeros(point.raw_dim());
    draws.iter().for_each(|d| mean += *d);
    mean /= n;
    let mut squares = Array::zeros(point.raw_dim());
    for d in draws {
        squares += &(*d - &mean).mapv(|x| x * x);
    }
    squares.mapv(|x| Z_90 * BOOTSTRAP_WIDENING * (x / (n - 1.0)).sqrt())
}

/// Wilson score interval for a share `p` of `n` trials.
pub(super) fn wilson_interval(p: f64, n: f64) -> (f64, f64) {
    let z2 = Z_90 * Z_90;
    let centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
    let half = Z_90 / (1.0 + z2 / n) * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    ((centre - half).max(0.0), (centre + half).min(1.0))
}

pub(super) fn reports(
    p: &Problem,
    fit: &Fit,
    accuracy: &Array1<f64>,
    draws: &[Draw],
) -> Vec<AnnotatorReport> {
    let items = p.labelled();
    let accuracies: Vec<&Array1<f64>> = draws.iter().map(|d| &d.0).collect();
    let spread = (!draws.is_empty()).then(|| half_width(accuracy, &accuracies));
    let mut out = Vec::with_capacity(p.annotators);
    for (a, matrix) in fit.pi.iter().enumerate() {
        let (centre, mut bounds) = (accuracy[a], (None, None));
        let (low, high) = match &spread {
            Some(spread) => {
                let cells: Vec<&Array2<f64>> = draws.iter().map(|d| &d.1[a]).collect();
                let h = half_width(matrix, &cells);
                let low = (matrix - &h).mapv(|x| x.max(0.0));
                bounds = (Some(low), Some((matrix + &h).mapv(|x| x.min(1.0))));
                ((centre - spread[a]).max(0.0), (centre + spread[a]).min(1.0))
            }
            None => wilson_interval(centre, items[a] as f64 / WILSON_DESIGN_EFFECT),
        };
        out.push(AnnotatorReport {
            items: items[a],
            accuracy: centre,
            accuracy_low: low,
            accuracy_high: high,
            matrix: matrix.clone(),
            matrix_low: bounds.0,
            matrix_high: bounds.1,
        });
    }
    out
}

pub(super) fn warnings(p: &Problem, run: &EmRun, reports: &[AnnotatorReport]) -> Vec<String> {
    let unlabelled = (0..p.items()).filter(|&r| p.item(r).is_empty()).count();
    let mut out = Vec::new();
    if unlabelled > 0 {
        out.push(format!(
            "{unlabelled} items have no label; their class is the prior"
        ));
    }
    if !run.converged {
        out.push(format!(
            "EM stopped unconverged after {} iterations",
            run.iterations
        ));
    }
    for (a, report) in reports.iter().enumerate() {
        if report.accuracy < 1.0 / p.classes as f64 {
            let why = "classes may be permuted, or it mislabels systematically";
            let accuracy = format!("accuracy {:.3}", report.accuracy);
            out.push(format!("annotator {a} is below chance ({accuracy}); {why}"));
        }
    }
    out
}
