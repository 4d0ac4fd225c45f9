//! What a flip matrix says about the data, and what to be careful about.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use serde::Serialize;

use super::linalg::{condition_number, inverse, project_to_simplex};
use super::posterior::Posterior;
use crate::data::probs::argmax;

/// Equal-width confidence bins of the expected calibration error (the usual choice,
/// e.g. Guo et al., ICML 2017).
pub const CALIBRATION_BINS: usize = 15;
/// Above this 1-norm condition number backward correction is warned against.
pub const ILL_CONDITIONED: f64 = 100.0;

/// One bin of the reliability table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReliabilityBin {
    /// Lower edge of the confidence bin.
    pub lower: f64,
    /// Upper edge.
    pub upper: f64,
    /// Rows whose top probability falls in the bin.
    pub rows: usize,
    /// Mean top probability in the bin.
    pub mean_confidence: f64,
    /// Share of those rows whose top class is the observed label.
    pub accuracy: f64,
}

/// The noise summary of a flip matrix on a dataset.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Diagnostics {
    /// Share of rows observed in each class.
    pub observed_prior: Vec<f64>,
    /// π solving Tᵀπ = observed prior, projected onto the simplex.
    pub clean_prior: Vec<f64>,
    /// 1 − T[i][i] per class.
    pub noise_rate: Vec<f64>,
    /// Σ over rows of 1 − P(true = observed | x, observed).
    pub expected_mislabeled: f64,
    /// `expected_mislabeled / rows`.
    pub expected_mislabeled_share: f64,
    /// 1-norm condition number of T (infinite when singular).
    pub condition_number: f64,
    /// Expected calibration error of the probabilities against the observed labels.
    pub calibration_error: f64,
    /// The reliability table behind `calibration_error`.
    pub reliability: Vec<ReliabilityBin>,
    /// Things to be careful about.
    pub warnings: Vec<String>,
}

/// Diagnoses `t` on `probs`/`labels`. `external_probs` is true when the probabilities came
/// from the user (and so might be in-sample); flipmend's own are out-of-fold.
pub fn diagnose(
    t: &Array2<f64>,
    probs: ArrayView2<f32>,
    labels: &[usize],
    classes: &[String],
    external_probs: bool,
) -> Diagnostics {
    diagnose_with_expected(t, probs, labels, classes, external_probs, None)
}

/// [`diagnose`], given the expected number of mislabelled rows when the caller already
/// has it (the posterior scores under `t`, summed with [`expected_from_scores`]): that sum is the
/// only part of the diagnosis that needs every row's clean posterior, the bulk of the
/// work with many classes.
///
/// [`expected_from_scores`]: super::posterior::expected_from_scores
pub fn diagnose_with_expected(
    t: &Array2<f64>,
    probs: ArrayView2<f32>,
    labels: &[usize],
    classes: &[String],
    external_probs: bool,
    expected_mislabeled: Option<f64>,
) -> Diagnostics {
    let k = classes.len();
    let n = labels.len().max(1) as f64;
    let mut warnings = Vec::new();
    let mut counts = vec![0usize; k];
    labels.iter().for_each(|&y| counts[y] += 1);
    let observed_prior: Vec<f64> = counts.iter().map(|&c| c as f64 / n).collect();
    let clean_prior = clean_prior(t, &observed_prior, &mut warnings);
    let noise_rate: Vec<f64> = (0..k).map(|i| 1.0 - t[[i, i]]).collect();
    let condition_number = condition_number(t);
    if condition_number > ILL_CONDITIONED {
        warnings.push(format!(
            "the flip matrix is ill-conditioned (1-norm condition number {condition_number:.3e}): backward correction \
             would amplify noise; prefer forward correction"
        ));
    }
    warn_indistinguishable(t, classes, &mut warnings);
    let posterior = Posterior::new(t);
    if !posterior.inverts() {
        warnings.push("the flip matrix is (nearly) singular: per-row clean posteriors use the given probabilities unchanged".into());
    }
    let expected_mislabeled =
        expected_mislabeled.unwrap_or_else(|| posterior.expected_mislabeled(probs, labels));
    let (calibration_error, reliability, agreement, mean_max) = calibration(probs, labels);
    if external_probs {
        let weighted_noise: f64 = clean_prior
            .iter()
            .zip(&noise_rate)
            .map(|(p, r)| p * r)
            .sum();
        warn_in_sample(agreement, mean_max, weighted_noise, &mut warnings);
    }
    Diagnostics {
        observed_prior,
        clean_prior,
        noise_rate,
        expected_mislabeled,
        expected_mislabeled_share: expected_mislabeled / n,
        condition_number,
        calibration_error,
        reliability,
        warnings,
    }
}

/// Solves Tᵀπ = ρ and projects onto the simplex, warning when the raw solution was
/// clearly negative (the matrix and the observed shares do not fit together).
pub fn clean_prior(t: &Array2<f64>, observed: &[f64], warnings: &mut Vec<String>) -> Vec<f64> {
    let Some(inv) = inverse(&t.t().to_owned()) else {
        warnings.push(
            "the flip matrix is singular: the clean prior is shown as the observed one".into(),
        );
        return observed.to_vec();
    };
    let raw: Vec<f64> = (0..observed.len())
        .map(|i| inv.row(i).iter().zip(observed).map(|(a, b)| a * b).sum())
        .collect();
    let lowest = raw.iter().copied().fold(f64::INFINITY, f64::min);
    if lowest < -0.01 {
        warnings.push(format!(
            "solving for the clean class shares gave a negative share ({lowest:.3}): the flip matrix and the observed \
             class counts do not fit together; the shares shown are projected onto valid proportions"
        ));
    }
    project_to_simplex(&raw)
}

fn warn_indistinguishable(t: &Array2<f64>, classes: &[String], warnings: &mut Vec<String>) {
    for i in 0..classes.len() {
        let column = t.column(i);
        let (top, &value) = column
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .unwrap_or((i, &0.0));
        if top != i && value > t[[i, i]] {
            warnings.push(format!(
                "true '{}' items are labelled '{}' more often (T = {value:.3}) than true '{}' items are (T = {:.3}): \
                 the label '{}' does not single out its own class",
                classes[top], classes[i], classes[i], t[[i, i]], classes[i]
            ));
        }
    }
}

fn warn_in_sample(agreement: f64, mean_max: f64, weighted_noise: f64, warnings: &mut Vec<String>) {
    if agreement >= 0.98 && mean_max >= 0.98 && weighted_noise >= 0.05 {
        warnings.push(format!(
            "the probabilities agree with the observed labels on {:.1}% of rows (mean top probability {mean_max:.3}) \
             although about {:.1}% of labels are estimated to be flipped: were they computed on the rows the model \
             was trained on? Use out-of-sample probabilities, or omit --probs to compute them by cross-validation",
            100.0 * agreement,
            100.0 * weighted_noise
        ));
    } else if mean_max >= 0.995 {
        warnings.push(format!(
            "the mean top probability is {mean_max:.4}: nearly every row is predicted with certainty, which is typical \
             of in-sample probabilities; they make any flip matrix look like no flips"
        ));
    }
}

/// Rows per partial sum of the calibration bins: the chunks are summed in order, so the
/// figures do not depend on the number of threads.
const CALIBRATION_CHUNK_ROWS: usize = 16_384;

/// Per-bin row counts, confidence sums and hits of some rows.
#[derive(Clone, Copy, Default)]
struct Bins {
    rows: [usize; CALIBRATION_BINS],
    confidence: [f64; CALIBRATION_BINS],
    hits: [usize; CALIBRATION_BINS],
}

impl Bins {
    fn of(probs: ArrayView2<f32>, labels: &[usize], first: usize) -> Self {
        let mut bins = Bins::default();
        for (i, &y) in labels.iter().enumerate() {
            let row = probs.row(first + i);
            let top = match row.as_slice() {
                Some(slice) => argmax(slice),
                None => argmax(&row.to_vec()),
            };
            let conf = row[top] as f64;
            let bin = ((conf * CALIBRATION_BINS as f64) as usize).min(CALIBRATION_BINS - 1);
            bins.rows[bin] += 1;
            bins.confidence[bin] += conf;
            bins.hits[bin] += usize::from(top == y);
        }
        bins
    }

    fn add(mut self, other: &Bins) -> Self {
        for b in 0..CALIBRATION_BINS {
            self.rows[b] += other.rows[b];
            self.confidence[b] += other.confidence[b];
            self.hits[b] += other.hits[b];
        }
        self
    }
}

/// Expected calibration error, the reliability table, agreement and mean top probability.
fn calibration(probs: ArrayView2<f32>, labels: &[usize]) -> (f64, Vec<ReliabilityBin>, f64, f64) {
    let parts: Vec<Bins> = labels
        .par_chunks(CALIBRATION_CHUNK_ROWS)
        .enumerate()
        .map(|(chunk, labels)| Bins::of(probs, labels, chunk * CALIBRATION_CHUNK_ROWS))
        .collect();
    let Bins {
        rows,
        confidence,
        hits,
    } = parts.iter().fold(Bins::default(), Bins::add);
    let n = labels.len().max(1) as f64;
    let mut ece = 0.0;
    let mut table = Vec::with_capacity(CALIBRATION_BINS);
    for b in 0..CALIBRATION_BINS {
        let count = rows[b].max(1) as f64;
        let (mean_conf, acc) = (confidence[b] / count, hits[b] as f64 / count);
        if rows[b] > 0 {
            ece += rows[b] as f64 / n * (acc - mean_conf).abs();
        }
        table.push(ReliabilityBin {
            lower: b as f64 / CALIBRATION_BINS as f64,
            upper: (b + 1) as f64 / CALIBRATION_BINS as f64,
            rows: rows[b],
            mean_confidence: mean_conf,
            accuracy: acc,
        });
    }
    let agreement = hits.iter().sum::<usize>() as f64 / n;
    let mean_max = confidence.iter().sum::<f64>() / n;
    (ece, table, agreement, mean_max)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn priors_noise_rates_and_expected_errors_by_hand() {
        // T = [[0.9, 0.1], [0.2, 0.8]]; observed prior ρ = (0.55, 0.45).
        // Tᵀπ = ρ: 0.9π₀ + 0.2π₁ = 0.55, π₀ + π₁ = 1 → 0.7π₀ = 0.35 → π = (0.5, 0.5).
        let t = array![[0.9, 0.1], [0.2, 0.8]];
        let mut labels = vec![0usize; 55];
        labels.extend(vec![1usize; 45]);
        let probs =
            Array2::<f32>::from_shape_fn(
                (100, 2),
                |(r, c)| if (r < 55) == (c == 0) { 0.7 } else { 0.3 },
            );
        let classes = vec!["a".to_string(), "b".to_string()];
        let d = diagnose(&t, probs.view(), &labels, &classes, false);
        assert!(
            (d.clean_prior[0] - 0.5).abs() < 1e-12,
            "{:?}",
            d.clean_prior
        );
        assert!((d.noise_rate[0] - 0.1).abs() < 1e-12 && (d.noise_rate[1] - 0.2).abs() < 1e-12);
        // Rows observed a with p̃ = (0.7, 0.3): clean p = (Tᵀ)⁻¹p̃. Tᵀ = [[.9,.2],[.1,.8]],
        // det .7, inverse [[.8,−.2],[−.1,.9]]/.7 → p = (0.5, 0.2)/0.7 = (5/7, 2/7).
        // P(true = a | obs = a) ∝ (0.9·5/7, 0.2·2/7) = (4.5, 0.4)/7 → 4.5/4.9.
        // Rows observed b with p̃ = (0.3, 0.7): p = (0.1, 0.6)/0.7 = (1/7, 6/7);
        // P(true = b | obs = b) ∝ (0.1·1/7, 0.8·6/7) → 4.8/4.9.
        let expected = 55.0 * (0.4 / 4.9) + 45.0 * (0.1 / 4.9);
        assert!(
            (d.expected_mislabeled - expected).abs() < 1e-4,
            "{} vs {expected}",
            d.expected_mislabeled
        );
        // 1-norm condition: ‖T‖₁ = max column sum = 1.1; T⁻¹ = [[.8,−.1],[−.2,.9]]/.7 has
        // absolute column sums 1/.7 and 1/.7, so κ₁ = 1.1/.7.
        assert!((d.condition_number - 1.1 / 0.7).abs() < 1e-9);
        // Every row's top probability is 0.7 and is the observed label: ECE = |1 − 0.7| = 0.3.
        assert!((d.calibration_error - 0.3).abs() < 1e-6);
        assert!(d.warnings.is_empty(), "{:?}", d.warnings);
    }

    #[test]
    fn warnings_for_unidentifiable_classes_and_bad_priors() {
        let t = array![[0.4, 0.6], [0.7, 0.3]];
        let classes = vec!["a".to_string(), "b".to_string()];
        let labels = vec![0usize, 0, 0, 0, 1];
        let probs = Array2::<f32>::from_elem((5, 2), 0.5);
        let d = diagnose(&t, probs.view(), &labels, &classes, false);
        assert!(
            d.warnings
                .iter()
                .any(|w| w.contains("true 'b' items are labelled 'a' more often")),
            "{:?}",
            d.warnings
        );
        assert!(
            d.warnings.iter().any(|w| w.contains("negative share")),
            "{:?}",
            d.warnings
        );
    }

    #[test]
    fn in_sample_probabilities_are_flagged() {
        let t = array![[0.7, 0.3], [0.3, 0.7]];
        let classes = vec!["a".to_string(), "b".to_string()];
        let labels: Vec<usize> = (0..100).map(|r| r % 2).collect();
        let probs =
            Array2::<f32>::from_shape_fn((100, 2), |(r, c)| if r % 2 == c { 0.999 } else { 0.001 });
        let d = diagnose(&t, probs.view(), &labels, &classes, true);
        assert!(
            d.warnings
                .iter()
                .any(|w| w.contains("rows the model was trained on")),
            "{:?}",
            d.warnings
        );
        let own = diagnose(&t, probs.view(), &labels, &classes, false);
        assert!(!own.warnings.iter().any(|w| w.contains("trained on")));
    }
}
