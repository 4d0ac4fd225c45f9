//! The Flip matrix view: the estimate as an editable heatmap (rows = true class), the
//! overall matrix or one label source's, the estimator controls, and what the matrix
//! implies (`matrix_side`).

use eframe::egui;

use super::matrix_side;
use super::widgets::{heat, path_row, plain};
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::matrix_edit::MatrixEditor;
use crate::gui::source_edit::MatrixTarget;
use crate::gui::state::AppState;
use crate::noise::bootstrap::Interval;
use crate::noise::{Estimator, TrustedFallback};

/// Above this many classes the grid scrolls and the largest flips are listed beside it.
pub const MANY_CLASSES: usize = 12;

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
        grid(ui, state, &data.classes, editor, out);
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

/// The bootstrap intervals of the matrix shown, once computed.
fn shown_intervals(state: &AppState) -> Option<&Interval> {
    match state.shown_matrix() {
        MatrixTarget::Overall => state.intervals(),
        MatrixTarget::Source(s) => state.source_intervals()?.matrices.get(s),
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
        ui.label("· type a value or drag a cell; the rest of its row rescales to sum to 1");
    });
}

fn grid(
    ui: &mut egui::Ui,
    state: &AppState,
    classes: &[String],
    editor: &MatrixEditor,
    out: &mut Vec<Command>,
) {
    let k = classes.len();
    let dark = ui.visuals().dark_mode;
    let changed_stroke = egui::Stroke::new(2.0, egui::Color32::from_rgb(255, 150, 40));
    let height = if k > MANY_CLASSES {
        420.0
    } else {
        f32::INFINITY
    };
    egui::ScrollArea::both()
        .max_height(height)
        .id_salt("matrix-grid")
        .show(ui, |ui| {
            egui::Grid::new("matrix")
                .spacing([2.0, 2.0])
                .show(ui, |ui| {
                    ui.label("true \\ observed");
                    for c in classes {
                        ui.strong(c);
                    }
                    ui.strong("row sum");
                    ui.end_row();
                    for i in 0..k {
                        ui.strong(&classes[i]);
                        for j in 0..k {
                            cell(
                                ui,
                                state,
                                editor,
                                classes,
                                (i, j),
                                dark,
                                changed_stroke,
                                out,
                            );
                        }
                        ui.label(format!("{:.4}", editor.row_sum(i)));
                        ui.end_row();
                    }
                });
        });
    if k > MANY_CLASSES {
        largest_flips(ui, classes, editor);
    }
}

#[allow(clippy::too_many_arguments)]
fn cell(
    ui: &mut egui::Ui,
    state: &AppState,
    editor: &MatrixEditor,
    classes: &[String],
    (i, j): (usize, usize),
    dark: bool,
    changed_stroke: egui::Stroke,
    out: &mut Vec<Command>,
) {
    let mut value = editor.matrix()[[i, j]];
    let changed = editor.is_changed(i, j);
    // The heat colour fills a frame around the value (the value box keeps the theme's
    // colours, so its text stays readable); a changed cell gets an orange outline.
    let frame = egui::Frame::new()
        .fill(heat(value, dark))
        .stroke(if changed {
            changed_stroke
        } else {
            egui::Stroke::NONE
        })
        .corner_radius(3.0)
        .inner_margin(4.0);
    let response = frame
        .show(ui, |ui| {
            ui.add_sized(
                [62.0, 20.0],
                egui::DragValue::new(&mut value)
                    .speed(0.002)
                    .range(0.0..=1.0)
                    .fixed_decimals(4),
            )
        })
        .inner;
    let label = format!("T {} → {}", classes[i], classes[j]);
    let shown = value;
    response.widget_info(|| {
        let mut info = egui::WidgetInfo::drag_value(true, shown);
        info.label = Some(label.clone());
        info
    });
    if response.changed() {
        out.push(Command::SetCell {
            row: i,
            col: j,
            value,
        });
        if !response.dragged() {
            out.push(Command::EndGesture);
        }
    }
    if response.drag_stopped() {
        out.push(Command::EndGesture);
    }
    response.on_hover_ui(|ui| {
        ui.label(format!(
            "P(observed {} | true {}) = {:.4}",
            classes[j],
            classes[i],
            editor.matrix()[[i, j]]
        ));
        ui.label(format!("estimate: {:.4}", editor.reference()[[i, j]]));
        if let Some(iv) = shown_intervals(state) {
            ui.label(format!(
                "bootstrap 5–95%: {:.4} – {:.4}",
                iv.low[[i, j]],
                iv.high[[i, j]]
            ));
        }
    });
}

/// The off-diagonal cells from largest down, for matrices too big to scan by eye.
fn largest_flips(ui: &mut egui::Ui, classes: &[String], editor: &MatrixEditor) {
    let m = editor.matrix();
    let k = classes.len();
    let mut flips: Vec<(f64, usize, usize)> = (0..k)
        .flat_map(|i| (0..k).filter(move |&j| j != i).map(move |j| (i, j)))
        .map(|(i, j)| (m[[i, j]], i, j))
        .collect();
    flips.sort_by(|a, b| b.0.total_cmp(&a.0));
    ui.heading("Largest flips");
    egui::ScrollArea::vertical()
        .max_height(200.0)
        .id_salt("largest-flips")
        .show(ui, |ui| {
            for (v, i, j) in flips.into_iter().take(30) {
                ui.label(format!("{} -> {}: {:.4}", classes[i], classes[j], v));
            }
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
