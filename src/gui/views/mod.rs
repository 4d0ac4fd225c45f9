//! Drawing. Every function here reads the app state and pushes commands; none changes
//! the state itself.

mod about;
mod annotators;
mod colour;
mod compare_charts;
mod data;
mod heatmaps;
mod inspector;
mod matrix;
mod matrix_grid;
mod matrix_side;
mod overview;
mod overview_inputs;
mod retrain;
mod review_panel;
mod sources;
mod suspects;
mod widgets;
pub(crate) mod yield_plot;

use eframe::egui;

use super::app::{Persisted, UiState, View};
use super::command::Command;
use super::dialogs::Purpose;
use super::state::{AppState, Level};

/// The whole window: menu and tabs, messages, status bar, the current view.
pub fn frame(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    persisted: &mut Persisted,
    out: &mut Vec<Command>,
) {
    overview_inputs::follow_loads(state, view);
    egui::Panel::top("menu").show(ui, |ui| menu_bar(ui, state, view, persisted, out));
    egui::Panel::bottom("status").show(ui, |ui| status_bar(ui, state, out));
    if !state.messages().is_empty() {
        egui::Panel::top("messages").show(ui, |ui| messages(ui, state, out));
    }
    if view.show_about {
        egui::Panel::right("about")
            .default_size(360.0)
            .show(ui, |ui| about::show(ui, view));
    }
    egui::CentralPanel::default().show(ui, |ui| match view.view() {
        View::Overview => overview::show(ui, state, view, out),
        View::Data => data::show(ui, state, view, out),
        View::Matrix => matrix::show(ui, state, view, out),
        View::Sources => sources::show(ui, state, view, out),
        View::Suspects => suspects::show(ui, state, view, out),
        View::Retrain => retrain::show(ui, state, view, out),
    });
}

fn menu_bar(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    persisted: &mut Persisted,
    out: &mut Vec<Command>,
) {
    egui::MenuBar::new().ui(ui, |ui| {
        ui.menu_button("File", |ui| file_menu(ui, state, view, persisted, out));
        ui.menu_button("Edit", |ui| edit_menu(ui, state, out));
        ui.separator();
        for v in View::ALL {
            if ui.selectable_label(view.view() == v, v.title()).clicked() {
                view.view = Some(v);
            }
        }
        ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
            if ui.selectable_label(view.show_about, "About").clicked() {
                view.show_about = !view.show_about;
            }
            // The theme is the app's preference, kept with the window state, not in
            // sessions (opening one must not switch it).
            let dark = persisted.dark.unwrap_or(true);
            if ui
                .button(if dark { "Light theme" } else { "Dark theme" })
                .clicked()
            {
                persisted.dark = Some(!dark);
            }
        });
    });
}

/// Opening and saving data and sessions, the recent files, quitting.
fn file_menu(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    persisted: &Persisted,
    out: &mut Vec<Command>,
) {
    if ui.button("Open data…  (Ctrl+O)").clicked() {
        view.dialog_requests.push(Purpose::OpenData);
    }
    if ui.button("Open session…").clicked() {
        view.dialog_requests.push(Purpose::OpenSession);
    }
    let save = ui.add_enabled(
        state.session_path().is_some(),
        egui::Button::new("Save session  (Ctrl+S)"),
    );
    if save.clicked() {
        out.push(Command::SaveSession(None));
    }
    if ui.button("Save session as…").clicked() {
        view.dialog_requests.push(Purpose::SaveSession);
    }
    ui.menu_button("Recent", |ui| {
        if persisted.recent.is_empty() {
            ui.label("nothing yet");
        }
        for path in &persisted.recent {
            if ui.button(path.display().to_string()).clicked() {
                out.push(Command::open(path));
            }
        }
    });
    ui.separator();
    if ui.button("Quit").clicked() {
        ui.ctx().send_viewport_cmd(egui::ViewportCommand::Close);
    }
}

/// Undo and redo of the edits of the matrix shown.
fn edit_menu(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    let editor = state.shown_editor();
    if ui
        .add_enabled(
            editor.is_some_and(|e| e.can_undo()),
            egui::Button::new("Undo  (Ctrl+Z)"),
        )
        .clicked()
    {
        out.push(Command::Undo);
    }
    if ui
        .add_enabled(
            editor.is_some_and(|e| e.can_redo()),
            egui::Button::new("Redo  (Ctrl+Shift+Z)"),
        )
        .clicked()
    {
        out.push(Command::Redo);
    }
}

fn messages(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    // Newest first, at most a few lines; the rest scroll.
    egui::ScrollArea::vertical()
        .max_height(96.0)
        .show(ui, |ui| {
            for (i, m) in state.messages().iter().enumerate().rev() {
                ui.horizontal(|ui| {
                    let (tag, color) = match m.level {
                        Level::Error => ("error", ui.visuals().error_fg_color),
                        Level::Warning => ("warning", ui.visuals().warn_fg_color),
                        Level::Info => ("ok", ui.visuals().weak_text_color()),
                    };
                    if ui.small_button("x").on_hover_text("dismiss").clicked() {
                        out.push(Command::Dismiss(i));
                    }
                    ui.colored_label(color, format!("{tag}: {}", widgets::plain(&m.text)));
                });
            }
        });
}

fn status_bar(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        match state.data() {
            Some(d) => ui.label(format!(
                "{} · {} rows · {} classes",
                d.path.file_name().map_or_else(
                    || d.path.display().to_string(),
                    |n| n.to_string_lossy().into()
                ),
                d.rows(),
                d.classes.len()
            )),
            None => ui.label("no data"),
        };
        ui.separator();
        let origin = state.editor().map_or("none", |e| e.origin().label());
        let changed = state
            .source_editors()
            .map(|s| s.edited_names().join(", "))
            .filter(|names| !names.is_empty())
            .map_or(String::new(), |names| format!(" · {names} changed"));
        ui.label(format!("matrix: {origin}{changed}"))
            .on_hover_text(state.matrix_description());
        if let Some(r) = state.ranking() {
            ui.separator();
            ui.label(format!("ranked in {:.0} ms", r.duration_secs * 1000.0));
        }
        for running in state.jobs().all_running() {
            ui.separator();
            let kind = running.ticket.kind;
            ui.add(
                egui::ProgressBar::new(running.control.progress())
                    .desired_width(120.0)
                    .text(kind.label()),
            );
            if ui.small_button("Cancel").clicked() {
                out.push(Command::Cancel(kind));
            }
        }
    });
}
