//! Scores when each row's label follows its own source's matrix: row r is scored under
//! T_{s(r)}, P(true = k | x, observed = j, s) ∝ q_k(x)·T_s[k][j], with the clean
//! posterior q shared by every source.

use ndarray::ArrayView2;

use super::{score_selected, score_values, RowScore, ScoreKind};
use crate::noise::posterior::Flip;

/// The matrices the rows are scored under: one for every row, or one per source.
#[derive(Debug, Clone)]
pub enum RowFlips<'a> {
    /// One matrix (or none: the probabilities stand for the clean posterior).
    One(Option<Flip<'a>>),
    /// Row r under `flips[of_row[r]]`.
    BySource {
        /// One per source.
        flips: Vec<Flip<'a>>,
        /// The source of every row.
        of_row: &'a [u32],
    },
}

impl RowFlips<'_> {
    /// Every row's score (see [`score_values`]).
    pub fn values(&self, kind: ScoreKind, probs: ArrayView2<f32>, labels: &[usize]) -> Vec<f64> {
        match self {
            RowFlips::One(flip) => score_values(kind, probs, labels, *flip),
            RowFlips::BySource { .. } => {
                let mut scores = vec![0.0; labels.len()];
                let all: Vec<usize> = (0..labels.len()).collect();
                for verdict in self.selected(kind, probs, labels, &all) {
                    scores[verdict.row] = verdict.score;
                }
                scores
            }
        }
    }

    /// The full verdict of the given rows, in the given order (see [`score_selected`]).
    pub fn selected(
        &self,
        kind: ScoreKind,
        probs: ArrayView2<f32>,
        labels: &[usize],
        rows: &[usize],
    ) -> Vec<RowScore> {
        match self {
            RowFlips::One(flip) => score_selected(kind, probs, labels, *flip, rows),
            RowFlips::BySource { flips, of_row } => {
                let mut groups: Vec<Vec<usize>> = vec![Vec::new(); flips.len()];
                let mut place: Vec<Vec<usize>> = vec![Vec::new(); flips.len()];
                for (i, &r) in rows.iter().enumerate() {
                    groups[of_row[r] as usize].push(r);
                    place[of_row[r] as usize].push(i);
                }
                let mut out = vec![RowScore::default(); rows.len()];
                for (s, flip) in flips.iter().enumerate() {
                    let verdicts = score_selected(kind, probs, labels, Some(*flip), &groups[s]);
                    for (verdict, &i) in verdicts.into_iter().zip(&place[s]) {
                        out[i] = verdict;
                    }
                }
                out
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn each_row_is_scored_under_its_own_sources_matrix() {
        // Bayes' rule by hand: q = (0.6, 0.4), observed 1. Source 0 never flips 0→1,
        // so the label is surely right (P(wrong) = 0); source 1 flips 0→1 half the time:
        // P(true 0 | observed 1) = 0.6·0.5 / (0.6·0.5 + 0.4·1) = 0.3/0.7.
        let clean = array![[0.6f32, 0.4], [0.6, 0.4]];
        let never = array![[1.0, 0.0], [0.0, 1.0]];
        let half = array![[0.5, 0.5], [0.0, 1.0]];
        let of_row = [0u32, 1];
        let flips = RowFlips::BySource {
            flips: vec![Flip::clean(&never), Flip::clean(&half)],
            of_row: &of_row,
        };
        let scores = flips.values(ScoreKind::Posterior, clean.view(), &[1, 1]);
        let wrong: Vec<f64> = scores
            .iter()
            .map(|&s| ScoreKind::Posterior.probability(s).unwrap())
            .collect();
        assert!(wrong[0].abs() < 1e-6, "{wrong:?}");
        assert!((wrong[1] - 0.3 / 0.7).abs() < 1e-6, "{wrong:?}");
        let picked = flips.selected(ScoreKind::Posterior, clean.view(), &[1, 1], &[1, 0]);
        assert_eq!((picked[0].row, picked[1].row), (1, 0), "the order given");
        assert_eq!(picked[0].score, scores[1]);
    }
}
