//! The Suspects view: every row ranked by how likely its label is wrong (re-ranked when
//! the matrix changes), filters, a budget, the score histogram, and the worklist round
//! trip (export, review elsewhere, import).

use eframe::egui;
use egui_extras::{Column, TableBuilder};
use egui_plot::{Bar, BarChart, Plot};

use super::widgets::{class_filter, path_row};
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::jobs::JobKind;
use crate::gui::state::AppState;
use crate::io::worklist::WORKLIST_COLUMNS;
use crate::noise::scores::ScoreKind;
use crate::workflow::review::{ReviewSummary, SliceResult};

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let Some(data) = state.data() else {
        ui.label("Load a data table first (Data view).");
        return;
    };
    controls(ui, state, &data.classes, out);
    if let Some(sources) = &data.sources {
        source_filter(ui, state, &sources.names, out);
    }
    let Some(ranking) = state.ranking() else {
        ui.horizontal(|ui| {
            ui.spinner();
            ui.label("ranking…");
        });
        return;
    };
    let stale = state.jobs().running(JobKind::Rank).is_some() || !ranking.is_complete();
    ui.horizontal(|ui| {
        ui.label(format!(
            "{} of {} rows pass the filters; the worklist takes the first {}",
            state.visible().len(),
            ranking.rows,
            state.visible().len().min(state.settings().budget)
        ));
        if let Some(e) = ranking.expected_errors {
            ui.label(format!("· expected mislabelled rows: {e:.0}"));
        }
        if !ranking.is_complete() {
            ui.label(format!(
                "· showing the top {} while the rest is sorted",
                ranking.ranked.len()
            ));
        }
        if stale {
            ui.spinner();
        }
    });
    ui.weak("Scores are estimates to guide a qualified reviewer, not verdicts; for medical, safety or other sensitive data follow your local rules and licensed practice.");
    egui::Panel::right("suspects-side")
        .default_size(320.0)
        .show(ui, |ui| {
            histogram(ui, state);
            ui.separator();
            worklist_files(ui, state, view, out);
        });
    egui::CentralPanel::default().show(ui, |ui| table(ui, state));
}

fn controls(ui: &mut egui::Ui, state: &AppState, classes: &[String], out: &mut Vec<Command>) {
    let mut s = state.settings().clone();
    ui.horizontal_wrapped(|ui| {
        ui.label("score");
        egui::ComboBox::from_id_salt("score")
            .selected_text(s.score.name())
            .show_ui(ui, |ui| {
                for &k in ScoreKind::all() {
                    ui.selectable_value(&mut s.score, k, k.name())
                        .on_hover_text(score_help(k));
                }
            });
        ui.label("observed");
        if let Some(c) = class_filter(ui, "observed-filter", classes, &s.observed_filter) {
            s.observed_filter = c;
        }
        ui.label("suggested");
        if let Some(c) = class_filter(ui, "suggested-filter", classes, &s.suggested_filter) {
            s.suggested_filter = c;
        }
        let (low, high) = s.score.shown_range();
        ui.add(
            egui::Slider::new(&mut s.min_score, low..=high)
                .text("threshold")
                .fixed_decimals(2),
        )
        .on_hover_text("only rows scoring at least this (p_wrong, or the margin)");
        ui.add(
            egui::DragValue::new(&mut s.budget)
                .range(1..=10_000_000)
                .prefix("budget "),
        );
        ui.add(
            egui::DragValue::new(&mut s.control)
                .range(0.0..=0.45)
                .speed(0.005)
                .fixed_decimals(2)
                .prefix("control share "),
        )
        .on_hover_text(
            "Share of the worklist given to rows drawn at random from the rows not listed, \
             shuffled in so reviewers judge every row alike; the review then measures what \
             the list misses. 0 exports a ranked list without them.",
        );
    });
    if s != *state.settings() {
        out.push(Command::Settings(s));
    }
}

/// Only one label source's suspects (the Sources view's names lead here too).
fn source_filter(ui: &mut egui::Ui, state: &AppState, names: &[String], out: &mut Vec<Command>) {
    let current = state.source_filter();
    let name = |s: Option<u32>| {
        s.and_then(|s| names.get(s as usize))
            .map_or_else(|| "any".to_string(), Clone::clone)
    };
    let mut choice = current;
    ui.horizontal(|ui| {
        ui.label("source");
        egui::ComboBox::from_id_salt("source-filter")
            .selected_text(name(current))
            .show_ui(ui, |ui| {
                ui.selectable_value(&mut choice, None, "any");
                for (s, n) in names.iter().enumerate() {
                    ui.selectable_value(&mut choice, Some(s as u32), n);
                }
            });
        if current.is_some() {
            ui.weak(format!(
                "showing only the rows labelled by {}",
                name(current)
            ));
        }
    });
    if choice != current {
        out.push(Command::FilterSource(choice));
    }
}

fn score_help(k: ScoreKind) -> &'static str {
    match k {
        ScoreKind::Posterior => "probability that the label is wrong, under the flip matrix",
        ScoreKind::SelfConfidence => "one minus the probability of the observed label",
        ScoreKind::Margin => "best other class's probability minus the observed one's",
    }
}

fn histogram(ui: &mut egui::Ui, state: &AppState) {
    let Some(r) = state.ranking() else { return };
    let h = &r.histogram;
    let w = h.bin_width();
    let bars: Vec<Bar> = h
        .counts
        .iter()
        .enumerate()
        .map(|(i, &c)| Bar::new(h.low + (i as f64 + 0.5) * w, c as f64).width(w * 0.95))
        .collect();
    ui.label("score histogram (all rows)");
    Plot::new("score-histogram")
        .height(160.0)
        .allow_scroll(false)
        .show(ui, |p| p.bar_chart(BarChart::new("rows", bars)));
}

/// Where the label source's column goes (after the id), when the table has sources.
const SOURCE_COLUMN: usize = 3;

fn table(ui: &mut egui::Ui, state: &AppState) {
    let (Some(data), Some(r)) = (state.data(), state.ranking()) else {
        return;
    };
    let classes = &data.classes;
    let sources = data.sources.as_ref();
    // The ranked worklist's column names (all but the reviewer's column), and below them
    // the same figures as the file writes; each row's label source after its id, if any.
    let mut titles: Vec<&str> = WORKLIST_COLUMNS[..9].to_vec();
    let mut widths = vec![50.0, 60.0, 80.0, 90.0, 90.0, 60.0, 60.0, 90.0, 60.0];
    if sources.is_some() {
        titles.insert(SOURCE_COLUMN, "source");
        widths.insert(SOURCE_COLUMN, 50.0);
    }
    let mut builder = TableBuilder::new(ui)
        .id_salt("suspects-table")
        .striped(true);
    for (n, width) in widths.iter().enumerate() {
        builder = builder.column(if n + 1 == titles.len() {
            Column::remainder().at_least(*width)
        } else {
            Column::auto().at_least(*width)
        });
    }
    builder
        .header(20.0, |mut h| {
            for &title in &titles {
                h.col(|ui| {
                    ui.strong(title);
                });
            }
        })
        .body(|body| {
            // Only the rows in view are laid out, so a million rows scroll smoothly.
            body.rows(18.0, state.visible().len(), |mut row| {
                let position = state.visible()[row.index()] as usize;
                let s = &r.ranked[position];
                let mut cells = vec![
                    (position + 1).to_string(),
                    s.row.to_string(),
                    data.id(s.row).into_owned(),
                    classes[data.labels[s.row]].clone(),
                    classes[s.suggested].clone(),
                    format!("{:.2}", r.kind.written(s.score)),
                    r.kind
                        .probability(s.score)
                        .map_or(String::new(), |p| format!("{p:.4}")),
                    classes[s.second_choice].clone(),
                    format!("{:.4}", s.second_choice_prob),
                ];
                if let Some(sources) = sources {
                    let name = sources.names[sources.of_row[s.row] as usize].clone();
                    cells.insert(SOURCE_COLUMN, name);
                }
                for text in cells {
                    row.col(|ui| {
                        ui.label(text);
                    });
                }
            });
        });
}

fn worklist_files(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    ui.heading("Worklist");
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
            "merged data CSV to write",
        ) {
            out.push(Command::SaveMerged(path));
        }
    }
}

/// The review's measurements in words: precision of the listed rows, the error rate of
/// the control rows and what it implies for the rows not listed, and any note.
fn review_findings(s: &ReviewSummary) -> Vec<String> {
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
