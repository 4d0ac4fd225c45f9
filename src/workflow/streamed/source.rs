//! Where a streamed run's rows come from: a file read here part by part
//! ([`super::local::LocalSource`]), or an engine that splits every pass among workers and
//! merges what they found (the distributed runner). The run's logic (which rows are drawn,
//! how the matrix is estimated, how rows rank) is the same for both; a source only reads
//! rows and gathers what the pass asks for.

use std::path::Path;

use super::kept::Kept;
use super::scoring::{ControlRanks, ScoreRule};
use crate::data::roles::ColumnPlan;
use crate::error::Result;
use crate::noise::estimators::passes::Passes;
use crate::workflow::ranking::ScoreTally;

/// A table read in passes.
pub trait RowSource {
    /// The table (for messages and the worklist's table).
    fn table_path(&self) -> &Path;
    /// The probabilities' file (or folder).
    fn probs_path(&self) -> &Path;
    /// The table's roles.
    fn plan(&self) -> &ColumnPlan;
    /// Pass 1: the row count, the classes, and the rows of two seeded draws.
    fn gather(&self, draws: &Draws) -> Result<Gathered>;
    /// One pass of an estimator over every row, in class terms (the classes of
    /// [`RowSource::gather`], which comes first).
    fn estimator_pass(&self, passes: &mut Passes) -> Result<()>;
    /// Pass 2: every row scored.
    fn score(&self, job: &ScoreJob) -> Result<Scored>;
}

/// The rows pass 1 keeps: per draw, the rows with the smallest keys of
/// [`crate::workflow::worklist::draw_key`] (ties to the earlier row).
#[derive(Debug, Clone, Copy)]
pub struct Draws {
    /// Rows of the fitting sample (stream `SAMPLE_STREAM`).
    pub sample_rows: usize,
    /// Control candidates (stream `CONTROL_STREAM`).
    pub candidates: usize,
    /// The seed.
    pub seed: u64,
}

/// What pass 1 found.
#[derive(Debug, Clone)]
pub struct Gathered {
    /// Rows in the table.
    pub rows: usize,
    /// Every label name (observed or trusted), in natural order.
    pub classes: Vec<String>,
    /// The sample, in table order.
    pub sample: Kept,
    /// The control candidates, in draw order (smallest key first).
    pub candidates: Kept,
}

/// What pass 2 computes.
#[derive(Debug, Clone)]
pub struct ScoreJob<'a> {
    /// The score.
    pub rule: &'a ScoreRule,
    /// The control candidates' rank keys, ascending.
    pub ranks: &'a ControlRanks,
    /// Rows to list.
    pub suspects: usize,
    /// Rows scoring below this (internal score) are not listed.
    pub threshold: Option<f64>,
}

/// What pass 2 found.
#[derive(Debug, Clone)]
pub struct Scored {
    /// The most suspect rows, in rank order (best first), with the probabilities the
    /// score read (`probs`: clean posteriors under the joint fit); no trusted labels.
    pub top: Kept,
    /// The control candidates' counts.
    pub ranks: ControlRanks,
    /// Every row's score.
    pub tally: ScoreTally,
}
