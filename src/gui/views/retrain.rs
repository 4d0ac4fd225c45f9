//! The Compare view: train the uncorrected model and the chosen corrections with the
//! matrix on screen, compare them on one holdout, and save the chosen model.

use eframe::egui;
use egui_extras::{Column, TableBuilder};
use egui_plot::{Bar, BarChart, Legend, Plot};

use super::widgets::{index_axis, path_row, pct};
use crate::gui::app::UiState;
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
        chart(ui, c);
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
        confusions(ui, c, chosen);
        changed_rows(ui, state, c, chosen);
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

/// Reads one figure of a model's report.
type Metric = fn(&ModelReport) -> Option<f64>;

fn chart(ui: &mut egui::Ui, c: &Comparison) {
    let metrics: [(&str, Metric); 3] = [
        ("est. clean", |m| m.estimated_clean_accuracy),
        ("trusted", |m| m.trusted_accuracy),
        ("test", |m| m.test_accuracy),
    ];
    let models = &c.report.models;
    let names: Vec<String> = models.iter().map(|m| m.correction.to_string()).collect();
    Plot::new("compare-chart")
        .height(180.0)
        .allow_scroll(false)
        .legend(Legend::default())
        .x_axis_formatter(index_axis(&names))
        .x_grid_spacer(egui_plot::uniform_grid_spacer(|_| [1.0, 5.0, 10.0]))
        .show(ui, |p| {
            for (s, (name, get)) in metrics.iter().enumerate() {
                let bars: Vec<Bar> = models
                    .iter()
                    .enumerate()
                    .filter_map(|(i, m)| get(m).map(|v| (i, v)))
                    .map(|(i, v)| {
                        Bar::new(i as f64 + (s as f64 - 1.0) * 0.25, v)
                            .width(0.22)
                            .name(m_name(models, i))
                    })
                    .collect();
                if !bars.is_empty() {
                    p.bar_chart(BarChart::new(*name, bars));
                }
            }
        });
}

fn m_name(models: &[ModelReport], i: usize) -> &'static str {
    models[i].correction
}

fn confusions(ui: &mut egui::Ui, c: &Comparison, chosen: usize) {
    let classes = &c.report.classes;
    ui.label(format!(
        "confusion against {} (rows: reference, columns: prediction)",
        c.report.reference
    ));
    ui.columns(2, |cols| {
        for (col, index) in cols.iter_mut().zip([0, chosen]) {
            col.strong(c.report.models[index].correction);
            egui::ScrollArea::horizontal()
                .id_salt(("confusion", index))
                .show(col, |ui| {
                    egui::Grid::new(("confusion-grid", index))
                        .striped(true)
                        .show(ui, |ui| {
                            ui.label("");
                            for name in classes {
                                ui.weak(name);
                            }
                            ui.end_row();
                            for (i, row) in c.report.models[index].confusion.iter().enumerate() {
                                ui.weak(&classes[i]);
                                for (j, v) in row.iter().enumerate() {
                                    if i == j {
                                        ui.strong(v.to_string());
                                    } else {
                                        ui.label(v.to_string());
                                    }
                                }
                                ui.end_row();
                            }
                        });
                });
        }
    });
}

fn changed_rows(ui: &mut egui::Ui, state: &AppState, c: &Comparison, chosen: usize) {
    let Some(data) = state.data() else { return };
    let before = &c.predictions[0];
    let after = &c.predictions[chosen];
    let changed: Vec<usize> = (0..before.len())
        .filter(|&i| before[i] != after[i])
        .collect();
    ui.label(format!(
        "holdout rows whose prediction changed from none to {}: {}",
        c.report.models[chosen].correction,
        changed.len()
    ));
    let classes = &data.classes;
    ui.push_id("changed-rows", |ui| {
        TableBuilder::new(ui)
            .striped(true)
            .max_scroll_height(200.0)
            .columns(Column::auto().at_least(80.0), 4)
            .column(Column::remainder())
            .header(18.0, |mut h| {
                for t in ["row", "id", "observed", "none", "corrected"] {
                    h.col(|ui| {
                        ui.strong(t);
                    });
                }
            })
            .body(|body| {
                body.rows(18.0, changed.len(), |mut row| {
                    let i = changed[row.index()];
                    let r = c.holdout[i];
                    for text in [
                        r.to_string(),
                        data.id(r).into_owned(),
                        classes[data.labels[r]].clone(),
                        classes[before[i]].clone(),
                        classes[after[i]].clone(),
                    ] {
                        row.col(|ui| {
                            ui.label(text);
                        });
                    }
                });
            });
    });
}
