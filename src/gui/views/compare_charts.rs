//! The Compare view's pictures: each model's accuracies as dots with their 90 % intervals
//! on an axis zoomed to the data (models a point or two apart look apart, which bars on
//! a 0–100 % axis hide), each correction's gain over `none` with its interval around a
//! zero line, and two confusion matrices as heatmaps on one colour scale.

use eframe::egui;
use egui_plot::{HoverPosition, Legend, Line, MarkerShape, Plot, PlotPoints, Points, VLine};

use super::colour::{legend_horizontal, text_on, FlipScale};
use crate::workflow::compare::{Comparison, ModelReport};

/// Reads one figure of a model's report and its interval.
type Metric = fn(&ModelReport) -> (Option<f64>, Option<[f64; 2]>);

/// The accuracies drawn, each in its own colour and a little above or below the model's
/// line so that overlapping intervals stay apart.
const METRICS: [(&str, Metric, egui::Color32); 3] = [
    (
        "est. clean",
        |m| (m.estimated_clean_accuracy, None),
        egui::Color32::from_rgb(150, 150, 150),
    ),
    (
        "trusted",
        |m| (m.trusted_accuracy, m.trusted_accuracy_interval),
        egui::Color32::from_rgb(70, 140, 255),
    ),
    (
        "test",
        |m| (m.test_accuracy, m.test_accuracy_interval),
        egui::Color32::from_rgb(230, 120, 60),
    ),
];

/// Each model's accuracies with their 90 % intervals, one line per model.
pub fn accuracies(ui: &mut egui::Ui, c: &Comparison) {
    let models = &c.report.models;
    ui.label("accuracy with its 90 % interval (axis zoomed to the figures)");
    Plot::new("compare-accuracy")
        .height(36.0 + 30.0 * models.len() as f32)
        .legend(Legend::default())
        .allow_scroll(false)
        .allow_zoom(false)
        .allow_drag(false)
        .custom_x_axes(vec![short_ticks(percent_mark)])
        .y_axis_formatter(model_axis(models))
        .y_grid_spacer(egui_plot::uniform_grid_spacer(|_| [1.0, 5.0, 10.0]))
        .label_formatter(|pos| hovered(pos, |x| format!("{:.2} %", 100.0 * x)))
        .show(ui, |p| {
            for (s, (name, get, colour)) in METRICS.iter().enumerate() {
                let offset = (s as f64 - 1.0) * 0.18;
                let figures = models.iter().enumerate().map(|(i, m)| (i, get(m)));
                dots(p, name, *colour, offset, figures);
            }
        });
}

/// Each correction's accuracy gained over `none` on the same rows, with its 90 %
/// interval (paired, so the noise both models share cancels), around a zero line.
pub fn gains(ui: &mut egui::Ui, c: &Comparison) {
    let models = &c.report.models;
    let figures: Vec<_> = models
        .iter()
        .enumerate()
        .filter(|(_, m)| m.correction != "none")
        .filter_map(|(i, m)| m.gain_vs_none.map(|[low, g, high]| (i, (g, [low, high]))))
        .filter(|(_, (g, [low, high]))| [g, low, high].iter().all(|v| v.is_finite()))
        .collect();
    if figures.is_empty() {
        ui.weak("gain over none: needs a test table or randomly audited holdout rows (none here)");
        return;
    }
    ui.label("gain over none in accuracy points, with its 90 % interval (right of 0: better)");
    let zero = ui.visuals().strong_text_color();
    Plot::new("compare-gain")
        .height(36.0 + 30.0 * models.len() as f32)
        .include_x(0.0)
        .allow_scroll(false)
        .allow_zoom(false)
        .allow_drag(false)
        .custom_x_axes(vec![short_ticks(|mark| {
            format!("{:+.1}", 100.0 * mark.value)
        })])
        .y_axis_formatter(model_axis(models))
        .y_grid_spacer(egui_plot::uniform_grid_spacer(|_| [1.0, 5.0, 10.0]))
        .label_formatter(|pos| hovered(pos, |x| format!("{:+.2} points", 100.0 * x)))
        .show(ui, |p| {
            p.vline(VLine::new("no gain", 0.0).color(zero).width(2.0));
            let colour = egui::Color32::from_rgb(70, 170, 110);
            let points = figures.iter().map(|&(i, (g, iv))| (i, (Some(g), Some(iv))));
            dots(p, "gain over none", colour, 0.0, points);
        });
}

/// One series: a dot per model at its figure, a whisker over its interval.
fn dots(
    p: &mut egui_plot::PlotUi<'_>,
    name: &str,
    colour: egui::Color32,
    offset: f64,
    figures: impl Iterator<Item = (usize, (Option<f64>, Option<[f64; 2]>))>,
) {
    let mut centres = Vec::new();
    for (i, (value, interval)) in figures {
        let y = -(i as f64) + offset;
        if let Some([low, high]) = interval.filter(|iv| iv.iter().all(|v| v.is_finite())) {
            let whisker = PlotPoints::from(vec![[low, y], [high, y]]);
            p.line(Line::new(name, whisker).color(colour).width(2.0));
        }
        if let Some(v) = value.filter(|v| v.is_finite()) {
            centres.push([v, y]);
        }
    }
    if !centres.is_empty() {
        let points = Points::new(name, PlotPoints::from(centres))
            .color(colour)
            .radius(4.5)
            .shape(MarkerShape::Circle)
            .filled(true);
        p.points(points);
    }
}

/// An x axis whose short tick labels may sit closer than egui_plot's default 60 points,
/// so that a zoomed axis a few points wide still names its whole points.
fn short_ticks<'a>(
    format: impl Fn(egui_plot::GridMark) -> String + 'a,
) -> egui_plot::AxisHints<'a> {
    egui_plot::AxisHints::new_x()
        .formatter(move |mark, _| format(mark))
        .label_spacing(34.0..=50.0)
}

/// An accuracy tick as a short percentage (whole points when the ticks are a point or
/// more apart), so that the labels fit between the ticks of a zoomed axis.
fn percent_mark(mark: egui_plot::GridMark) -> String {
    let decimals = if mark.step_size >= 0.00999 { 0 } else { 1 };
    format!("{:.*}%", decimals, 100.0 * mark.value)
}

/// Names the model lines (model `i` sits at y = −i, so `none` is on top).
fn model_axis(
    models: &[ModelReport],
) -> impl Fn(egui_plot::GridMark, &std::ops::RangeInclusive<f64>) -> String + 'static {
    let names: Vec<&'static str> = models.iter().map(|m| m.correction).collect();
    move |mark, _| {
        let i = -mark.value.round();
        if (mark.value.round() - mark.value).abs() > 1e-6 || i < 0.0 {
            return String::new();
        }
        names
            .get(i as usize)
            .map_or(String::new(), |n| n.to_string())
    }
}

/// The hover text near a dot: the series and its figure.
fn hovered(pos: &HoverPosition<'_>, figure: impl Fn(f64) -> String) -> Option<String> {
    match pos {
        HoverPosition::NearDataPoint {
            plot_name,
            position,
            ..
        } if !plot_name.is_empty() => Some(format!("{plot_name}: {}", figure(position.x))),
        _ => None,
    }
}

/// A confusion matrix as row shares (each reference class's row sums to 1; an empty row
/// stays 0).
pub fn row_shares(confusion: &[Vec<usize>]) -> Vec<Vec<f64>> {
    confusion
        .iter()
        .map(|row| {
            let total: usize = row.iter().sum();
            row.iter()
                .map(|&n| {
                    if total == 0 {
                        0.0
                    } else {
                        n as f64 / total as f64
                    }
                })
                .collect()
        })
        .collect()
}

/// The largest off-diagonal share of these confusion matrices: one scale for both.
fn shared_scale(shares: &[&Vec<Vec<f64>>]) -> FlipScale {
    let top = shares
        .iter()
        .flat_map(|m| m.iter().enumerate())
        .flat_map(|(i, row)| row.iter().enumerate().filter(move |(j, _)| *j != i))
        .map(|(_, &v)| v)
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    FlipScale::new(top)
}

/// `none` and the chosen model's confusion matrices side by side, coloured by row share
/// on one scale, each cell showing its count.
pub fn confusions(ui: &mut egui::Ui, c: &Comparison, chosen: usize) {
    let models = &c.report.models;
    let Some(none) = models.first() else { return };
    let chosen = chosen.min(models.len() - 1);
    ui.label(format!(
        "confusion against {} (rows: reference, columns: prediction); colour: share of \
         the row, one scale for both; numbers: rows",
        c.report.reference
    ));
    let shares = [
        row_shares(&none.confusion),
        row_shares(&models[chosen].confusion),
    ];
    let scale = shared_scale(&[&shares[0], &shares[1]]);
    legend_horizontal(ui, scale, "errors (off the diagonal):");
    ui.columns(2, |cols| {
        for ((col, index), share) in cols.iter_mut().zip([0, chosen]).zip(&shares) {
            col.strong(models[index].correction);
            egui::ScrollArea::horizontal()
                .id_salt(("confusion", index))
                .show(col, |ui| {
                    confusion_grid(ui, &c.report.classes, &models[index], share, scale)
                });
        }
    });
}

fn confusion_grid(
    ui: &mut egui::Ui,
    classes: &[String],
    model: &ModelReport,
    shares: &[Vec<f64>],
    scale: FlipScale,
) {
    let dark = ui.visuals().dark_mode;
    let k = classes.len();
    let side = cell_width(ui, classes);
    egui::Grid::new(("confusion-grid", model.correction))
        .spacing([2.0, 2.0])
        .show(ui, |ui| {
            ui.label("");
            for name in classes {
                ui.weak(name);
            }
            ui.end_row();
            for (i, (row, share)) in model.confusion.iter().zip(shares).enumerate() {
                ui.weak(classes.get(i).map_or("?", |c| c.as_str()));
                for (j, (&n, &s)) in row.iter().zip(share).enumerate() {
                    let fill = scale.fill(s, i == j, dark);
                    let (rect, response) =
                        ui.allocate_exact_size(egui::vec2(side, 20.0), egui::Sense::hover());
                    ui.painter().rect_filled(rect, 2.0, fill);
                    ui.painter().text(
                        rect.center(),
                        egui::Align2::CENTER_CENTER,
                        n.to_string(),
                        egui::FontId::proportional(if k > 12 { 10.0 } else { 12.0 }),
                        text_on(fill),
                    );
                    let (r, p) = (name(classes, i), name(classes, j));
                    response.on_hover_text(format!(
                        "{n} rows of {r} predicted {p}: {:.1} % of the row",
                        100.0 * s
                    ));
                }
                ui.end_row();
            }
        });
}

/// Cells as wide as the widest class name (so the columns under the names line up), at
/// least 40 points and at most 90; 26 with many classes, whose names then overflow.
fn cell_width(ui: &egui::Ui, classes: &[String]) -> f32 {
    if classes.len() > 12 {
        return 26.0;
    }
    let font = egui::TextStyle::Body.resolve(ui.style());
    let widest = classes
        .iter()
        .map(|c| {
            let galley = ui
                .painter()
                .layout_no_wrap(c.clone(), font.clone(), egui::Color32::WHITE);
            galley.size().x
        })
        .fold(0.0, f32::max);
    (widest + 4.0).clamp(40.0, 90.0)
}

fn name(classes: &[String], i: usize) -> &str {
    classes.get(i).map_or("?", |c| c.as_str())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn confusion_rows_become_shares_and_both_models_share_one_scale() {
        let a = vec![vec![8, 2], vec![0, 0]];
        let b = vec![vec![9, 1], vec![3, 7]];
        let (sa, sb) = (row_shares(&a), row_shares(&b));
        assert_eq!(sa, vec![vec![0.8, 0.2], vec![0.0, 0.0]]);
        assert_eq!(sb[1], vec![0.3, 0.7]);
        // The top is the larger error share of either model (b's 0.3, not a's 0.2).
        assert_eq!(shared_scale(&[&sa, &sb]).top, 0.3);
    }
}
