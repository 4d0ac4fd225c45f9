//! Per-row suspect scores: how likely each observed label is wrong, with the suggested
//! true class, and the ranking built from them.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use serde::Serialize;

use super::posterior::{odds, odds_of, wrong_probability, Flip, Posterior, Workspace, BLOCK_ROWS};

mod by_source;
mod selection;
#[cfg(test)]
mod tests;

pub use self::by_source::RowFlips;
pub use self::selection::{auroc, rank, rank_key, rank_values, select_rows, Selection};

/// Which score ranks the rows.
///
/// The two probability scores are kept as odds, P(wrong) / P(right): the probability
/// itself rounds to exactly 1 for the most certain errors (hundreds of rows on a
/// 40,000-row table, and 6-decimal output ties thousands more), which left the head of a
/// worklist in file order. [`ScoreKind::probability`] gives the probability back, and
/// files show the log-odds ([`ScoreKind::written`]), easier to read than odds of 10³⁰.
///
/// The command line's `--score`, a session's `score` and the app's picker list these
/// values; `self` (the earlier name of self-confidence) is still read.
#[derive(
    Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, serde::Deserialize, clap::ValueEnum,
)]
#[serde(rename_all = "kebab-case")]
pub enum ScoreKind {
    /// Odds of P(true ≠ observed | x, observed) under the flip matrix: the clean
    /// posterior (the joint fit's, or p = (Tᵀ)⁻¹p̃ of Patrini et al. 2017), then Bayes'
    /// rule with T[k][observed]. Suggested label: the most probable true class.
    #[default]
    Posterior,
    /// Self-confidence (Northcutt et al. 2021) as odds of 1 − p(observed | x), the same
    /// order as the published 1 − p. Suggested: argmax p.
    #[serde(alias = "self", alias = "selfconfidence")]
    #[value(alias = "self")]
    SelfConfidence,
    /// Normalized margin (Northcutt et al. 2021): max_{j≠observed} p_j − p_observed, in
    /// [−1, 1]. Suggested: argmax p.
    Margin,
}

impl ScoreKind {
    /// The name on the command line and in files.
    pub fn name(self) -> &'static str {
        match self {
            ScoreKind::Posterior => "posterior",
            ScoreKind::SelfConfidence => "self-confidence",
            ScoreKind::Margin => "margin",
        }
    }

    /// Every score, in the order pickers list them.
    pub fn all() -> &'static [ScoreKind] {
        <ScoreKind as clap::ValueEnum>::value_variants()
    }

    /// True when the score is the odds of a probability that the observed label is
    /// wrong, so that a sum of [`ScoreKind::probability`] is an expected number of errors.
    pub fn is_probability(self) -> bool {
        !matches!(self, ScoreKind::Margin)
    }

    /// The probability that the label is wrong, for the probability scores.
    pub fn probability(self, score: f64) -> Option<f64> {
        self.is_probability().then(|| wrong_probability(score))
    }

    /// The range of [`ScoreKind::shown`]: [0, 1] for the probabilities, [−1, 1] for the
    /// margin.
    pub fn shown_range(self) -> (f64, f64) {
        if self.is_probability() {
            (0.0, 1.0)
        } else {
            (-1.0, 1.0)
        }
    }

    /// The score as people read it: the probability, or the margin.
    pub fn shown(self, score: f64) -> f64 {
        self.probability(score).unwrap_or(score)
    }

    /// The score as files write it: the log-odds for the probability scores (0 = even
    /// odds), the margin as it is.
    pub fn written(self, score: f64) -> f64 {
        if self.is_probability() {
            score.ln()
        } else {
            score
        }
    }

    /// The score whose [`ScoreKind::shown`] value is `shown` (a threshold given as a
    /// probability, for the probability scores).
    pub fn from_shown(self, shown: f64) -> f64 {
        if self.is_probability() {
            odds_of(shown)
        } else {
            shown
        }
    }
}

/// One row's verdict.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct RowScore {
    /// 0-based data row.
    pub row: usize,
    /// Higher = more likely mislabelled (odds for the probability scores).
    pub score: f64,
    /// The most likely true class.
    pub suggested: usize,
    /// The best class other than `suggested`.
    pub second_choice: usize,
    /// Its probability (posterior or model probability, as the score uses).
    pub second_choice_prob: f64,
}

/// Scores every row. `t` is needed for [`ScoreKind::Posterior`]; without it (or when it
/// cannot be inverted) the posterior score uses the probabilities as the clean posterior.
pub fn score_rows(
    kind: ScoreKind,
    probs: ArrayView2<f32>,
    labels: &[usize],
    t: Option<Flip>,
) -> Vec<RowScore> {
    over_all_rows(kind, probs, t, labels.len(), |s, post, i, row| {
        s.row_score(kind, i, row, labels[row], post)
    })
}

/// `each(scratch, posterior, i, row)` for every row in order, block by block (row `row`
/// is the block's row `i`, its clean posteriors already computed), on every core.
fn over_all_rows<T: Default + Clone + Send>(
    kind: ScoreKind,
    probs: ArrayView2<f32>,
    t: Option<Flip>,
    rows: usize,
    each: impl Fn(&mut Scratch, &Posterior, usize, usize) -> T + Sync,
) -> Vec<T> {
    let k = probs.ncols();
    let posterior = posterior_for(t, k);
    let contiguous = probs.as_standard_layout();
    let mut out = vec![T::default(); rows];
    out.par_chunks_mut(BLOCK_ROWS).enumerate().for_each_init(
        || Scratch::new(k),
        |s, (block, dst)| {
            let start = block * BLOCK_ROWS;
            s.load(
                kind,
                &contiguous.view(),
                Rows::Range(start, dst.len()),
                &posterior,
            );
            for (i, d) in dst.iter_mut().enumerate() {
                *d = each(s, &posterior, i, start + i);
            }
        },
    );
    out
}

/// The matrix prepared for scoring; without one, the identity (the probabilities then
/// stand for the clean posterior).
fn posterior_for(t: Option<Flip>, k: usize) -> Posterior {
    match t {
        Some(flip) => Posterior::for_flip(flip),
        None => Posterior::new(&Array2::eye(k)),
    }
}

/// Which rows a block holds.
#[derive(Clone, Copy)]
enum Rows<'a> {
    /// `len` consecutive rows from `start`.
    Range(usize, usize),
    /// These rows.
    List(&'a [usize]),
}

/// One worker's buffers for a block of rows.
struct Scratch {
    k: usize,
    /// The block's probabilities, row after row.
    noisy: Vec<f32>,
    /// Their unnormalised clean posteriors (posterior score only).
    clean: Vec<f64>,
    ok: Vec<bool>,
    belief: Vec<f64>,
    workspace: Workspace,
}

impl Scratch {
    fn new(k: usize) -> Self {
        Scratch {
            k,
            noisy: vec![0.0; BLOCK_ROWS * k],
            clean: vec![0.0; BLOCK_ROWS * k],
            ok: vec![false; BLOCK_ROWS],
            belief: vec![0.0; k],
            workspace: Workspace::default(),
        }
    }

    /// Copies the block's probabilities in and, for the posterior score, computes their
    /// clean posteriors in one go.
    fn load(&mut self, kind: ScoreKind, probs: &ArrayView2<f32>, rows: Rows, post: &Posterior) {
        let k = self.k;
        let m = match rows {
            Rows::Range(start, len) => {
                match probs.as_slice() {
                    Some(flat) => {
                        self.noisy[..len * k].copy_from_slice(&flat[start * k..(start + len) * k])
                    }
                    None => self.gather((start..start + len).enumerate(), probs),
                }
                len
            }
            Rows::List(list) => {
                self.gather(list.iter().copied().enumerate(), probs);
                list.len()
            }
        };
        if kind == ScoreKind::Posterior {
            post.clean_rows(
                &self.noisy[..m * k],
                &mut self.clean[..m * k],
                &mut self.ok[..m],
                &mut self.workspace,
            );
        }
    }

    fn gather(&mut self, rows: impl Iterator<Item = (usize, usize)>, probs: &ArrayView2<f32>) {
        let k = self.k;
        for (i, r) in rows {
            self.noisy[i * k..(i + 1) * k]
                .iter_mut()
                .zip(probs.row(r))
                .for_each(|(dst, &src)| *dst = src);
        }
    }

    /// Fills `belief` for the block's row `i` and returns its score. Every scoring path
    /// goes through [`Scratch::score_alone`], so a score computed alone equals the one in
    /// the row's [`RowScore`] bit for bit.
    fn belief_and_score(
        &mut self,
        kind: ScoreKind,
        i: usize,
        observed: usize,
        post: &Posterior,
    ) -> f64 {
        let k = self.k;
        match kind {
            ScoreKind::Posterior => {
                post.belief_from_clean(&self.clean[i * k..(i + 1) * k], observed, &mut self.belief)
            }
            _ => self
                .belief
                .iter_mut()
                .zip(&self.noisy[i * k..(i + 1) * k])
                .for_each(|(b, &p)| *b = p as f64),
        }
        self.score_alone(kind, i, observed, post)
    }

    /// The score of the block's row `i` alone (no normalised belief: ten divisions a row
    /// for ten classes were a good part of re-ranking's time).
    fn score_alone(&mut self, kind: ScoreKind, i: usize, observed: usize, post: &Posterior) -> f64 {
        let k = self.k;
        match kind {
            ScoreKind::Posterior => {
                post.wrong_odds_from_clean(&self.clean[i * k..(i + 1) * k], observed)
            }
            ScoreKind::SelfConfidence => {
                let row = &self.noisy[i * k..(i + 1) * k];
                let others: f64 = row
                    .iter()
                    .enumerate()
                    .filter(|&(j, _)| j != observed)
                    .map(|(_, &p)| p as f64)
                    .sum();
                odds(others, row[observed] as f64)
            }
            ScoreKind::Margin => {
                let row = &self.noisy[i * k..(i + 1) * k];
                let best_other = row
                    .iter()
                    .enumerate()
                    .filter(|&(j, _)| j != observed)
                    .map(|(_, &p)| p as f64)
                    .fold(f64::NEG_INFINITY, f64::max);
                best_other - row[observed] as f64
            }
        }
    }

    fn row_score(
        &mut self,
        kind: ScoreKind,
        i: usize,
        row: usize,
        observed: usize,
        post: &Posterior,
    ) -> RowScore {
        let score = self.belief_and_score(kind, i, observed, post);
        let (suggested, second_choice) = top_two(&self.belief);
        RowScore {
            row,
            score,
            suggested,
            second_choice,
            second_choice_prob: self.belief[second_choice],
        }
    }
}

/// Only the score of every row (what ranking needs; 8 bytes a row instead of a whole
/// [`RowScore`]). Equal to the `score` field [`score_rows`] gives.
pub fn score_values(
    kind: ScoreKind,
    probs: ArrayView2<f32>,
    labels: &[usize],
    t: Option<Flip>,
) -> Vec<f64> {
    over_all_rows(kind, probs, t, labels.len(), |s, post, i, row| {
        s.score_alone(kind, i, labels[row], post)
    })
}

/// The full [`RowScore`] of the given rows, in the given order.
pub fn score_selected(
    kind: ScoreKind,
    probs: ArrayView2<f32>,
    labels: &[usize],
    t: Option<Flip>,
    rows: &[usize],
) -> Vec<RowScore> {
    let k = probs.ncols();
    let posterior = posterior_for(t, k);
    let mut out = vec![RowScore::default(); rows.len()];
    out.par_chunks_mut(BLOCK_ROWS)
        .zip(rows.par_chunks(BLOCK_ROWS))
        .for_each_init(
            || Scratch::new(k),
            |s, (dst, list)| {
                s.load(kind, &probs, Rows::List(list), &posterior);
                for (i, (d, &r)) in dst.iter_mut().zip(list).enumerate() {
                    *d = s.row_score(kind, i, r, labels[r], &posterior);
                }
            },
        );
    out
}

/// Indices of the largest and second-largest values (first index wins ties).
fn top_two(values: &[f64]) -> (usize, usize) {
    let mut best = 0;
    for (i, &v) in values.iter().enumerate() {
        if v > values[best] {
            best = i;
        }
    }
    let mut second = if best == 0 {
        1.min(values.len() - 1)
    } else {
        0
    };
    for (i, &v) in values.iter().enumerate() {
        if i != best && v > values[second] {
            second = i;
        }
    }
    (best, second)
}
