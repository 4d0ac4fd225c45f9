//! Several annotators per row in the Data view: the role that names their label columns,
//! and each annotator's estimated accuracy once the consensus has run.

use eframe::egui;

use crate::gui::state::AppState;
use crate::io::session::Roles;

/// Checkboxes for the annotators' label columns. With two or more chosen, their
/// consensus replaces the observed-label column.
pub fn picker(ui: &mut egui::Ui, header: &[String], draft: &mut Roles) {
    let mut chosen = draft.annotators.clone().unwrap_or_default();
    let shown = match chosen.len() {
        0 => "none".to_string(),
        n => format!("{n} columns"),
    };
    let mut changed = false;
    egui::CollapsingHeader::new(shown)
        .id_salt("annotators")
        .show(ui, |ui| {
            changed = super::widgets::column_checkboxes(ui, "annotator-list", header, &mut chosen);
        });
    if changed {
        draft.annotators = (!chosen.is_empty()).then_some(chosen);
    }
}

/// Each annotator's items and estimated accuracy with its 90 % interval, most accurate
/// first, once the consensus has run.
pub fn table(ui: &mut egui::Ui, state: &AppState) {
    let Some(found) = state.consensus() else {
        return;
    };
    ui.heading("Annotators");
    ui.label(format!(
        "The observed label of every row is its annotators' consensus (Dawid & Skene's EM, \
         the classifier's probabilities as each row's prior); {} rows differ from the plain \
         majority. Accuracy: the estimated share of an annotator's labels that are right.",
        found.changed_from_majority
    ));
    let annotators = &found.consensus.annotators;
    let mut order: Vec<usize> = (0..annotators.len()).collect();
    order.sort_by(|&a, &b| annotators[b].accuracy.total_cmp(&annotators[a].accuracy));
    egui::Grid::new("annotators")
        .striped(true)
        .num_columns(4)
        .show(ui, |ui| {
            ui.strong("annotator");
            ui.strong("items");
            ui.strong("accuracy");
            ui.strong("90 % interval");
            ui.end_row();
            for a in order {
                let one = &annotators[a];
                ui.label(&found.columns[a]);
                ui.label(one.items.to_string());
                ui.label(format!("{:.1} %", 100.0 * one.accuracy));
                ui.label(format!(
                    "{:.1}–{:.1} %",
                    100.0 * one.accuracy_low,
                    100.0 * one.accuracy_high
                ));
                ui.end_row();
            }
        });
    ui.label("Estimates for qualified review, not verdicts on a person.");
}
