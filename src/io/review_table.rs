//! What reading a review back needs to know of the table: its row count, classes, and
//! each reviewed row's observed label, id and earlier trusted label. A loaded
//! [`Dataset`] knows it for every row; a table too large to hold gives it for the rows
//! a worklist names ([`crate::workflow::streamed_review`]), so the same checks and the
//! same merged copy serve both.

use std::borrow::Cow;
use std::path::Path;

use crate::data::origin::Origin;
use crate::data::Dataset;

/// The facts of a table that a review is checked against and merged into.
pub trait ReviewTable {
    /// The table file.
    fn path(&self) -> &Path;
    /// Rows in the table.
    fn rows(&self) -> usize;
    /// Class names, indexed by label code.
    fn classes(&self) -> &[String];
    /// The observed label of `row`.
    fn label(&self, row: usize) -> usize;
    /// The id of `row` (its row number when the table has no id column).
    fn id(&self, row: usize) -> Cow<'_, str>;
    /// The trusted label `row` already had.
    fn trusted(&self, row: usize) -> Option<usize>;
    /// How that trusted label was obtained.
    fn origin(&self, row: usize) -> Origin;
    /// The table's trusted column, when it has one.
    fn trusted_column(&self) -> Option<&str>;
    /// The table's origin column, when it has one.
    fn origin_column(&self) -> Option<&str>;
}

impl ReviewTable for Dataset {
    fn path(&self) -> &Path {
        &self.path
    }
    fn rows(&self) -> usize {
        Dataset::rows(self)
    }
    fn classes(&self) -> &[String] {
        &self.classes
    }
    fn label(&self, row: usize) -> usize {
        self.labels[row]
    }
    fn id(&self, row: usize) -> Cow<'_, str> {
        Dataset::id(self, row)
    }
    fn trusted(&self, row: usize) -> Option<usize> {
        self.trusted.as_ref().and_then(|t| t[row])
    }
    fn origin(&self, row: usize) -> Origin {
        Dataset::origin(self, row)
    }
    fn trusted_column(&self) -> Option<&str> {
        self.trusted_column.as_deref()
    }
    fn origin_column(&self) -> Option<&str> {
        self.origin_column.as_deref()
    }
}
