//! Flip-matrix estimators. Each returns a validated row-stochastic K×K matrix with rows =
//! true class: T[i][j] = P(observed j | true i).
//!
//! All work from out-of-sample probabilities p(observed | x) of the noisy labels; the
//! rows to use come as an index list so that bootstrap resamples need no copies.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::joint::{fit_joint, JointFit, JointParams, DEFAULT_VOLUME_SCALE};
use super::matrix::{normalize_rows, validate};
use crate::data::origin::Origin;
use crate::error::{Error, Result};

/// The quantile the quantile estimator uses unless told otherwise (command line and app).
pub const DEFAULT_QUANTILE: f64 = 0.97;

/// Rows per parallel work item in the row passes.
const CHUNK_ROWS: usize = 16_384;

/// The estimator a user picks: the command line's `--method`, a session's `estimator` and
/// the app's picker all list these values. [`Method`] is the same choice with its settings.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Estimator {
    /// T and a clean classifier fitted together (maximum likelihood, minimum volume),
    /// started from counting.
    #[default]
    Joint,
    /// Anchor rows just below the q-quantile of each class's probability.
    Quantile,
    /// The highest-probability row of each class.
    Anchor,
    /// Mean probabilities of the rows with a randomly audited trusted label.
    Trusted,
    /// Confident counting with per-class thresholds.
    Counting,
}

/// What the trusted estimator does for classes without randomly audited rows.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TrustedFallback {
    /// Stop with an error naming the classes.
    #[default]
    None,
    /// Estimate those classes with the quantile estimator (and say so in a note).
    Quantile,
}

/// The settings an [`Estimator`] may read; each ignores the ones it does not use.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EstimatorSettings {
    /// Quantile of the quantile estimator and of the trusted estimator's fallback.
    pub quantile: f64,
    /// The trusted estimator's fallback.
    pub fallback: TrustedFallback,
    /// λ of the joint fit; `None` for its default.
    pub volume_weight: Option<f64>,
}

impl Default for EstimatorSettings {
    fn default() -> Self {
        EstimatorSettings {
            quantile: DEFAULT_QUANTILE,
            fallback: TrustedFallback::None,
            volume_weight: None,
        }
    }
}

impl Estimator {
    /// The name used on the command line, in files and in the app.
    pub fn name(self) -> &'static str {
        match self {
            Estimator::Anchor => "anchor",
            Estimator::Quantile => "quantile",
            Estimator::Trusted => "trusted",
            Estimator::Counting => "counting",
            Estimator::Joint => "joint",
        }
    }

    /// Every estimator, in the order pickers list them.
    pub fn all() -> &'static [Estimator] {
        <Estimator as clap::ValueEnum>::value_variants()
    }

    /// True when `quantile` matters to this estimator.
    pub fn uses_quantile(self) -> bool {
        matches!(self, Estimator::Quantile | Estimator::Trusted)
    }

    /// The estimator with its settings.
    pub fn with(self, settings: &EstimatorSettings) -> Method {
        match self {
            Estimator::Quantile => Method::Quantile {
                q: settings.quantile,
            },
            Estimator::Anchor => Method::Anchor,
            Estimator::Trusted => Method::Trusted {
                fallback_quantile: (settings.fallback == TrustedFallback::Quantile)
                    .then_some(settings.quantile),
            },
            Estimator::Counting => Method::Counting,
            Estimator::Joint => Method::Joint {
                volume_weight: settings.volume_weight,
            },
        }
    }
}

/// An estimator with its settings, as the library runs it.
#[derive(Debug, Clone, PartialEq)]
pub enum Method {
    /// Patrini et al. (CVPR 2017): the row with the highest p(observed = i | x) is taken
    /// as an anchor point of class i, and its probability vector becomes T[i].
    Anchor,
    /// The same, but the anchor of class i is the row with the largest p(observed = i | x)
    /// strictly below that column's q-quantile (numpy's "higher" interpolation), the
    /// robust choice used in Patrini et al.'s experiments.
    Quantile {
        /// The quantile, in (0, 1]. Default 0.97.
        q: f64,
    },
    /// Hendrycks et al. (NeurIPS 2018): T[i] = mean probability vector over the rows
    /// whose trusted label is i.
    Trusted {
        /// Estimate classes without trusted rows by `Quantile { q }` instead of failing.
        fallback_quantile: Option<f64>,
    },
    /// Northcutt et al. (JAIR 2021), confident counting: per-class thresholds, the
    /// confident joint, calibration to the observed class counts, then conditioned on
    /// the true class.
    Counting,
    /// Maximum likelihood of T and a clean classifier together under the forward model,
    /// with a minimum-volume penalty (Li et al., ICML 2021), started from the counting
    /// estimate ([`super::joint`]). Audited rows add their known clean class.
    Joint {
        /// λ, the weight of ln det T; `None` for [`DEFAULT_VOLUME_SCALE`] / K.
        volume_weight: Option<f64>,
    },
}

impl Method {
    /// Which estimator this is.
    pub fn estimator(&self) -> Estimator {
        match self {
            Method::Anchor => Estimator::Anchor,
            Method::Quantile { .. } => Estimator::Quantile,
            Method::Trusted { .. } => Estimator::Trusted,
            Method::Counting => Estimator::Counting,
            Method::Joint { .. } => Estimator::Joint,
        }
    }

    /// The name used on the command line and in JSON.
    pub fn name(&self) -> &'static str {
        self.estimator().name()
    }

    /// Refuses a quantile outside (0, 1] and joint-fit settings that cannot work.
    pub fn check(&self) -> Result<()> {
        match self {
            Method::Quantile { q }
            | Method::Trusted {
                fallback_quantile: Some(q),
            } if !(*q > 0.0 && *q <= 1.0) => Err(Error::Usage(format!(
                "the quantile must lie in (0, 1], not {q}"
            ))),
            Method::Joint {
                volume_weight: Some(volume_weight),
            } => JointParams {
                volume_weight: *volume_weight,
                ..JointParams::default()
            }
            .check(),
            _ => Ok(()),
        }
    }
}

/// The rows an estimator sees.
#[derive(Debug, Clone, Copy)]
pub struct Sample<'a> {
    /// `rows × classes` out-of-sample probabilities of the observed label.
    pub probs: ArrayView2<'a, f32>,
    /// Observed label of every row.
    pub labels: &'a [usize],
    /// Trusted label of every row, where audited.
    pub trusted: Option<&'a [Option<usize>]>,
    /// How each trusted label was obtained (`None`: every one by a random audit). The
    /// trusted estimator averages only random audits; the joint fit uses every one.
    pub origins: Option<&'a [Origin]>,
    /// Which rows to use (repeats allowed, as in a bootstrap resample).
    pub rows: &'a [usize],
}

impl Sample<'_> {
    /// True when row `r`'s trusted label (if any) came from a random audit.
    pub fn at_random(&self, r: usize) -> bool {
        self.origins.is_none_or(|o| o[r].is_random_sample())
    }
}

/// An estimated matrix and what the user should know about it.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// The row-stochastic flip matrix.
    pub matrix: Array2<f64>,
    /// The clean posterior q(x) of every row, for estimators that fit one (joint): the
    /// scores then use it instead of inverting T.
    pub clean: Option<Array2<f32>>,
    /// Notes such as fallbacks taken.
    pub notes: Vec<String>,
}

/// Runs `method` on `sample`; `classes` names the classes in messages.
pub fn estimate(method: &Method, sample: &Sample, classes: &[String]) -> Result<Estimate> {
    method.check()?;
    if sample.rows.is_empty() {
        return Err(Error::Usage(
            "no rows to estimate the flip matrix from".into(),
        ));
    }
    let mut notes = Vec::new();
    let mut clean = None;
    let mut matrix = match method {
        Method::Anchor => anchor(sample),
        Method::Quantile { q } => quantile(sample, *q, classes, &mut notes),
        Method::Trusted { fallback_quantile } => {
            trusted(sample, *fallback_quantile, classes, &mut notes)?
        }
        Method::Counting => counting(sample, classes, &mut notes),
        Method::Joint { volume_weight } => {
            let fit = joint(sample, *volume_weight, classes, &mut notes)?;
            clean = Some(fit.clean);
            fit.matrix
        }
    };
    normalize_rows(&mut matrix);
    validate(&matrix).map_err(|e| Error::Internal(format!("{} estimator: {e}", method.name())))?;
    Ok(Estimate {
        matrix,
        clean,
        notes,
    })
}

/// Copies row `row` of the probabilities into T's row `class`.
fn set_row(t: &mut Array2<f64>, class: usize, probs: ArrayView2<f32>, row: usize) {
    for (dst, &src) in t.row_mut(class).iter_mut().zip(probs.row(row)) {
        *dst = src as f64;
    }
}

/// For every class, the first row (in sample order) with the largest probability strictly
/// below `below[class]` (`f32::INFINITY` admits every row).
fn best_rows(sample: &Sample, below: &[f32]) -> Vec<Option<usize>> {
    let k = sample.probs.ncols();
    let per_chunk: Vec<Vec<Option<(f32, usize)>>> = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut best: Vec<Option<(f32, usize)>> = vec![None; k];
            for &r in rows {
                for ((b, &v), &limit) in best.iter_mut().zip(sample.probs.row(r)).zip(below) {
                    if v < limit && b.is_none_or(|(top, _)| v > top) {
                        *b = Some((v, r));
                    }
                }
            }
            best
        })
        .collect();
    let mut best: Vec<Option<(f32, usize)>> = vec![None; k];
    for chunk in per_chunk {
        for (c, candidate) in chunk.into_iter().enumerate() {
            if let Some((v, r)) = candidate {
                if best[c].is_none_or(|(b, _)| v > b) {
                    best[c] = Some((v, r));
                }
            }
        }
    }
    best.into_iter().map(|b| b.map(|(_, r)| r)).collect()
}

fn anchor(sample: &Sample) -> Array2<f64> {
    let k = sample.probs.ncols();
    let mut t = Array2::zeros((k, k));
    for (class, row) in best_rows(sample, &vec![f32::INFINITY; k])
        .into_iter()
        .enumerate()
    {
        match row {
            Some(row) => set_row(&mut t, class, sample.probs, row),
            None => t[[class, class]] = 1.0,
        }
    }
    t
}

/// The sorted position numpy's "higher" quantile takes among `n` ≥ 1 values: ⌈q·(n−1)⌉.
fn higher_index(n: usize, q: f64) -> usize {
    ((q * (n - 1) as f64).ceil() as usize).min(n - 1)
}

/// numpy's `quantile(values, q, method="higher")`: the sorted value at ⌈q·(n−1)⌉.
pub fn quantile_higher(values: &mut [f32], q: f64) -> f32 {
    let index = higher_index(values.len(), q);
    *values.select_nth_unstable_by(index, f32::total_cmp).1
}

/// Bits of a value's order key that pick its histogram bucket in [`column_quantiles`]:
/// 4,096 buckets a class, 32 KiB of counts, so a worker's histograms of 100 classes stay
/// in cache.
const BUCKET_BITS: u32 = 12;

/// A u32 that sorts as `f32::total_cmp` sorts the value (the usual map of IEEE bits).
fn order_key(v: f32) -> u32 {
    let bits = v.to_bits();
    if bits >> 31 == 1 {
        !bits
    } else {
        bits | 1 << 31
    }
}

fn bucket(v: f32) -> usize {
    (order_key(v) >> (32 - BUCKET_BITS)) as usize
}

/// [`quantile_higher`] of every column over the sample's rows, without copying any column
/// out of the row-major array (with 100 classes a column copy read a whole cache line per
/// value, 100 times over). Two passes over the rows in memory order: a histogram of each
/// column's values by the top bits of their order key finds the bucket holding the
/// wanted rank; the second pass keeps only that bucket's values, among which the rank is
/// selected. The result equals `quantile_higher` on the copied column exactly.
pub fn column_quantiles(probs: ArrayView2<f32>, rows: &[usize], q: f64) -> Vec<f32> {
    let k = probs.ncols();
    if rows.is_empty() {
        return vec![f32::NAN; k];
    }
    let index = higher_index(rows.len(), q);
    let buckets = 1usize << BUCKET_BITS;
    // Few, large chunks: each has histograms of k × 4,096 counts to clear and merge.
    let chunk_rows = rows.len().div_ceil(16).max(CHUNK_ROWS);
    let histogram = rows
        .par_chunks(chunk_rows)
        .map(|chunk| {
            let mut counts = vec![0u64; k * buckets];
            for &r in chunk {
                for (c, &v) in probs.row(r).iter().enumerate() {
                    counts[c * buckets + bucket(v)] += 1;
                }
            }
            counts
        })
        .reduce_with(|mut a, b| {
            a.iter_mut().zip(&b).for_each(|(x, y)| *x += y);
            a
        })
        .unwrap_or_default();
    // Per column: the bucket holding rank `index`, and how many values lie below it.
    let target: Vec<(usize, usize)> = histogram
        .chunks_exact(buckets)
        .map(|counts| {
            let mut below = 0usize;
            for (b, &count) in counts.iter().enumerate() {
                if below + count as usize > index {
                    return (b, below);
                }
                below += count as usize;
            }
            (buckets - 1, below)
        })
        .collect();
    let candidates = rows
        .par_chunks(chunk_rows)
        .map(|chunk| {
            let mut kept: Vec<Vec<f32>> = vec![Vec::new(); k];
            for &r in chunk {
                for ((c, &v), &(b, _)) in probs.row(r).iter().enumerate().zip(&target) {
                    if bucket(v) == b {
                        kept[c].push(v);
                    }
                }
            }
            kept
        })
        .reduce_with(|mut a, b| {
            a.iter_mut().zip(b).for_each(|(x, y)| x.extend(y));
            a
        })
        .unwrap_or_default();
    candidates
        .into_par_iter()
        .zip(target)
        .map(|(mut values, (_, below))| {
            *values
                .select_nth_unstable_by(index - below, f32::total_cmp)
                .1
        })
        .collect()
}

fn quantile(sample: &Sample, q: f64, classes: &[String], notes: &mut Vec<String>) -> Array2<f64> {
    let k = sample.probs.ncols();
    let thresholds = column_quantiles(sample.probs, sample.rows, q);
    let below = best_rows(sample, &thresholds);
    // The highest-probability rows are only needed for classes with nothing below, so
    // they are found the first time one is.
    let mut anchors: Option<Array2<f64>> = None;
    let mut t = Array2::zeros((k, k));
    for (class, row) in below.into_iter().enumerate() {
        match row {
            Some(row) => set_row(&mut t, class, sample.probs, row),
            None => {
                notes.push(format!(
                    "class '{}': no row lies strictly below the {q} quantile; its highest-probability row was used",
                    classes[class]
                ));
                let anchors = anchors.get_or_insert_with(|| anchor(sample));
                t.row_mut(class).assign(&anchors.row(class));
            }
        }
    }
    t
}

fn trusted(
    sample: &Sample,
    fallback: Option<f64>,
    classes: &[String],
    notes: &mut Vec<String>,
) -> Result<Array2<f64>> {
    let k = sample.probs.ncols();
    let trusted = sample.trusted.ok_or_else(|| {
        Error::Usage("--method trusted needs a trusted-label column (--trusted COL, or a column named 'trusted')".into())
    })?;
    let (sums, counts) = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut sums = Array2::<f64>::zeros((k, k));
            let mut counts = vec![0usize; k];
            for &r in rows {
                if let Some(class) = trusted[r].filter(|_| sample.at_random(r)) {
                    counts[class] += 1;
                    for (s, &v) in sums.row_mut(class).iter_mut().zip(sample.probs.row(r)) {
                        *s += v as f64;
                    }
                }
            }
            (sums, counts)
        })
        .collect::<Vec<_>>()
        .into_iter()
        .fold(
            (Array2::<f64>::zeros((k, k)), vec![0usize; k]),
            |(mut s, mut c), (s2, c2)| {
                s += &s2;
                c.iter_mut().zip(c2).for_each(|(a, b)| *a += b);
                (s, c)
            },
        );
    let chosen = sample
        .rows
        .iter()
        .filter(|&&r| trusted[r].is_some() && !sample.at_random(r))
        .count();
    if chosen > 0 {
        notes.push(format!(
            "{chosen} trusted label(s) from reviews left out of the trusted estimate: those rows \
             were chosen, not drawn at random, so their average would be biased"
        ));
    }
    let missing: Vec<usize> = (0..k).filter(|&c| counts[c] == 0).collect();
    if !missing.is_empty() && fallback.is_none() {
        let names: Vec<&str> = missing.iter().map(|&c| classes[c].as_str()).collect();
        return Err(Error::Usage(format!(
            "no trusted rows for the class(es) {} from a random audit; audit some at random, or \
             pass --fallback quantile",
            names.join(", ")
        )));
    }
    let mut t = sums;
    for (mut row, &count) in t.rows_mut().into_iter().zip(&counts) {
        if count > 0 {
            row.mapv_inplace(|v| v / count as f64);
        }
    }
    if let Some(q) = fallback.filter(|_| !missing.is_empty()) {
        let by_quantile = quantile(sample, q, classes, notes);
        for &c in &missing {
            t.row_mut(c).assign(&by_quantile.row(c));
            notes.push(format!(
                "class '{}' has no trusted rows from a random audit; its row comes from the {q} \
                 quantile estimator",
                classes[c]
            ));
        }
    }
    Ok(t)
}

fn joint(
    sample: &Sample,
    volume_weight: Option<f64>,
    classes: &[String],
    notes: &mut Vec<String>,
) -> Result<JointFit> {
    let volume_weight =
        volume_weight.unwrap_or(DEFAULT_VOLUME_SCALE / sample.probs.ncols().max(1) as f64);
    let start = counting(sample, classes, notes);
    let params = JointParams {
        volume_weight,
        ..JointParams::default()
    };
    let fit = fit_joint(sample, &start, &params, &mut |_| true)?;
    if !fit.converged {
        notes.push(format!(
            "the joint fit stopped at its iteration limit ({} iterations)",
            fit.iterations
        ));
    }
    Ok(fit)
}

fn counting(sample: &Sample, classes: &[String], notes: &mut Vec<String>) -> Array2<f64> {
    let k = sample.probs.ncols();
    // Thresholds t_j: mean self-confidence p_j over the rows observed as j.
    let mut totals = vec![0.0f64; k];
    let mut observed = vec![0usize; k];
    for &r in sample.rows {
        let y = sample.labels[r];
        totals[y] += sample.probs[[r, y]] as f64;
        observed[y] += 1;
    }
    let thresholds: Vec<f64> = (0..k)
        .map(|j| {
            if observed[j] > 0 {
                totals[j] / observed[j] as f64
            } else {
                f64::INFINITY
            }
        })
        .collect();
    // Confident joint C[observed][true]: a row counts for the most probable of the
    // classes whose probability reaches their threshold.
    let joint = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut c = Array2::<f64>::zeros((k, k));
            for &r in rows {
                let p = sample.probs.row(r);
                let mut best: Option<(f32, usize)> = None;
                for (j, &v) in p.iter().enumerate() {
                    if v as f64 >= thresholds[j] && best.is_none_or(|(b, _)| v > b) {
                        best = Some((v, j));
                    }
                }
                if let Some((_, j)) = best {
                    c[[sample.labels[r], j]] += 1.0;
                }
            }
            c
        })
        .collect::<Vec<_>>()
        .into_iter()
        .fold(Array2::<f64>::zeros((k, k)), |a, b| a + b);
    // Calibrate: each observed row of C scaled to that class's observed count, then the
    // whole made a joint distribution Q(observed, true).
    let mut q = joint;
    for (mut row, &count) in q.rows_mut().into_iter().zip(&observed) {
        let row_sum: f64 = row.sum();
        if row_sum > 0.0 {
            row.mapv_inplace(|v| v / row_sum * count as f64);
        }
    }
    let total: f64 = q.sum();
    if total > 0.0 {
        q.mapv_inplace(|v| v / total);
    }
    // Ours is conditioned on the true class: T[j][i] = Q(i, j) / Σ_i' Q(i', j), the
    // transpose of the paper's orientation.
    let mut t = Array2::zeros((k, k));
    for j in 0..k {
        let column: f64 = q.column(j).sum();
        if column > 0.0 {
            for i in 0..k {
                t[[j, i]] = q[[i, j]] / column;
            }
        } else {
            t[[j, j]] = 1.0;
            notes.push(format!(
                "class '{}': no row is confidently of this class; its row was set to no flips",
                classes[j]
            ));
        }
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn names() -> Vec<String> {
        vec!["a".into(), "b".into(), "c".into()]
    }

    /// Eight rows, three classes, for the anchor-point estimators (values chosen by hand).
    fn eight() -> (Array2<f32>, Vec<usize>) {
        let p = array![
            [0.90, 0.05, 0.05], // 0
            [0.70, 0.20, 0.10], // 1
            [0.60, 0.30, 0.10], // 2
            [0.10, 0.80, 0.10], // 3
            [0.20, 0.70, 0.10], // 4
            [0.05, 0.15, 0.80], // 5
            [0.10, 0.30, 0.60], // 6
            [0.30, 0.30, 0.40], // 7
        ];
        (p, vec![0, 0, 1, 1, 1, 2, 2, 2])
    }

    fn run(
        method: Method,
        p: &Array2<f32>,
        labels: &[usize],
        trusted: Option<&[Option<usize>]>,
    ) -> Result<Estimate> {
        let rows: Vec<usize> = (0..labels.len()).collect();
        let sample = Sample {
            probs: p.view(),
            labels,
            trusted,
            origins: None,
            rows: &rows,
        };
        estimate(&method, &sample, &names())
    }

    fn close(t: &Array2<f64>, expected: &[[f64; 3]; 3]) {
        for i in 0..3 {
            for j in 0..3 {
                assert!(
                    (t[[i, j]] - expected[i][j]).abs() < 1e-6,
                    "T[{i}][{j}] = {} vs {}",
                    t[[i, j]],
                    expected[i][j]
                );
            }
        }
    }

    #[test]
    fn anchor_takes_each_columns_argmax_row() {
        // Column maxima (Patrini et al. 2017, anchor points): a → row 0, b → row 3, c → row 5.
        let (p, y) = eight();
        let t = run(Method::Anchor, &p, &y, None).unwrap().matrix;
        close(
            &t,
            &[[0.90, 0.05, 0.05], [0.10, 0.80, 0.10], [0.05, 0.15, 0.80]],
        );
    }

    #[test]
    fn quantile_takes_the_largest_value_below_the_higher_quantile() {
        // q = 0.8, n = 8: index ⌈0.8·7⌉ = ⌈5.6⌉ = 6 of the sorted column.
        // a sorted: .05 .10 .10 .20 .30 .60 .70 .90 → threshold .70; largest below: .60 (row 2).
        // b sorted: .05 .15 .20 .30 .30 .30 .70 .80 → threshold .70; largest below: .30 (row 2, first).
        // c sorted: .05 .10 .10 .10 .10 .40 .60 .80 → threshold .60; largest below: .40 (row 7).
        let (p, y) = eight();
        let t = run(Method::Quantile { q: 0.8 }, &p, &y, None)
            .unwrap()
            .matrix;
        close(
            &t,
            &[[0.60, 0.30, 0.10], [0.60, 0.30, 0.10], [0.30, 0.30, 0.40]],
        );
        let mut column = vec![0.05f32, 0.9, 0.1, 0.1, 0.2, 0.3, 0.6, 0.7];
        assert_eq!(quantile_higher(&mut column, 0.8), 0.7);
    }

    #[test]
    fn trusted_averages_only_the_rows_audited_at_random() {
        // The audit of trusted_averages_the_audited_rows plus rows 1 and 4 reviewed (as a
        // and as c): reviewed rows were chosen, so the average leaves them out and says so.
        let (p, y) = eight();
        let trusted = [
            Some(0),
            Some(0),
            Some(0),
            Some(1),
            Some(2),
            None,
            Some(2),
            Some(2),
        ];
        let mut origins = [Origin::Audit; 8];
        origins[1] = Origin::Review;
        origins[4] = Origin::Control;
        let rows: Vec<usize> = (0..8).collect();
        let sample = Sample {
            probs: p.view(),
            labels: &y,
            trusted: Some(&trusted),
            origins: Some(&origins),
            rows: &rows,
        };
        let method = Method::Trusted {
            fallback_quantile: None,
        };
        let e = estimate(&method, &sample, &names()).unwrap();
        close(
            &e.matrix,
            &[[0.75, 0.175, 0.075], [0.10, 0.80, 0.10], [0.20, 0.30, 0.50]],
        );
        assert!(e.notes[0].starts_with("2 trusted label(s) from reviews left out"));
    }

    #[test]
    fn trusted_averages_the_audited_rows() {
        // Trusted: rows 0 and 2 are a, row 3 is b, rows 6 and 7 are c.
        let (p, y) = eight();
        let trusted = [
            Some(0),
            None,
            Some(0),
            Some(1),
            None,
            None,
            Some(2),
            Some(2),
        ];
        let t = run(
            Method::Trusted {
                fallback_quantile: None,
            },
            &p,
            &y,
            Some(&trusted),
        )
        .unwrap()
        .matrix;
        close(
            &t,
            &[[0.75, 0.175, 0.075], [0.10, 0.80, 0.10], [0.20, 0.30, 0.50]],
        );
        let partial = [Some(0), None, None, None, None, None, Some(2), None];
        let err = run(
            Method::Trusted {
                fallback_quantile: None,
            },
            &p,
            &y,
            Some(&partial),
        )
        .unwrap_err();
        assert!(
            err.to_string()
                .contains("no trusted rows for the class(es) b"),
            "{err}"
        );
        let fallback = run(
            Method::Trusted {
                fallback_quantile: Some(0.8),
            },
            &p,
            &y,
            Some(&partial),
        )
        .unwrap();
        let row_b: Vec<f64> = fallback.matrix.row(1).to_vec();
        assert!(
            row_b
                .iter()
                .zip([0.6, 0.3, 0.1])
                .all(|(a, b)| (a - b).abs() < 1e-6),
            "{row_b:?}"
        );
        assert!(fallback.notes[0].contains("'b' has no trusted rows"));
    }

    #[test]
    fn counting_by_hand() {
        // Ten rows worked by hand from Northcutt et al. (2021), Sec. 3.1:
        let p = array![
            [0.8, 0.1, 0.1], // y=a
            [0.7, 0.2, 0.1], // y=a
            [0.2, 0.7, 0.1], // y=a
            [0.6, 0.3, 0.1], // y=a
            [0.1, 0.8, 0.1], // y=b
            [0.2, 0.6, 0.2], // y=b
            [0.1, 0.2, 0.7], // y=b
            [0.1, 0.1, 0.8], // y=c
            [0.1, 0.2, 0.7], // y=c
            [0.5, 0.1, 0.4], // y=c
        ];
        let y = [0, 0, 0, 0, 1, 1, 1, 2, 2, 2];
        // Thresholds: t_a = (.8+.7+.2+.6)/4 = .575, t_b = (.8+.6+.2)/3 = .5333, t_c = (.8+.7+.4)/3 = .6333.
        // Confident joint C[observed][true]:
        //   row 0 a≥.575 → (a,a); row 1 → (a,a); row 2 b=.7≥.533 → (a,b); row 3 a=.6≥.575 → (a,a);
        //   row 4 → (b,b); row 5 b=.6 → (b,b); row 6 c=.7≥.633 → (b,c);
        //   row 7 → (c,c); row 8 c=.7 → (c,c); row 9 a=.5 < .575, c=.4 < .633 → not counted.
        //   C = [[3,1,0],[0,2,1],[0,0,2]]; observed counts n = (4, 3, 3).
        // Calibrated: row a ×4/4 = [3,1,0]; row b ×3/3 = [0,2,1]; row c ×3/2 = [0,0,3];
        //   total 10 → Q = [[.3,.1,0],[0,.2,.1],[0,0,.3]].
        // T[j][i] = Q[i][j] / Σ_i Q[i][j]: column a = (.3,0,0) → T[a] = (1,0,0);
        //   column b = (.1,.2,0) → T[b] = (1/3, 2/3, 0); column c = (0,.1,.3) → T[c] = (0, 1/4, 3/4).
        let t = run(Method::Counting, &p, &y, None).unwrap().matrix;
        close(
            &t,
            &[
                [1.0, 0.0, 0.0],
                [1.0 / 3.0, 2.0 / 3.0, 0.0],
                [0.0, 0.25, 0.75],
            ],
        );
    }

    #[test]
    fn results_are_row_stochastic_and_a_bad_quantile_is_refused() {
        let (p, y) = eight();
        for method in [
            Method::Anchor,
            Method::Quantile { q: 0.97 },
            Method::Counting,
        ] {
            let t = run(method, &p, &y, None).unwrap().matrix;
            assert!(validate(&t).is_ok());
        }
        assert!(run(Method::Quantile { q: 1.5 }, &p, &y, None).is_err());
        assert!(run(Method::Quantile { q: 0.0 }, &p, &y, None).is_err());
    }

    /// A seeded stream of uniform f32 in [0, 1) (a plain LCG; tests need no rand).
    fn uniform(seed: u64) -> impl FnMut() -> f32 {
        let mut state = seed;
        move || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 40) as f32 / (1u64 << 24) as f32
        }
    }

    #[test]
    fn column_quantiles_equal_the_quantile_of_the_copied_column() {
        // Columns with many ties, values spread over many magnitudes and tiny values, and
        // rows repeated as a bootstrap resample repeats them: the two-pass bucket search
        // must give exactly numpy's "higher" quantile of the copied column.
        let mut next = uniform(11);
        let (n, k) = (5000, 7);
        let probs = Array2::from_shape_fn((n, k), |(_, c)| {
            let u = next();
            match c % 3 {
                0 => (u * 20.0).floor() / 20.0,
                1 => u.powi(6),
                _ => u * 1e-3,
            }
        });
        let rows: Vec<usize> = (0..n).map(|i| (i * 7919) % n).chain(0..300).collect();
        for q in [0.0, 0.3, 0.97, 0.999, 1.0] {
            let fast = column_quantiles(probs.view(), &rows, q);
            for (c, value) in fast.iter().enumerate() {
                let mut column: Vec<f32> = rows.iter().map(|&r| probs[[r, c]]).collect();
                let expected = quantile_higher(&mut column, q);
                assert_eq!(value.to_bits(), expected.to_bits(), "q {q}, column {c}");
            }
        }
    }
}
