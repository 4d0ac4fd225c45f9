//! The Sources view: the label sources side by side. A table from the noisiest (rows,
//! audited rows, noise rate with its bootstrap interval, largest flip), the test of
//! whether they differ, and one small heatmap per source on a shared scale. A source's
//! name opens its suspects; its heatmap opens its matrix for editing.

use eframe::egui;

use super::heatmaps::{flip_scale, legend, small_heatmap};
use super::matrix_side::ranking_rule;
use super::widgets::job_progress;
use crate::gui::app::{UiState, View};
use crate::gui::command::Command;
use crate::gui::jobs::JobKind;
use crate::gui::source_edit::MatrixTarget;
use crate::gui::state::AppState;
use crate::noise::sources::{BySource, SourceMatrix};

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let Some(data) = state.data() else {
        ui.label("Load a data table first (Data view).");
        return;
    };
    if data.sources.is_none() {
        ui.label(
            "No label source yet. Give the column that says where each label came from \
             (annotator, station, vendor, rule) the 'label source' role in the Data view and \
             load the table again: each source then gets its own flip matrix.",
        );
        return;
    }
    let Some(by_source) = state.current_sources() else {
        waiting(ui, state);
        return;
    };
    egui::ScrollArea::vertical()
        .id_salt("sources-view")
        .show(ui, |ui| {
            ui.heading("Label sources");
            ui.label(ranking_rule(state));
            intervals_controls(ui, state, out);
            ui.add_space(4.0);
            table(ui, state, &data.classes, by_source, view, out);
            test_line(ui, by_source);
            ui.separator();
            heatmaps(ui, state, &data.classes, by_source, view, out);
            ui.add_space(6.0);
            ui.weak(
                "Noise rates and matrices are estimates to guide a qualified reviewer, not \
                 verdicts on a source or a person; for medical, safety or other sensitive data \
                 follow your local rules and licensed practice.",
            );
        });
}

/// Before (or without) an estimate by source.
fn waiting(ui: &mut egui::Ui, state: &AppState) {
    let busy = [JobKind::Load, JobKind::Probabilities, JobKind::Estimate]
        .into_iter()
        .any(|kind| state.jobs().running(kind).is_some());
    if busy {
        ui.horizontal(|ui| {
            ui.spinner();
            ui.label("waiting for probabilities and the estimate…");
        });
    } else if state.estimate().is_some() {
        ui.label(
            "The current matrix is one for every row: it was imported from a file (import \
             into the overall matrix sets the sources aside; estimate again to get them back).",
        );
    } else {
        ui.label(
            "No estimate yet: see the message above. One matrix per source needs the joint, \
             counting or trusted estimator (Flip matrix view).",
        );
    }
}

fn intervals_controls(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        let can = state.estimate().is_some_and(|e| e.method.is_some());
        let button = ui
            .add_enabled(can, egui::Button::new("Bootstrap intervals"))
            .on_hover_text(
                "90 % intervals of every source's noise rate and matrix cells, from refitting \
                 on rows resampled within each source (the bootstrap count is set in the Flip \
                 matrix view)",
            );
        if button.clicked() {
            out.push(Command::Bootstrap);
        }
        job_progress(ui, state, JobKind::Bootstrap, out);
    });
}

/// One row per source from the noisiest; the name opens the source's suspects.
fn table(
    ui: &mut egui::Ui,
    state: &AppState,
    classes: &[String],
    by_source: &BySource,
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    let heads = [
        ("rank", "1 = the noisiest source"),
        ("source", "click a name to see that source's suspects"),
        ("rows", "rows labelled by the source"),
        ("audited", "rows with a trusted label"),
        (
            "noise rate",
            "estimated share of the source's rows whose label is wrong",
        ),
        (
            "90 % interval",
            "bootstrap interval of the estimated noise rate",
        ),
        (
            "largest flip",
            "the off-diagonal cell holding most of the source's rows",
        ),
        ("", ""),
    ];
    egui::Grid::new("sources-table")
        .striped(true)
        .spacing([14.0, 4.0])
        .show(ui, |ui| {
            for (head, hover) in heads {
                ui.strong(head).on_hover_text(hover);
            }
            ui.end_row();
            for (rank, s) in by_source.noisiest_first().into_iter().enumerate() {
                let source = &by_source.sources[s];
                ui.label((rank + 1).to_string());
                let link = ui.link(&source.name);
                if link.on_hover_text("show this source's suspects").clicked() {
                    view.view = Some(View::Suspects);
                    out.push(Command::FilterSource(Some(s as u32)));
                }
                ui.label(source.rows.to_string());
                ui.label(source.audited.to_string());
                ui.label(format!("{:.1} %", 100.0 * source.noise_rate));
                ui.label(interval(state, s));
                ui.label(largest_flip(classes, source));
                ui.label(markers(state, source, s));
                ui.end_row();
            }
        });
}

/// The bootstrap interval of source `s`'s estimated noise rate, or a dash.
fn interval(state: &AppState, s: usize) -> String {
    let Some([low, high]) = state.source_intervals().and_then(|i| i.noise_rates.get(s)) else {
        return "–".into();
    };
    format!("{:.1}–{:.1} %", 100.0 * low, 100.0 * high)
}

/// "pooled" (too few rows: the overall matrix stands in) and "changed" (edited by hand or
/// imported; the interval is still the estimate's).
fn markers(state: &AppState, source: &SourceMatrix, s: usize) -> String {
    let mut marks = Vec::new();
    if source.pooled {
        marks.push("pooled (too few rows: the overall matrix)");
    }
    if state.source_editors().is_some_and(|e| e.is_edited(s)) {
        marks.push("changed by hand (the interval is the estimate's)");
    }
    marks.join("; ")
}

/// A source's largest off-diagonal flip by share of its rows, in words.
fn largest_flip(classes: &[String], source: &SourceMatrix) -> String {
    match source.largest_flips().first() {
        Some(&(i, j, _)) => format!(
            "{} typed as {}: {:.0} %",
            classes[i],
            classes[j],
            100.0 * source.matrix[[i, j]]
        ),
        None => String::new(),
    }
}

fn test_line(ui: &mut egui::Ui, by_source: &BySource) {
    let Some(test) = by_source.test else {
        ui.weak("no test of equal matrices: it needs two sources with matrices of their own");
        return;
    };
    let differ = test.p_value <= 0.01;
    ui.label(format!(
        "test of equal matrices (as estimated): p {} {:.2}, {}",
        if differ { "<=" } else { "=" },
        test.p_value,
        if differ {
            "the sources differ"
        } else {
            "no clear difference between the sources"
        }
    ));
}

/// Every source's matrix as a small heatmap, in the table's order, on one scale.
fn heatmaps(
    ui: &mut egui::Ui,
    state: &AppState,
    classes: &[String],
    by_source: &BySource,
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    ui.strong("Each source's matrix: rows = true class, columns = label given");
    ui.weak(format!(
        "classes in this order, top to bottom and left to right: {}. Hover a cell for its \
         value; click a heatmap to edit that source's matrix.",
        classes.join(", ")
    ));
    let scale = flip_scale(by_source.sources.iter().map(|s| &s.matrix));
    legend(ui, scale);
    let cell = (168.0 / classes.len().max(1) as f32).clamp(6.0, 20.0);
    ui.horizontal_wrapped(|ui| {
        for s in by_source.noisiest_first() {
            let source = &by_source.sources[s];
            ui.vertical(|ui| {
                let edited = state.source_editors().is_some_and(|e| e.is_edited(s));
                ui.label(format!(
                    "{} · {:.1} %{}",
                    source.name,
                    100.0 * source.noise_rate,
                    if edited { " · changed" } else { "" }
                ));
                let map = small_heatmap(ui, &source.name, &source.matrix, classes, scale, cell);
                if map.clicked() {
                    view.view = Some(View::Matrix);
                    out.push(Command::SelectMatrix(MatrixTarget::Source(s)));
                }
            });
            ui.add_space(10.0);
        }
    });
}
