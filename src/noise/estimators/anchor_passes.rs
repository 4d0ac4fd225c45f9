//! The searches of the anchor-point estimators as passes: per class, the row with the
//! largest probability (below a limit, for the quantile variant), and numpy's "higher"
//! quantile of each column found by refining a histogram of order keys over three passes
//! instead of selecting among values held in memory. Shares of a pass merge, ties going
//! to the row first in the table ([`super::passes`]).

use ndarray::{Array2, ArrayView2};

use super::anchors::{higher_index, order_key, BUCKET_BITS};

/// Per class, the first row with the largest probability strictly below a limit (and,
/// for the classes with none, the first row with the largest probability), with its
/// probability vector.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) struct Best {
    below: Option<Vec<f32>>,
    best: Vec<Option<Found>>,
    highest: Vec<Option<Found>>,
    pub(super) done: bool,
}

/// A row found: its probability for the class, its table row, its probability vector.
type Found = (f32, usize, Vec<f32>);

/// True when `v` at `row` beats what was found: larger, or as large and earlier in the
/// table.
fn beats(v: f32, row: usize, found: Option<&Found>) -> bool {
    found.is_none_or(|&(top, at, _)| v > top || (v == top && row < at))
}

impl Best {
    pub(super) fn new(k: usize, below: Option<Vec<f32>>) -> Self {
        Best {
            below,
            best: vec![None; k],
            highest: vec![None; k],
            done: false,
        }
    }

    pub(super) fn rows(&mut self, probs: ArrayView2<f32>, first_row: usize) {
        for (i, row) in probs.rows().into_iter().enumerate() {
            let at = first_row + i;
            for (c, &v) in row.iter().enumerate() {
                if beats(v, at, self.highest[c].as_ref()) {
                    self.highest[c] = Some((v, at, row.to_vec()));
                }
                let Some(below) = &self.below else { continue };
                if v < below[c] && beats(v, at, self.best[c].as_ref()) {
                    self.best[c] = Some((v, at, row.to_vec()));
                }
            }
        }
    }

    /// The same search with nothing found yet.
    pub(super) fn share(&self) -> Best {
        Best {
            done: self.done,
            ..Best::new(self.highest.len(), self.below.clone())
        }
    }

    /// Takes in what another share of the same pass found.
    pub(super) fn merge(&mut self, other: Best) {
        let take = |mine: &mut Vec<Option<Found>>, theirs: Vec<Option<Found>>| {
            for (m, t) in mine.iter_mut().zip(theirs) {
                if let Some((v, at, p)) = t {
                    if beats(v, at, m.as_ref()) {
                        *m = Some((v, at, p));
                    }
                }
            }
        };
        take(&mut self.best, other.best);
        take(&mut self.highest, other.highest);
    }

    pub(super) fn anchor_matrix(&self) -> Array2<f64> {
        let k = self.highest.len();
        let mut t = Array2::zeros((k, k));
        for (c, row) in self.highest.iter().enumerate() {
            set_row(&mut t, c, row.as_ref());
        }
        t
    }
}

fn set_row(t: &mut Array2<f64>, class: usize, row: Option<&Found>) {
    match row {
        Some((_, _, p)) => t
            .row_mut(class)
            .iter_mut()
            .zip(p)
            .for_each(|(d, &s)| *d = s as f64),
        None => t[[class, class]] = 1.0,
    }
}

/// numpy's "higher" quantile of every column, found by refining a histogram of order keys
/// over three passes, then the rows below it (a fourth).
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) struct Quantile {
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
    pub(super) fn new(k: usize, q: f64) -> Self {
        Quantile {
            q,
            k,
            n: 0,
            prefix: vec![(0, 0, 0); k],
            counts: vec![0; k << BUCKET_BITS],
            best: None,
        }
    }

    pub(super) fn done(&self) -> bool {
        self.best.as_ref().is_some_and(|b| b.done)
    }

    /// The pass under way: 0–2 refine, 3 the rows below.
    pub(super) fn step(&self) -> usize {
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

    pub(super) fn rows(&mut self, probs: ArrayView2<f32>, first_row: usize) {
        let step = self.step();
        if step == 3 {
            if let Some(best) = &mut self.best {
                best.rows(probs, first_row);
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

    /// The same refinement with nothing counted yet.
    pub(super) fn share(&self) -> Quantile {
        Quantile {
            q: self.q,
            k: self.k,
            n: self.n,
            prefix: self.prefix.clone(),
            counts: vec![0; self.counts.len()],
            best: self.best.as_ref().map(Best::share),
        }
    }

    /// Takes in another share of the same pass.
    pub(super) fn merge(&mut self, other: Quantile) {
        self.counts
            .iter_mut()
            .zip(&other.counts)
            .for_each(|(a, b)| *a += b);
        if let (Some(mine), Some(theirs)) = (&mut self.best, other.best) {
            mine.merge(theirs);
        }
    }

    pub(super) fn end_pass(&mut self, rows: usize) {
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

    pub(super) fn matrix(&self, classes: &[String], warnings: &mut Vec<String>) -> Array2<f64> {
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
