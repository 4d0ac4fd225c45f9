//! Per-row clean posterior under a flip matrix.
//!
//! The noisy posterior is p̃(j | x) = Σ_k T[k][j]·p(k | x), i.e. p̃ = Tᵀ·p (Patrini et al.
//! 2017, Eq. 2), so the clean posterior is recovered as p = (Tᵀ)⁻¹·p̃, clipped at 0 and
//! renormalised. Given the observed label j, Bayes' rule gives
//! P(true = k | x, observed = j) ∝ T[k][j]·p(k | x).

use ndarray::linalg::general_mat_mul;
use ndarray::{Array2, ArrayView2, ArrayViewMut2, ShapeBuilder};
use rayon::prelude::*;

use super::linalg::inverse_and_condition;

/// Above this 1-norm condition number, inverting Tᵀ amplifies probability noise too much
/// to trust the recovered clean posterior; the noisy probabilities are used instead.
pub const MAX_CONDITION_FOR_INVERSION: f64 = 1e6;

/// Width of the fixed-size chunks of the per-row accumulation.
const LANES: usize = 4;
/// Up to this many classes each row is accumulated on the stack, in registers. Above it
/// a block of rows is one matrix product (noisy block × T⁻¹) through ndarray's
/// matrixmultiply backend, which picks AVX2/FMA kernels at run time: with 100 classes
/// that is K² = 10,000 multiply-adds a row, and the per-row loops ran near one per cycle.
const MAX_STACK_CLASSES: usize = 16;

/// Rows whose clean posteriors are computed together: with 100 classes a block is 100 KiB
/// of f32 in, 200 KiB of f64 out, and T⁻¹ (80 KiB) stays in cache across it.
pub const BLOCK_ROWS: usize = 256;

/// Chunk of rows per partial sum of [`Posterior::expected_mislabeled`]; sums of scores
/// that must equal it bit for bit use the same chunks ([`expected_from_scores`]).
pub const SUM_CHUNK_ROWS: usize = 8192;

/// out = Σ_j noisy_j · (row j of `inv`), with `CHUNKS` chunks of LANES accumulators on
/// the stack (`padded` ≤ CHUNKS·LANES).
fn accumulate<const CHUNKS: usize>(inv: &[f64], noisy: &[f32], padded: usize, out: &mut [f64]) {
    let mut acc = [[0.0f64; LANES]; CHUNKS];
    let acc = &mut acc[..padded / LANES];
    for (row, &p) in inv.chunks_exact(padded).zip(noisy) {
        let p = p as f64;
        for (a, r) in acc.iter_mut().zip(row.chunks_exact(LANES)) {
            for l in 0..LANES {
                a[l] += r[l] * p;
            }
        }
    }
    out.iter_mut()
        .zip(acc.iter().flatten())
        .for_each(|(o, &a)| *o = a);
}

/// Clips one row of (Tᵀ)⁻¹p̃ at 0; returns false (and puts the noisy probabilities in
/// its place) when nothing positive is left.
fn clip_or_fallback(noisy: &[f32], out: &mut [f64]) -> bool {
    let mut total = 0.0;
    for o in out.iter_mut() {
        *o = o.max(0.0);
        total += *o;
    }
    if total > 0.0 {
        return true;
    }
    out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64);
    false
}

/// Scratch space of the blocked product, kept by each worker between blocks.
#[derive(Debug, Default, Clone)]
pub struct Workspace {
    /// The noisy block widened to f64 (the product's left operand).
    wide: Vec<f64>,
}

/// The flip matrix prepared for per-row posteriors. Matrices are kept as flat row-major
/// vectors so the per-row loops run over plain slices (this runs for every row after
/// every matrix edit in the desktop app).
#[derive(Debug, Clone)]
pub struct Posterior {
    k: usize,
    /// T's columns, one after another: `t_columns[j·k + i] = T[i][j]`, so the column of
    /// the observed class is one contiguous slice.
    t_columns: Vec<f64>,
    /// T⁻¹ row-major (rows padded to a multiple of LANES), or `None` when T is too
    /// ill-conditioned to invert. Since (Tᵀ)⁻¹p̃ = Σ_j p̃_j·(row j of T⁻¹), the clean
    /// posterior is a sum of scaled rows, whose per-class accumulators are independent
    /// (no chain of dependent additions, which made the dot-product form about four
    /// times slower); for a block of rows it is the product P̃·T⁻¹.
    inv: Option<Vec<f64>>,
    /// True when the rows handed in are already clean posteriors q(x) (a joint fit's):
    /// they are used as they are, with no inversion and no clipping.
    clean_inputs: bool,
}

/// The flip matrix a posterior works under, and what the probabilities handed with it
/// are: noisy p̃(x), to be inverted, or clean q(x) from a fit that estimated both.
#[derive(Debug, Clone, Copy)]
pub struct Flip<'a> {
    /// Row-stochastic, rows = true class.
    pub matrix: &'a Array2<f64>,
    /// True when the probabilities are clean posteriors.
    pub clean_inputs: bool,
}

impl<'a> Flip<'a> {
    /// Noisy probabilities under `matrix`.
    pub fn noisy(matrix: &'a Array2<f64>) -> Self {
        Flip {
            matrix,
            clean_inputs: false,
        }
    }

    /// Clean posteriors under `matrix`.
    pub fn clean(matrix: &'a Array2<f64>) -> Self {
        Flip {
            matrix,
            clean_inputs: true,
        }
    }
}

impl Posterior {
    /// Prepares `flip` for rows of the kind it names.
    pub fn for_flip(flip: Flip) -> Self {
        if flip.clean_inputs {
            Posterior::for_clean_inputs(flip.matrix)
        } else {
            Posterior::new(flip.matrix)
        }
    }

    /// Prepares `t` for rows that are already clean posteriors.
    pub fn for_clean_inputs(t: &Array2<f64>) -> Self {
        Posterior {
            k: t.nrows(),
            t_columns: t.t().iter().copied().collect(),
            inv: None,
            clean_inputs: true,
        }
    }

    /// Prepares `t` (validated, row-stochastic).
    pub fn new(t: &Array2<f64>) -> Self {
        // (Tᵀ)⁻¹ = (T⁻¹)ᵀ, so one elimination gives both the inverse and the condition.
        let (inv, condition) = inverse_and_condition(t);
        let padded = t.nrows().next_multiple_of(LANES);
        let inv = inv
            .filter(|_| condition <= MAX_CONDITION_FOR_INVERSION)
            .map(|i| {
                // Rows padded with zeros to a multiple of LANES, so the accumulation runs
                // in fixed-width chunks the compiler turns into vector instructions.
                let mut flat = vec![0.0; t.nrows() * padded];
                for (dst, src) in flat.chunks_exact_mut(padded).zip(i.rows()) {
                    dst[..src.len()]
                        .iter_mut()
                        .zip(src)
                        .for_each(|(d, &s)| *d = s);
                }
                flat
            });
        Posterior {
            k: t.nrows(),
            t_columns: t.t().iter().copied().collect(),
            inv,
            clean_inputs: false,
        }
    }

    /// False when T could not be inverted and the noisy probabilities stand in for the
    /// clean posterior (the caller should warn).
    pub fn inverts(&self) -> bool {
        self.clean_inputs || self.inv.is_some()
    }

    /// Clean posterior of one row into `out`.
    pub fn clean(&self, noisy: &[f32], out: &mut [f64]) {
        if self.unnormalised_clean(noisy, out) {
            let total: f64 = out.iter().sum();
            out.iter_mut().for_each(|o| *o /= total);
        }
    }

    /// (Tᵀ)⁻¹p̃ clipped at 0, not yet normalised; returns false (and copies the noisy
    /// probabilities) when there is no inverse or nothing positive is left.
    fn unnormalised_clean(&self, noisy: &[f32], out: &mut [f64]) -> bool {
        let mut ok = [false];
        self.clean_rows(noisy, out, &mut ok, &mut Workspace::default());
        ok[0]
    }

    /// The unnormalised clipped clean posteriors of consecutive rows: `noisy` holds
    /// `m × k` probabilities row after row, `out` receives `m × k`. `ok[i]` is false where
    /// row i fell back to its noisy probabilities (no inverse, or nothing positive).
    /// Every posterior in flipmend comes from here, so a row's numbers do not depend on
    /// which rows share its block (the product computes each row on its own).
    pub fn clean_rows(&self, noisy: &[f32], out: &mut [f64], ok: &mut [bool], ws: &mut Workspace) {
        let k = self.k;
        let rows = ok.len();
        debug_assert!(noisy.len() == rows * k && out.len() == rows * k);
        if self.clean_inputs {
            out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64);
            ok.fill(true);
            return;
        }
        let Some(inv) = &self.inv else {
            out.iter_mut().zip(noisy).for_each(|(o, &p)| *o = p as f64);
            ok.fill(false);
            return;
        };
        let padded = k.next_multiple_of(LANES);
        if padded <= MAX_STACK_CLASSES {
            for (o, p) in out.chunks_exact_mut(k).zip(noisy.chunks_exact(k)) {
                accumulate::<{ MAX_STACK_CLASSES / LANES }>(inv, p, padded, o);
            }
        } else {
            multiply(inv, padded, noisy, out, k, &mut ws.wide);
        }
        for ((o, p), flag) in out
            .chunks_exact_mut(k)
            .zip(noisy.chunks_exact(k))
            .zip(ok.iter_mut())
        {
            *flag = clip_or_fallback(p, o);
        }
    }

    /// P(true = k | x, observed) for every k, into `out` (`clean` is scratch space).
    pub fn given_observed(
        &self,
        noisy: &[f32],
        observed: usize,
        clean: &mut [f64],
        out: &mut [f64],
    ) {
        self.unnormalised_clean(noisy, clean);
        self.belief_from_clean(clean, observed, out);
    }

    /// P(true = k | x, observed) for every k from the row's unnormalised clean posterior
    /// (as [`Posterior::clean_rows`] gives it).
    pub fn belief_from_clean(&self, clean: &[f64], observed: usize, out: &mut [f64]) {
        // The clean posterior's normalisation cancels in Bayes' rule, so it is skipped.
        let column = &self.t_columns[observed * self.k..(observed + 1) * self.k];
        let mut total = 0.0;
        for ((o, &t), &c) in out.iter_mut().zip(column).zip(clean.iter()) {
            *o = t * c;
            total += *o;
        }
        if total > 0.0 {
            // Division, not multiplication by 1/total: a certain label then scores
            // exactly 0, and such rows tie (and keep row order) instead of scattering
            // by rounding error.
            out.iter_mut().for_each(|o| *o /= total);
        } else {
            out.iter_mut().for_each(|o| *o = 0.0);
            out[observed] = 1.0;
        }
    }

    /// The odds P(true ≠ observed) / P(true = observed) given x and the observed label,
    /// from the row's unnormalised clean posterior (as [`Posterior::clean_rows`] gives
    /// it). Both sides are summed apart, so the odds keep their precision where the
    /// probability 1 − P(true = observed) rounds to 1 (a few hundred rows of a large table
    /// do): ranked by them, such rows keep distinct scores instead of tying at 1.
    pub fn wrong_odds_from_clean(&self, clean: &[f64], observed: usize) -> f64 {
        let column = &self.t_columns[observed * self.k..(observed + 1) * self.k];
        // The classes before and after the observed one, each a loop without a branch.
        let dot = |t: &[f64], c: &[f64]| t.iter().zip(c).map(|(t, c)| t * c).sum::<f64>();
        let wrong = dot(&column[..observed], &clean[..observed])
            + dot(&column[observed + 1..], &clean[observed + 1..self.k]);
        odds(wrong, column[observed] * clean[observed])
    }

    /// Σ over rows of P(true ≠ observed | x, observed), each from its odds as a score
    /// has it ([`wrong_probability`]): the expected number of mislabelled rows.
    pub fn expected_mislabeled(&self, probs: ArrayView2<f32>, labels: &[usize]) -> f64 {
        let k = probs.ncols();
        let contiguous = probs.as_standard_layout();
        let Some(flat) = contiguous.as_slice() else {
            return 0.0;
        };
        let parts: Vec<f64> = flat
            .par_chunks(SUM_CHUNK_ROWS * k.max(1))
            .zip(labels.par_chunks(SUM_CHUNK_ROWS))
            .map(|(noisy, labels)| {
                let mut ws = Workspace::default();
                let mut clean = vec![0.0; BLOCK_ROWS * k];
                let mut ok = [false; BLOCK_ROWS];
                let mut sum = 0.0;
                for (block, labels) in noisy
                    .chunks(BLOCK_ROWS * k.max(1))
                    .zip(labels.chunks(BLOCK_ROWS))
                {
                    let m = labels.len();
                    self.clean_rows(block, &mut clean[..m * k], &mut ok[..m], &mut ws);
                    for (c, &y) in clean.chunks_exact(k.max(1)).zip(labels) {
                        sum += wrong_probability(self.wrong_odds_from_clean(c, y));
                    }
                }
                sum
            })
            .collect();
        parts.iter().sum()
    }
}

/// The odds wrong / right of two non-negative weights: +∞ when only `wrong` has weight,
/// 0 when it has none (nothing says the label is wrong).
pub fn odds(wrong: f64, right: f64) -> f64 {
    if wrong > 0.0 {
        wrong / right
    } else {
        0.0
    }
}

/// The probability whose odds are `odds`: odds / (1 + odds), 1 for infinite odds. A
/// division, not a logistic: every row of a million goes through it after each matrix
/// edit (an `exp` and a `ln` a row cost the app's re-ranking a third of its time).
pub fn wrong_probability(odds: f64) -> f64 {
    if odds.is_infinite() {
        1.0
    } else {
        odds / (1.0 + odds)
    }
}

/// The odds of a probability (the inverse of [`wrong_probability`]).
pub fn odds_of(probability: f64) -> f64 {
    odds(probability, 1.0 - probability)
}

/// The one order in which flipmend sums a per-row quantity over many rows, so a sum is
/// the same bit for bit whoever asks for it and however many threads run: `chunk` sums
/// each run of [`SUM_CHUNK_ROWS`] values in order (the runs on every core) and may
/// gather something else on the way, then the runs' sums are added in order. Returns the
/// total and what each run gathered.
pub fn sum_in_chunks<A: Send>(
    values: &[f64],
    chunk: impl Fn(&[f64]) -> (f64, A) + Sync + Send,
) -> (f64, Vec<A>) {
    let parts: Vec<(f64, A)> = values.par_chunks(SUM_CHUNK_ROWS).map(chunk).collect();
    let mut total = 0.0;
    let mut gathered = Vec::with_capacity(parts.len());
    for (sum, extra) in parts {
        total += sum;
        gathered.push(extra);
    }
    (total, gathered)
}

/// Σ of the probabilities of a wrong label whose odds are `scores` (posterior scores),
/// summed by [`sum_in_chunks`] as [`Posterior::expected_mislabeled`] sums: the expected
/// number of mislabelled rows without scoring every row twice.
pub fn expected_from_scores(scores: &[f64]) -> f64 {
    sum_in_chunks(scores, |chunk| {
        let mut sum = 0.0;
        for &s in chunk {
            sum += wrong_probability(s);
        }
        (sum, ())
    })
    .0
}

/// out (m × k) = noisy (m × k, widened into `wide`) · T⁻¹ (k × k, rows `padded` apart).
fn multiply(
    inv: &[f64],
    padded: usize,
    noisy: &[f32],
    out: &mut [f64],
    k: usize,
    wide: &mut Vec<f64>,
) {
    let rows = noisy.len() / k;
    wide.clear();
    wide.extend(noisy.iter().map(|&p| p as f64));
    let shapes = (
        ArrayView2::from_shape((rows, k), &wide[..]),
        ArrayView2::from_shape((k, k).strides((padded, 1)), inv),
        ArrayViewMut2::from_shape((rows, k), out),
    );
    if let (Ok(a), Ok(b), Ok(mut c)) = shapes {
        general_mat_mul(1.0, &a, &b, 0.0, &mut c);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn clean_and_observed_posteriors_by_hand() {
        // T = [[0.8, 0.2], [0.3, 0.7]] and clean p = (0.5, 0.5) give the noisy
        // p̃ = Tᵀp = (0.8·0.5 + 0.3·0.5, 0.2·0.5 + 0.7·0.5) = (0.55, 0.45);
        // recovering from p̃ must give back (0.5, 0.5).
        let t = array![[0.8, 0.2], [0.3, 0.7]];
        let post = Posterior::new(&t);
        let mut clean = [0.0; 2];
        post.clean(&[0.55, 0.45], &mut clean);
        assert!(
            (clean[0] - 0.5).abs() < 1e-7 && (clean[1] - 0.5).abs() < 1e-7,
            "{clean:?}"
        );
        // Observed class 1: P(true = k | x, obs = 1) ∝ T[k][1]·p(k) = (0.2·0.5, 0.7·0.5) → (2/9, 7/9).
        let mut out = [0.0; 2];
        post.given_observed(&[0.55, 0.45], 1, &mut clean, &mut out);
        assert!(
            (out[0] - 2.0 / 9.0).abs() < 1e-6 && (out[1] - 7.0 / 9.0).abs() < 1e-6,
            "{out:?}"
        );
        let probs = array![[0.55f32, 0.45]];
        assert!((post.expected_mislabeled(probs.view(), &[1]) - 2.0 / 9.0).abs() < 1e-6);
    }

    #[test]
    fn singular_matrices_fall_back_to_the_noisy_probabilities() {
        let t = array![[0.5, 0.5], [0.5, 0.5]];
        let post = Posterior::new(&t);
        assert!(!post.inverts());
        let mut clean = [0.0; 2];
        post.clean(&[0.3, 0.7], &mut clean);
        assert!((clean[0] - 0.3).abs() < 1e-7);
    }

    /// A row-stochastic K × K matrix, 0.7 on the diagonal and the rest spread unevenly.
    fn spread(k: usize) -> Array2<f64> {
        let mut t = Array2::from_shape_fn((k, k), |(i, j)| ((i * 7 + j * 3) % 11 + 1) as f64);
        for i in 0..k {
            t[[i, i]] = 0.0;
            let off: f64 = t.row(i).sum();
            t.row_mut(i).mapv_inplace(|v| 0.3 * v / off);
            t[[i, i]] = 0.7;
        }
        t
    }

    #[test]
    fn many_classes_recover_the_clean_posterior_and_rows_do_not_depend_on_their_block() {
        // 23 classes take the blocked product. Noisy rows are made from known clean ones
        // by p̃ = Tᵀp (Patrini et al. 2017, Eq. 2); recovering must give p back (up to the
        // f32 rounding of p̃), and a row computed alone must equal it within a block bit for bit.
        let k = 23;
        let t = spread(k);
        let rows = 300;
        let clean: Vec<f64> = (0..rows * k)
            .map(|i| ((i * 37 + i / k * 5) % 17) as f64 + 0.5)
            .collect();
        let mut noisy = vec![0.0f32; rows * k];
        for r in 0..rows {
            let p = &clean[r * k..(r + 1) * k];
            let total: f64 = p.iter().sum();
            for j in 0..k {
                let v: f64 = (0..k).map(|i| t[[i, j]] * p[i] / total).sum();
                noisy[r * k + j] = v as f32;
            }
        }
        let post = Posterior::new(&t);
        assert!(post.inverts());
        let mut out = vec![0.0; rows * k];
        let mut ok = vec![false; rows];
        post.clean_rows(&noisy, &mut out, &mut ok, &mut Workspace::default());
        assert!(ok.iter().all(|&o| o));
        for r in 0..rows {
            let p = &clean[r * k..(r + 1) * k];
            let total: f64 = p.iter().sum();
            for i in 0..k {
                let got = out[r * k + i];
                assert!(
                    (got - p[i] / total).abs() < 1e-5,
                    "row {r} class {i}: {got}"
                );
            }
            let mut alone = vec![0.0; k];
            post.clean_rows(
                &noisy[r * k..(r + 1) * k],
                &mut alone,
                &mut [false],
                &mut Workspace::default(),
            );
            assert_eq!(alone, out[r * k..(r + 1) * k], "row {r}");
        }
    }

    #[test]
    fn a_sum_of_scores_in_chunks_is_the_expected_count_bit_for_bit() {
        // More rows than one sum chunk, for few and for many classes.
        for k in [5, 20] {
            let t = spread(k);
            let post = Posterior::new(&t);
            let rows = 2 * SUM_CHUNK_ROWS + 123;
            let probs =
                Array2::from_shape_fn((rows, k), |(r, c)| ((r * 13 + c * 29) % 31 + 1) as f32);
            let probs = &probs
                / &probs
                    .sum_axis(ndarray::Axis(1))
                    .insert_axis(ndarray::Axis(1));
            let labels: Vec<usize> = (0..rows).map(|r| (r * 7) % k).collect();
            let mut clean = vec![0.0; k];
            let scores: Vec<f64> = (0..rows)
                .map(|r| {
                    let row: Vec<f32> = probs.row(r).to_vec();
                    post.clean(&row, &mut clean);
                    post.wrong_odds_from_clean(&clean, labels[r])
                })
                .collect();
            let summed = expected_from_scores(&scores);
            let expected = post.expected_mislabeled(probs.view(), &labels);
            assert_eq!(summed.to_bits(), expected.to_bits(), "{k} classes");
        }
    }
}
