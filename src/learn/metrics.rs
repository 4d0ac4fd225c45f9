//! Evaluation of predictions: accuracy, confusion, recall, and the clean accuracy implied
//! by noisy labels and a flip matrix.

use ndarray::Array2;

use crate::noise::linalg::inverse;

/// Share of positions where `predicted` equals `reference`.
pub fn accuracy(predicted: &[usize], reference: &[usize]) -> Option<f64> {
    (!reference.is_empty()).then(|| {
        predicted
            .iter()
            .zip(reference)
            .filter(|(p, r)| p == r)
            .count() as f64
            / reference.len() as f64
    })
}

/// The normal quantile of a two-sided 90 % interval.
pub const Z_90: f64 = 1.644_853_626_951_472_2;

/// A proportion with its interval.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Proportion {
    /// Successes.
    pub count: usize,
    /// Trials.
    pub of: usize,
    /// count / of.
    pub value: f64,
    /// Lower end of the 90 % Wilson score interval.
    pub low: f64,
    /// Upper end.
    pub high: f64,
}

impl Proportion {
    /// `count` of `of` with its 90 % Wilson score interval; `None` without trials.
    pub fn of(count: usize, of: usize) -> Option<Proportion> {
        let (low, high) = wilson(count, of, Z_90)?;
        Some(Proportion {
            count,
            of,
            value: count as f64 / of as f64,
            low,
            high,
        })
    }
}

/// The Wilson score interval of `successes` in `trials` at normal quantile `z` (Wilson
/// 1927; Newcombe 1998, method 3). Unlike p̂ ± z·se it stays inside [0, 1] and does not
/// collapse to a point at 0 or n successes, which matters for small review samples.
pub fn wilson(successes: usize, trials: usize, z: f64) -> Option<(f64, f64)> {
    if trials == 0 {
        return None;
    }
    let n = trials as f64;
    let p = successes as f64 / n;
    let z2 = z * z;
    let denominator = 1.0 + z2 / n;
    let centre = (p + z2 / (2.0 * n)) / denominator;
    let half = z * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt() / denominator;
    Some(((centre - half).max(0.0), (centre + half).min(1.0)))
}

/// The 90 % Wilson interval of an accuracy.
pub fn accuracy_interval(predicted: &[usize], reference: &[usize]) -> Option<[f64; 2]> {
    let right = predicted
        .iter()
        .zip(reference)
        .filter(|(p, r)| p == r)
        .count();
    let p = Proportion::of(right, reference.len())?;
    Some([p.low, p.high])
}

/// Accuracy of `a` minus that of `b` on the same `labels`, with a 90 % interval from the
/// paired per-row differences (a normal interval on their mean; the rows where both are
/// right or both wrong add nothing, as in McNemar's test): [low, estimate, high].
pub fn paired_gain(a: &[usize], b: &[usize], labels: &[usize]) -> Option<[f64; 3]> {
    let n = labels.len();
    if n < 2 || a.len() != n || b.len() != n {
        return None;
    }
    let d: Vec<f64> = (0..n)
        .map(|i| f64::from(u8::from(a[i] == labels[i])) - f64::from(u8::from(b[i] == labels[i])))
        .collect();
    let mean = d.iter().sum::<f64>() / n as f64;
    let variance = d.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
    let half = Z_90 * (variance / n as f64).sqrt();
    Some([mean - half, mean, mean + half])
}

/// Counts with rows = reference class, columns = predicted class.
pub fn confusion(predicted: &[usize], reference: &[usize], classes: usize) -> Array2<usize> {
    let mut c = Array2::zeros((classes, classes));
    for (&p, &r) in predicted.iter().zip(reference) {
        c[[r, p]] += 1;
    }
    c
}

/// Recall of each reference class (`None` for a class with no reference rows).
pub fn recall(confusion: &Array2<usize>) -> Vec<Option<f64>> {
    confusion
        .rows()
        .into_iter()
        .enumerate()
        .map(|(i, row)| {
            let total: usize = row.sum();
            (total > 0).then(|| row[i] as f64 / total as f64)
        })
        .collect()
}

/// The accuracy against the (unseen) true labels implied by the accuracy against noisy
/// ones. With N[i][j] the share of rows predicted i and observed j, and flips that depend
/// only on the true class (so not on the prediction, which holds for rows the model never
/// saw), N = M·T where M[i][k] is the share predicted i and truly k; hence M = N·T⁻¹ and
/// the clean accuracy is trace(M). `None` when T is singular or when trace(M) falls
/// clearly outside [0, 1] (beyond 0.02): the matrix then does not fit these labels (the
/// inverse amplifies any error in T), and no number is better than a wrong one. Values
/// just outside are clipped.
pub const CLEAN_ACCURACY_SLACK: f64 = 0.02;
/// See [`CLEAN_ACCURACY_SLACK`].
pub fn estimated_clean_accuracy(
    predicted: &[usize],
    observed: &[usize],
    t: &Array2<f64>,
) -> Option<f64> {
    let k = t.nrows();
    let n = observed.len() as f64;
    if n == 0.0 {
        return None;
    }
    let counts = confusion(observed, predicted, k); // rows = predicted, columns = observed
    let noisy = counts.mapv(|c| c as f64 / n);
    let clean = noisy.dot(&inverse(t)?);
    let trace: f64 = (0..k).map(|i| clean[[i, i]]).sum();
    (-CLEAN_ACCURACY_SLACK..=1.0 + CLEAN_ACCURACY_SLACK)
        .contains(&trace)
        .then(|| trace.clamp(0.0, 1.0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn paired_gain_by_hand() {
        // a right on rows 0, 1, 3; b right on row 0 only: differences 0, 1, 0, 1, mean
        // 0.5, sample variance (4 × 0.25) / 3 = 1/3, standard error √(1/12), half-width
        // 1.645 × 0.2887 = 0.4748.
        let labels = [0, 1, 2, 0];
        let g = paired_gain(&[0, 1, 0, 0], &[0, 0, 0, 1], &labels).unwrap();
        let half = Z_90 * (1.0f64 / 12.0).sqrt();
        assert!((g[1] - 0.5).abs() < 1e-12);
        assert!((g[0] - (0.5 - half)).abs() < 1e-12 && (g[2] - (0.5 + half)).abs() < 1e-12);
        assert_eq!(paired_gain(&[0], &[0], &[0]), None, "one row has no spread");
        let [low, high] = accuracy_interval(&[0, 1, 0, 0], &labels).unwrap();
        assert!(low < 0.75 && 0.75 < high);
    }

    #[test]
    fn wilson_intervals_match_newcombes_worked_examples() {
        // Newcombe (Statistics in Medicine 1998, Table I, method 3, 95 %), values from
        // memory of the paper: 81/263 → 0.2553–0.3662, 15/148 → 0.0624–0.1605,
        // 0/20 → 0–0.1611, 1/29 → 0.0061–0.1718.
        let z95 = 1.959_963_984_540_054;
        let cases = [
            (81, 263, 0.2553, 0.3662),
            (15, 148, 0.0624, 0.1605),
            (0, 20, 0.0, 0.1611),
            (1, 29, 0.0061, 0.1718),
        ];
        for (x, n, low, high) in cases {
            let (l, h) = wilson(x, n, z95).unwrap();
            assert!(
                (l - low).abs() < 6e-5 && (h - high).abs() < 6e-5,
                "{x}/{n}: {l} {h}"
            );
        }
        assert_eq!(wilson(0, 0, z95), None);
        let p = Proportion::of(3, 25).unwrap();
        assert!(p.low < 0.12 && 0.12 < p.high && p.value == 0.12);
    }

    #[test]
    fn confusion_and_recall() {
        let c = confusion(&[0, 1, 1, 0], &[0, 1, 0, 0], 2);
        assert_eq!(c, array![[2, 1], [0, 1]]);
        assert_eq!(recall(&c), vec![Some(2.0 / 3.0), Some(1.0)]);
        assert_eq!(accuracy(&[0, 1, 1, 0], &[0, 1, 0, 0]), Some(0.75));
    }

    #[test]
    fn clean_accuracy_from_noisy_agreement_by_hand() {
        // A perfect predictor (ŷ = y) on balanced classes under T = [[0.8, 0.2], [0.1, 0.9]]:
        // N = M·T with M = diag(0.5, 0.5) → N = [[0.4, 0.1], [0.05, 0.45]]; the observed
        // agreement is 0.85, and N·T⁻¹ must give back accuracy 1.
        let t = array![[0.8, 0.2], [0.1, 0.9]];
        let mut predicted = Vec::new();
        let mut observed = Vec::new();
        for (p, o, count) in [(0, 0, 40), (0, 1, 10), (1, 0, 5), (1, 1, 45)] {
            predicted.extend(std::iter::repeat_n(p, count));
            observed.extend(std::iter::repeat_n(o, count));
        }
        assert_eq!(accuracy(&predicted, &observed), Some(0.85));
        let clean = estimated_clean_accuracy(&predicted, &observed, &t).unwrap();
        assert!((clean - 1.0).abs() < 1e-12, "{clean}");
        // A matrix claiming far more noise than the labels show implies an accuracy above 1:
        // no estimate.
        let noisier = array![[0.55, 0.45], [0.45, 0.55]];
        assert_eq!(
            estimated_clean_accuracy(&predicted, &observed, &noisier),
            None
        );
    }
}
