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
//! Measured how much memory costs at all (cross-entropy, 32 features, 10 classes, best
//! of five, 2 cores): 33.3–33.7 ns a row with 20,000–50,000 rows (in cache) against
//! 38.4–38.8 ns with 200,000–400,000, so f32 storage could save at most about 13 %;
//! f32 arithmetic (eight lanes) is the larger, untried step.

use ndarray::ArrayView2;
use pulp::{Arch, Simd, WithSimd};
use rayon::prelude::*;

mod row_losses;

use self::row_losses::{row_losses, Padded, Rows};

/// Rows per parallel work item. Each block's gradient share is added in block order, so
/// the result does not depend on the thread count; 2048 rows keep that final sum small.
const BLOCK_ROWS: usize = 2048;
/// Rows per pass inside a block: the logits, the losses and the gradient product of 64
/// rows run while their features (16 KiB at 32 features) and logits stay in L1. Measured
/// with `cargo bench --bench train -- objective` (cross-entropy, 200,000 × 32 × 10, two
/// runs, ms): 32 rows 7.6/6.8, 64 rows 6.3/6.5, 128 rows 6.5/7.1, 256 rows 6.9/6.8,
/// 512 rows 7.2/8.1, 2048 rows (one pass a block) 7.5/9.2.
const SUB_ROWS: usize = 64;

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
            scratch.work.resize(2 * SUB_ROWS * kp, 0.0);
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
