//! The label sources' matrices being edited: one [`MatrixEditor`] per source, each with
//! its own undo history, and the sources as they now stand (each noise rate and the
//! overall mix computed again by [`BySource::with_matrices`] after every change, the same
//! code the estimate runs). No drawing here, so every rule is unit-tested.

use std::sync::Arc;

use ndarray::Array2;

use super::matrix_edit::{MatrixEditor, MatrixOrigin};
use crate::noise::sources::BySource;

/// Which matrix the Flip matrix view shows and edits.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Hash)]
pub enum MatrixTarget {
    /// The overall matrix (with label sources: their mix, unless edited by hand).
    #[default]
    Overall,
    /// One label source's matrix (index into the sources' names).
    Source(usize),
}

/// Every source's editor and the sources with the edited matrices.
#[derive(Debug, Clone)]
pub struct SourceEditors {
    editors: Vec<MatrixEditor>,
    /// The estimate's sources (rows, class shares, test), kept to recompute from.
    estimated: Arc<BySource>,
    /// The sources with the current matrices: noise rates and mix recomputed.
    current: Arc<BySource>,
}

impl SourceEditors {
    /// Starts every source's editor from its estimated matrix.
    pub fn new(estimated: Arc<BySource>) -> Self {
        let editors = estimated
            .sources
            .iter()
            .map(|s| MatrixEditor::new(s.matrix.clone(), MatrixOrigin::Estimated))
            .collect();
        SourceEditors {
            editors,
            current: estimated.clone(),
            estimated,
        }
    }

    /// Number of sources.
    pub fn len(&self) -> usize {
        self.editors.len()
    }

    /// True without sources.
    pub fn is_empty(&self) -> bool {
        self.editors.is_empty()
    }

    /// Source `s`'s editor.
    pub fn editor(&self, s: usize) -> Option<&MatrixEditor> {
        self.editors.get(s)
    }

    /// Applies `change` to source `s`'s editor; when it changed the matrix, the sources'
    /// noise rates and mix are computed again. Returns whether anything changed (false
    /// for a source that does not exist).
    pub fn change(&mut self, s: usize, change: impl FnOnce(&mut MatrixEditor) -> bool) -> bool {
        let Some(editor) = self.editors.get_mut(s) else {
            return false;
        };
        if !change(editor) {
            return false;
        }
        let matrices = self.editors.iter().map(|e| e.matrix().clone()).collect();
        self.current = Arc::new(self.estimated.with_matrices(matrices));
        true
    }

    /// The sources as they stand: the current matrices, their noise rates and mix.
    pub fn current(&self) -> &Arc<BySource> {
        &self.current
    }

    /// The sources as estimated.
    pub fn estimated(&self) -> &Arc<BySource> {
        &self.estimated
    }

    /// Every source's current matrix, in order.
    pub fn matrices(&self) -> Vec<Array2<f64>> {
        self.editors.iter().map(|e| e.matrix().clone()).collect()
    }

    /// True when source `s`'s matrix was edited by hand or imported (and not reset to
    /// its estimate or undone).
    pub fn is_edited(&self, s: usize) -> bool {
        self.editors
            .get(s)
            .is_some_and(|e| e.origin() != MatrixOrigin::Estimated)
    }

    /// The names of the sources edited by hand or imported.
    pub fn edited_names(&self) -> Vec<&str> {
        (0..self.len())
            .filter(|&s| self.is_edited(s))
            .map(|s| self.current.sources[s].name.as_str())
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::noise::sources::SourceMatrix;
    use ndarray::array;

    fn two_sources() -> Arc<BySource> {
        let source = |name: &str, rows, matrix: Array2<f64>| SourceMatrix {
            name: name.into(),
            rows,
            audited: 0,
            noise_rate: 0.5 * (2.0 - matrix[[0, 0]] - matrix[[1, 1]]),
            matrix,
            pooled: false,
            clean_share: vec![0.5, 0.5],
        };
        let a = source("a", 100, array![[0.9, 0.1], [0.0, 1.0]]);
        let b = source("b", 300, array![[0.7, 0.3], [0.2, 0.8]]);
        let start = BySource {
            sources: vec![a, b],
            overall: Array2::eye(2),
            test: None,
            warnings: Vec::new(),
        };
        // The estimate's own mix, as the library computes it.
        Arc::new(start.with_matrices(start.matrices().into_iter().cloned().collect()))
    }

    #[test]
    fn an_edit_of_one_source_recomputes_its_noise_rate_and_the_mix() {
        let estimated = two_sources();
        let mut e = SourceEditors::new(estimated.clone());
        assert_eq!(e.current().overall, estimated.overall);
        assert!(e.change(1, |m| m.set_cell(0, 1, 0.5, false)));
        let edited = e.matrices();
        assert!((edited[1][[0, 1]] - 0.5).abs() < 1e-12);
        assert_eq!(
            edited[0], estimated.sources[0].matrix,
            "the other source stays"
        );
        // The library's own recomputation of the same matrices.
        let expected = estimated.with_matrices(edited);
        assert_eq!(**e.current(), expected);
        assert!((e.current().sources[1].noise_rate - 0.5 * (0.5 + 0.2)).abs() < 1e-12);
        assert!(e.is_edited(1) && !e.is_edited(0));
        assert_eq!(e.edited_names(), ["b"]);
        // Undo is the source's own: it brings back the estimate and its mix.
        assert!(e.change(1, MatrixEditor::undo));
        assert_eq!(e.current().overall, estimated.overall);
        assert!(e.edited_names().is_empty());
        assert!(!e.change(0, MatrixEditor::undo), "nothing to undo on a");
        assert!(!e.change(7, MatrixEditor::undo), "no such source");
    }
}
