//! Small multiples: one small heatmap per label source, every one on the same colour
//! scale so that they can be compared at a glance. The off-diagonal cells (the flips)
//! share one sequential scale from 0 to the largest flip of any source; the diagonal
//! (labels kept) is drawn in grey on its own scale, so that a 0.9 on the diagonal does
//! not wash out a 0.03 beside it.

use eframe::egui;
use ndarray::Array2;

/// The largest off-diagonal cell of all `matrices` (the top of the shared scale); never
/// below 0.001, so a matrix without flips still gets a scale.
pub fn flip_scale<'a>(matrices: impl IntoIterator<Item = &'a Array2<f64>>) -> f64 {
    matrices
        .into_iter()
        .flat_map(|m| {
            m.indexed_iter()
                .filter(|((i, j), _)| i != j)
                .map(|(_, &v)| v)
        })
        .filter(|v| v.is_finite())
        .fold(0.001, f64::max)
}

/// The stops of the sequential scale, from no flips to the largest flip.
const DARK_STOPS: [[f32; 3]; 5] = [
    [48.0, 48.0, 54.0],
    [60.0, 50.0, 120.0],
    [170.0, 60.0, 110.0],
    [240.0, 130.0, 60.0],
    [255.0, 235.0, 130.0],
];
const LIGHT_STOPS: [[f32; 3]; 5] = [
    [246.0, 246.0, 246.0],
    [252.0, 212.0, 160.0],
    [240.0, 120.0, 40.0],
    [170.0, 50.0, 20.0],
    [80.0, 15.0, 10.0],
];

/// The colour of a share `t` in [0, 1] of the scale (clamped; not a number is 0).
pub fn ramp(t: f64, dark: bool) -> egui::Color32 {
    let stops = if dark { &DARK_STOPS } else { &LIGHT_STOPS };
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    } as f32;
    let x = t * (stops.len() - 1) as f32;
    let i = (x.floor() as usize).min(stops.len() - 2);
    let f = x - i as f32;
    let mix = |c: usize| (stops[i][c] + (stops[i + 1][c] - stops[i][c]) * f) as u8;
    egui::Color32::from_rgb(mix(0), mix(1), mix(2))
}

/// A diagonal cell: grey, lighter (dark theme) or darker (light theme) as more labels
/// are kept.
fn diagonal(value: f64, dark: bool) -> egui::Color32 {
    let v = if value.is_finite() {
        value.clamp(0.0, 1.0)
    } else {
        0.0
    } as f32;
    let level = if dark {
        70.0 + 110.0 * v
    } else {
        225.0 - 110.0 * v
    };
    egui::Color32::from_gray(level as u8)
}

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
    let painter = ui.painter_at(rect);
    for ((i, j), &v) in matrix.indexed_iter() {
        let min = rect.min + egui::vec2(j as f32 * cell, i as f32 * cell);
        let fill = if i == j {
            diagonal(v, dark)
        } else {
            ramp(v / scale, dark)
        };
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
    let dark = ui.visuals().dark_mode;
    ui.horizontal(|ui| {
        ui.label("flips (off the diagonal), one scale for every source: 0");
        let (rect, _) = ui.allocate_exact_size(egui::vec2(120.0, 12.0), egui::Sense::hover());
        let steps = 24;
        let w = rect.width() / steps as f32;
        for s in 0..steps {
            let min = rect.min + egui::vec2(s as f32 * w, 0.0);
            let fill = ramp((s as f64 + 0.5) / steps as f64, dark);
            let r = egui::Rect::from_min_size(min, egui::vec2(w + 0.5, rect.height()));
            ui.painter().rect_filled(r, 0.0, fill);
        }
        ui.label(format!("{:.1} %", 100.0 * scale));
        ui.separator();
        let (swatch, _) = ui.allocate_exact_size(egui::vec2(12.0, 12.0), egui::Sense::hover());
        ui.painter().rect_filled(swatch, 0.0, diagonal(0.9, dark));
        ui.label("diagonal (labels kept) in grey, on its own scale");
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn the_shared_scale_is_the_largest_flip_of_any_source() {
        let a = array![[0.9, 0.1], [0.02, 0.98]];
        let b = array![[0.7, 0.3], [0.0, 1.0]];
        assert_eq!(flip_scale([&a, &b]), 0.3);
        assert_eq!(flip_scale([&Array2::eye(3)]), 0.001, "no flips: a floor");
    }

    #[test]
    fn the_ramp_runs_from_its_first_to_its_last_stop_and_clamps() {
        let c = |s: [f32; 3]| egui::Color32::from_rgb(s[0] as u8, s[1] as u8, s[2] as u8);
        assert_eq!(ramp(0.0, true), c(DARK_STOPS[0]));
        assert_eq!(ramp(1.0, true), c(DARK_STOPS[4]));
        assert_eq!(ramp(7.0, false), c(LIGHT_STOPS[4]));
        assert_eq!(ramp(f64::NAN, false), c(LIGHT_STOPS[0]));
    }

    #[test]
    fn a_pointer_offset_names_its_cell() {
        assert_eq!(cell_at(egui::vec2(25.0, 5.0), 10.0, 3), Some((0, 2)));
        assert_eq!(cell_at(egui::vec2(31.0, 5.0), 10.0, 3), None);
        assert_eq!(cell_at(egui::vec2(-1.0, 5.0), 10.0, 3), None);
    }
}
