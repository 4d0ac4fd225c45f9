//! The estimators that read every row (anchor, quantile, trusted, counting) as passes
//! over rows that come a part at a time, in table order: a table too large to hold is
//! streamed through them (`workflow::streamed`) and they give the in-memory estimate
//! exactly. Sums are taken in the order the in-memory estimators take them (counting's
//! thresholds row by row; the trusted sums in runs of [`CHUNK_ROWS`]), maxima keep the
//! first row in table order, and the quantile is found by refining a histogram of each
//! column's order keys (12, 12, then 8 bits: three passes) instead of selecting among
//! values held in memory.

use ndarray::{Array2, ArrayView2};

use super::anchors::{higher_index, order_key, BUCKET_BITS};
use super::counting::{confident_class, from_confident_joint, Thresholds};
use super::trusted::{from_trusted_sums, TrustedSums};
use super::{Method, CHUNK_ROWS};
use crate::error::{Error, Result};

/// Rows of one part, in class terms.
#[derive(Debug, Clone, Copy)]
pub struct Rows<'a> {
    /// `rows × classes` probabilities.
    pub probs: ArrayView2<'a, f32>,
    /// Observed class of each row.
    pub labels: &'a [usize],
    /// Trusted class of each row, where audited.
    pub trusted: Option<&'a [Option<usize>]>,
    /// Whether each row's trusted label came from a random audit.
    pub at_random: Option<&'a [bool]>,
}

/// An estimator run as passes over every row.
pub struct Passes {
    k: usize,
    state: State,
    /// Rows seen in the current pass.
    rows: usize,
}

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
            State::Anchor(best) => best.rows(rows.probs),
            State::Quantile(q) => q.rows(rows.probs),
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
                    q.rows(rows.probs);
                }
            }
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

/// Per class, the first row with the largest probability strictly below a limit (and,
/// for the classes with none, the first row with the largest probability), with its
/// probability vector.
struct Best {
    below: Option<Vec<f32>>,
    best: Vec<Option<(f32, Vec<f32>)>>,
    highest: Vec<Option<(f32, Vec<f32>)>>,
    done: bool,
}

impl Best {
    fn new(k: usize, below: Option<Vec<f32>>) -> Self {
        Best {
            below,
            best: vec![None; k],
            highest: vec![None; k],
            done: false,
        }
    }

    fn rows(&mut self, probs: ArrayView2<f32>) {
        for row in probs.rows() {
            for (c, &v) in row.iter().enumerate() {
                if self.highest[c].as_ref().is_none_or(|(top, _)| v > *top) {
                    self.highest[c] = Some((v, row.to_vec()));
                }
                let Some(below) = &self.below else { continue };
                if v < below[c] && self.best[c].as_ref().is_none_or(|(top, _)| v > *top) {
                    self.best[c] = Some((v, row.to_vec()));
                }
            }
        }
    }

    fn anchor_matrix(&self) -> Array2<f64> {
        let k = self.highest.len();
        let mut t = Array2::zeros((k, k));
        for (c, row) in self.highest.iter().enumerate() {
            set_row(&mut t, c, row.as_ref());
        }
        t
    }
}

fn set_row(t: &mut Array2<f64>, class: usize, row: Option<&(f32, Vec<f32>)>) {
    match row {
        Some((_, p)) => t
            .row_mut(class)
            .iter_mut()
            .zip(p)
            .for_each(|(d, &s)| *d = s as f64),
        None => t[[class, class]] = 1.0,
    }
}

/// numpy's "higher" quantile of every column, found by refining a histogram of order keys
/// over three passes, then the rows below it (a fourth).
struct Quantile {
    q: f64,
    k: usize,
    /// Rows in the table (known after the first pass).
    n: usize,
    /// Per class: the order-key bits fixed so far, how many of them, and how many values
    /// lie below that prefix.
    prefix: Vec<(u32, u32, usize)>,
    counts: Vec<u64>,
    best: Option<Best>,
}

/// Bits fixed by each refining pass: 12 + 12 + 8 = the 32 bits of an order key.
const REFINE_BITS: [u32; 3] = [BUCKET_BITS, 12, 8];

impl Quantile {
    fn new(k: usize, q: f64) -> Self {
        Quantile {
            q,
            k,
            n: 0,
            prefix: vec![(0, 0, 0); k],
            counts: vec![0; k << BUCKET_BITS],
            best: None,
        }
    }

    fn done(&self) -> bool {
        self.best.as_ref().is_some_and(|b| b.done)
    }

    /// The pass under way: 0–2 refine, 3 the rows below.
    fn step(&self) -> usize {
        match &self.best {
            Some(_) => 3,
            None => REFINE_BITS
                .iter()
                .scan(0, |fixed, bits| {
                    *fixed += bits;
                    Some(*fixed)
                })
                .position(|fixed| fixed > self.prefix[0].1)
                .unwrap_or(3),
        }
    }

    fn rows(&mut self, probs: ArrayView2<f32>) {
        let step = self.step();
        if step == 3 {
            if let Some(best) = &mut self.best {
                best.rows(probs);
            }
            return;
        }
        let bits = REFINE_BITS[step];
        let width = 1usize << bits;
        for row in probs.rows() {
            for (c, &v) in row.iter().enumerate() {
                let key = order_key(v);
                let (prefix, fixed, _) = self.prefix[c];
                if fixed > 0 && key >> (32 - fixed) != prefix {
                    continue;
                }
                let digit = (key << fixed) >> (32 - bits);
                self.counts[c * width + digit as usize] += 1;
            }
        }
    }

    fn end_pass(&mut self, rows: usize) {
        let step = self.step();
        if step == 3 {
            if let Some(best) = &mut self.best {
                best.done = true;
            }
            return;
        }
        if step == 0 {
            self.n = rows;
        }
        let bits = REFINE_BITS[step];
        let width = 1usize << bits;
        let index = higher_index(self.n.max(1), self.q);
        for c in 0..self.k {
            let (prefix, fixed, below) = self.prefix[c];
            let mut seen = below;
            let mut digit = width - 1;
            for (d, &count) in self.counts[c * width..(c + 1) * width].iter().enumerate() {
                if seen + count as usize > index {
                    digit = d;
                    break;
                }
                seen += count as usize;
            }
            self.prefix[c] = ((prefix << bits) | digit as u32, fixed + bits, seen);
        }
        self.counts.iter_mut().for_each(|c| *c = 0);
        if step == 2 {
            let limits = self
                .prefix
                .iter()
                .map(|&(key, _, _)| from_order_key(key))
                .collect();
            self.best = Some(Best::new(self.k, Some(limits)));
        }
    }

    fn matrix(&self, classes: &[String], warnings: &mut Vec<String>) -> Array2<f64> {
        let k = self.k;
        let mut t = Array2::zeros((k, k));
        let Some(best) = &self.best else {
            return Array2::eye(k);
        };
        for (c, (found, class)) in best.best.iter().zip(classes).enumerate() {
            match found {
                Some(row) => set_row(&mut t, c, Some(row)),
                None => {
                    warnings.push(format!(
                        "class '{}': no row lies strictly below the {} quantile; its highest-probability row was used",
                        class, self.q
                    ));
                    set_row(&mut t, c, best.highest[c].as_ref());
                }
            }
        }
        t
    }
}

/// The value whose order key ([`order_key`]) is `key`.
fn from_order_key(key: u32) -> f32 {
    let bits = if key >> 31 == 1 {
        key & !(1 << 31)
    } else {
        !key
    };
    f32::from_bits(bits)
}

/// Sums in runs of [`CHUNK_ROWS`] rows, each run's sum added to the total in turn: the
/// order of the in-memory estimators' chunked sums.
#[derive(Debug, Clone)]
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

    pub(super) fn close(&mut self) {
        if self.in_run > 0 {
            self.total += &self.run;
            self.run.fill(0.0);
            self.in_run = 0;
        }
    }
}
