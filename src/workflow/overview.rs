//! The few numbers a person wants first, before any table: how many rows are probably
//! mislabelled (with a 90 % interval that says where it comes from), which classes and
//! label sources are noisiest, the largest flips in words, and what reviewing the
//! suspects a worklist lists should find. Plain data, computed from what the estimate, the bootstrap,
//! the diagnostics and the ranking already hold; the app's Overview view draws it.
//!
//! Every figure is an estimate from a model, meant to direct qualified human review.
//!
//! The interval of the mislabelled count combines two errors, each as a 90 % half-width,
//! in quadrature (independent errors add in variance):
//! - the matrix's own uncertainty: the bootstrap's 90 % band of each class's noise rate
//!   1 − T[i][i], weighted by the estimated class shares π. Adding the weighted ends is
//!   at least as wide as the band of the weighted sum itself (an sd of a sum is at most the
//!   sum of the sds), so this part errs wide;
//! - the count's own spread: given calibrated p_wrong, the number of wrong rows is a sum
//!   of independent Bernoulli(p) draws (Poisson-binomial), variance Σ p(1 − p).

use ndarray::ArrayView2;

use crate::learn::metrics::Z_90;
use crate::noise::bootstrap::{Interval, SourceIntervals};
use crate::noise::scores::{RowScore, ScoreKind};
use crate::noise::sources::BySource;
use crate::noise::Diagnostics;
use crate::workflow::ranking::Ranking;

/// Flips listed in words.
pub const FLIPS_LISTED: usize = 5;
/// Classes (and label sources) listed as the noisiest.
pub const NOISIEST_LISTED: usize = 3;

/// What the overview is computed from; any part may be missing (no bootstrap yet, no
/// ranking yet, no source column).
#[derive(Debug, Clone, Copy)]
pub struct Inputs<'a> {
    /// Class names, in matrix order.
    pub classes: &'a [String],
    /// The current flip matrix (rows = true class).
    pub matrix: ArrayView2<'a, f64>,
    /// Bootstrap intervals of that matrix's cells (pass none when the matrix was edited
    /// by hand: the intervals belong to the estimate).
    pub interval: Option<&'a Interval>,
    /// Diagnostics of the matrix (the class shares π weight the noise rates).
    pub diagnostics: Option<&'a Diagnostics>,
    /// The label sources' matrices, with a source column.
    pub sources: Option<&'a BySource>,
    /// Their bootstrap intervals.
    pub source_intervals: Option<&'a SourceIntervals>,
    /// The ranking of the rows.
    pub ranking: Option<&'a Ranking>,
    /// Rows of the data.
    pub rows: usize,
    /// The suspects a worklist would list now, each with its rank (the worklist head:
    /// the budget less its control rows, through the filters), as
    /// [`listed_head`](crate::workflow::worklist::listed_head) gives them.
    pub listed: &'a [(RowScore, usize)],
}

/// The estimated number of mislabelled rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Mislabelled {
    /// Expected count: Σ p_wrong over every row.
    pub rows: f64,
    /// `rows` / rows of the data.
    pub share: f64,
    /// 90 % interval of the count (see the module doc), once the bootstrap has run.
    pub interval: Option<[f64; 2]>,
    /// True when the interval includes the count's binomial spread (needs every row's
    /// p_wrong: a complete ranking by a probability score).
    pub spread_included: bool,
}

impl Mislabelled {
    /// The interval as shares of the rows.
    pub fn share_interval(&self, total_rows: usize) -> Option<[f64; 2]> {
        let n = total_rows.max(1) as f64;
        self.interval.map(|[a, b]| [a / n, b / n])
    }
}

/// One class's noise rate 1 − T[i][i].
#[derive(Debug, Clone, PartialEq)]
pub struct ClassNoise {
    /// Class index.
    pub class: usize,
    /// Its name.
    pub name: String,
    /// 1 − T[i][i].
    pub rate: f64,
    /// 90 % bootstrap interval.
    pub interval: Option<[f64; 2]>,
}

/// One label source's noise rate (share of its rows whose label is wrong).
#[derive(Debug, Clone, PartialEq)]
pub struct SourceNoise {
    /// Source index (as the source filter takes it).
    pub source: u32,
    /// Its name.
    pub name: String,
    /// Its rows.
    pub rows: usize,
    /// Estimated share of its rows mislabelled.
    pub rate: f64,
    /// 90 % bootstrap interval.
    pub interval: Option<[f64; 2]>,
    /// Too few rows of its own: the overall matrix stands in.
    pub pooled: bool,
}

/// One off-diagonal cell of the matrix: true class typed as another.
#[derive(Debug, Clone, PartialEq)]
pub struct FlipCell {
    /// True class (row of T).
    pub true_class: usize,
    /// Observed class (column of T).
    pub observed: usize,
    /// Name of the true class.
    pub true_name: String,
    /// Name of the observed class.
    pub observed_name: String,
    /// T[true][observed].
    pub value: f64,
    /// 90 % bootstrap interval of the cell.
    pub interval: Option<[f64; 2]>,
}

impl FlipCell {
    /// "cardboard typed as paper: 14 % (11–17 %)".
    pub fn words(&self) -> String {
        format!(
            "{} typed as {}: {}",
            self.true_name,
            self.observed_name,
            percent_with(self.value, self.interval)
        )
    }
}

/// What reviewing the suspects a worklist lists should find.
#[derive(Debug, Clone, PartialEq)]
pub struct ReviewYield {
    /// Rows reviewed: the listed suspects (control rows are drawn at random and not
    /// counted).
    pub rows: usize,
    /// Expected wrong labels among them: Σ p_wrong.
    pub expected: f64,
    /// 90 % binomial spread of the count if the p_wrong are calibrated.
    pub interval: [f64; 2],
}

/// The whole summary.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Overview {
    /// Estimated mislabelled rows (none before the ranking or the diagnostics).
    pub mislabelled: Option<Mislabelled>,
    /// The noisiest classes first.
    pub noisiest_classes: Vec<ClassNoise>,
    /// The noisiest label sources first (empty without a source column).
    pub noisiest_sources: Vec<SourceNoise>,
    /// The largest off-diagonal cells first.
    pub largest_flips: Vec<FlipCell>,
    /// The next step's yield (none without a probability score's ranking).
    pub review: Option<ReviewYield>,
}

/// Computes the overview. Never panics: missing parts give empty fields, non-finite
/// cells are left out of the lists.
pub fn summarize(inputs: &Inputs) -> Overview {
    let interval = inputs
        .interval
        .filter(|i| i.low.dim() == inputs.matrix.dim() && i.high.dim() == inputs.matrix.dim());
    let inputs = Inputs {
        interval,
        ..*inputs
    };
    Overview {
        mislabelled: mislabelled(&inputs),
        noisiest_classes: noisiest_classes(&inputs),
        noisiest_sources: noisiest_sources(&inputs),
        largest_flips: largest_flips(&inputs),
        review: inputs
            .ranking
            .and_then(|r| worklist_yield(r.kind, inputs.listed)),
    }
}

/// Cumulative expected wrong labels found after reviewing k rows, k = 0..=n, in the
/// order given (entry 0 is 0). A p_wrong outside [0, 1] is clipped; NaN counts as 0.
pub fn yield_curve(p_wrong_in_rank_order: impl Iterator<Item = f64>) -> Vec<f64> {
    let mut curve = vec![0.0];
    let mut total = 0.0;
    for p in p_wrong_in_rank_order {
        total += clip(p);
        curve.push(total);
    }
    curve
}

/// Every ranked row's p_wrong, most suspect first; none for the margin score, which is
/// not a probability.
pub fn p_wrong_in_rank_order(ranking: &Ranking) -> Option<impl Iterator<Item = f64> + '_> {
    let kind = ranking.kind;
    kind.is_probability().then(|| {
        ranking
            .ranked
            .iter()
            .filter_map(move |s| kind.probability(s.score))
    })
}

/// Standard deviation of a sum of independent Bernoulli(p) draws: √Σ p(1 − p).
pub fn binomial_spread(p_wrong: impl Iterator<Item = f64>) -> f64 {
    p_wrong.map(clip).map(|p| p * (1.0 - p)).sum::<f64>().sqrt()
}

/// A share as people read it: whole percents from 10 % up, one decimal below.
pub fn percent(share: f64) -> String {
    if !share.is_finite() {
        return "–".into();
    }
    let digits = if share.abs() >= 0.095 { 0 } else { 1 };
    format!("{:.*} %", digits, 100.0 * share)
}

/// A share with its interval at the same precision: "14 % (11–17 %)".
pub fn percent_with(share: f64, interval: Option<[f64; 2]>) -> String {
    match interval.filter(|i| i.iter().all(|v| v.is_finite())) {
        Some(range) => format!("{} ({})", percent(share), percent_range(range, share)),
        None => percent(share),
    }
}

/// An interval of shares at the precision [`percent`] gives `like`: "11–17 %".
pub fn percent_range([low, high]: [f64; 2], like: f64) -> String {
    let digits = if like.abs() >= 0.095 { 0 } else { 1 };
    format!("{:.*}–{:.*} %", digits, 100.0 * low, digits, 100.0 * high)
}

fn clip(p: f64) -> f64 {
    if p.is_nan() {
        0.0
    } else {
        p.clamp(0.0, 1.0)
    }
}

/// Σ p_wrong from the ranking (the same p as the spread and the yield), or the
/// diagnostics' expected count under the margin score.
fn mislabelled(inputs: &Inputs) -> Option<Mislabelled> {
    let from_ranking = inputs.ranking.and_then(|r| r.expected_errors);
    let rows = from_ranking.or(inputs.diagnostics.map(|d| d.expected_mislabeled))?;
    if !rows.is_finite() {
        return None;
    }
    let n = inputs.rows as f64;
    let spread = inputs
        .ranking
        .filter(|r| r.is_complete())
        .and_then(p_wrong_in_rank_order)
        .map(binomial_spread);
    let interval = noise_band(inputs).map(|[below, above]| {
        let count = Z_90 * spread.unwrap_or(0.0);
        let low = rows - (n * below).hypot(count);
        let high = rows + (n * above).hypot(count);
        [low.max(0.0), high.min(n)]
    });
    Some(Mislabelled {
        rows,
        share: if n > 0.0 { rows / n } else { 0.0 },
        interval,
        spread_included: spread.is_some(),
    })
}

/// How far the share Σ π_i(1 − T[i][i]) reaches below and above its point value when
/// each noise rate moves to the ends of its bootstrap interval.
fn noise_band(inputs: &Inputs) -> Option<[f64; 2]> {
    let interval = inputs.interval?;
    let prior = &inputs.diagnostics?.clean_prior;
    let k = inputs.matrix.nrows();
    if prior.len() != k {
        return None;
    }
    let weighted =
        |diag: &dyn Fn(usize) -> f64| -> f64 { (0..k).map(|i| prior[i] * (1.0 - diag(i))).sum() };
    let point = weighted(&|i| inputs.matrix[[i, i]]);
    let low = weighted(&|i| interval.high[[i, i]]);
    let high = weighted(&|i| interval.low[[i, i]]);
    let band = [(point - low).max(0.0), (high - point).max(0.0)];
    band.iter().all(|v| v.is_finite()).then_some(band)
}

/// The classes by noise rate, highest first (ties in class order).
fn noisiest_classes(inputs: &Inputs) -> Vec<ClassNoise> {
    let k = inputs.matrix.nrows().min(inputs.classes.len());
    let mut classes: Vec<ClassNoise> = (0..k)
        .map(|i| ClassNoise {
            class: i,
            name: inputs.classes[i].clone(),
            rate: 1.0 - inputs.matrix[[i, i]],
            interval: inputs
                .interval
                .map(|b| [1.0 - b.high[[i, i]], 1.0 - b.low[[i, i]]]),
        })
        .filter(|c| c.rate.is_finite())
        .collect();
    classes.sort_by(|a, b| b.rate.total_cmp(&a.rate).then(a.class.cmp(&b.class)));
    classes.truncate(NOISIEST_LISTED);
    classes
}

/// The label sources by noise rate, highest first.
fn noisiest_sources(inputs: &Inputs) -> Vec<SourceNoise> {
    let Some(sources) = inputs.sources else {
        return Vec::new();
    };
    let rates = inputs
        .source_intervals
        .map(|i| &i.noise_rates)
        .filter(|r| r.len() == sources.sources.len());
    sources
        .noisiest_first()
        .into_iter()
        .map(|s| {
            let source = &sources.sources[s];
            SourceNoise {
                source: s as u32,
                name: source.name.clone(),
                rows: source.rows,
                rate: source.noise_rate,
                interval: rates.map(|r| r[s]),
                pooled: source.pooled,
            }
        })
        .filter(|s| s.rate.is_finite())
        .take(NOISIEST_LISTED)
        .collect()
}

/// The largest off-diagonal cells of the matrix (ties in class order).
fn largest_flips(inputs: &Inputs) -> Vec<FlipCell> {
    let k = inputs.matrix.nrows().min(inputs.classes.len());
    let m = inputs.matrix;
    let mut cells: Vec<(usize, usize)> = (0..k)
        .flat_map(|i| (0..k).filter(move |&j| j != i).map(move |j| (i, j)))
        .filter(|&(i, j)| m[[i, j]].is_finite() && m[[i, j]] > 0.0)
        .collect();
    cells.sort_by(|a, b| m[*b].total_cmp(&m[*a]).then(a.cmp(b)));
    cells
        .into_iter()
        .take(FLIPS_LISTED)
        .map(|(i, j)| FlipCell {
            true_class: i,
            observed: j,
            true_name: inputs.classes[i].clone(),
            observed_name: inputs.classes[j].clone(),
            value: m[[i, j]],
            interval: inputs.interval.map(|b| [b.low[[i, j]], b.high[[i, j]]]),
        })
        .collect()
}

/// What reviewing the `listed` suspects (a worklist head, without its control rows)
/// should find: Σ p_wrong over exactly those rows, with its binomial spread; none for
/// the margin score. The one figure of the kind: the Overview and the Suspects view's
/// yield plot both call it on the same rows, so they cannot disagree.
pub fn worklist_yield(kind: ScoreKind, listed: &[(RowScore, usize)]) -> Option<ReviewYield> {
    if !kind.is_probability() {
        return None;
    }
    let p_wrong: Vec<f64> = listed
        .iter()
        .filter_map(|(s, _)| kind.probability(s.score))
        .collect();
    let expected = *yield_curve(p_wrong.iter().copied()).last()?;
    let half = Z_90 * binomial_spread(p_wrong.iter().copied());
    Some(ReviewYield {
        rows: p_wrong.len(),
        expected,
        interval: [
            (expected - half).max(0.0),
            (expected + half).min(p_wrong.len() as f64),
        ],
    })
}

#[cfg(test)]
mod tests;
