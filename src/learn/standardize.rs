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
        let zero = vec![0.0; d];
        let mean: Vec<f64> = column_sums(x, rows, &zero, false)
            .into_iter()
            .map(|s| s / n)
            .collect();
        let squares = column_sums(x, rows, &mean, true);
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
                        match source.as_slice() {
                            Some(values) => self.standardise_row(values, row_out),
                            None => self.standardise_row(&source.to_vec(), row_out),
                        }
                    }
                });
        }
        out
    }

    /// One row: (x − mean) / std, over slices so the loop has no index checks and
    /// vectorises.
    fn standardise_row(&self, values: &[f64], out: &mut [f64]) {
        for (((t, &v), &m), &s) in out.iter_mut().zip(values).zip(&self.mean).zip(&self.std) {
            *t = (v - m) / s;
        }
    }
}

/// Rows per parallel work item.
const BLOCK_ROWS: usize = 4096;

/// Σ over `rows` of each feature's x − centre, or of its square when `square`: in
/// parallel over row blocks, summed in block order (the same result on any thread count).
fn column_sums(x: ArrayView2<f64>, rows: &[usize], centre: &[f64], square: bool) -> Vec<f64> {
    let d = centre.len();
    let parts: Vec<Vec<f64>> = rows
        .par_chunks(BLOCK_ROWS)
        .map(|chunk| {
            let mut acc = vec![0.0; d];
            for &r in chunk {
                let row = x.row(r);
                let copy;
                let values = match row.as_slice() {
                    Some(values) => values,
                    None => {
                        copy = row.to_vec();
                        &copy
                    }
                };
                // Two loops rather than a branch inside one, so each vectorises.
                let pairs = acc.iter_mut().zip(values).zip(centre);
                if square {
                    pairs.for_each(|((a, &v), &c)| *a += (v - c) * (v - c));
                } else {
                    pairs.for_each(|((a, &v), &c)| *a += v - c);
                }
            }
            acc
        })
        .collect();
    parts.iter().fold(vec![0.0; d], |mut total, part| {
        total.iter_mut().zip(part).for_each(|(t, p)| *t += p);
        total
    })
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

    #[test]
    fn strided_rows_give_the_contiguous_result() {
        // A column-major array's rows are not slices: the copying path must agree with
        // the slice path on the same values.
        let x = Array2::from_shape_fn((9_000, 3), |(r, j)| ((r * 7 + j * 13) % 101) as f64 - 40.0);
        let strided = x.t().as_standard_layout().into_owned().reversed_axes();
        assert!(strided.row(0).as_slice().is_none());
        let rows: Vec<usize> = (0..9_000).filter(|r| r % 3 != 1).collect();
        let (a, b) = (
            Standardizer::fit(x.view(), Some(&rows)),
            Standardizer::fit(strided.view(), Some(&rows)),
        );
        assert_eq!(a, b);
        assert_eq!(
            a.transform(x.view(), Some(&rows)),
            a.transform(strided.view(), Some(&rows))
        );
    }
}
