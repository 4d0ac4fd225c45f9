//! The Flip matrix view's editable heatmap: one cell per (true, observed) pair, filled on
//! the app's colour scale (`colour`) with its value typed or dragged in place, a key
//! beside it, and a small button in each off-diagonal cell that opens the suspects of
//! that flip. A click on the value edits it and a drag changes it, as before; opening
//! the suspects is a separate button so that neither gesture can be mistaken for the
//! other.

use eframe::egui;

use super::colour::{legend_vertical, text_on, FlipScale};
use crate::data::table::Dataset;
use crate::gui::app::{UiState, View};
use crate::gui::command::Command;
use crate::gui::matrix_edit::MatrixEditor;
use crate::gui::source_edit::MatrixTarget;
use crate::gui::state::AppState;
use crate::noise::bootstrap::Interval;

/// Above this many classes the grid scrolls and the largest flips are listed beside it.
pub const MANY_CLASSES: usize = 12;

/// The glyph of the open-suspects button (in the bundled font).
const OPEN: &str = "»";

/// The words under the edit buttons that say what a cell's parts do.
pub const HINT: &str = "type a value or drag a cell (the rest of its row rescales to sum to \
                        1); » in a cell opens the suspects of that flip";

/// What every cell of one frame's grid reads.
struct Grid<'a> {
    state: &'a AppState,
    data: &'a Dataset,
    editor: &'a MatrixEditor,
    intervals: Option<&'a Interval>,
    scale: FlipScale,
    dark: bool,
}

/// Draws the grid, its key, and (for many classes) the largest flips.
pub fn show(
    ui: &mut egui::Ui,
    state: &AppState,
    data: &Dataset,
    editor: &MatrixEditor,
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    let g = Grid {
        state,
        data,
        editor,
        intervals: shown_intervals(state),
        scale: FlipScale::of([editor.matrix()]),
        dark: ui.visuals().dark_mode,
    };
    let k = data.classes.len();
    let height = if k > MANY_CLASSES {
        420.0
    } else {
        f32::INFINITY
    };
    ui.horizontal_top(|ui| {
        let width = (ui.available_width() - 110.0).max(120.0);
        egui::ScrollArea::both()
            .max_height(height)
            .max_width(width)
            .id_salt("matrix-grid")
            .show(ui, |ui| cells(ui, &g, view, out));
        let key_height = if k == 0 { 120.0 } else { 160.0 };
        legend_vertical(ui, g.scale, "flips", key_height);
    });
    if k > MANY_CLASSES {
        largest_flips(ui, &data.classes, editor);
    }
}

/// The bootstrap intervals of the matrix shown, once computed.
fn shown_intervals(state: &AppState) -> Option<&Interval> {
    match state.shown_matrix() {
        MatrixTarget::Overall => state.intervals(),
        MatrixTarget::Source(s) => state.source_intervals()?.matrices.get(s),
    }
}

fn cells(ui: &mut egui::Ui, g: &Grid<'_>, view: &mut UiState, out: &mut Vec<Command>) {
    let classes = &g.data.classes;
    let k = classes.len().min(g.editor.matrix().nrows());
    egui::Grid::new("matrix")
        .spacing([2.0, 2.0])
        .show(ui, |ui| {
            ui.label("true \\ observed");
            for c in classes {
                ui.strong(c);
            }
            ui.strong("row sum");
            ui.end_row();
            for (i, name) in classes.iter().enumerate().take(k) {
                ui.strong(name);
                for j in 0..k {
                    cell(ui, g, (i, j), view, out);
                }
                ui.label(format!("{:.4}", g.editor.row_sum(i)));
                ui.end_row();
            }
        });
}

/// One cell: its fill, the value (typed or dragged), and off the diagonal the button
/// that opens the suspects of the flip.
fn cell(
    ui: &mut egui::Ui,
    g: &Grid<'_>,
    (i, j): (usize, usize),
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    let classes = &g.data.classes;
    let mut value = g.editor.matrix()[[i, j]];
    let fill = g.scale.fill(value, i == j, g.dark);
    let ink = text_on(fill);
    // A changed cell gets an outline in a hue the ramp does not use.
    let stroke = if g.editor.is_changed(i, j) {
        egui::Stroke::new(2.0, CHANGED)
    } else {
        egui::Stroke::NONE
    };
    let frame = egui::Frame::new()
        .fill(fill)
        .stroke(stroke)
        .corner_radius(3.0)
        .inner_margin(egui::Margin::symmetric(3, 2));
    frame.show(ui, |ui| {
        paint_widgets_on(ui.visuals_mut(), fill, ink);
        ui.spacing_mut().item_spacing.x = 0.0;
        ui.horizontal(|ui| {
            let edit = ui.add_sized(
                [58.0, 20.0],
                egui::DragValue::new(&mut value)
                    .speed(0.002)
                    .range(0.0..=1.0)
                    .fixed_decimals(4),
            );
            edited(&edit, value, (i, j), classes, out);
            edit.on_hover_ui(|ui| hover(ui, g, (i, j)));
            if i == j {
                ui.add_space(OPEN_WIDTH);
            } else if open_button(ui, classes, (i, j)).clicked() {
                open_suspects(g.state, classes, (i, j), view, out);
            }
        });
    });
}

/// The outline of a cell changed by hand: a blue the ramp never reaches.
const CHANGED: egui::Color32 = egui::Color32::from_rgb(0, 160, 255);

/// Width of the open-suspects button (and of the gap that stands for it on the diagonal,
/// so that the columns line up).
const OPEN_WIDTH: f32 = 16.0;

/// The cell's widgets drawn on its fill with readable text: the value box and, while it
/// is typed in, the text field take the fill; their text and outline take `ink`.
fn paint_widgets_on(v: &mut egui::Visuals, fill: egui::Color32, ink: egui::Color32) {
    for (w, outline) in [
        (&mut v.widgets.inactive, 0.0),
        (&mut v.widgets.hovered, 1.0),
        (&mut v.widgets.active, 1.0),
    ] {
        w.bg_fill = fill;
        w.weak_bg_fill = fill;
        w.fg_stroke.color = ink;
        w.bg_stroke = egui::Stroke::new(outline, ink);
    }
    v.extreme_bg_color = fill;
    v.text_edit_bg_color = Some(fill);
    v.override_text_color = Some(ink);
    v.text_cursor.stroke.color = ink;
}

/// The value's widget: named for tests and screen readers, its changes sent as commands
/// (a drag is one gesture, ended when the drag stops).
fn edited(
    response: &egui::Response,
    value: f64,
    (i, j): (usize, usize),
    classes: &[String],
    out: &mut Vec<Command>,
) {
    let label = format!("T {} → {}", classes[i], classes[j]);
    response.widget_info(|| {
        let mut info = egui::WidgetInfo::drag_value(true, value);
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
}

/// The small button that opens the suspects of flip `i` → `j`.
fn open_button(ui: &mut egui::Ui, classes: &[String], (i, j): (usize, usize)) -> egui::Response {
    let button = egui::Button::new(OPEN)
        .frame(false)
        .min_size(egui::vec2(OPEN_WIDTH, 20.0));
    let response = ui.add(button);
    let label = format!("open suspects {} → {}", classes[i], classes[j]);
    response.widget_info(|| egui::WidgetInfo::labeled(egui::Role::Button, true, &label));
    response.on_hover_text(format!(
        "open the suspects of this flip: rows labelled {}, suggested {}",
        classes[j], classes[i]
    ))
}

/// The Suspects view, filtered to rows observed as `j` whose suggested (most likely true)
/// class is `i`; with label sources, to the source whose matrix is shown (every source
/// for the overall matrix).
fn open_suspects(
    state: &AppState,
    classes: &[String],
    (i, j): (usize, usize),
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    let mut s = state.settings().clone();
    s.observed_filter = Some(classes[j].clone());
    s.suggested_filter = Some(classes[i].clone());
    out.push(Command::Settings(s));
    if state.current_sources().is_some() {
        let source = match state.shown_matrix() {
            MatrixTarget::Overall => None,
            MatrixTarget::Source(s) => u32::try_from(s).ok(),
        };
        out.push(Command::FilterSource(source));
    }
    view.view = Some(View::Suspects);
}

/// A cell's hover: its value and estimate, the bootstrap interval once computed, and
/// the counts behind it.
fn hover(ui: &mut egui::Ui, g: &Grid<'_>, (i, j): (usize, usize)) {
    let classes = &g.data.classes;
    let m = g.editor.matrix();
    ui.label(format!(
        "P(observed {} | true {}) = {:.4}",
        classes[j],
        classes[i],
        m[[i, j]]
    ));
    ui.label(format!("estimate: {:.4}", g.editor.reference()[[i, j]]));
    // An interval of another shape (computed before the classes changed) is not shown.
    let interval = g
        .intervals
        .and_then(|iv| Some((iv.low.get((i, j))?, iv.high.get((i, j))?)));
    match interval {
        Some((low, high)) => ui.label(format!("bootstrap 5–95 %: {low:.4} – {high:.4}")),
        None => ui.weak("no bootstrap interval yet (Bootstrap intervals, above)"),
    };
    for line in counts(g, (i, j)) {
        ui.label(line);
    }
}

/// The rows behind a cell: how many are labelled `j`; for the overall matrix, about how
/// many of them are truly `i` (rows × clean prior of `i` × T[i][j]); and how the randomly
/// audited rows of true class `i` were labelled.
fn counts(g: &Grid<'_>, (i, j): (usize, usize)) -> Vec<String> {
    let (data, classes) = (g.data, &g.data.classes);
    let labelled = data.labels.iter().filter(|&&l| l == j).count();
    let whole = if g.state.shown_matrix() == MatrixTarget::Overall {
        ""
    } else {
        " (whole table)"
    };
    let mut lines = vec![format!("rows labelled {}: {labelled}{whole}", classes[j])];
    let prior = g
        .state
        .diagnostics()
        .and_then(|(d, _)| d.clean_prior.get(i));
    if let (Some(&p), MatrixTarget::Overall) = (prior, g.state.shown_matrix()) {
        let expected = data.rows() as f64 * p * g.editor.matrix()[[i, j]];
        if expected.is_finite() {
            lines.push(format!(
                "about {expected:.0} rows truly {} labelled {}",
                classes[i], classes[j]
            ));
        }
    }
    if let Some(audited) = data.randomly_audited() {
        let of_i = audited
            .iter()
            .zip(&data.labels)
            .filter(|(t, _)| **t == Some(i));
        let (all, as_j) = of_i.fold((0, 0), |(n, k), (_, &l)| (n + 1, k + usize::from(l == j)));
        lines.push(format!(
            "random audits: {as_j} of {all} rows of true {} labelled {}{whole}",
            classes[i], classes[j]
        ));
    }
    lines
}

/// The off-diagonal cells from largest down, for matrices too big to scan by eye.
fn largest_flips(ui: &mut egui::Ui, classes: &[String], editor: &MatrixEditor) {
    let m = editor.matrix();
    let k = classes.len().min(m.nrows());
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
