//! Small dense linear algebra for K×K flip matrices (K is at most a few hundred).

use ndarray::Array2;

/// The inverse of a square matrix by Gauss–Jordan elimination with partial pivoting, or
/// `None` when a pivot falls below `1e-12` times the largest entry (numerically singular).
pub fn inverse(a: &Array2<f64>) -> Option<Array2<f64>> {
    eliminate(a).map(|e| e.inverse)
}

/// The inverse and ln det A from the same elimination, when A is invertible (as
/// [`inverse`] judges it) and its determinant is positive; `None` otherwise.
pub fn inverse_and_ln_det(a: &Array2<f64>) -> Option<(Array2<f64>, f64)> {
    eliminate(a)
        .filter(|e| !e.negative)
        .map(|e| (e.inverse, e.ln_abs_det))
}

/// What one Gauss–Jordan elimination yields.
struct Elimination {
    inverse: Array2<f64>,
    /// ln |det A|: the sum of the pivots' logarithms.
    ln_abs_det: f64,
    /// True when det A < 0 (an odd number of row swaps and negative pivots).
    negative: bool,
}

fn eliminate(a: &Array2<f64>) -> Option<Elimination> {
    let n = a.nrows();
    if n != a.ncols() {
        return None;
    }
    let scale = a
        .iter()
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    let mut work = a.clone();
    let mut inv = Array2::<f64>::eye(n);
    let (mut ln_abs_det, mut negative) = (0.0, false);
    for col in 0..n {
        let pivot =
            (col..n).max_by(|&i, &j| work[[i, col]].abs().total_cmp(&work[[j, col]].abs()))?;
        if work[[pivot, col]].abs() <= 1e-12 * scale {
            return None;
        }
        if pivot != col {
            negative = !negative;
            for j in 0..n {
                work.swap([pivot, j], [col, j]);
                inv.swap([pivot, j], [col, j]);
            }
        }
        let p = work[[col, col]];
        ln_abs_det += p.abs().ln();
        negative ^= p < 0.0;
        for j in 0..n {
            work[[col, j]] /= p;
            inv[[col, j]] /= p;
        }
        for i in 0..n {
            if i != col {
                let factor = work[[i, col]];
                if factor != 0.0 {
                    for j in 0..n {
                        work[[i, j]] -= factor * work[[col, j]];
                        inv[[i, j]] -= factor * inv[[col, j]];
                    }
                }
            }
        }
    }
    Some(Elimination {
        inverse: inv,
        ln_abs_det,
        negative,
    })
}

/// The 1-norm condition number ‖A‖₁·‖A⁻¹‖₁ (‖·‖₁ = largest column sum of absolute
/// values); infinite when A is singular. Within a factor K of the 2-norm one.
pub fn condition_number(a: &Array2<f64>) -> f64 {
    inverse_and_condition(a).1
}

/// The inverse (if any) and the 1-norm condition number, from one elimination.
pub fn inverse_and_condition(a: &Array2<f64>) -> (Option<Array2<f64>>, f64) {
    match inverse(a) {
        Some(inv) => {
            let condition = norm1(a) * norm1(&inv);
            (Some(inv), condition)
        }
        None => (None, f64::INFINITY),
    }
}

fn norm1(a: &Array2<f64>) -> f64 {
    (0..a.ncols())
        .map(|j| a.column(j).iter().map(|v| v.abs()).sum::<f64>())
        .fold(0.0, f64::max)
}

/// Euclidean projection onto the probability simplex {x ≥ 0, Σx = 1}, by the sort-based
/// algorithm of Duchi, Shalev-Shwartz, Singer & Chandra (ICML 2008), Fig. 1.
pub fn project_to_simplex(v: &[f64]) -> Vec<f64> {
    let mut sorted = v.to_vec();
    sorted.sort_by(|a, b| b.total_cmp(a));
    let mut cumulative = 0.0;
    let mut theta = 0.0;
    for (j, &u) in sorted.iter().enumerate() {
        cumulative += u;
        let candidate = (cumulative - 1.0) / (j + 1) as f64;
        if u - candidate > 0.0 {
            theta = candidate;
        }
    }
    v.iter().map(|&x| (x - theta).max(0.0)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn log_determinant_matches_the_closed_form() {
        // det [[a, b], [c, d]] = ad − bc; a permutation flips the sign.
        let ln_det = |m: &Array2<f64>| inverse_and_ln_det(m).map(|(_, d)| d);
        let m = array![[0.9, 0.1], [0.3, 0.7]];
        assert!((ln_det(&m).unwrap() - (0.9f64 * 0.7 - 0.1 * 0.3).ln()).abs() < 1e-12);
        assert!(ln_det(&array![[0.0, 1.0], [1.0, 0.0]]).is_none());
        assert!(ln_det(&array![[0.5, 0.5], [0.5, 0.5]]).is_none());
        // Upper triangular 3×3: the product of the diagonal.
        let u = array![[2.0, 1.0, 5.0], [0.0, 3.0, 1.0], [0.0, 0.0, 0.5]];
        assert!((ln_det(&u).unwrap() - 3.0f64.ln()).abs() < 1e-12);
    }

    #[test]
    fn inverse_of_a_known_matrix() {
        // [[4, 7], [2, 6]]⁻¹ = [[0.6, −0.7], [−0.2, 0.4]] (determinant 10; textbook example).
        let inv = inverse(&array![[4.0, 7.0], [2.0, 6.0]]).unwrap();
        let expected = array![[0.6, -0.7], [-0.2, 0.4]];
        for (a, b) in inv.iter().zip(expected.iter()) {
            assert!((a - b).abs() < 1e-12);
        }
        assert!(inverse(&array![[1.0, 2.0], [2.0, 4.0]]).is_none());
    }

    #[test]
    fn condition_numbers() {
        assert!((condition_number(&Array2::eye(4)) - 1.0).abs() < 1e-12);
        // [[0.6, 0.4], [0.4, 0.6]]: ‖A‖₁ = 1, A⁻¹ = [[3, −2], [−2, 3]], ‖A⁻¹‖₁ = 5.
        assert!((condition_number(&array![[0.6, 0.4], [0.4, 0.6]]) - 5.0).abs() < 1e-9);
        assert!(condition_number(&array![[0.5, 0.5], [0.5, 0.5]]).is_infinite());
    }

    #[test]
    fn simplex_projection() {
        assert_eq!(project_to_simplex(&[0.2, 0.3, 0.5]), vec![0.2, 0.3, 0.5]);
        // (1.2, −0.2): θ = 0.2 → (1, 0).
        let p = project_to_simplex(&[1.2, -0.2]);
        assert!((p[0] - 1.0).abs() < 1e-12 && p[1] == 0.0);
        // (0.5, 0.5, 0.5): θ = 1/6 → (1/3, 1/3, 1/3).
        let p = project_to_simplex(&[0.5, 0.5, 0.5]);
        assert!(p.iter().all(|x| (x - 1.0 / 3.0).abs() < 1e-12));
    }
}
