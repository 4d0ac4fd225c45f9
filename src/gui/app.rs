//! The eframe app: runtime UI state, the frame loop (poll jobs, draw, then apply the
//! commands the drawing produced), shortcuts, drag-and-drop and persistence.

use std::path::PathBuf;
use std::sync::Arc;

use eframe::egui;
use rustc_hash::FxHashMap;
use serde::{Deserialize, Serialize};

use super::command::Command;
use super::dialogs::{self, Dialogs, Purpose};
use super::state::AppState;
use super::views;
use crate::io::session::Roles;

/// The views, in tab order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum View {
    /// The headline numbers with their intervals, each linking to the view that explains
    /// it; what to do first before data are loaded.
    Overview,
    /// Table, roles, classes, probabilities.
    Data,
    /// The editable flip matrix and its diagnostics.
    Matrix,
    /// The label sources side by side: table, heatmaps, each one's suspects.
    Sources,
    /// Ranked suspect rows, worklist export and review import.
    Suspects,
    /// Corrected training and the comparison.
    Retrain,
}

impl View {
    /// All views in tab order.
    pub const ALL: [View; 6] = [
        View::Overview,
        View::Data,
        View::Matrix,
        View::Sources,
        View::Suspects,
        View::Retrain,
    ];

    /// The tab's title.
    pub fn title(self) -> &'static str {
        match self {
            View::Overview => "Overview",
            View::Data => "Data",
            View::Matrix => "Flip matrix",
            View::Sources => "Sources",
            View::Suspects => "Suspects",
            View::Retrain => "Compare",
        }
    }
}

/// What eframe keeps between runs (window geometry is kept by eframe itself).
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct Persisted {
    /// Recently opened data files and sessions, newest first.
    pub recent: Vec<PathBuf>,
    /// Dark theme (`None`: dark). An app preference, not part of any session.
    pub dark: Option<bool>,
}

/// Recent files remembered.
const RECENT: usize = 10;

/// UI-only state: what is typed but not yet applied, the current view, open dialogs.
#[derive(Debug, Default)]
pub struct UiState {
    /// The view shown.
    pub view: Option<View>,
    /// Typed paths, per purpose.
    pub paths: FxHashMap<Purpose, String>,
    /// Roles being edited (applied with "Load").
    pub roles_draft: Option<Roles>,
    /// Dialogs the views asked for this frame.
    pub dialog_requests: Vec<Purpose>,
    /// Model picked for saving (index into the comparison); `None` until picked.
    pub model_choice: Option<usize>,
    /// The About panel is open.
    pub show_about: bool,
    /// The data row (0-based) the row inspector shows; any view may select one
    /// ([`UiState::select_row`], with `view = Some(View::Suspects)`) to open it there.
    /// Private so that every change of row goes through `select_row`.
    selected_row: Option<usize>,
    /// The suspects table scrolls to the selected row on the next frame.
    pub scroll_to_selected: bool,
    /// The id typed in the suspects view's search box.
    pub id_search: String,
    /// The class the inspector compares the selected row with (`None`: the row's
    /// suggested class); chosen for one row, so a new selection clears it.
    compare_class: Option<usize>,
    /// The data generation the UI last saw ([`AppState::data_generation`]): a newer one
    /// means a load succeeded, and the Overview is shown.
    pub seen_generation: u64,
    /// The estimate number whose bootstrap the Overview started, so it starts once per
    /// estimate (not again after a cancel or a failure).
    pub intervals_started: Option<u64>,
    /// The Overview's summary and the fingerprint of what it was computed from (summing
    /// every row's spread each frame would cost milliseconds on a million rows).
    pub(crate) overview: Option<(u64, Arc<crate::workflow::overview::Overview>)>,
    /// The review yield plot's figures and the hash of the inputs they were drawn from.
    pub(crate) yield_cache: Option<(u64, crate::gui::views::yield_plot::YieldFigures)>,
}

impl UiState {
    /// The current view (the Overview until one is chosen).
    pub fn view(&self) -> View {
        self.view.unwrap_or(View::Overview)
    }

    /// The model picked among `models` (index into the comparison). Until one is picked,
    /// the first correction (index 1) is set against `none`.
    pub fn chosen_model(&self, models: usize) -> usize {
        self.model_choice.unwrap_or(1).min(models.saturating_sub(1))
    }

    /// The typed path for `purpose`.
    pub fn path(&mut self, purpose: Purpose) -> &mut String {
        self.paths.entry(purpose).or_default()
    }

    /// The data row the row inspector shows.
    pub fn selected_row(&self) -> Option<usize> {
        self.selected_row
    }

    /// Selects `row` (or none). A class chosen to compare with belongs to the row it was
    /// chosen for: another row starts again from its own suggested class.
    pub fn select_row(&mut self, row: Option<usize>) {
        if row != self.selected_row {
            self.compare_class = None;
        }
        self.selected_row = row;
    }

    /// The class the inspector compares the selected row with, when one was chosen.
    pub fn compare_class(&self) -> Option<usize> {
        self.compare_class
    }

    /// Compares the selected row with `class` until another row is selected.
    pub fn compare_with(&mut self, class: usize) {
        self.compare_class = Some(class);
    }
}

/// The app.
pub struct FlipmendApp {
    /// Everything the views show.
    pub state: AppState,
    /// What only the UI needs.
    pub ui: UiState,
    /// Kept between runs.
    pub persisted: Persisted,
    dialogs: Dialogs,
    commands: Vec<Command>,
    /// When the process asked for the window; reported at the first frame when the
    /// environment sets FLIPMEND_TIMING (for the start-up measurement).
    launched: Option<std::time::Instant>,
}

/// Key of the persisted state in eframe's storage.
const STORAGE_KEY: &str = "flipmend";

impl FlipmendApp {
    /// A new app; `wake` requests a repaint from worker threads.
    pub fn new(ctx: &egui::Context, persisted: Persisted) -> Self {
        let repaint = ctx.clone();
        let wake: Arc<dyn Fn() + Send + Sync> = Arc::new(move || repaint.request_repaint());
        let state = AppState::new(wake);
        FlipmendApp {
            state,
            ui: UiState::default(),
            persisted,
            dialogs: Dialogs::default(),
            commands: Vec::new(),
            launched: None,
        }
    }

    /// Reports the time from `at` to the first frame on standard error when the
    /// environment sets FLIPMEND_TIMING.
    pub fn time_first_frame(&mut self, at: std::time::Instant) {
        if std::env::var_os("FLIPMEND_TIMING").is_some() {
            self.launched = Some(at);
        }
    }

    /// Built by eframe: restores the persisted state.
    pub fn from_creation(cc: &eframe::CreationContext<'_>) -> Self {
        let persisted = cc
            .storage
            .and_then(|s| eframe::get_value(s, STORAGE_KEY))
            .unwrap_or_default();
        Self::new(&cc.egui_ctx, persisted)
    }

    /// Queues a command for after this frame.
    pub fn push(&mut self, command: Command) {
        self.commands.push(command);
    }

    /// Applies queued commands now.
    pub fn apply_commands(&mut self) {
        for command in std::mem::take(&mut self.commands) {
            self.remember(&command);
            self.state.apply(command);
        }
    }

    fn remember(&mut self, command: &Command) {
        let path = match command {
            Command::LoadData(p, _) | Command::OpenSession(p) => p,
            Command::SaveSession(Some(p)) => p,
            _ => return,
        };
        let recent = &mut self.persisted.recent;
        recent.retain(|r| r != path);
        recent.insert(0, path.clone());
        recent.truncate(RECENT);
    }

    fn shortcuts(&mut self, ctx: &egui::Context) {
        use egui::{Key, KeyboardShortcut, Modifiers};
        let open = KeyboardShortcut::new(Modifiers::COMMAND, Key::O);
        let save = KeyboardShortcut::new(Modifiers::COMMAND, Key::S);
        let undo = KeyboardShortcut::new(Modifiers::COMMAND, Key::Z);
        let redo = KeyboardShortcut::new(Modifiers::COMMAND | Modifiers::SHIFT, Key::Z);
        let redo_y = KeyboardShortcut::new(Modifiers::COMMAND, Key::Y);
        let (o, s, r, u) = ctx.input_mut(|i| {
            (
                i.consume_shortcut(&open),
                i.consume_shortcut(&save),
                // Redo first: Ctrl+Shift+Z also matches Ctrl+Z's shortcut otherwise.
                i.consume_shortcut(&redo) || i.consume_shortcut(&redo_y),
                i.consume_shortcut(&undo),
            )
        });
        if o {
            self.ui.dialog_requests.push(Purpose::OpenData);
        }
        if s {
            match self.state.session_path() {
                Some(_) => self.push(Command::SaveSession(None)),
                None => self.ui.dialog_requests.push(Purpose::SaveSession),
            }
        }
        if r {
            self.push(Command::Redo);
        }
        if u {
            self.push(Command::Undo);
        }
    }

    fn dropped_files(&mut self, ctx: &egui::Context) {
        let dropped: Vec<PathBuf> = ctx.input(|i| {
            i.raw
                .dropped_files
                .iter()
                .map(|f| f.path().to_path_buf())
                .filter(|p| !p.as_os_str().is_empty())
                .collect()
        });
        for path in dropped {
            let command = Command::open(&path);
            self.push(command);
        }
    }

    /// Turns a path chosen in a dialog into the command it was for.
    pub fn chosen(&mut self, purpose: Purpose, path: PathBuf) {
        *self.ui.path(purpose) = path.display().to_string();
        let command = match purpose {
            Purpose::OpenData => {
                let roles = self.ui.roles_draft.clone().unwrap_or_default();
                Command::LoadData(path, roles)
            }
            Purpose::OpenProbabilities => Command::LoadProbabilities(path),
            Purpose::ImportMatrix => Command::ImportMatrix(path),
            Purpose::ExportMatrix => Command::ExportMatrix(path),
            Purpose::ExportWorklist => Command::ExportWorklist(path),
            Purpose::ImportReview => Command::ImportReview(path),
            Purpose::SaveMerged => Command::SaveMerged(path),
            Purpose::OpenTest => {
                let mut s = self.state.settings().clone();
                s.test = Some(path);
                Command::Settings(s)
            }
            Purpose::SaveModel => {
                let models = self
                    .state
                    .retrained()
                    .as_ref()
                    .map_or(1, |r| r.comparison.models.len());
                Command::SaveModel(self.ui.chosen_model(models), path)
            }
            Purpose::OpenSession => Command::OpenSession(path),
            Purpose::SaveSession => Command::SaveSession(Some(path)),
            Purpose::ExportVerdicts => Command::ExportVerdicts(path),
        };
        self.push(command);
    }

    /// One frame's drawing; commands are applied at its end.
    pub fn draw(&mut self, ui: &mut egui::Ui) {
        let ctx = ui.ctx().clone();
        ctx.set_theme(if self.persisted.dark.unwrap_or(true) {
            egui::Theme::Dark
        } else {
            egui::Theme::Light
        });
        views::frame(
            ui,
            &self.state,
            &mut self.ui,
            &mut self.persisted,
            &mut self.commands,
        );
        for purpose in std::mem::take(&mut self.ui.dialog_requests) {
            let proposed = match purpose {
                Purpose::SaveMerged => self.state.data().map(|d| dialogs::merged_name(&d.path)),
                _ => None,
            };
            self.dialogs.request(purpose, proposed, &ctx);
        }
        self.apply_commands();
        if self.state.jobs().busy() {
            // Progress bars move; the workers' wake-up covers the end of each job.
            ctx.request_repaint_after(std::time::Duration::from_millis(100));
        }
    }
}

impl eframe::App for FlipmendApp {
    fn logic(&mut self, ctx: &egui::Context, _frame: &mut eframe::Frame) {
        self.state.poll();
        for (purpose, path) in self.dialogs.poll() {
            self.chosen(purpose, path);
        }
        self.shortcuts(ctx);
        self.dropped_files(ctx);
    }

    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.draw(ui);
        if let Some(at) = self.launched.take() {
            eprintln!(
                "flipmend: first frame drawn {:.0} ms after start",
                at.elapsed().as_secs_f64() * 1000.0
            );
        }
    }

    fn save(&mut self, storage: &mut dyn eframe::Storage) {
        eframe::set_value(storage, STORAGE_KEY, &self.persisted);
    }
}

#[cfg(test)]
mod tests {
    use super::UiState;

    #[test]
    fn a_class_chosen_to_compare_with_is_cleared_when_another_row_is_selected() {
        let mut ui = UiState::default();
        ui.select_row(Some(3));
        ui.compare_with(2);
        assert_eq!(ui.compare_class(), Some(2));
        // The same row again (a second click on it) keeps the choice.
        ui.select_row(Some(3));
        assert_eq!(ui.compare_class(), Some(2));
        // Another row starts from its own suggested class.
        ui.select_row(Some(4));
        assert_eq!((ui.selected_row(), ui.compare_class()), (Some(4), None));
        // So does clearing the selection.
        ui.compare_with(1);
        ui.select_row(None);
        assert_eq!((ui.selected_row(), ui.compare_class()), (None, None));
    }
}
