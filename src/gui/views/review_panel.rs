//! The review side of the Suspects view: review rounds inside the app, what the verdicts
//! measured so far, writing them as a reviewed worklist, and the worklist file round
//! trip (export, review elsewhere, import).

use eframe::egui;

use super::widgets::path_row;
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::state::AppState;
use crate::workflow::review::{ReviewSummary, SliceResult};

/// The in-app review: the round, the verdicts' findings, and writing them.
pub fn in_app(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    ui.heading("Review");
    match state.round_progress() {
        Some((done, rows)) => {
            ui.label(format!(
                "review round: {done} of {rows} rows judged (suspects and random control rows, shuffled)"
            ));
            ui.horizontal(|ui| {
                if ui.button("Next row to judge").clicked() {
                    view.select_row(None);
                    super::inspector::move_selection(state, view, 1, true);
                }
                if ui.button("End round").clicked() {
                    out.push(Command::EndRound);
                }
            });
        }
        None => {
            ui.label("A round takes the worklist (the budget, with its control share drawn at random) and shows its rows one by one, in a shuffled order, without flipmend's opinion.");
            if ui.button("Start review round").clicked() {
                out.push(Command::StartRound);
                view.select_row(None);
            }
        }
    }
    let n = state.verdicts().len();
    if n == 0 {
        return;
    }
    ui.label(format!(
        "{n} verdicts given here{}",
        if state.follows_estimate() {
            "; the flip matrix and the ranking follow them"
        } else {
            "; the matrix was changed by hand, so it does not follow them (re-estimate to include them)"
        }
    ));
    if state.round().is_some() {
        // Per-slice counts that move with each verdict would tell which rows were drawn
        // at random, so they wait for the end of the round.
        ui.weak("The round's findings (precision of the suspects, errors the list missed) are shown when it ends.");
    } else if let Some(s) = state.verdict_summary() {
        for line in review_findings(s) {
            ui.label(line);
        }
    }
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::ExportVerdicts,
        "Write verdicts",
        "reviewed worklist CSV to write",
    ) {
        out.push(Command::ExportVerdicts(path));
    }
}

pub fn worklist_files(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    ui.heading("Worklist files");
    ui.label("Export the filtered rows up to the budget (with the control share drawn at random and shuffled in, and the key beside the file); reviewers fill the review column with the correct class (or keep).");
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::ExportWorklist,
        "Export",
        "worklist CSV to write",
    ) {
        out.push(Command::ExportWorklist(path));
    }
    ui.label("Read a reviewed worklist (checked like the command line's review):");
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::ImportReview,
        "Import",
        "reviewed worklist CSV",
    ) {
        out.push(Command::ImportReview(path));
    }
    if let Some(r) = state.review() {
        ui.label(format!(
            "{}: {} confirm, {} change the label, {} left blank",
            r.path
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default(),
            r.summary.confirmed,
            r.summary.changed,
            r.review.not_reviewed
        ));
        for line in review_findings(&r.summary) {
            ui.label(line);
        }
        ui.label(
            "Write a copy of the data with the reviewed labels in the trusted column, and load it:",
        );
        if let Some(path) = path_row(
            ui,
            view,
            Purpose::SaveMerged,
            "Write and load",
            "merged copy to write (CSV for a CSV table, Parquet for a columnar one)",
        ) {
            out.push(Command::SaveMerged(path));
        }
    }
}

/// The review's measurements in words: precision of the listed rows, the error rate of
/// the control rows and what it implies for the rows not listed, and any note.
pub fn review_findings(s: &ReviewSummary) -> Vec<String> {
    let rate = |what: &str, r: &SliceResult| {
        format!(
            "{what}: {} of {} wrong ({:.0} %, 90 % interval {:.0}–{:.0} %){}",
            r.wrong.count,
            r.wrong.of,
            100.0 * r.wrong.value,
            100.0 * r.wrong.low,
            100.0 * r.wrong.high,
            r.expected
                .map_or(String::new(), |e| format!("; expected {:.0} %", 100.0 * e))
        )
    };
    let mut lines = Vec::new();
    if let Some(l) = &s.listed {
        lines.push(rate("listed suspects", l));
    }
    if let Some(c) = &s.control {
        lines.push(rate("control rows", c));
    }
    if let (Some((low, mid, high)), Some(n)) = (s.missed_errors, s.unlisted_rows) {
        lines.push(format!(
            "about {mid:.0} wrong labels left among the {n} rows not listed (90 % interval {low:.0}–{high:.0})"
        ));
    }
    lines.extend(s.notes.iter().map(|n| format!("note: {n}")));
    lines
}
