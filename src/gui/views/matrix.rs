//! The Flip matrix view: the estimate as an editable heatmap (rows = true class,
//! `matrix_grid`), the overall matrix or one label source's, the estimator controls, and
//! what the matrix implies (`matrix_side`).

use eframe::egui;

use super::widgets::{path_row, plain};
use super::{matrix_grid, matrix_side};
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::matrix_edit::MatrixEditor;
use crate::gui::source_edit::MatrixTarget;
use crate::gui::state::AppState;
use crate::noise::{Estimator, TrustedFallback};

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let Some(data) = state.data() else {
        ui.label("Load a data table first (Data view).");
        return;
    };
    let (Some(overall), Some(editor)) = (state.editor(), state.shown_editor()) else {
        ui.horizontal(|ui| {
            ui.spinner();
            ui.label("waiting for probabilities and the estimate…");
        });
        return;
    };
    estimator_controls(ui, state, out);
    matrix_picker(ui, state, out);
    edit_controls(ui, state, editor, out);
    ui.separator();
    egui::Panel::right("matrix-side")
        .resizable(true)
        .default_size(340.0)
        .show(ui, |ui| matrix_side::show(ui, state, overall));
    egui::CentralPanel::default().show(ui, |ui| {
        matrix_grid::show(ui, state, data, editor, view, out);
        ui.separator();
        files(ui, state, view, out);
    });
}

/// With label sources: which matrix the grid shows (the overall one or a source's), and
/// what the ranking uses.
fn matrix_picker(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    let Some(sources) = state.current_sources() else {
        return;
    };
    let edited = |s: usize| state.source_editors().is_some_and(|e| e.is_edited(s));
    let shown = state.shown_matrix();
    ui.horizontal_wrapped(|ui| {
        ui.label("matrix shown");
        let overall = ui
            .selectable_label(shown == MatrixTarget::Overall, "overall")
            .on_hover_text(
                "the sources' mix (each true class's row weighted by the sources' rows of it), \
                 unless edited by hand",
            );
        if overall.clicked() {
            out.push(Command::SelectMatrix(MatrixTarget::Overall));
        }
        for (s, source) in sources.sources.iter().enumerate() {
            let target = MatrixTarget::Source(s);
            let hover = format!(
                "{} rows, noise rate {:.1} %{}",
                source.rows,
                100.0 * source.noise_rate,
                if edited(s) { ", changed by hand" } else { "" }
            );
            let pick = ui.selectable_label(shown == target, &source.name);
            if pick.on_hover_text(hover).clicked() {
                out.push(Command::SelectMatrix(target));
            }
        }
    });
    let rule = matrix_side::ranking_rule(state);
    if state.ranks_by_source() {
        ui.weak(rule);
    } else {
        ui.colored_label(ui.visuals().warn_fg_color, rule);
    }
}

fn estimator_controls(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    let mut s = state.settings().clone();
    ui.horizontal(|ui| {
        ui.label("estimator");
        egui::ComboBox::from_id_salt("estimator")
            .selected_text(s.estimator.name())
            .show_ui(ui, |ui| {
                for &e in Estimator::all() {
                    ui.selectable_value(&mut s.estimator, e, e.name());
                }
            });
        if s.estimator == Estimator::Trusted {
            fallback_picker(ui, &mut s.fallback);
        }
        ui.add_enabled(
            s.estimator.uses_quantile(),
            egui::Slider::new(&mut s.quantile, 0.5..=1.0)
                .text("quantile")
                .fixed_decimals(3),
        );
        ui.separator();
        ui.add(
            egui::DragValue::new(&mut s.resamples)
                .range(2..=1000)
                .prefix("bootstrap "),
        );
        if ui
            .button("Bootstrap intervals")
            .on_hover_text("90 % intervals from refitting on resampled rows, shown on hover")
            .clicked()
        {
            out.push(Command::Bootstrap);
        }
    });
    if s != *state.settings() {
        out.push(Command::Settings(s));
    }
    if let Some(info) = state.estimate() {
        ui.label(format!("matrix from {}", state.matrix_description()))
            .on_hover_text(plain(&info.warnings.join("\n")).into_owned());
        if let Some(volume) = &info.volume {
            ui.label(plain(volume).into_owned());
        }
    }
}

/// What the trusted estimator does for classes without randomly audited rows (the
/// command line's `--fallback`).
fn fallback_picker(ui: &mut egui::Ui, fallback: &mut TrustedFallback) {
    let mut fill = *fallback == TrustedFallback::Quantile;
    ui.checkbox(&mut fill, "fallback quantile")
        .on_hover_text("classes without randomly audited rows get the quantile estimate");
    *fallback = if fill {
        TrustedFallback::Quantile
    } else {
        TrustedFallback::None
    };
}

fn edit_controls(
    ui: &mut egui::Ui,
    state: &AppState,
    editor: &MatrixEditor,
    out: &mut Vec<Command>,
) {
    ui.horizontal(|ui| {
        if ui
            .add_enabled(editor.can_undo(), egui::Button::new("Undo"))
            .clicked()
        {
            out.push(Command::Undo);
        }
        if ui
            .add_enabled(editor.can_redo(), egui::Button::new("Redo"))
            .clicked()
        {
            out.push(Command::Redo);
        }
        if ui
            .button("Reset to estimate")
            .on_hover_text("the matrix shown back to its estimate (one undo step)")
            .clicked()
        {
            out.push(Command::ResetMatrix);
        }
        let mut s = state.settings().clone();
        if ui
            .checkbox(&mut s.keep_diagonal, "keep diagonal fixed")
            .on_hover_text(
                "an edit off the diagonal takes its mass from the other off-diagonal cells",
            )
            .changed()
        {
            out.push(Command::Settings(s));
        }
        ui.label(format!("· {}", matrix_grid::HINT));
    });
}

fn files(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    match state.shown_source_name() {
        Some(name) => ui.label(format!(
            "Matrix CSV of {name} (the format of the command line's --matrix): export writes \
             it, import replaces it"
        )),
        None => ui.label("Matrix CSV (the format of the command line's --matrix):"),
    };
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::ImportMatrix,
        "Import",
        "matrix CSV to read",
    ) {
        out.push(Command::ImportMatrix(path));
    }
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::ExportMatrix,
        "Export",
        "where to write the matrix CSV",
    ) {
        out.push(Command::ExportMatrix(path));
    }
}
