//! The desktop app's state and every rule of how it changes, with no drawing: views
//! read it through its accessors and push [`Command`]s; [`AppState::apply`] carries them
//! out and starts background jobs; [`AppState::poll`] takes the jobs' results in, through
//! the one stamp check in [`AppState::accept`] (`intake`). Split by concern:
//! [`messages`], data and probabilities (`data`), the flip matrix and its edits
//! (`matrix`), ranking and diagnosis (`ranking`), label sources' matrices and the source
//! filter (`sources`), worklists and reviews (`review`), training and comparing
//! (`compare`), sessions and saving (`session`). Unit tests (`tests`, `tests_sources`)
//! drive it without a window.

mod compare;
mod data;
mod intake;
mod matrix;
pub mod messages;
mod ranking;
mod review;
mod session;
mod sources;
#[cfg(test)]
mod tests;
#[cfg(test)]
mod tests_sources;
mod verdicts;

use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::Array2;

pub use self::data::{table_options, Relabelled};
use self::messages::Messages;
pub use self::messages::{Level, Message};
pub use self::verdicts::{SuspectColumn, SuspectSort};
use super::command::Command;
use super::jobs::{Finished, JobControl, JobFailure, JobKind, Jobs};
use super::matrix_edit::MatrixEditor;
use super::source_edit::{MatrixTarget, SourceEditors};
use super::verdict_book::{Round, VerdictBook};
use crate::data::typical::Typical;
use crate::data::Dataset;
use crate::error::Error;
use crate::io::review::Review;
use crate::io::session::{
    Roles, Session, SessionMatrix, SessionRoundRow, SessionSourceMatrix, SessionVerdict, Settings,
};
use crate::noise::bootstrap::{Interval, SourceIntervals};
use crate::noise::{Diagnostics, Method};
use crate::workflow::compare::Comparison;
use crate::workflow::consensus::Consensual;
use crate::workflow::ranking::Ranking;
use crate::workflow::review::{ReviewSummary, TrustedLabels};
use crate::workflow::RowProbabilities;

/// The estimate a matrix was started from.
#[derive(Debug, Clone)]
pub struct EstimateInfo {
    /// How it was made (`quantile (q = 0.97)`, `file m.csv`, …).
    pub source: String,
    /// Warnings from estimation.
    pub warnings: Vec<String>,
    /// The method, for the bootstrap (none for imported matrices), with the choices the
    /// estimate made from the data fixed (the joint fit's λ).
    pub method: Option<Method>,
    /// The joint fit's λ and why it was used, in words.
    pub volume: Option<String>,
    /// Every row's clean posterior from a joint fit: the scores read it under the
    /// (possibly edited) matrix instead of inverting the matrix.
    pub clean: Option<Arc<Array2<f32>>>,
    /// One matrix per label source, when the roles name a source column.
    pub by_source: Option<Arc<crate::noise::sources::BySource>>,
}

/// A comparison and the matrix version it was trained with.
#[derive(Debug, Clone)]
pub struct Retrained {
    /// The results.
    pub comparison: Arc<Comparison>,
    /// Matrix version used.
    pub matrix_version: u64,
}

/// A reviewed worklist that was read, waiting to be merged.
#[derive(Debug, Clone)]
pub struct ReviewRead {
    /// The worklist file.
    pub path: PathBuf,
    /// Its verdicts.
    pub review: Arc<Review>,
    /// What the review measured (verdicts that confirm or change the label among it).
    pub summary: ReviewSummary,
}

/// What a finished job hands back ([`Stamped`] with the data generation it read; a
/// diagnosis also carries the matrix version it is for).
#[derive(Debug)]
pub enum JobOutput {
    /// A table was read.
    Loaded(Box<Dataset>, Roles),
    /// Probabilities, and with several annotators' columns the table relabelled by their
    /// consensus.
    Probabilities(Box<RowProbabilities>, Option<Box<Relabelled>>),
    /// An estimate.
    Estimated(Array2<f64>, EstimateInfo),
    /// Bootstrap intervals of estimate number `.1`.
    Intervals(Interval, u64),
    /// Bootstrap intervals of every label source's matrix and noise rate, and their mix,
    /// of estimate number `.1`.
    SourceIntervals(Box<SourceIntervals>, u64),
    /// A ranking (perhaps only its head in order).
    Ranked(Box<Ranking>),
    /// The complete ranking of a head ranking,.
    RankedRest(Box<Ranking>),
    /// Diagnostics for matrix version `.1`.
    Diagnosed(Box<Diagnostics>, u64),
    /// A comparison.
    Compared(Retrained),
    /// A reviewed worklist.
    Reviewed(ReviewRead),
    /// A file was written; the message says which.
    Saved(String),
    /// A merged copy was written; load it next.
    Merged(PathBuf),
    /// A test job's text.
    Text(String),
}

impl JobOutput {
    /// True for results computed from the loaded data (dropped when it is replaced);
    /// loads, saves and test jobs do not read it.
    fn reads_data(&self) -> bool {
        !matches!(
            self,
            JobOutput::Loaded(..) | JobOutput::Saved(_) | JobOutput::Merged(_) | JobOutput::Text(_)
        )
    }
}

/// A job's result with the data generation its inputs came from.
#[derive(Debug)]
pub struct Stamped {
    generation: u64,
    output: JobOutput,
}

/// The whole app state.
pub struct AppState {
    /// Paths, roles, matrix and settings as a session file stores them.
    session: Session,
    /// The session file, once saved or opened.
    session_path: Option<PathBuf>,
    /// The loaded table.
    data: Option<Arc<Dataset>>,
    /// Observed and trusted rows per class of `data`, counted once at load (the Data view
    /// shows them every frame).
    class_counts: (Vec<usize>, Vec<usize>),
    /// Bumped on every successful load; results from older data are discarded.
    data_generation: u64,
    /// Probabilities of the current data.
    probs: Option<Arc<RowProbabilities>>,
    /// The annotators' consensus that relabelled `data` (with annotators' columns).
    consensus: Option<Arc<Consensual>>,
    /// The matrix being edited.
    editor: Option<MatrixEditor>,
    /// How the editor's reference matrix was made.
    estimate: Option<EstimateInfo>,
    /// Bootstrap intervals of the estimate.
    intervals: Option<Interval>,
    /// Bootstrap intervals of every label source (with a source column).
    source_intervals: Option<SourceIntervals>,
    /// Bumped whenever the estimate is replaced: intervals of another are dropped.
    estimates: u64,
    /// Every label source's matrix being edited (with a source column).
    sources: Option<SourceEditors>,
    /// The source of every row, shared with the ranking jobs (with a source column).
    of_row: Option<Arc<[u32]>>,
    /// The matrix the Flip matrix view shows and edits.
    shown: MatrixTarget,
    /// Only the suspects of this label source are shown.
    source_filter: Option<u32>,
    /// Diagnostics of the current matrix (and the version they are for).
    diagnostics: Option<(Diagnostics, u64)>,
    /// Ranked suspects of the current (or, while re-ranking, the previous) matrix.
    ranking: Option<Arc<Ranking>>,
    /// Positions in the ranking that pass the filters, in rank order.
    visible: Vec<u32>,
    /// `visible` in the table's order when it is sorted by a column.
    sorted: Vec<u32>,
    /// Every data row's position in the ranking, and its line in the table (`u32::MAX`
    /// where it has none): the inspector and the arrows look rows up every frame, and a
    /// scan of a million-row ranking takes milliseconds.
    position_of: Vec<u32>,
    table_line_of: Vec<u32>,
    /// The last comparison.
    retrained: Option<Retrained>,
    /// The last reviewed worklist read.
    review: Option<ReviewRead>,
    /// Messages not yet dismissed, oldest first.
    messages: Messages,
    /// Background work.
    jobs: Jobs<Stamped>,
    /// A matrix from a session, applied once its data's estimate arrives.
    pending_matrix: Option<SessionMatrix>,
    /// Label sources' changed matrices from a session, applied with it.
    pending_sources: Vec<SessionSourceMatrix>,
    /// The matrix changed while a ranking (or diagnosis) was running: run again when it
    /// ends. At most one of each runs, so a drag over a cell never piles up stale work.
    rank_pending: bool,
    diagnose_pending: bool,
    /// Saves started so far (each save is its own job).
    saves: u64,
    /// Verdicts given in the app, with their history.
    verdicts: VerdictBook,
    /// The last review round started in the app (its rows are the key of its verdicts).
    round: Option<Round>,
    /// The round is under way (its rows are judged blind).
    round_open: bool,
    /// The table's trusted labels with the verdicts added, for the estimate and the
    /// bootstrap (`None` without verdicts).
    trusted_overlay: Option<Arc<TrustedLabels>>,
    /// What the verdicts measured so far.
    verdict_summary: Option<ReviewSummary>,
    /// Verdicts changed while an estimate was running: estimate again when it ends.
    estimate_pending: bool,
    /// Each class's typical feature values, for the row inspector.
    typical: Option<Arc<Typical>>,
    /// The suspects table's order, when not by rank.
    sort: Option<SuspectSort>,
    /// A session's verdicts and round, applied once its table is loaded.
    pending_review: Option<(Vec<SessionVerdict>, verdicts::PendingRound)>,
}

impl AppState {
    /// An empty state; `wake` is called from workers when a job ends.
    pub fn new(wake: Arc<dyn Fn() + Send + Sync>) -> Self {
        AppState {
            session: Session::new(),
            session_path: None,
            data: None,
            class_counts: (Vec::new(), Vec::new()),
            data_generation: 0,
            probs: None,
            consensus: None,
            editor: None,
            estimate: None,
            intervals: None,
            source_intervals: None,
            estimates: 0,
            sources: None,
            of_row: None,
            shown: MatrixTarget::Overall,
            source_filter: None,
            diagnostics: None,
            ranking: None,
            visible: Vec::new(),
            sorted: Vec::new(),
            position_of: Vec::new(),
            table_line_of: Vec::new(),
            retrained: None,
            review: None,
            messages: Messages::default(),
            jobs: Jobs::new(wake),
            pending_matrix: None,
            pending_sources: Vec::new(),
            rank_pending: false,
            saves: 0,
            diagnose_pending: false,
            verdicts: VerdictBook::default(),
            round: None,
            round_open: false,
            trusted_overlay: None,
            verdict_summary: None,
            estimate_pending: false,
            typical: None,
            sort: None,
            pending_review: None,
        }
    }

    /// The settings in force.
    pub fn settings(&self) -> &Settings {
        &self.session.settings
    }

    /// Paths, roles, matrix and settings as a session file stores them.
    pub fn session(&self) -> &Session {
        &self.session
    }

    /// The session file, once saved or opened.
    pub fn session_path(&self) -> Option<&Path> {
        self.session_path.as_deref()
    }

    /// The loaded table.
    pub fn data(&self) -> Option<&Arc<Dataset>> {
        self.data.as_ref()
    }

    /// Observed and trusted rows per class of the data, counted once at load.
    pub fn class_counts(&self) -> (&[usize], &[usize]) {
        (&self.class_counts.0, &self.class_counts.1)
    }

    /// Probabilities of the current data.
    pub fn probs(&self) -> Option<&Arc<RowProbabilities>> {
        self.probs.as_ref()
    }

    /// The annotators' consensus that relabelled the data, with annotators' columns.
    pub fn consensus(&self) -> Option<&Arc<Consensual>> {
        self.consensus.as_ref()
    }

    /// The matrix being edited.
    pub fn editor(&self) -> Option<&MatrixEditor> {
        self.editor.as_ref()
    }

    /// How the editor's reference matrix was made.
    pub fn estimate(&self) -> Option<&EstimateInfo> {
        self.estimate.as_ref()
    }

    /// Bootstrap intervals of the estimate.
    pub fn intervals(&self) -> Option<&Interval> {
        self.intervals.as_ref()
    }

    /// Diagnostics of the current matrix and the matrix version they are for.
    pub fn diagnostics(&self) -> Option<&(Diagnostics, u64)> {
        self.diagnostics.as_ref()
    }

    /// Ranked suspects of the current (or, while re-ranking, the previous) matrix.
    pub fn ranking(&self) -> Option<&Arc<Ranking>> {
        self.ranking.as_ref()
    }

    /// Positions in the ranking that pass the filters, in rank order.
    pub fn visible(&self) -> &[u32] {
        &self.visible
    }

    /// The last comparison.
    pub fn retrained(&self) -> Option<&Retrained> {
        self.retrained.as_ref()
    }

    /// The last reviewed worklist read.
    pub fn review(&self) -> Option<&ReviewRead> {
        self.review.as_ref()
    }

    /// Messages not yet dismissed, oldest first.
    pub fn messages(&self) -> &[Message] {
        self.messages.lines()
    }

    /// Background work (progress and what runs).
    pub fn jobs(&self) -> &Jobs<Stamped> {
        &self.jobs
    }

    /// Adds a message.
    pub fn say(&mut self, level: Level, text: impl Into<String>) {
        self.messages.say(level, text);
    }

    /// The most recent error message, if any is shown.
    pub fn last_error(&self) -> Option<&str> {
        self.messages.last_error()
    }

    /// Carries out one command.
    pub fn apply(&mut self, command: Command) {
        match command {
            Command::LoadData(path, roles) => self.load_data(path, roles),
            Command::LoadProbabilities(path) => self.load_probabilities(Some(path)),
            Command::ComputeProbabilities => self.load_probabilities(None),
            Command::Settings(settings) => self.change_settings(settings),
            Command::Estimate => self.start_estimate(),
            Command::SelectMatrix(target) => self.select_matrix(target),
            Command::FilterSource(source) => self.filter_source(source),
            Command::SetCell { row, col, value } => {
                let keep = self.session.settings.keep_diagonal;
                self.edit(|e| e.set_cell(row, col, value, keep));
            }
            Command::EndGesture => self.edit(|e| {
                e.end_gesture();
                false
            }),
            Command::Undo => self.edit(MatrixEditor::undo),
            Command::Redo => self.edit(MatrixEditor::redo),
            Command::ResetMatrix => self.edit(MatrixEditor::reset),
            Command::ImportMatrix(path) => self.import_matrix(&path),
            Command::ExportMatrix(path) => self.export_matrix(path),
            Command::Bootstrap => self.start_bootstrap(),
            Command::ExportWorklist(path) => self.export_worklist(path),
            Command::ImportReview(path) => self.import_review(path),
            Command::SaveMerged(path) => self.save_merged(path),
            Command::Retrain => self.start_retrain(),
            Command::SaveModel(index, path) => self.save_model(index, path),
            Command::SaveSession(path) => self.save_session(path),
            Command::OpenSession(path) => self.open_session(&path),
            Command::Cancel(kind) => self.jobs.cancel(kind),
            Command::Dismiss(i) => self.messages.dismiss(i),
            Command::UseProbabilitiesFile(path) => self.session.probs = Some(path),
            Command::Verdict { row, label } => self.give_verdict(row, label),
            Command::UndoVerdict => self.undo_verdict(),
            Command::RedoVerdict => self.redo_verdict(),
            Command::StartRound => self.start_round(),
            Command::EndRound => self.end_round(),
            Command::ExportVerdicts(path) => self.export_verdicts(path),
            Command::SortSuspects(sort) => {
                self.sort = sort;
                self.refilter();
            }
        }
    }
}

/// Library errors become job failures (cancellation stays cancellation).
fn fail(e: Error) -> JobFailure {
    match e {
        Error::Cancelled => JobFailure::Cancelled,
        e => JobFailure::Error(e.to_string()),
    }
}
