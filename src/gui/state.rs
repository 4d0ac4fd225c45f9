//! The desktop app's state and every rule of how it changes, with no drawing: views
//! read it and push [`Command`]s; [`AppState::apply`] carries them out and starts
//! background jobs; [`AppState::poll`] takes the jobs' results in. Unit tests drive it
//! directly, without a window.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::{Array2, ArrayView2};

use super::command::Command;
use super::jobs::{Finished, JobControl, JobFailure, JobKind, Jobs};
use super::matrix_edit::MatrixEditor;
use crate::data::roles::ColumnPlan;
use crate::data::{Dataset, ProbOptions, TableOptions};
use crate::error::Error;
use crate::io::model::{write_model, ModelFile, Provenance, TrainingSettings};
use crate::io::review::{load_key, load_review, write_merged, Review};
use crate::io::session::{
    read_session, write_session, MatrixOrigin, Roles, Session, SessionMatrix, Settings,
};
use crate::io::worklist::{key_beside, key_path, write_worklist_files, Item};
use crate::io::{check_not_input, write_atomic};
use crate::learn::{OofParams, SoftmaxParams};
use crate::noise::bootstrap::Interval;
use crate::noise::matrix::{load_matrix_csv, write_matrix_csv};
use crate::noise::posterior::Flip;
use crate::noise::scores::RowScore;
use crate::noise::scores::ScoreKind;
use crate::noise::{Diagnostics, Estimator, EstimatorSettings, Method};
use crate::workflow::compare::{
    compare, load_test, CompareInputs, CompareSettings, Comparison, MatrixChoice,
};
use crate::workflow::ranking::{
    filter_rows, finish_ranking, rank_rows_head, Filter, Ranking, HEAD_ROWS,
};
use crate::workflow::review::{summarise, ReviewSummary};
use crate::workflow::worklist::{split_budget, with_control};
use crate::workflow::{self, RowProbabilities};

/// How serious a message is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Level {
    /// Something failed; nothing was lost.
    Error,
    /// Worth knowing before trusting a figure.
    Warning,
    /// Done.
    Info,
}

/// A line shown in the message area until dismissed.
#[derive(Debug, Clone, PartialEq)]
pub struct Message {
    /// Its level.
    pub level: Level,
    /// Its text.
    pub text: String,
}

/// The estimate a matrix was started from.
#[derive(Debug, Clone)]
pub struct EstimateInfo {
    /// How it was made (`quantile (q = 0.97)`, `file m.csv`, …).
    pub source: String,
    /// Notes from estimation.
    pub notes: Vec<String>,
    /// The method, for the bootstrap (none for imported matrices).
    pub method: Option<Method>,
    /// Every row's clean posterior from a joint fit: the scores read it under the
    /// (possibly edited) matrix instead of inverting the matrix.
    pub clean: Option<Arc<Array2<f32>>>,
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

/// What a finished job hands back. Each result carries the data generation (and, where
/// it matters, the matrix version) it was computed from; one that no longer matches is
/// discarded.
#[derive(Debug)]
pub enum JobOutput {
    /// A table was read.
    Loaded(Box<Dataset>, Roles),
    /// Probabilities for data generation `.1`.
    Probabilities(Box<RowProbabilities>, u64),
    /// An estimate for data generation `.1`.
    Estimated(Array2<f64>, u64, EstimateInfo),
    /// Bootstrap intervals for data generation `.1`.
    Intervals(Interval, u64),
    /// A ranking (perhaps only its head in order) for data generation `.1`.
    Ranked(Box<Ranking>, u64),
    /// The complete ranking of a head ranking, for data generation `.1`.
    RankedRest(Box<Ranking>, u64),
    /// Diagnostics for data generation `.1` and matrix version `.2`.
    Diagnosed(Box<Diagnostics>, u64, u64),
    /// A comparison for data generation `.1`.
    Compared(Retrained, u64),
    /// A reviewed worklist for data generation `.1`.
    Reviewed(ReviewRead, u64),
    /// A file was written; the message says which.
    Saved(String),
    /// A merged copy was written; load it next.
    Merged(PathBuf),
    /// A test job's text.
    Text(String),
}

/// The whole app state.
pub struct AppState {
    /// Paths, roles, matrix and settings as a session file stores them.
    pub session: Session,
    /// The session file, once saved or opened.
    pub session_path: Option<PathBuf>,
    /// The loaded table.
    pub data: Option<Arc<Dataset>>,
    /// Observed and trusted rows per class of `data`, counted once at load (the Data view
    /// shows them every frame).
    pub class_counts: (Vec<usize>, Vec<usize>),
    /// Bumped on every successful load; results from older data are discarded.
    pub data_generation: u64,
    /// Probabilities of the current data.
    pub probs: Option<Arc<RowProbabilities>>,
    /// The matrix being edited.
    pub editor: Option<MatrixEditor>,
    /// How the editor's reference matrix was made.
    pub estimate: Option<EstimateInfo>,
    /// Bootstrap intervals of the estimate.
    pub intervals: Option<Interval>,
    /// Diagnostics of the current matrix (and the version they are for).
    pub diagnostics: Option<(Diagnostics, u64)>,
    /// Ranked suspects of the current (or, while re-ranking, the previous) matrix.
    pub ranking: Option<Arc<Ranking>>,
    /// Positions in the ranking that pass the filters.
    pub visible: Vec<u32>,
    /// The last comparison.
    pub retrained: Option<Retrained>,
    /// The last reviewed worklist read.
    pub review: Option<ReviewRead>,
    /// Messages not yet dismissed, oldest first.
    pub messages: Vec<Message>,
    /// Background work.
    pub jobs: Jobs<JobOutput>,
    /// A matrix from a session, applied once its data's estimate arrives.
    pending_matrix: Option<SessionMatrix>,
    /// The matrix changed while a ranking (or diagnosis) was running: run again when it
    /// ends. At most one of each runs, so a drag over a cell never piles up stale work.
    rank_pending: bool,
    diagnose_pending: bool,
    /// Saves started so far (each save is its own job).
    saves: u64,
}

/// Messages kept at most (older ones go first).
const MAX_MESSAGES: usize = 20;

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
            editor: None,
            estimate: None,
            intervals: None,
            diagnostics: None,
            ranking: None,
            visible: Vec::new(),
            retrained: None,
            review: None,
            messages: Vec::new(),
            jobs: Jobs::new(wake),
            pending_matrix: None,
            rank_pending: false,
            saves: 0,
            diagnose_pending: false,
        }
    }

    /// The settings in force.
    pub fn settings(&self) -> &Settings {
        &self.session.settings
    }

    /// Adds a message.
    pub fn say(&mut self, level: Level, text: impl Into<String>) {
        self.messages.push(Message {
            level,
            text: text.into(),
        });
        if self.messages.len() > MAX_MESSAGES {
            self.messages.remove(0);
        }
    }

    /// The most recent error message, if any is shown.
    pub fn last_error(&self) -> Option<&str> {
        self.messages
            .iter()
            .rev()
            .find(|m| m.level == Level::Error)
            .map(|m| m.text.as_str())
    }

    /// Carries out one command.
    pub fn apply(&mut self, command: Command) {
        match command {
            Command::LoadData(path, roles) => self.load_data(path, roles),
            Command::LoadProbabilities(path) => self.load_probabilities(Some(path)),
            Command::ComputeProbabilities => self.load_probabilities(None),
            Command::Settings(settings) => self.change_settings(settings),
            Command::Estimate => self.start_estimate(),
            Command::SetCell { row, col, value } => {
                let keep = self.session.settings.keep_diagonal;
                if let Some(e) = &mut self.editor {
                    if e.set_cell(row, col, value, keep) {
                        self.matrix_changed();
                    }
                }
            }
            Command::EndGesture => {
                if let Some(e) = &mut self.editor {
                    e.end_gesture();
                }
            }
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
            Command::Dismiss(i) => {
                if i < self.messages.len() {
                    self.messages.remove(i);
                }
            }
        }
    }

    /// Takes in finished jobs; returns true when anything changed.
    pub fn poll(&mut self) -> bool {
        let finished = self.jobs.poll();
        let changed = !finished.is_empty();
        for done in finished {
            self.receive(done);
        }
        changed
    }

    /// Waits for every job (and the jobs they start) to finish; for tests and scripts.
    pub fn settle(&mut self, timeout_secs: f64) {
        let deadline = std::time::Instant::now() + std::time::Duration::from_secs_f64(timeout_secs);
        loop {
            for done in self.jobs.wait_all(timeout_secs) {
                self.receive(done);
            }
            if !self.jobs.busy() || std::time::Instant::now() > deadline {
                break;
            }
        }
    }

    fn receive(&mut self, done: Finished<JobOutput>) {
        let kind = done.ticket.kind;
        match done.outcome {
            Ok(output) => self.accept(output),
            Err(JobFailure::Cancelled) => {
                self.say(Level::Info, format!("{}: cancelled", kind.label()))
            }
            Err(failure) => self.say(Level::Error, failure.to_string()),
        }
        if kind == JobKind::Rank && std::mem::take(&mut self.rank_pending) {
            self.start_rank();
        }
        let ranking_idle = self.jobs.running(JobKind::Rank).is_none();
        if ranking_idle && std::mem::take(&mut self.diagnose_pending) {
            self.start_diagnose();
        }
    }

    fn accept(&mut self, output: JobOutput) {
        let current = self.data_generation;
        match output {
            JobOutput::Loaded(data, roles) => self.data_loaded(*data, roles),
            JobOutput::Probabilities(p, generation) if generation == current => {
                for notice in &p.notices {
                    self.say(Level::Warning, notice.clone());
                }
                self.probs = Some(Arc::from(p));
                self.start_estimate();
            }
            JobOutput::Estimated(matrix, generation, info) if generation == current => {
                self.estimated(matrix, info)
            }
            JobOutput::Intervals(interval, generation) if generation == current => {
                self.intervals = Some(interval)
            }
            // A ranking of a slightly older matrix is still shown while the newer one is
            // computed (the view says it is updating); one of another score is not.
            JobOutput::Ranked(ranking, generation)
                if generation == current && ranking.kind == self.session.settings.score =>
            {
                let ranking: Arc<Ranking> = Arc::from(ranking);
                if !ranking.is_complete() {
                    self.start_rank_rest(ranking.clone());
                }
                self.ranking = Some(ranking);
                self.refilter();
            }
            JobOutput::RankedRest(full, generation)
                if generation == current
                    && self.ranking.as_ref().is_some_and(|r| {
                        r.matrix_version == full.matrix_version && r.kind == full.kind
                    }) =>
            {
                self.ranking = Some(Arc::from(full));
                self.refilter();
            }
            JobOutput::Diagnosed(d, generation, version) if generation == current => {
                self.diagnostics = Some((*d, version))
            }
            JobOutput::Compared(r, generation) if generation == current => {
                let warnings = r.comparison.report.warnings.clone();
                self.retrained = Some(r);
                for w in warnings {
                    self.say(Level::Warning, w);
                }
            }
            JobOutput::Reviewed(r, generation) if generation == current => {
                self.say(
                    Level::Info,
                    format!(
                        "{}: {} verdicts ({} confirm, {} change the label)",
                        r.path.display(),
                        r.summary.reviewed,
                        r.summary.confirmed,
                        r.summary.changed
                    ),
                );
                self.review = Some(r);
            }
            JobOutput::Saved(text) | JobOutput::Text(text) => self.say(Level::Info, text),
            JobOutput::Merged(path) => {
                self.say(Level::Info, format!("wrote {}; loading it", path.display()));
                let roles = self.session.roles.clone();
                self.load_data(path, roles);
            }
            // A result computed from data that has since been replaced.
            _ => {}
        }
    }

    // ---- data and probabilities -------------------------------------------------

    fn load_data(&mut self, path: PathBuf, roles: Roles) {
        let options = match table_options(&roles) {
            Ok(o) => o,
            Err(e) => return self.say(Level::Error, e),
        };
        self.jobs.spawn(JobKind::Load, move |_| {
            let data = Dataset::load(&path, &options).map_err(fail)?;
            Ok(JobOutput::Loaded(Box::new(data), roles))
        });
    }

    fn data_loaded(&mut self, data: Dataset, roles: Roles) {
        for w in &data.warnings {
            self.say(Level::Warning, w.clone());
        }
        self.say(
            Level::Info,
            format!(
                "loaded {}: {} rows, {} features, {} classes",
                data.path.display(),
                data.rows(),
                data.feature_names.len(),
                data.classes.len()
            ),
        );
        let other_file = self.session.data.as_ref().is_some_and(|p| p != &data.path);
        self.session.data = Some(data.path.clone());
        self.session.roles = roles;
        if other_file {
            self.session.probs = None;
        }
        self.class_counts = (data.class_counts(), data.trusted_counts());
        self.data = Some(Arc::new(data));
        self.data_generation += 1;
        self.rank_pending = false;
        self.diagnose_pending = false;
        for kind in [
            JobKind::Probabilities,
            JobKind::Estimate,
            JobKind::Bootstrap,
            JobKind::Rank,
            JobKind::RankRest,
            JobKind::Diagnose,
            JobKind::Retrain,
            JobKind::Review,
        ] {
            self.jobs.cancel(kind);
        }
        self.probs = None;
        self.editor = None;
        self.estimate = None;
        self.intervals = None;
        self.diagnostics = None;
        self.ranking = None;
        self.visible.clear();
        self.retrained = None;
        self.review = None;
        let probs = self.session.probs.clone();
        self.load_probabilities(probs);
    }

    fn load_probabilities(&mut self, path: Option<PathBuf>) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        let options = ProbOptions {
            renormalize: false,
            delimiter: None,
        };
        let oof = self.oof_params();
        let generation = self.data_generation;
        self.session.probs = path.clone();
        self.jobs.spawn(JobKind::Probabilities, move |control| {
            let probs =
                workflow::probabilities(&data, path.as_deref(), &options, &oof, &mut |f, n| {
                    control.set_progress(f, n);
                    !control.is_cancelled()
                })
                .map_err(fail)?;
            Ok(JobOutput::Probabilities(Box::new(probs), generation))
        });
    }

    /// Folds, seed and model of every fit.
    pub fn oof_params(&self) -> OofParams {
        let s = &self.session.settings;
        OofParams {
            folds: s.folds,
            seed: s.seed,
            model: SoftmaxParams::default().l2(s.l2).max_iter(s.max_iter),
        }
    }

    // ---- the flip matrix ----------------------------------------------------------

    /// The estimator the settings pick.
    pub fn method(&self) -> Method {
        let s = &self.session.settings;
        s.estimator.with(&EstimatorSettings {
            quantile: s.quantile,
            fallback: s.fallback,
            volume_weight: None,
        })
    }

    fn start_estimate(&mut self) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return;
        };
        let method = self.method();
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::Estimate, move |_| {
            let e = workflow::estimate_on_all_rows(&data, &probs, &method).map_err(fail)?;
            let info = EstimateInfo {
                source: workflow::MatrixSource::Estimate(method.clone()).describe(),
                notes: e.notes,
                method: Some(method),
                clean: e.clean.map(Arc::new),
            };
            Ok(JobOutput::Estimated(e.matrix, generation, info))
        });
    }

    fn estimated(&mut self, matrix: Array2<f64>, info: EstimateInfo) {
        for note in &info.notes {
            self.say(Level::Warning, note.clone());
        }
        let classes = self
            .data
            .as_ref()
            .map(|d| d.classes.clone())
            .unwrap_or_default();
        let restored = self
            .pending_matrix
            .take()
            .filter(|m| m.classes == classes)
            .map(|m| {
                let k = m.classes.len();
                let flat: Vec<f64> = m.values.into_iter().flatten().collect();
                (Array2::from_shape_vec((k, k), flat), m.origin)
            });
        match (restored, &mut self.editor) {
            (Some((Ok(saved), origin)), _) => {
                let mut editor = MatrixEditor::new(matrix, MatrixOrigin::Estimated);
                if origin == MatrixOrigin::Imported {
                    editor.replace(saved, MatrixOrigin::Imported);
                } else {
                    // Restored edits are measured against the fresh estimate.
                    editor.replace_current(saved, origin);
                }
                self.editor = Some(editor);
            }
            (_, Some(editor)) => editor.replace(matrix, MatrixOrigin::Estimated),
            (_, None) => self.editor = Some(MatrixEditor::new(matrix, MatrixOrigin::Estimated)),
        }
        self.estimate = Some(info);
        self.intervals = None;
        self.matrix_changed();
    }

    fn edit(&mut self, change: fn(&mut MatrixEditor) -> bool) {
        if let Some(e) = &mut self.editor {
            if change(e) {
                self.matrix_changed();
            }
        }
    }

    /// The matrix changed: re-rank first (the table is what the user watches while
    /// editing), and diagnose once the ranking is done, so the two do not share the
    /// cores.
    fn matrix_changed(&mut self) {
        self.start_rank();
        self.diagnose_pending = true;
        if self.jobs.running(JobKind::Rank).is_none() {
            self.start_diagnose();
        }
    }

    /// What a job on the current matrix needs, unless one of `kind` is already running
    /// (then the job is marked to run again when it ends, and `None` is returned).
    fn matrix_job_inputs(&mut self, kind: JobKind) -> Option<MatrixJobInputs> {
        let (Some(data), Some(probs), Some(editor)) =
            (self.data.clone(), self.probs.clone(), self.editor.as_ref())
        else {
            return None;
        };
        if self.jobs.running(kind).is_some() {
            match kind {
                JobKind::Rank => self.rank_pending = true,
                _ => self.diagnose_pending = true,
            }
            return None;
        }
        Some(MatrixJobInputs {
            data,
            probs,
            matrix: editor.matrix().clone(),
            version: editor.version(),
            clean: self.estimate.as_ref().and_then(|e| e.clean.clone()),
        })
    }

    fn start_rank(&mut self) {
        let Some(inputs) = self.matrix_job_inputs(JobKind::Rank) else {
            return;
        };
        let kind = self.session.settings.score;
        let generation = self.data_generation;
        // Sorting the rest of an older ranking is wasted once a newer one is on its way.
        self.jobs.cancel(JobKind::RankRest);
        self.jobs.spawn(JobKind::Rank, move |_| {
            let (probs, flip) = inputs.scored(kind);
            let r = rank_rows_head(
                probs,
                &inputs.data.labels,
                flip,
                kind,
                inputs.version,
                HEAD_ROWS,
            );
            Ok(JobOutput::Ranked(Box::new(r), generation))
        });
    }

    fn start_rank_rest(&mut self, partial: Arc<Ranking>) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return;
        };
        // The rows the head was scored from: the joint fit's clean posteriors or the
        // noisy probabilities.
        let clean = partial
            .clean_inputs
            .then(|| self.estimate.as_ref().and_then(|e| e.clean.clone()))
            .flatten();
        if partial.clean_inputs && clean.is_none() {
            return;
        }
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::RankRest, move |control| {
            if control.is_cancelled() {
                return Err(JobFailure::Cancelled);
            }
            let rows = match &clean {
                Some(c) => c.view(),
                None => probs.values.view(),
            };
            let full = finish_ranking(&partial, rows, &data.labels);
            Ok(JobOutput::RankedRest(Box::new(full), generation))
        });
    }

    fn start_diagnose(&mut self) {
        let Some(MatrixJobInputs {
            data,
            probs,
            matrix,
            version,
            clean,
        }) = self.matrix_job_inputs(JobKind::Diagnose)
        else {
            return;
        };
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::Diagnose, move |_| {
            let d = workflow::diagnose_matrix(&data, &probs, &matrix, clean.as_deref());
            Ok(JobOutput::Diagnosed(Box::new(d), generation, version))
        });
    }

    fn import_matrix(&mut self, path: &Path) {
        let Some(data) = &self.data else {
            return self.say(Level::Error, "load a data table first");
        };
        match load_matrix_csv(path, &data.classes, false) {
            Ok((matrix, notes)) => {
                for n in notes {
                    self.say(Level::Warning, n);
                }
                let k = matrix.nrows();
                let editor = self.editor.get_or_insert_with(|| {
                    MatrixEditor::new(Array2::eye(k), MatrixOrigin::Imported)
                });
                editor.replace(matrix, MatrixOrigin::Imported);
                self.estimate = Some(EstimateInfo {
                    source: format!("file {}", path.display()),
                    notes: Vec::new(),
                    method: None,
                    clean: None,
                });
                self.intervals = None;
                self.say(Level::Info, format!("imported {}", path.display()));
                self.matrix_changed();
            }
            Err(e) => self.say(Level::Error, e.to_string()),
        }
    }

    fn export_matrix(&mut self, path: PathBuf) {
        let (Some(data), Some(editor)) = (&self.data, &self.editor) else {
            return self.say(Level::Error, "there is no matrix to export yet");
        };
        let matrix = editor.matrix().clone();
        let classes = data.classes.clone();
        let inputs = self.input_paths();
        self.save_job(path, inputs, move |w| {
            write_matrix_csv(w, &matrix, &classes)
        });
    }

    fn start_bootstrap(&mut self) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return self.say(Level::Error, "the bootstrap needs data and probabilities");
        };
        let Some(method) = self.estimate.as_ref().and_then(|e| e.method.clone()) else {
            return self.say(
                Level::Error,
                "an imported matrix has no estimator to resample",
            );
        };
        let s = &self.session.settings;
        let (resamples, seed) = (s.resamples.max(2), s.seed);
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::Bootstrap, move |_| {
            let i = workflow::matrix_intervals(&data, &probs, &method, resamples, seed)
                .map_err(fail)?;
            Ok(JobOutput::Intervals(i, generation))
        });
    }

    // ---- settings -------------------------------------------------------------------

    fn change_settings(&mut self, new: Settings) {
        let old = std::mem::replace(&mut self.session.settings, new);
        let s = &self.session.settings;
        let estimator_changed = old.estimator != s.estimator
            || (matches!(s.estimator, Estimator::Quantile | Estimator::Trusted)
                && old.quantile != s.quantile);
        let score_changed = old.score != s.score;
        let filter_changed = old.min_score != s.min_score
            || old.observed_filter != s.observed_filter
            || old.suggested_filter != s.suggested_filter;
        if estimator_changed {
            self.start_estimate();
        } else if score_changed {
            self.start_rank();
        }
        if filter_changed {
            self.refilter();
        }
    }

    /// The filter the settings describe, with class names resolved.
    pub fn filter(&self) -> Filter {
        let s = &self.session.settings;
        let class = |name: &Option<String>| {
            let classes = &self.data.as_ref()?.classes;
            classes.iter().position(|c| Some(c) == name.as_ref())
        };
        Filter {
            observed: class(&s.observed_filter),
            suggested: class(&s.suggested_filter),
            min_score: s.min_score,
        }
    }

    fn refilter(&mut self) {
        let filter = self.filter();
        self.visible = match (&self.ranking, &self.data) {
            (Some(r), Some(d)) => filter_rows(r, &d.labels, &filter),
            _ => Vec::new(),
        };
    }

    // ---- suspects and review ----------------------------------------------------------

    fn export_worklist(&mut self, path: PathBuf) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        if !self.ranking.as_ref().is_some_and(|r| r.is_complete()) {
            return self.say(
                Level::Error,
                "the suspects are still being ranked; export again in a moment",
            );
        }
        let Some(ranking) = self.ranking.clone() else {
            return;
        };
        let filter = self.filter();
        let settings = &self.session.settings;
        let (suspects, control) = split_budget(settings.budget, settings.control);
        let listed: Vec<(RowScore, usize)> = self
            .visible
            .iter()
            .take(suspects)
            .map(|&i| (ranking.ranked[i as usize], i as usize + 1))
            .collect();
        let inputs = self.input_paths();
        let (kind, seed) = (settings.score, settings.seed);
        let job = self.next_save();
        self.jobs.spawn(job, move |_| {
            let items = ranked_with_control(&ranking, &data, &listed, control, seed, &filter);
            let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
            for target in [&path, &key_path(&path)] {
                check_not_input(target, &refs).map_err(fail)?;
            }
            let key = write_worklist_files(&path, &data, kind, &items, false).map_err(fail)?;
            let drawn = items.len() - listed.len();
            Ok(JobOutput::Saved(match key {
                None => format!(
                    "wrote {} ({} suspects, ranked)",
                    path.display(),
                    listed.len()
                ),
                Some(key) => format!(
                    "wrote {} ({} suspects and {drawn} control rows, shuffled) and its key {}: \
                     keep the key from the reviewers",
                    path.display(),
                    listed.len(),
                    key.display()
                ),
            }))
        });
    }

    fn import_review(&mut self, path: PathBuf) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::Review, move |_| {
            let mut review = load_review(&path, &data).map_err(fail)?;
            let key = key_beside(&path)
                .map(|key| load_key(&key, &data))
                .transpose()
                .map_err(fail)?;
            let summary = summarise(&data, &mut review, key.as_ref());
            let read = ReviewRead {
                path,
                review: Arc::new(review),
                summary,
            };
            Ok(JobOutput::Reviewed(read, generation))
        });
    }

    fn save_merged(&mut self, path: PathBuf) {
        let (Some(data), Some(review)) = (self.data.clone(), self.review.clone()) else {
            return self.say(Level::Error, "read a reviewed worklist first");
        };
        let inputs = self.input_paths();
        let mut all_inputs = inputs;
        all_inputs.push(review.path.clone());
        let delimiter = table_options(&self.session.roles)
            .map(|o| o.delimiter_for(&data.path))
            .unwrap_or(b',');
        let target = path.clone();
        let kind = self.next_save();
        self.jobs.spawn(kind, move |_| {
            let inputs: Vec<&Path> = all_inputs.iter().map(PathBuf::as_path).collect();
            check_not_input(&target, &inputs).map_err(fail)?;
            write_atomic(&target, |w| {
                write_merged(w, &data, delimiter, &review.review)
            })
            .map_err(fail)?;
            Ok(JobOutput::Merged(target))
        });
    }

    // ---- retraining -------------------------------------------------------------------

    fn start_retrain(&mut self) {
        let (Some(data), Some(probs), Some(editor)) =
            (self.data.clone(), self.probs.clone(), self.editor.as_ref())
        else {
            return self.say(
                Level::Error,
                "retraining needs data, probabilities and a matrix",
            );
        };
        let matrix = editor.matrix().clone();
        let version = editor.version();
        let s = &self.session.settings;
        let settings = CompareSettings {
            holdout: s.holdout,
            fit: self.oof_params(),
            corrections: s.corrections.clone(),
        };
        let test_path = s.test.clone();
        let generation = self.data_generation;
        self.jobs.spawn(JobKind::Retrain, move |control| {
            let test = test_path
                .as_deref()
                .map(|p| load_test(p, None, &data))
                .transpose()
                .map_err(fail)?;
            let inputs = CompareInputs {
                data: &data,
                probs: Some(&probs),
                matrix: MatrixChoice::Given(&matrix),
                test: test.as_ref().map(|(x, l)| (x, l.as_slice())),
            };
            let comparison = compare(inputs, &settings, Some(control.flag()), &mut |i, n| {
                control.set_progress(i, n);
                !control.is_cancelled()
            })
            .map_err(fail)?;
            let retrained = Retrained {
                comparison: Arc::new(comparison),
                matrix_version: version,
            };
            Ok(JobOutput::Compared(retrained, generation))
        });
    }

    fn save_model(&mut self, index: usize, path: PathBuf) {
        let (Some(data), Some(r)) = (self.data.clone(), self.retrained.clone()) else {
            return self.say(Level::Error, "train first");
        };
        if index >= r.comparison.models.len() {
            return self.say(Level::Error, "no such model");
        }
        let s = self.session.settings.clone();
        let source = self.matrix_description();
        let inputs = self.input_paths();
        self.save_job(path, inputs, move |w| {
            let c = &r.comparison;
            let (correction, model) = &c.models[index];
            let matrix = Array2::from_shape_vec(
                (c.report.classes.len(), c.report.classes.len()),
                c.report.matrix.iter().flatten().copied().collect(),
            )
            .map_err(std::io::Error::other)?;
            let provenance = Provenance {
                data: &data,
                rows: &c.train,
                correction: correction.name(),
                matrix: correction.needs_matrix().then_some(&matrix),
                fit: c.fits[index],
            };
            let settings = TrainingSettings {
                l2: s.l2,
                max_iter: s.max_iter,
                seed: s.seed,
                matrix_source: correction.needs_matrix().then(|| source.clone()),
            };
            write_model(w, &ModelFile::describe(model, provenance, settings))
        });
    }

    /// How the status bar and model files name the current matrix.
    pub fn matrix_description(&self) -> String {
        match (&self.editor, &self.estimate) {
            (Some(e), Some(info)) if e.origin() == MatrixOrigin::Edited => {
                format!("{} (edited by hand)", info.source)
            }
            (Some(_), Some(info)) => info.source.clone(),
            _ => "none yet".into(),
        }
    }

    // ---- sessions -----------------------------------------------------------------------

    /// The session as it would be saved now.
    pub fn snapshot_session(&self) -> Session {
        let mut s = self.session.clone();
        s.matrix = match (&self.data, &self.editor) {
            (Some(d), Some(e)) => Some(SessionMatrix {
                classes: d.classes.clone(),
                values: e.matrix().rows().into_iter().map(|r| r.to_vec()).collect(),
                origin: e.origin(),
            }),
            _ => None,
        };
        s
    }

    fn save_session(&mut self, path: Option<PathBuf>) {
        let Some(path) = path.or_else(|| self.session_path.clone()) else {
            return self.say(Level::Error, "choose a file to save the session to");
        };
        let session = self.snapshot_session();
        let inputs = self.input_paths();
        let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
        // Sessions are small: written here, so a failure is reported before the next frame.
        let outcome = check_not_input(&path, &refs)
            .and_then(|()| write_atomic(&path, |w| write_session(w, &session)));
        match outcome {
            Ok(()) => {
                self.say(Level::Info, format!("session saved to {}", path.display()));
                self.session_path = Some(path);
            }
            Err(e) => self.say(Level::Error, format!("the session was not saved: {e}")),
        }
    }

    fn open_session(&mut self, path: &Path) {
        let read = std::fs::File::open(path)
            .map_err(|source| Error::Read {
                path: path.to_path_buf(),
                source,
            })
            .and_then(|f| read_session(f, path));
        let session = match read {
            Ok(s) => s,
            Err(e) => return self.say(Level::Error, e.to_string()),
        };
        self.session_path = Some(path.to_path_buf());
        self.pending_matrix = session.matrix.clone();
        let data = session.data.clone();
        let roles = session.roles.clone();
        self.session = session;
        self.session.matrix = None;
        match data {
            Some(data) => self.load_data(data, roles),
            None => self.say(Level::Info, format!("opened session {}", path.display())),
        }
    }

    // ---- helpers --------------------------------------------------------------------------

    /// Files the app has read, which no output may replace.
    fn input_paths(&self) -> Vec<PathBuf> {
        let mut inputs: Vec<PathBuf> = Vec::new();
        inputs.extend(self.session.data.clone());
        inputs.extend(self.session.probs.clone());
        inputs.extend(self.session.settings.test.clone());
        inputs.extend(self.session_path.clone());
        inputs
    }

    /// A new job kind for one save.
    fn next_save(&mut self) -> JobKind {
        self.saves += 1;
        JobKind::Save(self.saves)
    }

    /// Writes a file on a worker, atomically, never over an input.
    fn save_job<F>(&mut self, path: PathBuf, inputs: Vec<PathBuf>, write: F)
    where
        F: FnOnce(&mut dyn std::io::Write) -> std::io::Result<()> + Send + 'static,
    {
        let kind = self.next_save();
        self.jobs.spawn(kind, move |_| {
            let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
            check_not_input(&path, &refs).map_err(fail)?;
            write_atomic(&path, write).map_err(fail)?;
            Ok(JobOutput::Saved(format!("wrote {}", path.display())))
        });
    }

    /// Checks roles against the loaded header without reading the file again; the
    /// message is shown beside the role pickers as the user changes them.
    pub fn check_roles(&self, roles: &Roles) -> Result<(), String> {
        let Some(data) = &self.data else {
            return Ok(());
        };
        let options = table_options(roles)?;
        ColumnPlan::resolve(&data.path, &data.header, &options)
            .map(|_| ())
            .map_err(|e| e.to_string())
    }

    /// Runs `work` as a job of `kind` (tests use it to prove a panicking worker is
    /// reported and the app goes on).
    pub fn spawn_job<F>(&mut self, kind: JobKind, work: F)
    where
        F: FnOnce(&JobControl) -> Result<JobOutput, JobFailure> + Send + 'static,
    {
        self.jobs.spawn(kind, work);
    }
}

/// The data, probabilities and a copy of the matrix (with its version) for a job.
struct MatrixJobInputs {
    data: Arc<Dataset>,
    probs: Arc<RowProbabilities>,
    matrix: Array2<f64>,
    version: u64,
    /// The joint fit's clean posteriors, when the matrix came from one.
    clean: Option<Arc<Array2<f32>>>,
}

impl MatrixJobInputs {
    /// What the posterior score reads, and the matrix as it applies to it.
    fn scored(&self, kind: ScoreKind) -> (ArrayView2<'_, f32>, Flip<'_>) {
        let (view, flip) =
            workflow::score_inputs(kind, &self.probs, self.clean.as_deref(), Some(&self.matrix));
        (view, flip.unwrap_or(Flip::noisy(&self.matrix)))
    }
}

/// Library errors become job failures (cancellation stays cancellation).
fn fail(e: Error) -> JobFailure {
    match e {
        Error::Cancelled => JobFailure::Cancelled,
        e => JobFailure::Error(e.to_string()),
    }
}

/// Roles as loader options.
pub fn table_options(roles: &Roles) -> Result<TableOptions, String> {
    let delimiter = match roles.delimiter.as_deref().map(str::trim) {
        None | Some("") => None,
        Some(text) => Some(crate::data::roles::parse_delimiter(text)?),
    };
    Ok(TableOptions {
        delimiter,
        label: roles.label.clone(),
        id: roles.id.clone(),
        trusted: roles.trusted.clone(),
        features: roles.features.clone(),
        exclude: Vec::new(),
        unlabeled: false,
    })
}

/// The listed rows of the app's worklist plus `control` control rows drawn from the rows
/// the filter's class choices allow, with their verdicts and ranks from the ranking.
fn ranked_with_control(
    ranking: &Ranking,
    data: &Dataset,
    listed: &[(RowScore, usize)],
    control: usize,
    seed: u64,
    filter: &Filter,
) -> Vec<Item> {
    let mut position = vec![0usize; ranking.ranked.len()];
    for (i, s) in ranking.ranked.iter().enumerate() {
        position[s.row] = i;
    }
    with_control(
        listed,
        data.rows(),
        control,
        seed,
        |r| filter.observed.is_none_or(|c| data.labels[r] == c),
        |rows| rows.iter().map(|&r| ranking.ranked[position[r]]).collect(),
        |rows| rows.iter().map(|&r| position[r] + 1).collect(),
    )
}
