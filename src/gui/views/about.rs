//! The About / Help panel: what the app does, the shortcuts, and the cautions.

use eframe::egui;

use crate::gui::app::UiState;

/// Draws the panel.
pub fn show(ui: &mut egui::Ui, view: &mut UiState) {
    ui.horizontal(|ui| {
        ui.heading(format!("flipmend {}", env!("CARGO_PKG_VERSION")));
        if ui.small_button("x").clicked() {
            view.show_about = false;
        }
    });
    egui::ScrollArea::vertical().show(ui, |ui| {
        ui.label("Measure how labels flip between classes, find the rows most likely mislabelled, and train models that account for the noise.");
        ui.add_space(6.0);
        ui.strong("Cautions");
        ui.label("Every figure here — the flip matrix, suspect scores, estimated accuracies — is an estimate from a model, meant for qualified human review. It is not a verdict on any row.");
        ui.label("For medical, safety-critical or other sensitive data, relabelling decisions belong to the people responsible under your local rules and licensed practice; use flipmend's lists only to direct their attention.");
        ui.add_space(6.0);
        ui.strong("Flow");
        ui.label("Data: load a table and choose roles; probabilities are computed out-of-fold unless you load a file.\nFlip matrix: T[i][j] = P(observed j | true i), rows = true class. Edit cells to add what you know; the rest of the row rescales.\nSuspects: rows ranked by how likely the label is wrong under the matrix; export a worklist, import it once reviewed.\nCompare: train no correction, forward, backward and pruning on one holdout and compare them; save a model.");
        ui.add_space(6.0);
        ui.strong("Shortcuts");
        egui::Grid::new("shortcuts").show(ui, |ui| {
            for (keys, what) in [
                ("Ctrl+O", "open a data table"),
                ("Ctrl+S", "save the session"),
                ("Ctrl+Z", "undo a matrix change"),
                ("Ctrl+Shift+Z / Ctrl+Y", "redo"),
            ] {
                ui.monospace(keys);
                ui.label(what);
                ui.end_row();
            }
        });
        ui.label("Drop a .csv to load it, a .npy to use it as probabilities, a .json to open a session.");
    });
}
