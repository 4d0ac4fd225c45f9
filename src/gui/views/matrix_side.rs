//! The Flip matrix view's side panel: what the overall matrix implies (noise per class,
//! priors, warnings) and, with label sources, which matrices the ranking uses.

use eframe::egui;
use egui_plot::{Bar, BarChart, Legend, Plot};

use super::widgets::{index_axis, plain};
use crate::gui::matrix_edit::MatrixEditor;
use crate::gui::state::AppState;
use crate::noise::sources::BySource;

/// What the overall matrix implies: expected mislabelled rows, noise per class, priors,
/// warnings, and with label sources what the ranking scores each row under.
pub fn show(ui: &mut egui::Ui, state: &AppState, editor: &MatrixEditor) {
    let Some(data) = state.data() else { return };
    let Some((d, version)) = state.diagnostics() else {
        ui.spinner();
        return;
    };
    if *version != editor.version() {
        ui.weak("updating…");
    }
    ui.heading(if state.current_sources().is_some() {
        "What the overall matrix implies"
    } else {
        "What the matrix implies"
    });
    ui.label(format!(
        "expected mislabelled rows: {:.0} ({:.1}%)",
        d.expected_mislabeled,
        100.0 * d.expected_mislabeled_share
    ));
    ui.label(format!(
        "condition number (1-norm): {:.3}",
        d.condition_number
    ));
    ui.label(format!(
        "calibration error (ECE): {:.4}",
        d.calibration_error
    ));
    let noise: Vec<Bar> = d
        .noise_rate
        .iter()
        .enumerate()
        .map(|(i, &v)| Bar::new(i as f64, v).name(&data.classes[i]))
        .collect();
    ui.label("noise rate per true class (1 - T[i][i])");
    Plot::new("noise-bars")
        .height(150.0)
        .allow_scroll(false)
        .x_axis_formatter(index_axis(&data.classes))
        .x_grid_spacer(egui_plot::uniform_grid_spacer(|_| [1.0, 5.0, 10.0]))
        .show(ui, |p| {
            p.bar_chart(
                BarChart::new("noise rate", noise)
                    .width(0.7)
                    .color(NOISE_COLOR),
            )
        });
    ui.label("class priors: observed vs clean (estimated)");
    let observed: Vec<Bar> = d
        .observed_prior
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            Bar::new(i as f64 - 0.18, v)
                .width(0.35)
                .name(&data.classes[i])
        })
        .collect();
    let clean: Vec<Bar> = d
        .clean_prior
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            Bar::new(i as f64 + 0.18, v)
                .width(0.35)
                .name(&data.classes[i])
        })
        .collect();
    Plot::new("priors")
        .height(150.0)
        .allow_scroll(false)
        .legend(Legend::default())
        .x_axis_formatter(index_axis(&data.classes))
        .x_grid_spacer(egui_plot::uniform_grid_spacer(|_| [1.0, 5.0, 10.0]))
        .show(ui, |p| {
            p.bar_chart(BarChart::new("observed", observed).color(OBSERVED_COLOR));
            p.bar_chart(BarChart::new("clean", clean).color(CLEAN_COLOR));
        });
    for w in &d.warnings {
        ui.colored_label(ui.visuals().warn_fg_color, format!("warning: {}", plain(w)));
    }
    if let Some(by_source) = state.current_sources() {
        ui.separator();
        sources(ui, by_source);
    }
}

const NOISE_COLOR: egui::Color32 = egui::Color32::from_rgb(230, 120, 60);
const OBSERVED_COLOR: egui::Color32 = egui::Color32::from_rgb(150, 150, 150);
const CLEAN_COLOR: egui::Color32 = egui::Color32::from_rgb(70, 140, 255);

/// How many sources, and the test of whether they differ (which matrices rank the
/// suspects is said under the matrix picker, [`ranking_rule`]).
fn sources(ui: &mut egui::Ui, by_source: &BySource) {
    ui.heading("Label sources");
    ui.label(format!(
        "{} sources, one flip matrix each and one clean classifier for all; pick one above \
         the grid to see or edit it. The Sources tab compares them.",
        by_source.sources.len()
    ));
    if let Some(test) = by_source.test {
        let verdict = if test.p_value <= 0.01 {
            "the sources differ"
        } else {
            "no clear difference between the sources"
        };
        ui.label(format!(
            "test of equal matrices (as estimated): p {} {:.2} ({verdict})",
            if test.p_value <= 0.01 { "<=" } else { "=" },
            test.p_value
        ));
    }
}

/// In words: what the suspects are ranked under while there are label sources.
pub fn ranking_rule(state: &AppState) -> &'static str {
    if state.ranks_by_source() {
        "Suspects: each row is ranked under its own source's matrix. The overall matrix is \
         the sources' mix and follows their edits; editing the overall matrix itself makes \
         it the one matrix for every row."
    } else {
        "Suspects: every row is ranked under the overall matrix, which was changed by hand; \
         the sources' matrices are set aside until the overall matrix is reset to the mix \
         (or its edits undone)."
    }
}
