//! How a streamed run scores rows, and where its control candidates rank: plain data
//! (serde), so that a distributed engine's workers score and count as this machine does.

use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};

use crate::noise::joint::CleanModel;
use crate::noise::posterior::Flip;
use crate::noise::scores::{RowFlips, ScoreKind};
use crate::noise::Estimate;

/// The score and what it is computed under: the clean classifier (the joint fit's) or
/// the noisy probabilities, under the matrix, as [`super::super::score_inputs`] decides
/// for a loaded table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScoreRule {
    kind: ScoreKind,
    /// The matrix, for the posterior score.
    matrix: Option<Array2<f64>>,
    /// The clean classifier, when the matrix came with one.
    model: Option<CleanModel>,
}

impl ScoreRule {
    /// The rule of `kind` under `estimate` (read only by the posterior score).
    pub fn new(kind: ScoreKind, estimate: Option<&Estimate>) -> Self {
        let estimate = estimate.filter(|_| kind == ScoreKind::Posterior);
        ScoreRule {
            kind,
            matrix: estimate.map(|e| e.matrix.clone()),
            model: estimate.and_then(|e| e.model.clone()),
        }
    }

    /// The score.
    pub fn kind(&self) -> ScoreKind {
        self.kind
    }

    /// The probabilities the score reads (clean posteriors, or the noisy ones).
    pub fn inputs(&self, noisy: ArrayView2<f32>) -> Array2<f32> {
        match &self.model {
            Some(model) => model.posteriors(noisy),
            None => noisy.to_owned(),
        }
    }

    /// The flip each row is scored under.
    pub fn flips(&self) -> RowFlips<'_> {
        let flip = self.matrix.as_ref().map(|m| match self.model {
            Some(_) => Flip::clean(m),
            None => Flip::noisy(m),
        });
        RowFlips::One(flip)
    }

    /// Scores of rows with noisy probabilities `noisy` and classes `labels`, with the
    /// probabilities they were computed from.
    pub fn scores(&self, noisy: ArrayView2<f32>, labels: &[usize]) -> (Array2<f32>, Vec<f64>) {
        let inputs = self.inputs(noisy);
        let scores = self.flips().values(self.kind, inputs.view(), labels);
        (inputs, scores)
    }
}

/// How many rows outrank each control candidate: every row's rank key counted into the
/// gaps between the candidates' sorted keys. Shares of the rows merge by adding.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ControlRanks {
    /// The candidates' rank keys, ascending.
    keys: Vec<u128>,
    /// Rows whose key falls below key j and not below key j − 1 (the last: above all).
    bumps: Vec<usize>,
}

impl ControlRanks {
    /// Counts against `keys` (ascending).
    pub fn new(keys: Vec<u128>) -> Self {
        let bumps = vec![0; keys.len() + 1];
        ControlRanks { keys, bumps }
    }

    /// A fresh count against the same keys.
    pub fn share(&self) -> Self {
        ControlRanks::new(self.keys.clone())
    }

    /// Counts a row of rank key `key`.
    pub fn add(&mut self, key: u128) {
        self.bumps[self.keys.partition_point(|&k| k <= key)] += 1;
    }

    /// Adds another share's counts (against the same keys).
    pub fn merge(&mut self, other: &ControlRanks) {
        self.bumps
            .iter_mut()
            .zip(&other.bumps)
            .for_each(|(a, b)| *a += b);
    }

    /// Rows outranking each key, in key order.
    pub fn above(&self) -> Vec<usize> {
        let mut running = 0;
        self.bumps[..self.keys.len()]
            .iter()
            .map(|b| {
                running += b;
                running
            })
            .collect()
    }
}
