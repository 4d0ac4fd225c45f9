//! The flip matrix T (T[i][j] = P(observed j | true i), rows = true class): its checks
//! and row normalisation. Its CSV file is [`crate::io::matrix_csv`].

use ndarray::Array2;

/// Row sums of a matrix file may differ from 1 by at most this.
pub const MATRIX_ROW_TOLERANCE: f64 = 1e-6;

/// Checks that `t` is square, finite, non-negative and row-stochastic (within
/// [`MATRIX_ROW_TOLERANCE`]); every estimator's output passes through here.
pub fn validate(t: &Array2<f64>) -> std::result::Result<(), String> {
    if t.nrows() != t.ncols() {
        return Err(format!(
            "the matrix is {}×{}, not square",
            t.nrows(),
            t.ncols()
        ));
    }
    for (i, row) in t.rows().into_iter().enumerate() {
        if let Some(v) = row.iter().find(|v| !v.is_finite() || **v < 0.0) {
            return Err(format!(
                "row {i} has the entry {v}; entries must be finite and non-negative"
            ));
        }
        let sum: f64 = row.sum();
        if (sum - 1.0).abs() > MATRIX_ROW_TOLERANCE {
            return Err(format!("row {i} sums to {sum}, not 1"));
        }
    }
    Ok(())
}

/// Divides each row by its sum (rows summing to 0 become the identity row).
pub fn normalize_rows(t: &mut Array2<f64>) {
    for (i, mut row) in t.rows_mut().into_iter().enumerate() {
        let sum: f64 = row.sum();
        if sum > 0.0 {
            row.mapv_inplace(|v| v / sum);
        } else {
            row.fill(0.0);
            row[i] = 1.0;
        }
    }
}
