//! The estimators that read every row (anchor, quantile, trusted, counting) as passes
//! over rows that come a part at a time, in table order: a table too large to hold is
//! streamed through them (`workflow::streamed`) and they give the in-memory estimate
//! exactly. Sums are taken in the order the in-memory estimators take them (counting's
//! thresholds row by row; the trusted sums in runs of [`CHUNK_ROWS`]), maxima keep the
//! first row in table order, and the quantile is found by refining a histogram of each
//! column's order keys (12, 12, then 8 bits: three passes) instead of selecting among
//! values held in memory ([`super::anchor_passes`]).
//!
//! A pass can also be split among workers, as a distributed engine splits a table:
//! each takes a [`Passes::share`] of the pass (what earlier passes fixed, no sums), feeds
//! it its rows, and the shares [`Passes::merge`] back in any order. Counts and sums add
//! (equal to one pass up to rounding, since they add in another order), and a maximum
//! keeps the row first in the table, so anchors are the one-pass rows
//! (`merge_tests.rs`).

use ndarray::{Array2, ArrayView2};

use super::anchor_passes::{Best, Quantile};
use super::counting::{confident_class, from_confident_joint, Thresholds};
use super::trusted::{from_trusted_sums, TrustedSums};
use super::{Method, CHUNK_ROWS};
use crate::error::{Error, Result};

/// Rows of one part, in class terms.
#[derive(Debug, Clone, Copy)]
pub struct Rows<'a> {
    /// Table row of the part's first row: ties between parts merged in any order go to
    /// the row first in the table, as in one pass.
    pub first_row: usize,
    /// `rows × classes` probabilities.
    pub probs: ArrayView2<'a, f32>,
    /// Observed class of each row.
    pub labels: &'a [usize],
    /// Trusted class of each row, where audited.
    pub trusted: Option<&'a [Option<usize>]>,
    /// Whether each row's trusted label came from a random audit.
    pub at_random: Option<&'a [bool]>,
}

/// An estimator run as passes over every row. It serialises (serde) so that a
/// distributed engine can send a share to its workers and their states back.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct Passes {
    k: usize,
    state: State,
    /// Rows seen in the current pass.
    rows: usize,
}

#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
enum State {
    Anchor(Best),
    Quantile(Quantile),
    Counting {
        thresholds: Thresholds,
        joint: Option<Array2<f64>>,
    },
    Trusted {
        sums: TrustedSums,
        fallback: Option<(f64, Quantile)>,
        done: bool,
    },
}

impl Passes {
    /// The passes of `method` over rows of `k` classes; `None` for the joint fit, which
    /// is fitted on a sample instead.
    pub fn new(method: &Method, k: usize) -> Option<Self> {
        let state = match method {
            Method::Anchor => State::Anchor(Best::new(k, None)),
            Method::Quantile { q } => State::Quantile(Quantile::new(k, *q)),
            Method::Counting => State::Counting {
                thresholds: Thresholds::new(k),
                joint: None,
            },
            Method::Trusted { fallback_quantile } => State::Trusted {
                sums: TrustedSums::new(k),
                fallback: fallback_quantile.map(|q| (q, Quantile::new(k, q))),
                done: false,
            },
            Method::Joint { .. } => return None,
        };
        Some(Passes { k, state, rows: 0 })
    }

    /// True while another pass over the rows is needed.
    pub fn wants_pass(&self) -> bool {
        match &self.state {
            State::Anchor(best) => !best.done,
            State::Quantile(q) => !q.done(),
            State::Counting { joint, .. } => joint.is_none(),
            State::Trusted {
                sums,
                fallback,
                done,
            } => {
                !done
                    || (sums.missing().is_some()
                        && fallback.as_ref().is_some_and(|(_, q)| !q.done()))
            }
        }
    }

    /// The next rows of the current pass, in table order.
    pub fn rows(&mut self, rows: &Rows) {
        self.rows += rows.labels.len();
        let k = self.k;
        match &mut self.state {
            State::Anchor(best) => best.rows(rows.probs, rows.first_row),
            State::Quantile(q) => q.rows(rows.probs, rows.first_row),
            State::Counting { thresholds, joint } => match joint {
                None if !thresholds.done => thresholds.rows(rows.probs, rows.labels),
                _ => {
                    let joint = joint.get_or_insert_with(|| Array2::zeros((k, k)));
                    for (p, &y) in rows.probs.rows().into_iter().zip(rows.labels) {
                        if let Some(j) = confident_class(p, &thresholds.values) {
                            joint[[y, j]] += 1.0;
                        }
                    }
                }
            },
            State::Trusted {
                sums,
                fallback,
                done,
            } => {
                if !*done {
                    sums.rows(rows);
                } else if let Some((_, q)) = fallback {
                    q.rows(rows.probs, rows.first_row);
                }
            }
        }
    }

    /// Takes in `other`, the same estimator's state after another share of the current
    /// pass's rows (as a distributed engine merges partial aggregates, in any order):
    /// counts and sums add, and the row a maximum keeps is the first in the table, so
    /// the matrix is that of one pass over every row (sums to rounding: they add in
    /// another order). Refused when the two are not in the same pass.
    pub fn merge(&mut self, other: Passes) -> Result<()> {
        let mismatch = || Error::Internal("merging estimator states of different passes".into());
        if self.k != other.k || self.step() != other.step() {
            return Err(mismatch());
        }
        self.rows += other.rows;
        match (&mut self.state, other.state) {
            (State::Anchor(mine), State::Anchor(theirs)) => mine.merge(theirs),
            (State::Quantile(mine), State::Quantile(theirs)) => mine.merge(theirs),
            (
                State::Counting { thresholds, joint },
                State::Counting {
                    thresholds: their_thresholds,
                    joint: their_joint,
                },
            ) => match (joint.as_mut(), their_joint) {
                (None, None) => thresholds.merge(&their_thresholds),
                (Some(mine), Some(theirs)) => *mine += &theirs,
                (Some(_), None) => {}
                (None, Some(theirs)) => *joint = Some(theirs),
            },
            (
                State::Trusted { sums, fallback, .. },
                State::Trusted {
                    sums: their_sums,
                    fallback: their_fallback,
                    ..
                },
            ) => {
                sums.merge(their_sums);
                if let (Some((_, mine)), Some((_, theirs))) = (fallback, their_fallback) {
                    mine.merge(theirs);
                }
            }
            _ => return Err(mismatch()),
        }
        Ok(())
    }

    /// A fresh share of the current pass: what the pass needs from the passes before it
    /// (thresholds, quantile prefixes, limits) without any of its sums, for a worker to
    /// feed its rows into and [`Passes::merge`] back.
    pub fn share(&self) -> Passes {
        let k = self.k;
        let state = match &self.state {
            State::Anchor(best) => State::Anchor(best.share()),
            State::Quantile(q) => State::Quantile(q.share()),
            State::Counting { thresholds, .. } => State::Counting {
                thresholds: if thresholds.done {
                    thresholds.clone()
                } else {
                    Thresholds::new(k)
                },
                joint: None,
            },
            State::Trusted { fallback, done, .. } => State::Trusted {
                sums: TrustedSums::new(k),
                fallback: fallback.as_ref().map(|(q, state)| (*q, state.share())),
                done: *done,
            },
        };
        Passes { k, state, rows: 0 }
    }

    /// Where the estimator stands, to check that merged states belong to one pass.
    fn step(&self) -> (usize, usize) {
        match &self.state {
            State::Anchor(best) => (usize::from(best.done), 0),
            State::Quantile(q) => (q.step(), 0),
            // A share that met no row of the second pass has no joint yet.
            State::Counting { thresholds, .. } => (usize::from(thresholds.done), 0),
            State::Trusted { done, fallback, .. } => (
                usize::from(*done),
                fallback.as_ref().map_or(0, |(_, q)| q.step()),
            ),
        }
    }

    /// Ends the current pass.
    pub fn end_pass(&mut self) {
        let rows = std::mem::take(&mut self.rows);
        match &mut self.state {
            State::Anchor(best) => best.done = true,
            State::Quantile(q) => q.end_pass(rows),
            State::Counting { thresholds, joint } => {
                if thresholds.done {
                    joint.get_or_insert_with(|| Array2::zeros((self.k, self.k)));
                } else {
                    thresholds.finish();
                }
            }
            State::Trusted {
                sums,
                fallback,
                done,
            } => {
                if !*done {
                    sums.end();
                    *done = true;
                } else if let Some((_, q)) = fallback {
                    q.end_pass(rows);
                }
            }
        }
    }

    /// The matrix, once no pass is wanted.
    pub fn finish(self, classes: &[String], warnings: &mut Vec<String>) -> Result<Array2<f64>> {
        if self.wants_pass() {
            return Err(Error::Internal(
                "an estimate finished before its last pass".into(),
            ));
        }
        match self.state {
            State::Anchor(best) => Ok(best.anchor_matrix()),
            State::Quantile(q) => Ok(q.matrix(classes, warnings)),
            State::Counting { thresholds, joint } => {
                let joint = joint.unwrap_or_else(|| Array2::zeros((self.k, self.k)));
                Ok(from_confident_joint(
                    joint,
                    &thresholds.observed,
                    classes,
                    warnings,
                ))
            }
            State::Trusted { sums, fallback, .. } => {
                let fallback = match (fallback, sums.missing()) {
                    (Some((q, state)), Some(_)) => Some((q, state.matrix(classes, warnings))),
                    _ => None,
                };
                from_trusted_sums(sums, fallback, classes, warnings)
            }
        }
    }
}

/// Sums in runs of [`CHUNK_ROWS`] rows, each run's sum added to the total in turn: the
/// order of the in-memory estimators' chunked sums.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) struct ChunkedSum {
    pub(super) total: Array2<f64>,
    run: Array2<f64>,
    in_run: usize,
}

impl ChunkedSum {
    pub(super) fn new(k: usize) -> Self {
        ChunkedSum {
            total: Array2::zeros((k, k)),
            run: Array2::zeros((k, k)),
            in_run: 0,
        }
    }

    /// Counts one row (whether or not it added anything to the run).
    pub(super) fn row(&mut self, add: impl FnOnce(&mut Array2<f64>)) {
        add(&mut self.run);
        self.in_run += 1;
        if self.in_run == CHUNK_ROWS {
            self.close();
        }
    }

    /// Adds another share's sums (both closed first: a run is a share's own).
    pub(super) fn merge(&mut self, mut other: ChunkedSum) {
        self.close();
        other.close();
        self.total += &other.total;
    }

    pub(super) fn close(&mut self) {
        if self.in_run > 0 {
            self.total += &self.run;
            self.run.fill(0.0);
            self.in_run = 0;
        }
    }
}
