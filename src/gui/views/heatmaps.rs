//! Small multiples: one small heatmap per label source, every one on the same colour
//! scale so that they can be compared at a glance: the app's one scale (`colour`), its
//! top the largest flip of any source.

use eframe::egui;
use ndarray::Array2;

pub use super::colour::flip_scale;
use super::colour::{legend_horizontal, FlipScale};

/// One source's small heatmap, `cell` points a side, clickable; hovering a cell names it.
pub fn small_heatmap(
    ui: &mut egui::Ui,
    name: &str,
    matrix: &Array2<f64>,
    classes: &[String],
    scale: f64,
    cell: f32,
) -> egui::Response {
    let k = matrix.nrows();
    let side = cell * k as f32;
    let (rect, response) = ui.allocate_exact_size(egui::vec2(side, side), egui::Sense::click());
    let label = format!("{name} heatmap");
    response.widget_info(|| egui::WidgetInfo::labeled(egui::Role::Button, true, &label));
    let dark = ui.visuals().dark_mode;
    let scale = FlipScale::new(scale);
    let painter = ui.painter_at(rect);
    for ((i, j), &v) in matrix.indexed_iter() {
        let min = rect.min + egui::vec2(j as f32 * cell, i as f32 * cell);
        let fill = scale.fill(v, i == j, dark);
        painter.rect_filled(
            egui::Rect::from_min_size(min, egui::vec2(cell, cell)),
            0.0,
            fill,
        );
    }
    let frame = ui.visuals().widgets.noninteractive.bg_stroke;
    painter.rect_stroke(rect, 0.0, frame, egui::StrokeKind::Inside);
    let hovered = response
        .hover_pos()
        .and_then(|p| cell_at(p - rect.min, cell, k))
        .map(|(i, j)| cell_text(name, classes, matrix, (i, j)));
    match hovered {
        Some(text) => response.on_hover_text_at_pointer(text),
        None => response,
    }
}

/// The (row, column) under `offset` from a heatmap's corner.
fn cell_at(offset: egui::Vec2, cell: f32, k: usize) -> Option<(usize, usize)> {
    if offset.x < 0.0 || offset.y < 0.0 || cell <= 0.0 {
        return None;
    }
    let (i, j) = ((offset.y / cell) as usize, (offset.x / cell) as usize);
    (i < k && j < k).then_some((i, j))
}

fn cell_text(name: &str, classes: &[String], m: &Array2<f64>, (i, j): (usize, usize)) -> String {
    let (true_class, typed) = (&classes[i], &classes[j]);
    let share = 100.0 * m[[i, j]];
    if i == j {
        format!("{name}: true {true_class} kept as {typed}: {share:.1} %")
    } else {
        format!("{name}: true {true_class} typed as {typed}: {share:.1} %\nclick to edit {name}'s matrix")
    }
}

/// The scale's key: the flips' ramp from 0 to `scale`, and the diagonal's grey.
pub fn legend(ui: &mut egui::Ui, scale: f64) {
    legend_horizontal(
        ui,
        FlipScale::new(scale),
        "flips (off the diagonal), one scale for every source:",
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_pointer_offset_names_its_cell() {
        assert_eq!(cell_at(egui::vec2(25.0, 5.0), 10.0, 3), Some((0, 2)));
        assert_eq!(cell_at(egui::vec2(31.0, 5.0), 10.0, 3), None);
        assert_eq!(cell_at(egui::vec2(-1.0, 5.0), 10.0, 3), None);
    }
}
