//! Label sources in the app: which matrix the Flip matrix view edits, every source's
//! editor beside the overall one, what the ranking scores each row under, and the source
//! filter of the suspects.
//!
//! The rule for the overall matrix while there are sources: as long as it is not edited
//! by hand it is the sources' mix (recomputed after every source edit) and each row is
//! ranked under its own source's matrix, as the command line ranks them. Once the overall
//! matrix itself is edited by hand, that one matrix ranks every row and the sources'
//! matrices are set aside (still shown and editable) until the overall edits are undone
//! or reset; the views say which of the two is in force.

use super::*;
use crate::io::session::MatrixOrigin;
use crate::noise::sources::BySource;
use crate::workflow::ranking::Matrices;

impl AppState {
    /// Every label source's matrix being edited (with a source column and an estimate
    /// by source).
    pub fn source_editors(&self) -> Option<&SourceEditors> {
        self.sources.as_ref()
    }

    /// The label sources as they stand: the estimate's, with any edited matrices, their
    /// noise rates and mix recomputed.
    pub fn current_sources(&self) -> Option<&BySource> {
        self.sources.as_ref().map(|s| s.current().as_ref())
    }

    /// Bootstrap intervals of every label source, once computed.
    pub fn source_intervals(&self) -> Option<&SourceIntervals> {
        self.source_intervals.as_ref()
    }

    /// The matrix the Flip matrix view shows and edits.
    pub fn shown_matrix(&self) -> MatrixTarget {
        self.shown
    }

    /// The editor of the matrix shown.
    pub fn shown_editor(&self) -> Option<&MatrixEditor> {
        match self.shown {
            MatrixTarget::Overall => self.editor.as_ref(),
            MatrixTarget::Source(s) => self.sources.as_ref()?.editor(s),
        }
    }

    /// True when the suspects are ranked each under its own source's matrix; false
    /// without sources, or once the overall matrix was edited by hand (or imported).
    pub fn ranks_by_source(&self) -> bool {
        let overall_estimated = self
            .editor
            .as_ref()
            .is_some_and(|e| e.origin() == MatrixOrigin::Estimated);
        let has_clean = self.estimate.as_ref().is_some_and(|e| e.clean.is_some());
        self.sources.is_some() && self.of_row.is_some() && overall_estimated && has_clean
    }

    /// The name of the label source whose matrix is shown, if one is.
    pub fn shown_source_name(&self) -> Option<String> {
        let MatrixTarget::Source(s) = self.shown else {
            return None;
        };
        Some(self.current_sources()?.sources.get(s)?.name.clone())
    }

    /// The label source the suspects are filtered to.
    pub fn source_filter(&self) -> Option<u32> {
        self.source_filter
    }

    /// The source of every row, when the table has a source column.
    pub fn row_sources(&self) -> Option<&[u32]> {
        self.of_row.as_deref()
    }

    /// New source editors for a new estimate (none without sources); the view stays on
    /// the same source when the new estimate has it.
    pub(super) fn start_sources(&mut self, by_source: Option<Arc<BySource>>) {
        self.sources = by_source.map(SourceEditors::new);
        self.source_intervals = None;
        let count = self.sources.as_ref().map_or(0, SourceEditors::len);
        if matches!(self.shown, MatrixTarget::Source(s) if s >= count) {
            self.shown = MatrixTarget::Overall;
        }
        self.follow_sources();
    }

    pub(super) fn select_matrix(&mut self, target: MatrixTarget) {
        let count = self.sources.as_ref().map_or(0, SourceEditors::len);
        match target {
            MatrixTarget::Source(s) if s >= count => self.say(
                Level::Error,
                format!("there is no label source number {}", s + 1),
            ),
            target => {
                if let Some(e) = &mut self.editor {
                    e.end_gesture();
                }
                self.shown = target;
            }
        }
    }

    /// Applies `change` to the matrix shown; when it changed, the overall matrix follows
    /// the sources' mix and the ranking and diagnosis run again.
    pub(super) fn edit(&mut self, change: impl FnOnce(&mut MatrixEditor) -> bool) {
        let changed = match self.shown {
            MatrixTarget::Overall => self.editor.as_mut().is_some_and(change),
            MatrixTarget::Source(s) => self.sources.as_mut().is_some_and(|e| e.change(s, change)),
        };
        if changed {
            self.follow_sources();
            self.matrix_changed();
        }
    }

    /// The overall editor's reference (and, unless edited by hand, its matrix) becomes
    /// the sources' current mix.
    pub(super) fn follow_sources(&mut self) {
        if let (Some(sources), Some(editor)) = (&self.sources, &mut self.editor) {
            editor.follow(sources.current().overall.clone());
        }
    }

    pub(super) fn filter_source(&mut self, source: Option<u32>) {
        let sources = self.data.as_ref().and_then(|d| d.sources.as_ref());
        let count = sources.map_or(0, |s| s.names.len());
        match source {
            Some(s) if s as usize >= count => self.say(
                Level::Error,
                format!("there is no label source number {}", s as usize + 1),
            ),
            source => {
                self.source_filter = source;
                self.refilter();
            }
        }
    }

    /// The matrices each row is ranked under, when that is one per source.
    pub(super) fn ranking_sources(&self) -> Option<Matrices> {
        if !self.ranks_by_source() {
            return None;
        }
        Some(Matrices::BySource {
            matrices: self.sources.as_ref()?.matrices(),
            of_row: self.of_row.clone()?,
        })
    }
}
