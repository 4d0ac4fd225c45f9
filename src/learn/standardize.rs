//! Feature standardisation with the fitting rows' statistics.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
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
    /// Statistics of the rows `rows` of `x` (all rows when `None`). Two passes (the mean,
    /// then squared deviations from it) keep the variance accurate for features with a
    /// large offset; both run in parallel over row blocks, summed in block order.
    pub fn fit(x: ArrayView2<f64>, rows: Option<&[usize]>) -> Self {
        let d = x.ncols();
        let all: Vec<usize>;
        let rows = match rows {
            Some(rows) => rows,
            None => {
                all = (0..x.nrows()).collect();
                &all
            }
        };
        let n = rows.len().max(1) as f64;
        let column_sums = |f: &(dyn Fn(usize, f64) -> f64 + Sync)| -> Vec<f64> {
            let parts: Vec<Vec<f64>> = rows
                .par_chunks(BLOCK_ROWS)
                .map(|chunk| {
                    let mut acc = vec![0.0; d];
                    for &r in chunk {
                        for (j, &v) in x.row(r).iter().enumerate() {
                            acc[j] += f(j, v);
                        }
                    }
                    acc
                })
                .collect();
            parts.iter().fold(vec![0.0; d], |mut total, part| {
                total.iter_mut().zip(part).for_each(|(t, p)| *t += p);
                total
            })
        };
        let mean: Vec<f64> = column_sums(&|_, v| v).into_iter().map(|s| s / n).collect();
        let squares = column_sums(&|j, v| (v - mean[j]) * (v - mean[j]));
        let std = squares
            .iter()
            .map(|s| (s / n).sqrt())
            .map(|s| if s > 0.0 { s } else { 1.0 })
            .collect();
        Standardizer { mean, std }
    }

    /// The standardised copy of the rows `rows` of `x` (all when `None`), filled in
    /// parallel.
    pub fn transform(&self, x: ArrayView2<f64>, rows: Option<&[usize]>) -> Array2<f64> {
        let n = rows.map_or(x.nrows(), <[usize]>::len);
        let d = x.ncols();
        let mut out = Array2::zeros((n, d));
        if let Some(flat) = out.as_slice_mut() {
            flat.par_chunks_mut(d.max(1) * BLOCK_ROWS)
                .enumerate()
                .for_each(|(block, target)| {
                    for (i, row_out) in target.chunks_mut(d.max(1)).enumerate() {
                        let index = block * BLOCK_ROWS + i;
                        let source = x.row(rows.map_or(index, |r| r[index]));
                        for (j, t) in row_out.iter_mut().enumerate() {
                            *t = (source[j] - self.mean[j]) / self.std[j];
                        }
                    }
                });
        }
        out
    }
}

/// Rows per parallel work item.
const BLOCK_ROWS: usize = 4096;

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
