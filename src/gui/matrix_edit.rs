//! The editable flip matrix: hand edits that keep every row a probability distribution,
//! with undo and redo. No drawing here, so every rule is unit-tested.

pub use crate::io::session::MatrixOrigin;
use ndarray::Array2;

/// Undo steps kept; older ones are forgotten (each step is one K×K matrix).
pub const UNDO_DEPTH: usize = 200;

/// Differences below this count as unchanged (the grid shows four decimals).
pub const CHANGED_TOLERANCE: f64 = 5e-5;

#[derive(Debug, Clone, PartialEq)]
struct Snapshot {
    matrix: Array2<f64>,
    origin: MatrixOrigin,
}

/// The matrix being edited, the reference it is compared with, and the history.
#[derive(Debug, Clone)]
pub struct MatrixEditor {
    current: Array2<f64>,
    origin: MatrixOrigin,
    /// What "reset" returns to and what changed cells are measured against.
    reference: Array2<f64>,
    reference_origin: MatrixOrigin,
    undo: Vec<Snapshot>,
    redo: Vec<Snapshot>,
    /// Bumped on every change, so results computed from an older matrix are recognised.
    version: u64,
    /// The cell being dragged: consecutive edits of it form one undo step.
    gesture: Option<(usize, usize)>,
}

impl MatrixEditor {
    /// Starts from `matrix` (rows must already sum to 1).
    pub fn new(matrix: Array2<f64>, origin: MatrixOrigin) -> Self {
        MatrixEditor {
            current: matrix.clone(),
            origin,
            reference: matrix,
            reference_origin: origin,
            undo: Vec::new(),
            redo: Vec::new(),
            version: 0,
            gesture: None,
        }
    }

    /// The matrix as edited.
    pub fn matrix(&self) -> &Array2<f64> {
        &self.current
    }

    /// The estimate (or imported matrix) edits are compared with.
    pub fn reference(&self) -> &Array2<f64> {
        &self.reference
    }

    /// Where the current matrix came from.
    pub fn origin(&self) -> MatrixOrigin {
        self.origin
    }

    /// Changes with every edit, undo, redo, reset or replacement.
    pub fn version(&self) -> u64 {
        self.version
    }

    /// Number of classes.
    pub fn classes(&self) -> usize {
        self.current.nrows()
    }

    /// True when the cell differs from the reference by more than display precision.
    pub fn is_changed(&self, i: usize, j: usize) -> bool {
        (self.current[[i, j]] - self.reference[[i, j]]).abs() > CHANGED_TOLERANCE
    }

    /// Row `i`'s sum (1 up to rounding after any edit).
    pub fn row_sum(&self, i: usize) -> f64 {
        self.current.row(i).sum()
    }

    /// Sets T[i][j] to `value` (clamped to [0, 1]) and rescales the row's other cells so
    /// the row still sums to 1, keeping their proportions. With `keep_diagonal` the
    /// diagonal cell is left alone too (when j ≠ i), and `value` is limited to what it
    /// leaves. When the other cells are all zero, the remainder is shared equally.
    /// Returns false (and changes nothing) for an out-of-range cell or a no-op.
    pub fn set_cell(&mut self, i: usize, j: usize, value: f64, keep_diagonal: bool) -> bool {
        let k = self.classes();
        if i >= k || j >= k || !value.is_finite() {
            return false;
        }
        let fixed_diag = keep_diagonal && i != j;
        let locked = if fixed_diag {
            self.current[[i, i]]
        } else {
            0.0
        };
        let value = value.clamp(0.0, 1.0 - locked);
        if (value - self.current[[i, j]]).abs() < 1e-12 {
            return false;
        }
        let free: Vec<usize> = (0..k)
            .filter(|&c| c != j && !(fixed_diag && c == i))
            .collect();
        if free.is_empty() {
            return false;
        }
        let before = self.snapshot();
        let remainder = 1.0 - locked - value;
        let free_sum: f64 = free.iter().map(|&c| self.current[[i, c]]).sum();
        for &c in &free {
            self.current[[i, c]] = if free_sum > 0.0 {
                self.current[[i, c]] / free_sum * remainder
            } else {
                remainder / free.len() as f64
            };
        }
        self.current[[i, j]] = value;
        self.record(before, Some((i, j)));
        self.origin = MatrixOrigin::Edited;
        true
    }

    /// Ends a drag gesture: the next edit, even of the same cell, is a new undo step.
    pub fn end_gesture(&mut self) {
        self.gesture = None;
    }

    /// Replaces the whole matrix (an import, or a new estimate), recorded for undo. The
    /// replacement becomes the reference changed cells are measured against.
    pub fn replace(&mut self, matrix: Array2<f64>, origin: MatrixOrigin) {
        let before = self.snapshot();
        self.current = matrix.clone();
        self.origin = origin;
        self.reference = matrix;
        self.reference_origin = origin;
        self.record(before, None);
    }

    /// Replaces the current matrix only (the reference stays), recorded for undo: a
    /// restored session's hand edits, still compared with the fresh estimate.
    pub fn replace_current(&mut self, matrix: Array2<f64>, origin: MatrixOrigin) {
        let before = self.snapshot();
        self.current = matrix;
        self.origin = origin;
        self.record(before, None);
    }

    /// Moves an estimated reference to `matrix` (the label sources' mix, after one of
    /// them changed), and the current matrix with it unless that was edited by hand or
    /// imported; no undo step. The version moves either way, because the matrices the
    /// ranking reads changed.
    pub fn follow(&mut self, matrix: Array2<f64>) {
        if self.origin == MatrixOrigin::Estimated {
            self.current = matrix.clone();
        }
        if self.reference_origin == MatrixOrigin::Estimated {
            self.reference = matrix;
        }
        self.version += 1;
    }

    /// Back to the reference matrix (one undo step).
    pub fn reset(&mut self) -> bool {
        if self.current == self.reference {
            return false;
        }
        let before = self.snapshot();
        self.current = self.reference.clone();
        self.origin = self.reference_origin;
        self.record(before, None);
        true
    }

    /// True when there is something to undo.
    pub fn can_undo(&self) -> bool {
        !self.undo.is_empty()
    }

    /// True when there is something to redo.
    pub fn can_redo(&self) -> bool {
        !self.redo.is_empty()
    }

    /// Undoes the last step.
    pub fn undo(&mut self) -> bool {
        let Some(previous) = self.undo.pop() else {
            return false;
        };
        let now = self.snapshot();
        self.redo.push(now);
        self.restore(previous);
        true
    }

    /// Redoes the last undone step.
    pub fn redo(&mut self) -> bool {
        let Some(next) = self.redo.pop() else {
            return false;
        };
        let now = self.snapshot();
        self.undo.push(now);
        self.restore(next);
        true
    }

    fn snapshot(&self) -> Snapshot {
        Snapshot {
            matrix: self.current.clone(),
            origin: self.origin,
        }
    }

    fn restore(&mut self, s: Snapshot) {
        self.current = s.matrix;
        self.origin = s.origin;
        self.gesture = None;
        self.version += 1;
    }

    /// Pushes the state before a change, unless the change continues the same gesture.
    fn record(&mut self, before: Snapshot, cell: Option<(usize, usize)>) {
        let continues = cell.is_some() && self.gesture == cell;
        if !continues {
            self.undo.push(before);
            if self.undo.len() > UNDO_DEPTH {
                self.undo.remove(0);
            }
        }
        self.gesture = cell;
        self.redo.clear();
        self.version += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn editor() -> MatrixEditor {
        MatrixEditor::new(
            array![[0.8, 0.15, 0.05], [0.1, 0.9, 0.0], [0.0, 0.0, 1.0]],
            MatrixOrigin::Estimated,
        )
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() < 1e-12
    }

    #[test]
    fn an_edit_rescales_the_rest_of_the_row_in_proportion() {
        let mut e = editor();
        assert!(e.set_cell(0, 0, 0.6, false));
        // The other cells held 0.15 : 0.05 = 3 : 1 of 0.2; they now share 0.4 as 3 : 1.
        assert!(close(e.matrix()[[0, 1]], 0.3));
        assert!(close(e.matrix()[[0, 2]], 0.1));
        assert!(close(e.row_sum(0), 1.0));
        assert_eq!(e.origin(), MatrixOrigin::Edited);
        assert!(e.is_changed(0, 0) && !e.is_changed(1, 1));
    }

    #[test]
    fn keeping_the_diagonal_moves_only_off_diagonal_mass() {
        let mut e = editor();
        assert!(e.set_cell(0, 2, 0.15, true));
        assert!(close(e.matrix()[[0, 0]], 0.8));
        assert!(close(e.matrix()[[0, 1]], 0.05));
        // Asking for more than the diagonal leaves is limited to it.
        assert!(e.set_cell(0, 1, 0.9, true));
        assert!(close(e.matrix()[[0, 1]], 0.2));
        assert!(close(e.matrix()[[0, 2]], 0.0));
        assert!(close(e.row_sum(0), 1.0));
    }

    #[test]
    fn zero_neighbours_share_the_remainder_equally() {
        let mut e = editor();
        assert!(e.set_cell(2, 2, 0.4, false));
        assert!(close(e.matrix()[[2, 0]], 0.3) && close(e.matrix()[[2, 1]], 0.3));
    }

    #[test]
    fn values_are_clamped_and_bad_cells_refused() {
        let mut e = editor();
        assert!(!e.set_cell(3, 0, 0.5, false));
        assert!(!e.set_cell(0, 0, f64::NAN, false));
        assert!(e.set_cell(1, 0, 7.0, false));
        assert!(close(e.matrix()[[1, 0]], 1.0) && close(e.matrix()[[1, 1]], 0.0));
        assert!(
            !e.set_cell(1, 0, 1.0, false),
            "no-op edits are not recorded"
        );
    }

    #[test]
    fn undo_redo_and_reset_walk_the_history() {
        let mut e = editor();
        let start = e.matrix().clone();
        e.set_cell(0, 0, 0.5, false);
        let after_first = e.matrix().clone();
        e.end_gesture();
        e.set_cell(1, 1, 0.7, false);
        assert!(e.undo());
        assert_eq!(e.matrix(), &after_first);
        assert!(e.undo());
        assert_eq!(e.matrix(), &start);
        assert_eq!(e.origin(), MatrixOrigin::Estimated);
        assert!(!e.undo());
        assert!(e.redo() && e.redo());
        assert!(close(e.matrix()[[1, 1]], 0.7));
        assert!(e.reset());
        assert_eq!(e.matrix(), &start);
        assert!(e.undo(), "a reset is undoable");
        assert!(close(e.matrix()[[1, 1]], 0.7));
    }

    #[test]
    fn a_drag_is_one_undo_step_and_a_new_edit_clears_redo() {
        let mut e = editor();
        let start = e.matrix().clone();
        for v in [0.7, 0.6, 0.5] {
            e.set_cell(0, 0, v, false);
        }
        e.end_gesture();
        assert!(e.undo());
        assert_eq!(e.matrix(), &start);
        e.set_cell(2, 2, 0.9, false);
        assert!(!e.can_redo());
    }

    #[test]
    fn following_moves_an_unedited_matrix_and_only_the_reference_of_an_edited_one() {
        let mut e = editor();
        let mix = array![[0.7, 0.2, 0.1], [0.1, 0.9, 0.0], [0.0, 0.1, 0.9]];
        let v = e.version();
        e.follow(mix.clone());
        assert_eq!(e.matrix(), &mix);
        assert!(!e.can_undo(), "no undo step");
        assert!(e.version() > v);
        e.set_cell(2, 2, 0.5, false);
        let edited = e.matrix().clone();
        e.follow(Array2::eye(3));
        assert_eq!(e.matrix(), &edited, "a hand edit stays");
        assert!(e.reset());
        assert_eq!(
            e.matrix(),
            &Array2::<f64>::eye(3),
            "reset goes to the newest mix"
        );
    }

    #[test]
    fn every_change_bumps_the_version() {
        let mut e = editor();
        let v0 = e.version();
        e.set_cell(0, 0, 0.5, false);
        let v1 = e.version();
        e.undo();
        let v2 = e.version();
        e.replace(Array2::eye(3), MatrixOrigin::Imported);
        assert!(v0 < v1 && v1 < v2 && v2 < e.version());
        assert_eq!(e.origin(), MatrixOrigin::Imported);
        assert!(!e.is_changed(0, 1), "an import is the new reference");
    }
}
