//! What the views ask for. Drawing code never changes the app state directly: it pushes
//! commands, which the app applies after the frame (so one frame sees one state).

use std::path::PathBuf;

use super::jobs::JobKind;
use super::source_edit::MatrixTarget;
use crate::io::session::{Roles, Settings};

/// One request from the UI.
#[derive(Debug, Clone, PartialEq)]
pub enum Command {
    /// Load a table with the given roles (the previous data stay until it succeeds).
    LoadData(PathBuf, Roles),
    /// Load a probability file for the current data.
    LoadProbabilities(PathBuf),
    /// Compute out-of-fold probabilities for the current data.
    ComputeProbabilities,
    /// New settings (the app works out what they invalidate).
    Settings(Settings),
    /// Re-estimate the matrix with the current estimator.
    Estimate,
    /// Show (and edit) this matrix: the overall one or a label source's. Cell edits,
    /// undo, redo and reset apply to the matrix shown.
    SelectMatrix(MatrixTarget),
    /// Show only the suspects of this label source (`None`: every source).
    FilterSource(Option<u32>),
    /// Set one cell of the matrix shown (row = true class).
    SetCell {
        /// True class.
        row: usize,
        /// Observed class.
        col: usize,
        /// New value.
        value: f64,
    },
    /// A drag on a cell ended.
    EndGesture,
    /// Undo the last change of the matrix shown.
    Undo,
    /// Redo the last undone change of the matrix shown.
    Redo,
    /// The matrix shown back to its estimate (or imported matrix).
    ResetMatrix,
    /// Read a matrix CSV.
    ImportMatrix(PathBuf),
    /// Write the matrix CSV.
    ExportMatrix(PathBuf),
    /// Compute bootstrap intervals of the estimator.
    Bootstrap,
    /// Write the worklist (the filtered rows, up to the budget).
    ExportWorklist(PathBuf),
    /// Read a reviewed worklist.
    ImportReview(PathBuf),
    /// Write the data with the review's verdicts in the trusted column, then load it.
    SaveMerged(PathBuf),
    /// Train and compare the corrections.
    Retrain,
    /// Save the model of one correction (index into the comparison).
    SaveModel(usize, PathBuf),
    /// Save the session (to its file when `None`).
    SaveSession(Option<PathBuf>),
    /// Open a session file.
    OpenSession(PathBuf),
    /// Read this probability file for the next table loaded (the app's `--probs` at
    /// start, given before the table is read).
    UseProbabilitiesFile(PathBuf),
    /// Stop a running job.
    Cancel(JobKind),
    /// Hide a message.
    Dismiss(usize),
    /// A reviewer's verdict: data row `row`'s true class is `label` (its observed label
    /// to keep it).
    Verdict {
        /// 0-based data row.
        row: usize,
        /// The class it truly is.
        label: usize,
    },
    /// Take back the last verdict change.
    UndoVerdict,
    /// Give back the last verdict change taken back.
    RedoVerdict,
    /// Start a review round in the app: the worklist's rows (suspects and random control
    /// rows, shuffled) to be reviewed one by one.
    StartRound,
    /// Leave the review round (its verdicts stay).
    EndRound,
    /// Write the verdicts given in the app as a reviewed worklist (with its key when the
    /// round has control rows), as `review` reads it.
    ExportVerdicts(PathBuf),
    /// Order the suspects table by a column (`None`: by rank).
    SortSuspects(Option<crate::gui::state::SuspectSort>),
}

impl Command {
    /// What opening `path` by itself means (a dropped file, a Recent entry): a `.json`
    /// opens as a session, a `.npy` as probabilities, anything else as a data table.
    pub fn open(path: &std::path::Path) -> Command {
        let ext = path
            .extension()
            .and_then(|e| e.to_str())
            .map(str::to_ascii_lowercase);
        match ext.as_deref() {
            Some("json") => Command::OpenSession(path.to_path_buf()),
            Some("npy") => Command::LoadProbabilities(path.to_path_buf()),
            _ => Command::LoadData(path.to_path_buf(), Roles::default()),
        }
    }
}
