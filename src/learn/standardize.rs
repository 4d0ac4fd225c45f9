//! Feature standardisation with the fitting rows' statistics.

use ndarray::{Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

/// Per-feature mean and standard deviation (population, ddof = 0, as scikit-learn's
/// `StandardScaler`); a constant feature gets std 1 so it maps to 0 instead of NaN.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Standardizer {
    /// Mean of each feature over the fitting rows.
    pub mean: Vec<f64>,
    /// Standard deviation of each feature (1 where it was 0).
    pub std: Vec<f64>,
}

impl Standardizer {
    /// Statistics of the rows `rows` of `x` (all rows when `None`).
    pub fn fit(x: ArrayView2<f64>, rows: Option<&[usize]>) -> Self {
        let d = x.ncols();
        let mut mean = vec![0.0; d];
        let mut sq = vec![0.0; d];
        let mut n = 0usize;
        let mut add = |row: ndarray::ArrayView1<f64>| {
            n += 1;
            // Welford's update: stable for features with a large offset.
            for (j, &v) in row.iter().enumerate() {
                let delta = v - mean[j];
                mean[j] += delta / n as f64;
                sq[j] += delta * (v - mean[j]);
            }
        };
        match rows {
            Some(rows) => rows.iter().for_each(|&r| add(x.row(r))),
            None => x.axis_iter(Axis(0)).for_each(&mut add),
        }
        let std = sq
            .iter()
            .map(|s| (s / n.max(1) as f64).sqrt())
            .map(|s| if s > 0.0 { s } else { 1.0 })
            .collect();
        Standardizer { mean, std }
    }

    /// The standardised copy of the rows `rows` of `x` (all when `None`).
    pub fn transform(&self, x: ArrayView2<f64>, rows: Option<&[usize]>) -> Array2<f64> {
        let n = rows.map_or(x.nrows(), <[usize]>::len);
        let mut out = Array2::zeros((n, x.ncols()));
        for (i, mut target) in out.axis_iter_mut(Axis(0)).enumerate() {
            let source = x.row(rows.map_or(i, |r| r[i]));
            for (j, t) in target.iter_mut().enumerate() {
                *t = (source[j] - self.mean[j]) / self.std[j];
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn zero_mean_unit_variance_and_constant_columns() {
        let x = array![[1.0, 5.0], [3.0, 5.0], [5.0, 5.0]];
        let s = Standardizer::fit(x.view(), None);
        assert_eq!(s.mean, vec![3.0, 5.0]);
        assert!((s.std[0] - (8.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert_eq!(s.std[1], 1.0);
        let z = s.transform(x.view(), Some(&[2, 0]));
        assert!((z[[0, 0]] - 2.0 / (8.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert_eq!(z[[1, 1]], 0.0);
    }
}
