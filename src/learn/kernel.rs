//! The fused objective-and-gradient kernel of softmax regression. One pass over a block
//! of rows computes the logits, the row losses and their gradient, and adds the block's
//! share of ∂/∂W while the block is still in cache. With K = 10 classes both matrix
//! products are thin, and a general multiply spent as long packing them as multiplying
//! (perf, in the profile that opened this kernel's issue); here nothing is packed.
//!
//! Layout: the classes lie along the vector lanes, padded to a whole number of vectors
//! (K = 10 takes three vectors of four f64 with AVX2), so a row's logits are a few vector
//! registers, its softmax runs on them in place, and both products are register tiles of
//! fused multiply-adds with one broadcast feature value each. `pulp` picks the widest
//! instruction set the processor has at run time (AVX2 with FMA on the machines we
//! measure), so the crate keeps `#![forbid(unsafe_code)]` and the default build target.
//!
//! Features stay f64. f32 features would halve the bytes read, but the kernel is bound
//! by its multiply-adds, not by memory: a sub-block's rows are read from L1 (see
//! `SUB_ROWS`), and converting f32 to f64 for the f64 arithmetic would add instructions.
//! Not tried; measure before changing.

use ndarray::ArrayView2;
use pulp::{Arch, Simd, WithSimd};
use rayon::prelude::*;

use super::fastmath::{exp_nonpositive_fma, ln_positive};

/// Rows per parallel work item. Each block's gradient share is added in block order, so
/// the result does not depend on the thread count; 2048 rows keep that final sum small.
const BLOCK_ROWS: usize = 2048;
/// Rows per pass inside a block: the logits, the losses and the gradient product of 64
/// rows run while their features (16 KiB at 32 features) and logits stay in L1. Measured
/// with `cargo bench --bench train -- objective` (cross-entropy, 200,000 × 32 × 10, two
/// runs, ms): 32 rows 7.6/6.8, 64 rows 6.3/6.5, 128 rows 6.5/7.1, 256 rows 6.9/6.8,
/// 512 rows 7.2/8.1, 2048 rows (one pass a block) 7.5/9.2.
const SUB_ROWS: usize = 64;

/// Smallest noisy probability the forward loss takes the logarithm of (as `loss::Forward`).
const MIN_PROB: f64 = 1e-300;

/// What a row's loss does with its softmax: the corrections the kernel computes itself.
/// A `RowLoss` that returns none of these is evaluated row by row instead.
#[derive(Debug, Clone, Copy)]
pub enum FusedLoss<'a> {
    /// −log q[y].
    CrossEntropy,
    /// −log Σ_c T_s[c][y]·q[c] for a row from label source s.
    Forward {
        /// `columns[(s·K + y)·K + c]` = T_s[c][y].
        columns: &'a [f64],
        /// Each fit row's source s; `None`: one matrix, s = 0 for every row.
        source_of_row: Option<&'a [u32]>,
    },
    /// Σ_c T⁻¹[y][c]·ℓ_c with ℓ_c = −log q_c, or −log(q_c + floor) when `floor` is given
    /// (see `loss::Backward`).
    Backward {
        /// `inverse[y·K + c]` = T⁻¹[y][c].
        inverse: &'a [f64],
        /// The smooth probability floor e^−cap of the guarded loss; `None`: unbounded.
        floor: Option<f64>,
    },
    /// The joint fit's likelihood (`noise::joint`): the forward loss of a row from group
    /// g, or −log q[c] − log T_g[c][y] for a row whose clean class c is known. The
    /// gradient then also holds ∂/∂T_g[c][y] for every group, after ∂/∂b.
    Joint {
        /// `columns[(g·K + y)·K + c]` = T_g[c][y]; its length gives the number of groups.
        columns: &'a [f64],
        /// Each fit row's group g; `None`: one group.
        group_of_row: Option<&'a [u32]>,
        /// Each fit row's known clean class, if any; `None`: none known.
        clean: Option<&'a [Option<usize>]>,
    },
}

impl FusedLoss<'_> {
    /// Flip matrices whose gradient the kernel returns after the biases' (the joint fit's).
    fn matrices(&self, k: usize) -> usize {
        match self {
            FusedLoss::Joint { columns, .. } => columns.len() / (k * k),
            _ => 0,
        }
    }
}

/// The summed row losses of `x`'s rows (standard layout, `labels` theirs) at weights
/// `weights` (K × d, row-major) and biases `bias`; `grad` (K·d + K, the same order, then
/// G·K·K for [`FusedLoss::Joint`]'s G flip matrices, each row-major) receives the summed
/// gradient. Blocks run in parallel and are added in block order, so
/// the result does not depend on the thread count. `None` when `x` is not contiguous.
pub fn summed_loss_and_grad(
    x: ArrayView2<f64>,
    labels: &[usize],
    loss: FusedLoss,
    weights: &[f64],
    bias: &[f64],
    grad: &mut [f64],
) -> Option<f64> {
    let flat = x.as_slice()?;
    let (n, d, k) = (x.nrows(), x.ncols(), bias.len());
    let arch = Arch::new();
    let lanes = arch.dispatch(Lanes);
    let kp = k.div_ceil(lanes) * lanes;
    let shape = Shape { d, k, kp };
    let (wt, bp) = padded_parameters(&shape, weights, bias);
    let matrices = loss.matrices(k);
    let loss = Padded::new(loss, k, kp);
    let stride = (d + 1 + matrices * k) * kp;
    let blocks = n.div_ceil(BLOCK_ROWS);
    let mut partial = vec![0.0; blocks * stride];
    let mut losses = vec![0.0; blocks];
    partial
        .par_chunks_mut(stride)
        .zip(losses.par_iter_mut())
        .enumerate()
        .for_each_init(Scratch::default, |scratch, (block, (out, loss_out))| {
            let start = block * BLOCK_ROWS;
            let end = (start + BLOCK_ROWS).min(n);
            scratch.z.resize(SUB_ROWS * kp, 0.0);
            scratch.kept.resize(SUB_ROWS, 0.0);
            scratch.logs.resize(SUB_ROWS, 0.0);
            scratch.work.resize(2 * kp, 0.0);
            *loss_out = arch.dispatch(Block {
                shape: &shape,
                x: &flat[start * d..end * d],
                rows: Rows {
                    labels: &labels[start..end],
                    first: start,
                    kept: &mut scratch.kept,
                    logs: &mut scratch.logs,
                    work: &mut scratch.work,
                },
                loss: &loss,
                wt: &wt,
                bp: &bp,
                z: &mut scratch.z,
                out,
            });
        });
    grad.iter_mut().for_each(|g| *g = 0.0);
    for part in partial.chunks(stride) {
        for c in 0..k {
            for j in 0..d {
                grad[c * d + j] += part[j * kp + c];
            }
            grad[k * d + c] += part[d * kp + c];
        }
        // The matrices' part holds Σ q_c/s and Σ 1/T[c][y] by (g, y) then c: minus ∂/∂T.
        let sums = &part[(d + 1) * kp..];
        let flips = &mut grad[k * d + k..];
        for (gy, column) in sums.chunks_exact(kp).enumerate() {
            let (g, y) = (gy / k, gy % k);
            for (c, v) in column[..k].iter().enumerate() {
                flips[g * k * k + c * k + y] -= v;
            }
        }
    }
    Some(losses.iter().sum())
}

/// A worker's buffers, kept from block to block: logits, per-row and per-class scratch.
#[derive(Default)]
struct Scratch {
    z: Vec<f64>,
    kept: Vec<f64>,
    logs: Vec<f64>,
    work: Vec<f64>,
}

/// Sizes: features, classes, classes padded to whole vectors.
struct Shape {
    d: usize,
    k: usize,
    kp: usize,
}

/// Wᵀ (d × kp) and the biases (kp), padded: zero weights and a −∞ bias, so that a padding
/// lane's logit is −∞, its probability 0 and its gradient 0 under every loss.
fn padded_parameters(shape: &Shape, weights: &[f64], bias: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let Shape { d, k, kp } = *shape;
    let mut wt = vec![0.0; d * kp];
    for c in 0..k {
        for j in 0..d {
            wt[j * kp + c] = weights[c * d + j];
        }
    }
    let mut bp = vec![f64::NEG_INFINITY; kp];
    bp[..k].copy_from_slice(bias);
    (wt, bp)
}

/// The vector width in f64 lanes of the instruction set `pulp` dispatches to.
struct Lanes;

impl WithSimd for Lanes {
    type Output = usize;

    #[inline(always)]
    fn with_simd<S: Simd>(self, _simd: S) -> usize {
        core::mem::size_of::<S::f64s>() / core::mem::size_of::<f64>()
    }
}

/// One block's work; returns the block's summed loss and writes its gradient share into
/// `out`: ∂/∂Wᵀ (d × kp), then ∂/∂b (kp).
struct Block<'a> {
    shape: &'a Shape,
    x: &'a [f64],
    rows: Rows<'a>,
    loss: &'a Padded<'a>,
    wt: &'a [f64],
    bp: &'a [f64],
    z: &'a mut [f64],
    out: &'a mut [f64],
}

impl WithSimd for Block<'_> {
    type Output = f64;

    #[inline(always)]
    fn with_simd<S: Simd>(self, simd: S) -> f64 {
        let Block {
            shape,
            x,
            rows,
            loss,
            wt,
            bp,
            z,
            out,
        } = self;
        let (d, kp) = (shape.d, shape.kp);
        out.iter_mut().for_each(|g| *g = 0.0);
        let (gwt, rest) = out.split_at_mut(d * kp);
        let (gb, sums) = rest.split_at_mut(kp);
        let mut total = 0.0;
        let n = rows.labels.len();
        let mut start = 0;
        while start < n {
            let end = (start + SUB_ROWS).min(n);
            let xs = &x[start * d..end * d];
            let zs = &mut z[..(end - start) * kp];
            logits(simd, shape, xs, wt, bp, zs);
            let sub = Rows {
                labels: &rows.labels[start..end],
                first: rows.first + start,
                kept: &mut rows.kept[..end - start],
                logs: &mut rows.logs[..end - start],
                work: &mut *rows.work,
            };
            total += row_losses(simd, shape, sub, loss, zs, sums);
            weight_gradient(simd, shape, xs, zs, gwt);
            for row in zs.chunks_exact(kp) {
                gb.iter_mut().zip(row).for_each(|(g, v)| *g += v);
            }
            start = end;
        }
        total
    }
}

/// Rows of one logit tile and vectors of one class tile: 3 × 3 accumulators beside three
/// weight vectors and a broadcast, within AVX2's sixteen registers. 4 × 3 (all sixteen)
/// made the compiler keep two accumulators on the stack, and measured slower.
const TILE_ROWS: usize = 3;
const TILE_VECTORS: usize = 3;
/// Features of one gradient tile (by `TILE_VECTORS` class vectors), for the same reason.
const TILE_FEATURES: usize = 3;

/// z = x·Wᵀ + b for every row of the block, a register tile at a time.
#[inline(always)]
fn logits<S: Simd>(simd: S, shape: &Shape, x: &[f64], wt: &[f64], bp: &[f64], z: &mut [f64]) {
    let lanes = core::mem::size_of::<S::f64s>() / core::mem::size_of::<f64>();
    let vectors = shape.kp / lanes;
    let rows = z.len() / shape.kp;
    let mut r0 = 0;
    while r0 < rows {
        let tall = rows - r0 >= TILE_ROWS;
        let mut v0 = 0;
        while v0 < vectors {
            let at = Tile { r0, v0, lanes };
            match (tall, (vectors - v0).min(TILE_VECTORS)) {
                (true, 1) => logit_tile::<S, TILE_ROWS, 1>(simd, shape, at, x, wt, bp, z),
                (true, 2) => logit_tile::<S, TILE_ROWS, 2>(simd, shape, at, x, wt, bp, z),
                (true, _) => logit_tile::<S, TILE_ROWS, 3>(simd, shape, at, x, wt, bp, z),
                (false, 1) => logit_tile::<S, 1, 1>(simd, shape, at, x, wt, bp, z),
                (false, 2) => logit_tile::<S, 1, 2>(simd, shape, at, x, wt, bp, z),
                (false, _) => logit_tile::<S, 1, 3>(simd, shape, at, x, wt, bp, z),
            }
            v0 += TILE_VECTORS;
        }
        r0 += if tall { TILE_ROWS } else { 1 };
    }
}

/// Where a tile starts: its first row (or feature), its first class vector, the lanes.
#[derive(Clone, Copy)]
struct Tile {
    r0: usize,
    v0: usize,
    lanes: usize,
}

/// `R` rows × `C` class vectors of logits, accumulated over every feature in registers.
#[inline(always)]
fn logit_tile<S: Simd, const R: usize, const C: usize>(
    simd: S,
    shape: &Shape,
    at: Tile,
    x: &[f64],
    wt: &[f64],
    bp: &[f64],
    z: &mut [f64],
) {
    let (d, kp) = (shape.d, shape.kp);
    let lo = at.v0 * at.lanes;
    let hi = lo + C * at.lanes;
    let bias = S::as_simd_f64s(&bp[lo..hi]).0;
    let mut acc = [[simd.splat_f64s(0.0); C]; R];
    for row in acc.iter_mut() {
        row.copy_from_slice(&bias[..C]);
    }
    let rows: [&[f64]; R] = core::array::from_fn(|r| &x[(at.r0 + r) * d..(at.r0 + r + 1) * d]);
    for j in 0..d {
        let w = S::as_simd_f64s(&wt[j * kp + lo..j * kp + hi]).0;
        for (acc_row, xs) in acc.iter_mut().zip(&rows) {
            let xv = simd.splat_f64s(xs[j]);
            for (a, &wv) in acc_row.iter_mut().zip(w) {
                *a = simd.mul_add_e_f64s(xv, wv, *a);
            }
        }
    }
    for (r, acc_row) in acc.iter().enumerate() {
        let at_row = (at.r0 + r) * kp;
        let out = S::as_mut_simd_f64s(&mut z[at_row + lo..at_row + hi]).0;
        out.copy_from_slice(acc_row);
    }
}

/// A `FusedLoss` with its per-label vectors padded to `kp` lanes (zeros), so that the
/// per-row sums over classes are whole-vector multiply-adds.
enum Padded<'a> {
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
    fn new(loss: FusedLoss<'a>, k: usize, kp: usize) -> Padded<'a> {
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
fn row_losses<S: Simd>(
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
            Padded::Backward {
                inverse,
                floor: Some(floor),
                ..
            } => {
                let w = &inverse[y * kp..(y + 1) * kp];
                (1.0, total + guarded_backward_row(row, w, *floor, rows.work))
            }
        };
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
/// scratch values per row and 2·kp scratch values.
struct Rows<'a> {
    labels: &'a [usize],
    first: usize,
    kept: &'a mut [f64],
    logs: &'a mut [f64],
    work: &'a mut [f64],
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

/// Guarded backward loss of one row (see `loss::Backward`) from its posterior `row`
/// and its (padded) row `w` of T⁻¹; `work` holds 2·kp values. The per-class logarithms
/// use the branch-free `ln_positive`, which the compiler vectorises over the row here.
#[inline(always)]
fn guarded_backward_row(row: &mut [f64], w: &[f64], floor: f64, work: &mut [f64]) -> f64 {
    let (logs, faithful) = work.split_at_mut(row.len());
    for ((l, f), &p) in logs.iter_mut().zip(faithful.iter_mut()).zip(row.iter()) {
        *l = ln_positive(p + floor);
        *f = p / (p + floor);
    }
    let (mut loss, mut weighted) = (0.0, 0.0);
    for ((l, f), &w) in logs.iter().zip(faithful.iter()).zip(w) {
        loss -= w * l;
        weighted += w * f;
    }
    for ((q, f), &w) in row.iter_mut().zip(faithful.iter()).zip(w) {
        *q = *q * weighted - w * f;
    }
    loss
}

/// ∂/∂Wᵀ of the block: Σ_rows x[r][j]·g[r][c], a register tile of features × class
/// vectors at a time over all rows.
#[inline(always)]
fn weight_gradient<S: Simd>(simd: S, shape: &Shape, x: &[f64], g: &[f64], out: &mut [f64]) {
    let lanes = core::mem::size_of::<S::f64s>() / core::mem::size_of::<f64>();
    let vectors = shape.kp / lanes;
    let mut j0 = 0;
    while j0 < shape.d {
        let wide = shape.d - j0 >= TILE_FEATURES;
        let mut v0 = 0;
        while v0 < vectors {
            let at = Tile { r0: j0, v0, lanes };
            match (wide, (vectors - v0).min(TILE_VECTORS)) {
                (true, 1) => grad_tile::<S, TILE_FEATURES, 1>(simd, shape, at, x, g, out),
                (true, 2) => grad_tile::<S, TILE_FEATURES, 2>(simd, shape, at, x, g, out),
                (true, _) => grad_tile::<S, TILE_FEATURES, 3>(simd, shape, at, x, g, out),
                (false, 1) => grad_tile::<S, 1, 1>(simd, shape, at, x, g, out),
                (false, 2) => grad_tile::<S, 1, 2>(simd, shape, at, x, g, out),
                (false, _) => grad_tile::<S, 1, 3>(simd, shape, at, x, g, out),
            }
            v0 += TILE_VECTORS;
        }
        j0 += if wide { TILE_FEATURES } else { 1 };
    }
}

/// `J` features (from `at.r0`) × `C` class vectors of ∂/∂Wᵀ, summed over the block's rows.
#[inline(always)]
fn grad_tile<S: Simd, const J: usize, const C: usize>(
    simd: S,
    shape: &Shape,
    at: Tile,
    x: &[f64],
    g: &[f64],
    out: &mut [f64],
) {
    let (d, kp) = (shape.d, shape.kp);
    let lo = at.v0 * at.lanes;
    let hi = lo + C * at.lanes;
    let mut acc = [[simd.splat_f64s(0.0); C]; J];
    for (xs, gs) in x.chunks_exact(d).zip(g.chunks_exact(kp)) {
        let gv = S::as_simd_f64s(&gs[lo..hi]).0;
        let xs = &xs[at.r0..at.r0 + J];
        for (acc_row, &xj) in acc.iter_mut().zip(xs) {
            let xv = simd.splat_f64s(xj);
            for (a, &gvc) in acc_row.iter_mut().zip(gv) {
                *a = simd.mul_add_e_f64s(xv, gvc, *a);
            }
        }
    }
    for (jj, acc_row) in acc.iter().enumerate() {
        let at_row = (at.r0 + jj) * kp;
        let dst = S::as_mut_simd_f64s(&mut out[at_row + lo..at_row + hi]).0;
        for (t, &a) in dst.iter_mut().zip(acc_row) {
            *t = simd.add_f64s(*t, a);
        }
    }
}

#[cfg(test)]
mod tests;
