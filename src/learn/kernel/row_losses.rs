//! The kernel's row losses: each row's softmax, its loss under the fitted correction, and
//! the logits' gradient in their place (the products around them live in the parent).

use pulp::Simd;

use super::{FusedLoss, Shape};
use crate::learn::fastmath::{exp_nonpositive_fma, ln_positive};

/// Smallest noisy probability the forward loss takes the logarithm of (as `loss::Forward`).
const MIN_PROB: f64 = 1e-300;

/// A `FusedLoss` with its per-label vectors padded to `kp` lanes (zeros), so that the
/// per-row sums over classes are whole-vector multiply-adds.
pub(super) enum Padded<'a> {
    CrossEntropy,
    /// `columns[(s·K + y)·kp + c]` = T_s[c][y].
    Forward {
        columns: Vec<f64>,
        source_of_row: Option<&'a [u32]>,
    },
    /// `columns` as `Forward`'s, by group.
    Joint {
        columns: Vec<f64>,
        group_of_row: Option<&'a [u32]>,
        clean: Option<&'a [Option<usize>]>,
    },
    /// `inverse[y·kp + c]` = T⁻¹[y][c]; `totals[y]` = Σ_c T⁻¹[y][c].
    Backward {
        inverse: Vec<f64>,
        totals: Vec<f64>,
        floor: Option<f64>,
    },
}

impl<'a> Padded<'a> {
    pub(super) fn new(loss: FusedLoss<'a>, k: usize, kp: usize) -> Padded<'a> {
        let pad = |flat: &[f64]| -> Vec<f64> {
            flat.chunks_exact(k)
                .flat_map(|row| row.iter().copied().chain(std::iter::repeat_n(0.0, kp - k)))
                .collect()
        };
        match loss {
            FusedLoss::CrossEntropy => Padded::CrossEntropy,
            FusedLoss::Forward {
                columns,
                source_of_row,
            } => Padded::Forward {
                columns: pad(columns),
                source_of_row,
            },
            FusedLoss::Joint {
                columns,
                group_of_row,
                clean,
            } => Padded::Joint {
                columns: pad(columns),
                group_of_row,
                clean,
            },
            FusedLoss::Backward { inverse, floor } => Padded::Backward {
                inverse: pad(inverse),
                totals: inverse
                    .chunks_exact(k)
                    .map(|row| row.iter().sum())
                    .collect(),
                floor,
            },
        }
    }
}

/// Each row's softmax and loss; overwrites the logits with ∂loss/∂z and returns the
/// block's summed loss. Sums over a row's classes are whole-vector operations followed
/// by one horizontal reduction (a scalar sum of ten terms is a chain of dependent adds
/// that cost more than the exponentials); the exponentials are one flat loop over the
/// block, which the compiler vectorises inside `pulp`'s context.
#[inline(always)]
pub(super) fn row_losses<S: Simd>(
    simd: S,
    shape: &Shape,
    rows: Rows,
    loss: &Padded,
    z: &mut [f64],
    sums: &mut [f64],
) -> f64 {
    let (k, kp) = (shape.k, shape.kp);
    for (r, ((row, &y), kept)) in z
        .chunks_exact_mut(kp)
        .zip(rows.labels)
        .zip(rows.kept.iter_mut())
        .enumerate()
    {
        let v = S::as_mut_simd_f64s(row).0;
        let top = simd.reduce_max_f64s(v.iter().fold(v[0], |m, &u| simd.max_f64s(m, u)));
        let top = simd.splat_f64s(top);
        v.iter_mut().for_each(|u| *u = simd.sub_f64s(*u, top));
        // What the loss needs of the shifted logits: z_y, or Σ_c T⁻¹[y][c]·z_c (over the
        // real classes: a padding lane holds −∞).
        *kept = match loss {
            Padded::CrossEntropy => row[y],
            Padded::Backward {
                inverse,
                floor: None,
                ..
            } => inverse[y * kp..y * kp + k]
                .iter()
                .zip(&row[..k])
                .map(|(w, v)| w * v)
                .sum(),
            Padded::Joint {
                clean: Some(clean), ..
            } => clean[rows.first + r].map_or(0.0, |c| row[c]),
            _ => 0.0,
        };
    }
    z.iter_mut().for_each(|v| *v = exp_nonpositive_fma(*v));
    // Each row's loss is Σ (its extra terms) + ln(its entry of `logs`); the logarithms
    // are taken afterwards in one flat loop, which vectorises (a library call per row
    // cost about a tenth of the whole evaluation).
    let mut total = 0.0;
    let logs = &mut rows.logs[..rows.labels.len()];
    for (r, (row, &y)) in z.chunks_exact_mut(kp).zip(rows.labels).enumerate() {
        let sum = row_sum(simd, S::as_simd_f64s(row).0);
        let inv = simd.splat_f64s(1.0 / sum);
        let q = S::as_mut_simd_f64s(row).0;
        q.iter_mut().for_each(|u| *u = simd.mul_f64s(*u, inv));
        (logs[r], total) = match loss {
            Padded::CrossEntropy => {
                row[y] -= 1.0;
                (sum, total - rows.kept[r])
            }
            Padded::Forward {
                columns,
                source_of_row,
            } => {
                let s = source_of_row
                    .as_ref()
                    .map_or(0, |s| s[rows.first + r] as usize);
                let at = (s * k + y) * kp;
                let noisy = forward_row(simd, q, S::as_simd_f64s(&columns[at..at + kp]).0, None);
                (1.0 / noisy, total)
            }
            Padded::Joint {
                columns,
                group_of_row,
                clean,
            } => {
                let i = rows.first + r;
                let g = group_of_row.map_or(0, |g| g[i] as usize);
                let at = (g * k + y) * kp;
                let column = &columns[at..at + kp];
                match clean.and_then(|clean| clean[i]) {
                    // −log q[c] − log T[c][y]: the cross-entropy's gradient, and 1/T[c][y].
                    Some(c) => {
                        sums[at + c] += 1.0 / column[c];
                        row[c] -= 1.0;
                        (sum / column[c], total - rows.kept[r])
                    }
                    None => {
                        let acc = S::as_mut_simd_f64s(&mut sums[at..at + kp]).0;
                        let column = S::as_simd_f64s(column).0;
                        (1.0 / forward_row(simd, q, column, Some(acc)), total)
                    }
                }
            }
            Padded::Backward {
                inverse,
                totals,
                floor: None,
            } => {
                let w = S::as_simd_f64s(&inverse[y * kp..(y + 1) * kp]).0;
                let total_w = simd.splat_f64s(totals[y]);
                for (q, &w) in q.iter_mut().zip(w) {
                    *q = simd.mul_add_e_f64s(*q, total_w, simd.neg_f64s(w));
                }
                (sum, total - rows.kept[r])
            }
            // The posterior is all the guarded loss needs; it runs on the whole
            // sub-block below.
            Padded::Backward { floor: Some(_), .. } => (1.0, total),
        };
    }
    if let Padded::Backward {
        inverse,
        floor: Some(floor),
        ..
    } = loss
    {
        total += guarded_backward(simd, shape, rows.labels, inverse, *floor, z, rows.work);
    }
    logs.iter_mut().for_each(|v| *v = ln_positive(*v));
    let (head, tail) = S::as_simd_f64s(logs);
    let head_sum = if head.is_empty() {
        0.0
    } else {
        row_sum(simd, head)
    };
    total + head_sum + tail.iter().sum::<f64>()
}

/// The rows of a block as the loss sees them: labels, the fit index of the first, two
/// scratch values per row and 2·kp scratch values a row.
pub(super) struct Rows<'a> {
    pub(super) labels: &'a [usize],
    pub(super) first: usize,
    pub(super) kept: &'a mut [f64],
    pub(super) logs: &'a mut [f64],
    pub(super) work: &'a mut [f64],
}

/// Σ of a row's lanes: the vectors added, then one horizontal sum.
#[inline(always)]
fn row_sum<S: Simd>(simd: S, v: &[S::f64s]) -> f64 {
    simd.reduce_sum_f64s(v[1..].iter().fold(v[0], |acc, &u| simd.add_f64s(acc, u)))
}

/// Forward loss of one row from its clean posterior `q` and the (padded) flip-matrix
/// column of its observed label; `q` becomes ∂loss/∂z (see `loss::Forward`), and `sums`
/// (the joint fit's) gains q/s, minus the loss's gradient with respect to that column.
/// Returns the noisy probability s (the loss is minus its logarithm).
#[inline(always)]
fn forward_row<S: Simd>(
    simd: S,
    q: &mut [S::f64s],
    col: &[S::f64s],
    sums: Option<&mut [S::f64s]>,
) -> f64 {
    let zero = simd.splat_f64s(0.0);
    let dot = q
        .iter()
        .zip(col)
        .fold(zero, |acc, (&q, &t)| simd.mul_add_e_f64s(q, t, acc));
    let noisy = simd.reduce_sum_f64s(dot).max(MIN_PROB);
    let inv = simd.splat_f64s(1.0 / noisy);
    if let Some(sums) = sums {
        for (a, &q) in sums.iter_mut().zip(q.iter()) {
            *a = simd.mul_add_e_f64s(q, inv, *a);
        }
    }
    for (q, &t) in q.iter_mut().zip(col) {
        let qt = simd.mul_f64s(*q, t);
        *q = simd.negate_mul_add_e_f64s(qt, inv, *q);
    }
    noisy
}

/// Guarded backward loss (see `loss::Backward`) of a sub-block's rows from their
/// posteriors `q` (padded rows) and the (padded) rows of T⁻¹ of their labels; each row
/// of `q` becomes its ∂loss/∂z. `work` holds 2·len(q) values. The per-class logarithms
/// and ratios run as two flat loops over the sub-block, which the compiler vectorises:
/// a row at a time, the backward evaluation took 1.9 × the cross-entropy's (`cargo
/// bench --bench train -- objective`).
#[inline(always)]
fn guarded_backward<S: Simd>(
    simd: S,
    shape: &Shape,
    labels: &[usize],
    inverse: &[f64],
    floor: f64,
    q: &mut [f64],
    work: &mut [f64],
) -> f64 {
    let kp = shape.kp;
    let (logs, faithful) = work[..2 * q.len()].split_at_mut(q.len());
    logs.iter_mut()
        .zip(q.iter())
        .for_each(|(l, &p)| *l = ln_positive(p + floor));
    faithful
        .iter_mut()
        .zip(q.iter())
        .for_each(|(f, &p)| *f = p / (p + floor));
    let zero = simd.splat_f64s(0.0);
    let mut total = 0.0;
    let rows = q
        .chunks_exact_mut(kp)
        .zip(logs.chunks_exact(kp))
        .zip(faithful.chunks_exact(kp));
    for (((row, l), f), &y) in rows.zip(labels) {
        let w = S::as_simd_f64s(&inverse[y * kp..(y + 1) * kp]).0;
        let (l, f) = (S::as_simd_f64s(l).0, S::as_simd_f64s(f).0);
        let (mut loss, mut weighted) = (zero, zero);
        for ((&w, &l), &f) in w.iter().zip(l).zip(f) {
            loss = simd.mul_add_e_f64s(w, l, loss);
            weighted = simd.mul_add_e_f64s(w, f, weighted);
        }
        total -= simd.reduce_sum_f64s(loss);
        let weighted = simd.splat_f64s(simd.reduce_sum_f64s(weighted));
        let q = S::as_mut_simd_f64s(row).0;
        for ((q, &w), &f) in q.iter_mut().zip(w).zip(f) {
            *q = simd.negate_mul_add_e_f64s(w, f, simd.mul_f64s(*q, weighted));
        }
    }
    total
}
