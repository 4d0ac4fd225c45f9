//! The Compare view: train the uncorrected model and the chosen corrections with the
//! matrix on screen, compare them on one holdout, and save the chosen model.

use eframe::egui;
use egui_extras::{Column, TableBuilder};

use super::compare_charts;
use super::widgets::{path_row, pct};
use crate::gui::app::{UiState, View};
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::jobs::JobKind;
use crate::gui::state::AppState;
use crate::learn::train::Correction;
use crate::workflow::compare::{Comparison, ModelReport};

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    if state.data().is_none() {
        ui.label("Load a data table first (Data view).");
        return;
    }
    controls(ui, state, view, out);
    let Some(r) = state.retrained() else {
        ui.label("Train to compare the corrections.");
        return;
    };
    if state
        .editor()
        .is_some_and(|e| e.version() != r.matrix_version)
    {
        ui.colored_label(
            ui.visuals().warn_fg_color,
            "the matrix changed since this training; train again to use it",
        );
    }
    ui.separator();
    let c = &r.comparison;
    egui::ScrollArea::vertical().show(ui, |ui| {
        results(ui, c);
        ui.columns(2, |cols| {
            compare_charts::accuracies(&mut cols[0], c);
            compare_charts::gains(&mut cols[1], c);
        });
        ui.separator();
        let chosen = view.chosen_model(c.models.len());
        ui.horizontal(|ui| {
            ui.label("model");
            egui::ComboBox::from_id_salt("model-choice")
                .selected_text(c.report.models[chosen].correction)
                .show_ui(ui, |ui| {
                    for (i, m) in c.report.models.iter().enumerate() {
                        ui.selectable_value(&mut view.model_choice, Some(i), m.correction);
                    }
                });
        });
        compare_charts::confusions(ui, c, chosen);
        changed_rows(ui, state, c, chosen, view);
        ui.label(
            "Save the chosen model (the command line's model file; `flipmend predict` reads it):",
        );
        if let Some(path) = path_row(
            ui,
            view,
            Purpose::SaveModel,
            "Save model",
            "model JSON to write",
        ) {
            out.push(Command::SaveModel(chosen, path));
        }
    });
}

fn controls(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let mut s = state.settings().clone();
    ui.horizontal_wrapped(|ui| {
        ui.label("corrections: none +");
        for &c in Correction::all().iter().filter(|&&c| c != Correction::None) {
            let mut on = s.corrections.contains(&c);
            if ui.checkbox(&mut on, c.name()).changed() {
                s.corrections.retain(|&d| d != c);
                if on {
                    s.corrections.push(c);
                }
            }
        }
        ui.separator();
        ui.add(egui::Slider::new(&mut s.holdout, 0.05..=0.5).text("holdout"));
        super::widgets::fit_settings(ui, &mut s);
    });
    if state.ranks_by_source() {
        ui.label(
            "forward scores each row under its own label source's matrix; backward and prune \
             use the sources' mix",
        );
    }
    ui.horizontal(|ui| {
        ui.label(match &s.test {
            Some(p) => format!("test table: {}", p.display()),
            None => "no test table (evaluation uses trusted or observed holdout labels)".into(),
        });
        if s.test.is_some() && ui.button("Remove").clicked() {
            s.test = None;
        }
    });
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::OpenTest,
        "Use as test table",
        "labelled test CSV (labels taken as correct)",
    ) {
        s.test = Some(path);
    }
    if s != *state.settings() {
        out.push(Command::Settings(s));
    }
    ui.horizontal(|ui| {
        let ready = state.probs().is_some() && state.editor().is_some();
        if ui
            .add_enabled(ready, egui::Button::new("Train and compare"))
            .clicked()
        {
            out.push(Command::Retrain);
        }
        super::widgets::job_progress(ui, state, JobKind::Retrain, out);
    });
}

fn results(ui: &mut egui::Ui, c: &Comparison) {
    let r = &c.report;
    ui.label(format!(
        "{} training rows, {} holdout rows; every model uses the same rows and matrix. Reference: {}.",
        r.train_rows, r.holdout_rows, r.reference
    ));
    egui::Grid::new("compare-results")
        .striped(true)
        .show(ui, |ui| {
            for h in [
                "correction",
                "observed",
                "est. clean",
                "test",
                "trusted",
                "changed",
                "dropped",
                "iterations",
            ] {
                ui.strong(h);
            }
            ui.end_row();
            for m in &r.models {
                ui.label(m.correction);
                ui.label(pct(m.holdout_accuracy_observed));
                ui.label(pct(m.estimated_clean_accuracy));
                ui.label(pct(m.test_accuracy))
                    .on_hover_text(interval_text(m.test_accuracy_interval, m));
                ui.label(pct(m.trusted_accuracy))
                    .on_hover_text(interval_text(m.trusted_accuracy_interval, m));
                ui.label(m.changed_vs_none.to_string());
                ui.label(m.dropped_rows.to_string());
                ui.label(m.iterations.to_string());
                ui.end_row();
            }
        });
    ui.weak("observed: holdout accuracy against the noisy labels. est. clean: implied accuracy against the true labels, trace(N·T^-1). test / trusted: against labels taken as correct. All are estimates for human review.");
}

/// "90 % interval 77.4–80.4 %; +7.1 points over none (+5.5 to +8.7)" for a hover.
fn interval_text(interval: Option<[f64; 2]>, m: &ModelReport) -> String {
    let mut text = interval.map_or("no interval".into(), |[low, high]| {
        format!("90 % interval {:.1}–{:.1} %", 100.0 * low, 100.0 * high)
    });
    if let Some([low, gain, high]) = m.gain_vs_none.filter(|_| m.correction != "none") {
        text.push_str(&format!(
            "; {:+.1} points over none ({:+.1} to {:+.1}, on the test rows when given, else \
             on the randomly audited holdout rows)",
            100.0 * gain,
            100.0 * low,
            100.0 * high
        ));
    }
    text
}

/// The holdout rows whose prediction the chosen correction changed from `none`'s, with
/// their labels; a row's button opens it in the Suspects view's row inspector.
fn changed_rows(
    ui: &mut egui::Ui,
    state: &AppState,
    c: &Comparison,
    chosen: usize,
    view: &mut UiState,
) {
    let Some(data) = state.data() else { return };
    let changed = changed_vs_none(c, chosen);
    let Some(after) = c.predictions.get(chosen) else {
        return;
    };
    ui.label(format!(
        "holdout rows whose prediction changed from none to {}: {} (click a row to inspect it)",
        c.report.models[chosen].correction,
        changed.len()
    ));
    let classes = &data.classes;
    let class = |k: Option<usize>| k.and_then(|k| classes.get(k)).map_or("–", |c| c.as_str());
    ui.push_id("changed-rows", |ui| {
        TableBuilder::new(ui)
            .striped(true)
            .max_scroll_height(220.0)
            .columns(Column::auto().at_least(80.0), 5)
            .column(Column::remainder())
            .header(18.0, |mut h| {
                for t in ["row", "id", "observed", "trusted", "none", "corrected"] {
                    h.col(|ui| {
                        ui.strong(t);
                    });
                }
            })
            .body(|body| {
                body.rows(20.0, changed.len(), |mut row| {
                    let i = changed[row.index()];
                    let Some(&r) = c.holdout.get(i) else { return };
                    row.col(|ui| {
                        let open =
                            ui.selectable_label(view.selected_row() == Some(r), format!("row {r}"));
                        if open
                            .on_hover_text("open this row in the Suspects view")
                            .clicked()
                        {
                            view.select_row(Some(r));
                            view.view = Some(View::Suspects);
                        }
                    });
                    let trusted = data
                        .trusted
                        .as_ref()
                        .and_then(|t| t.get(r).copied().flatten());
                    for text in [
                        data.id(r).into_owned(),
                        class(data.labels.get(r).copied()).to_string(),
                        class(trusted).to_string(),
                        class(c.predictions[0].get(i).copied()).to_string(),
                        class(after.get(i).copied()).to_string(),
                    ] {
                        row.col(|ui| {
                            ui.label(text);
                        });
                    }
                });
            });
    });
}

/// Indices into the holdout whose prediction differs between `none` (the first model)
/// and model `chosen`.
fn changed_vs_none(c: &Comparison, chosen: usize) -> Vec<usize> {
    let (Some(before), Some(after)) = (c.predictions.first(), c.predictions.get(chosen)) else {
        return Vec::new();
    };
    (0..before.len().min(after.len()))
        .filter(|&i| before[i] != after[i])
        .collect()
}
