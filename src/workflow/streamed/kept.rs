//! Rows a streamed run keeps (the sample, the control candidates, the listed suspects)
//! and the bounded selection that keeps them.

use ndarray::Array2;

use crate::data::origin::Origin;
use crate::data::roles::ColumnPlan;
use crate::data::table::StringColumn;
use crate::data::Dataset;

/// One row kept while reading, before its label codes are classes.
#[derive(Debug, Clone)]
pub(super) struct KeptRow {
    pub(super) row: usize,
    /// Label code (pass 1) or class (pass 2).
    pub(super) label: u32,
    pub(super) trusted: u32,
    pub(super) origin: Origin,
    pub(super) id: String,
    /// Probabilities, in the order of the fields read.
    pub(super) probs: Box<[f32]>,
}

/// The rows with the smallest keys seen, at most `capacity` of them. Rows are collected
/// until there are twice as many, then cut back to the smallest `capacity` (a linear
/// selection), whose largest key becomes the bound a new row must beat: constant work per
/// kept row, where a binary heap spent 7 % of a 10,000,000-row run popping (perf).
pub(super) struct Smallest {
    capacity: usize,
    kept: Vec<(u128, KeptRow)>,
    /// Keys from here up are not kept.
    bound: Option<u128>,
}

impl Smallest {
    pub(super) fn new(capacity: usize) -> Self {
        Smallest {
            capacity,
            kept: Vec::new(),
            bound: None,
        }
    }

    /// True when a row with `key` would be kept.
    pub(super) fn wants(&self, key: u128) -> bool {
        self.capacity > 0 && self.bound.is_none_or(|b| key < b)
    }

    pub(super) fn offer(&mut self, key: u128, row: impl FnOnce() -> KeptRow) {
        if !self.wants(key) {
            return;
        }
        self.kept.push((key, row()));
        if self.kept.len() >= 2 * self.capacity {
            self.cut();
        }
    }

    /// Keeps the `capacity` smallest keys.
    fn cut(&mut self) {
        if self.kept.len() <= self.capacity {
            return;
        }
        self.kept
            .select_nth_unstable_by_key(self.capacity - 1, |(k, _)| *k);
        self.kept.truncate(self.capacity);
        self.bound = self.kept.iter().map(|(k, _)| *k).max();
    }

    /// The kept rows, smallest key first.
    pub(super) fn into_sorted(mut self) -> Vec<(u128, KeptRow)> {
        self.cut();
        self.kept.sort_unstable_by_key(|(k, _)| *k);
        self.kept
    }
}

/// Rows kept by a streamed run, in class terms.
#[derive(Debug, Clone, Default)]
pub struct Kept {
    /// Table row of each row.
    pub rows: Vec<usize>,
    /// Observed class.
    pub labels: Vec<usize>,
    /// Trusted class, where audited.
    pub trusted: Vec<Option<usize>>,
    /// How each trusted label was obtained.
    pub origins: Vec<Origin>,
    /// Ids (empty strings without an id column).
    pub ids: Vec<String>,
    /// `rows × classes` probabilities, in class order.
    pub probs: Array2<f32>,
}

impl Kept {
    /// Rows read with their label codes (`code_class` gives each code's class of `k`) and
    /// probabilities in the order of `candidates` (the fields read), of which `fields`
    /// are the classes'.
    pub(super) fn new(
        kept: &[KeptRow],
        k: usize,
        code_class: &[u32],
        candidates: &[usize],
        fields: &[usize],
    ) -> Self {
        let position: Vec<usize> = fields
            .iter()
            .map(|f| candidates.iter().position(|c| c == f).unwrap_or(0))
            .collect();
        let mut probs = Array2::zeros((kept.len(), k));
        for (i, r) in kept.iter().enumerate() {
            for (c, &p) in position.iter().enumerate() {
                probs[(i, c)] = r.probs[p];
            }
        }
        let class = |code: u32| code_class[code as usize] as usize;
        Kept {
            rows: kept.iter().map(|r| r.row).collect(),
            labels: kept.iter().map(|r| class(r.label)).collect(),
            trusted: kept
                .iter()
                .map(|r| (r.trusted != u32::MAX).then(|| class(r.trusted)))
                .collect(),
            origins: kept.iter().map(|r| r.origin).collect(),
            ids: kept.iter().map(|r| r.id.clone()).collect(),
            probs,
        }
    }

    /// Rows in the set.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// True without rows.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The kept rows as a table without features, of the table at `path` with `plan`.
    pub(super) fn dataset(
        &self,
        path: &std::path::Path,
        plan: &ColumnPlan,
        classes: &[String],
    ) -> Dataset {
        let name = |f: Option<usize>| f.map(|i| plan.header[i].clone());
        let mut ids = StringColumn::default();
        if plan.id.is_some() {
            let text: String = self.ids.concat();
            let mut ends = Vec::with_capacity(self.ids.len());
            let mut end = 0;
            for id in &self.ids {
                end += id.len();
                ends.push(end);
            }
            ids.append(&text, &ends);
        }
        Dataset {
            path: path.to_path_buf(),
            header: plan.header.clone(),
            label_column: name(plan.label),
            id_column: name(plan.id),
            trusted_column: name(plan.trusted),
            origin_column: name(plan.origin),
            feature_names: Vec::new(),
            features: Array2::zeros((self.rows.len(), 0)),
            classes: classes.to_vec(),
            labels: self.labels.clone(),
            trusted: plan.trusted.map(|_| self.trusted.clone()),
            trusted_origins: plan.origin.map(|_| self.origins.clone()),
            annotations: None,
            sources: None,
            ids: plan.id.map(|_| ids),
            ignored: Vec::new(),
            missing: Vec::new(),
            warnings: Vec::new(),
        }
    }
}
