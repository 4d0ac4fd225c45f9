//! Bootstrap intervals for the flip matrix: rows are resampled with replacement and the
//! matrix re-estimated from the same probabilities (no refitting), B times.

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::estimators::{estimate, Method, Sample};
use crate::error::Result;

/// Per-entry 5th and 95th percentiles over the resamples.
#[derive(Debug, Clone, PartialEq)]
pub struct Interval {
    /// 5th percentiles.
    pub low: Array2<f64>,
    /// 95th percentiles.
    pub high: Array2<f64>,
}

/// Resamples `base.rows` `resamples` times. Resample `b` draws from ChaCha8 seeded with
/// `seed` on stream `b`, so the result does not depend on the thread count.
pub fn bootstrap(
    method: &Method,
    base: &Sample,
    classes: &[String],
    resamples: usize,
    seed: u64,
) -> Result<Interval> {
    let n = base.rows.len();
    let matrices: Vec<Array2<f64>> = (0..resamples)
        .into_par_iter()
        .map(|b| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(b as u64);
            let rows: Vec<usize> = (0..n).map(|_| base.rows[rng.random_range(0..n)]).collect();
            let sample = Sample {
                probs: base.probs.reborrow(),
                labels: base.labels,
                trusted: base.trusted,
                rows: &rows[..],
            };
            estimate(method, &sample, classes).map(|e| e.matrix)
        })
        .collect::<Result<_>>()?;
    let k = classes.len();
    let mut low = Array2::zeros((k, k));
    let mut high = Array2::zeros((k, k));
    let mut values = vec![0.0; matrices.len()];
    for i in 0..k {
        for j in 0..k {
            values
                .iter_mut()
                .zip(&matrices)
                .for_each(|(v, m)| *v = m[[i, j]]);
            values.sort_by(f64::total_cmp);
            low[[i, j]] = percentile(&values, 0.05);
            high[[i, j]] = percentile(&values, 0.95);
        }
    }
    Ok(Interval { low, high })
}

/// Percentile of sorted values with linear interpolation between neighbours (numpy's
/// default "linear" method).
pub fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let position = p * (sorted.len() - 1) as f64;
    let lower = position.floor() as usize;
    let upper = (lower + 1).min(sorted.len() - 1);
    let fraction = position - lower as f64;
    sorted[lower] + fraction * (sorted[upper] - sorted[lower])
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn percentile_matches_numpy_linear() {
        // numpy.percentile([1, 2, 3, 4], 5) = 1.15 and 95 → 3.85 (linear method).
        assert!((percentile(&[1.0, 2.0, 3.0, 4.0], 0.05) - 1.15).abs() < 1e-12);
        assert!((percentile(&[1.0, 2.0, 3.0, 4.0], 0.95) - 3.85).abs() < 1e-12);
    }

    #[test]
    fn intervals_bracket_the_estimate_and_repeat_with_the_seed() {
        let n = 400;
        let probs = Array2::<f32>::from_shape_fn((n, 2), |(r, c)| {
            let a = 0.5 + 0.45 * ((r * 37 % 101) as f32 / 100.0 - 0.5) * 2.0;
            if c == 0 {
                a
            } else {
                1.0 - a
            }
        });
        let labels: Vec<usize> = (0..n).map(|r| usize::from(probs[[r, 1]] > 0.5)).collect();
        let rows: Vec<usize> = (0..n).collect();
        let sample = Sample {
            probs: probs.view(),
            labels: &labels,
            trusted: None,
            rows: &rows,
        };
        let classes = vec!["a".to_string(), "b".to_string()];
        let method = Method::Quantile { q: 0.9 };
        let point = estimate(&method, &sample, &classes).unwrap().matrix;
        let a = bootstrap(&method, &sample, &classes, 50, 3).unwrap();
        let b = bootstrap(&method, &sample, &classes, 50, 3).unwrap();
        assert_eq!(a, b, "same seed, same intervals");
        for i in 0..2 {
            for j in 0..2 {
                assert!(a.low[[i, j]] <= a.high[[i, j]]);
                assert!(
                    a.low[[i, j]] - 0.05 <= point[[i, j]] && point[[i, j]] <= a.high[[i, j]] + 0.05
                );
            }
        }
    }
}
