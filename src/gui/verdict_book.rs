//! The verdicts a reviewer gives inside the app, with undo and redo, and the review round
//! they may belong to. No drawing here, so every rule is unit-tested.
//!
//! A row has at most one verdict; a later one replaces it (one undo step). Each verdict
//! records how its row came to be reviewed ([`Origin`]): a control row of the current
//! round (drawn at random, so an unbiased sample of the rows the list left out) or a
//! row chosen by the reviewer or the ranking (a selected sample, never counted as a
//! random one).

use rustc_hash::FxHashMap;

use crate::data::origin::Origin;
use crate::io::review::Verdict;
use crate::io::worklist::Slice;
use crate::noise::scores::{RowScore, ScoreKind};

/// Undo steps kept; older ones are forgotten.
pub const VERDICT_UNDO_DEPTH: usize = 10_000;

/// One change: the row's verdict before and after.
#[derive(Debug, Clone, PartialEq)]
struct Step {
    row: usize,
    before: Option<Verdict>,
    after: Option<Verdict>,
}

/// One row of a review round, in the order the reviewer sees them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RoundRow {
    /// 0-based data row.
    pub row: usize,
    /// Listed suspect or control row (never shown to the reviewer during the round).
    pub slice: Slice,
    /// 1-based rank among all rows when the round started.
    pub rank: usize,
    /// What flipmend thought of the row when the round started (the key of an exported
    /// round carries it, and the review is measured against it).
    pub score: RowScore,
}

/// A review round: the worklist's rows (listed suspects and random control rows,
/// shuffled together) reviewed inside the app instead of in an exported file.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Round {
    /// The rows in review order.
    pub rows: Vec<RoundRow>,
    /// The score the rows were ranked by.
    pub kind: ScoreKind,
}

impl Round {
    /// The slice of `row` in this round, if it is one of its rows.
    pub fn slice_of(&self, row: usize) -> Option<Slice> {
        self.rows.iter().find(|r| r.row == row).map(|r| r.slice)
    }

    /// flipmend's probability, when the round started, that `r`'s label was wrong
    /// (when the score is a probability).
    pub fn p_wrong(&self, r: &RoundRow) -> Option<f64> {
        self.kind.probability(r.score.score)
    }
}

/// Every verdict given in the app, in the order given, with its history.
#[derive(Debug, Clone, Default)]
pub struct VerdictBook {
    verdicts: Vec<Verdict>,
    /// Row → index into `verdicts`.
    index: FxHashMap<usize, usize>,
    undo: Vec<Step>,
    redo: Vec<Step>,
    /// Bumped on every change, so work done for older verdicts is recognised.
    version: u64,
}

impl VerdictBook {
    /// A book holding `verdicts` (a session's), without history; a later verdict for
    /// the same row replaces an earlier one.
    pub fn with_verdicts(verdicts: impl IntoIterator<Item = Verdict>) -> Self {
        let mut book = VerdictBook::default();
        for v in verdicts {
            book.put(v.row, Some(v));
        }
        book
    }

    /// Every verdict, in the order given.
    pub fn verdicts(&self) -> &[Verdict] {
        &self.verdicts
    }

    /// The verdict of `row`, if any.
    pub fn get(&self, row: usize) -> Option<&Verdict> {
        self.index.get(&row).map(|&i| &self.verdicts[i])
    }

    /// How many rows have a verdict.
    pub fn len(&self) -> usize {
        self.verdicts.len()
    }

    /// True when no verdict was given.
    pub fn is_empty(&self) -> bool {
        self.verdicts.is_empty()
    }

    /// Bumped on every change.
    pub fn version(&self) -> u64 {
        self.version
    }

    /// Records that `row`'s true class is `label`; `round` decides the origin (a control
    /// row of it is [`Origin::Control`], anything else [`Origin::Review`]). Returns
    /// false, changing nothing, when the row already has that verdict.
    pub fn give(&mut self, row: usize, label: usize, round: Option<&Round>) -> bool {
        let origin = match round.and_then(|r| r.slice_of(row)) {
            Some(Slice::Control) => Origin::Control,
            _ => Origin::Review,
        };
        let after = Verdict {
            row,
            label,
            line: 0,
            origin,
        };
        let before = self.get(row).cloned();
        if before.as_ref() == Some(&after) {
            return false;
        }
        self.put(row, Some(after.clone()));
        self.undo.push(Step {
            row,
            before,
            after: Some(after),
        });
        if self.undo.len() > VERDICT_UNDO_DEPTH {
            self.undo.remove(0);
        }
        self.redo.clear();
        true
    }

    /// Takes back the last change; returns the row it touched.
    pub fn undo(&mut self) -> Option<usize> {
        let step = self.undo.pop()?;
        self.put(step.row, step.before.clone());
        let row = step.row;
        self.redo.push(step);
        Some(row)
    }

    /// Gives back the last change taken back; returns the row it touched.
    pub fn redo(&mut self) -> Option<usize> {
        let step = self.redo.pop()?;
        self.put(step.row, step.after.clone());
        let row = step.row;
        self.undo.push(step);
        Some(row)
    }

    /// True when there is a change to take back.
    pub fn can_undo(&self) -> bool {
        !self.undo.is_empty()
    }

    /// True when there is a change to give back.
    pub fn can_redo(&self) -> bool {
        !self.redo.is_empty()
    }

    /// Sets (or with `None` removes) `row`'s verdict, keeping the index right.
    fn put(&mut self, row: usize, verdict: Option<Verdict>) {
        self.version += 1;
        match (self.index.get(&row).copied(), verdict) {
            (Some(i), Some(v)) => self.verdicts[i] = v,
            (None, Some(v)) => {
                self.index.insert(row, self.verdicts.len());
                self.verdicts.push(v);
            }
            (Some(i), None) => {
                self.verdicts.remove(i);
                self.index.remove(&row);
                for j in self.index.values_mut() {
                    if *j > i {
                        *j -= 1;
                    }
                }
            }
            (None, None) => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn round() -> Round {
        let row = |row, slice| RoundRow {
            row,
            slice,
            rank: row + 1,
            score: RowScore::default(),
        };
        Round {
            rows: vec![row(3, Slice::Listed), row(7, Slice::Control)],
            kind: ScoreKind::Posterior,
        }
    }

    #[test]
    fn a_control_row_of_the_round_is_the_only_random_verdict() {
        let mut book = VerdictBook::default();
        let r = round();
        assert!(book.give(3, 1, Some(&r)));
        assert!(book.give(7, 0, Some(&r)));
        assert!(book.give(9, 2, Some(&r)));
        assert!(book.give(4, 2, None));
        let origins: Vec<Origin> = book.verdicts().iter().map(|v| v.origin).collect();
        assert_eq!(
            origins,
            [
                Origin::Review,
                Origin::Control,
                Origin::Review,
                Origin::Review
            ]
        );
        assert!(origins.iter().all(|o| !o.is_random_sample()));
    }

    #[test]
    fn a_second_verdict_replaces_the_first_and_undo_restores_it() {
        let mut book = VerdictBook::default();
        book.give(5, 0, None);
        book.give(6, 1, None);
        assert!(
            !book.give(6, 1, None),
            "the same verdict again changes nothing"
        );
        book.give(5, 2, None);
        assert_eq!(book.len(), 2);
        assert_eq!(book.get(5).unwrap().label, 2);
        assert_eq!(book.undo(), Some(5));
        assert_eq!(book.get(5).unwrap().label, 0);
        assert_eq!(book.undo(), Some(6));
        assert_eq!(book.get(6), None);
        assert_eq!(book.verdicts().len(), 1);
        assert_eq!(book.redo(), Some(6));
        assert_eq!(book.get(6).unwrap().label, 1);
        // A new verdict after an undo forgets what could be redone.
        book.give(8, 1, None);
        assert!(!book.can_redo());
    }

    #[test]
    fn removing_a_verdict_keeps_the_others_findable() {
        let mut book = VerdictBook::with_verdicts((0..5).map(|row| Verdict {
            row: row * 10,
            label: row,
            line: 0,
            origin: Origin::Review,
        }));
        book.give(99, 1, None);
        book.undo();
        book.give(20, 4, None);
        book.undo();
        for row in 0..5 {
            assert_eq!(book.get(row * 10).unwrap().label, row);
        }
        let before = book.version();
        book.redo();
        assert!(book.version() > before);
        assert_eq!(book.get(20).unwrap().label, 4);
    }
}
