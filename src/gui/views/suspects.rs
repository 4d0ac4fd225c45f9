//! The Suspects view: every row ranked by how likely its label is wrong (re-ranked when
//! the matrix changes and as verdicts come in), filters, search by id, sorting by any
//! column, the row inspector with the verdict keys, the review round, the score
//! histogram and the worklist files.

use eframe::egui;
use egui_extras::{Column, TableBuilder};
use egui_plot::{Bar, BarChart, Plot};

use super::widgets::class_filter;
use super::{inspector, review_panel, yield_plot};
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::jobs::JobKind;
use crate::gui::state::{AppState, SuspectColumn, SuspectSort};
use crate::io::worklist::WORKLIST_COLUMNS;
use crate::noise::scores::ScoreKind;

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
    search(ui, state, view);
    egui::Panel::right("suspects-side")
        .default_size(430.0)
        .show(ui, |ui| {
            egui::ScrollArea::vertical()
                .id_salt("suspects-side-scroll")
                .show(ui, |ui| {
                    review_panel::in_app(ui, state, view, out);
                    egui::CollapsingHeader::new("review yield")
                        .default_open(true)
                        .show(ui, |ui| yield_plot::show(ui, state, view));
                    ui.separator();
                    inspector::show(ui, state, view, out);
                    ui.separator();
                    egui::CollapsingHeader::new("score histogram")
                        .show(ui, |ui| histogram(ui, state));
                    egui::CollapsingHeader::new("worklist files")
                        .default_open(true)
                        .show(ui, |ui| review_panel::worklist_files(ui, state, view, out));
                });
        });
    egui::CentralPanel::default().show(ui, |ui| match state.round() {
        // The table would give a round's rows away (their rank, their score, where the
        // selection sits), so it steps aside until the round ends.
        Some(round) => {
            ui.heading("Review round under way");
            ui.label(format!(
                "{} rows, listed suspects and rows drawn at random mixed together. The table is hidden while you review, so that ranks and scores do not tell them apart; judge each row in the inspector (K keeps, 1–9 relabel, S skips) and press End round to see the table again.",
                round.rows.len()
            ));
        }
        None => table(ui, state, view, out),
    });
}

/// Finds a row by id (the whole id, else the first id that starts with the text) and
/// opens it in the inspector.
fn search(ui: &mut egui::Ui, state: &AppState, view: &mut UiState) {
    let Some(data) = state.data() else { return };
    ui.horizontal(|ui| {
        ui.label("find id");
        let response = ui.add(
            egui::TextEdit::singleline(&mut view.id_search)
                .desired_width(160.0)
                .hint_text("id, then Enter"),
        );
        let go = response.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter));
        if go || ui.button("Find").clicked() {
            let wanted = view.id_search.trim();
            let found = (0..data.rows())
                .find(|&r| data.id(r) == wanted)
                .or_else(|| (0..data.rows()).find(|&r| data.id(r).starts_with(wanted)));
            match found {
                Some(row) if !wanted.is_empty() => {
                    view.select_row(Some(row));
                    view.scroll_to_selected = true;
                }
                _ => {
                    ui.weak("no such id");
                }
            }
        }
        if let Some(row) = view.selected_row() {
            if state.table_line(row).is_none() {
                ui.weak(format!("row {row} is not in the filtered table"));
            }
        }
    });
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
        flip_filter(ui, state, classes, &mut s);
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

/// The two class filters at once, by flip: the matrix's off-diagonal cells of at least
/// half a percent, largest first ("cardboard typed as paper").
fn flip_filter(
    ui: &mut egui::Ui,
    state: &AppState,
    classes: &[String],
    s: &mut crate::io::session::Settings,
) {
    let Some(editor) = state.editor() else { return };
    let t = editor.matrix();
    let mut flips: Vec<(usize, usize, f64)> = t
        .indexed_iter()
        .filter(|&((i, j), &v)| i != j && v >= 0.005 && i < classes.len() && j < classes.len())
        .map(|((i, j), &v)| (i, j, v))
        .collect();
    flips.sort_by(|a, b| b.2.total_cmp(&a.2));
    let name = |i: usize, j: usize| format!("{} typed as {}", classes[i], classes[j]);
    let current = match (&s.suggested_filter, &s.observed_filter) {
        (Some(i), Some(j)) => format!("{i} typed as {j}"),
        (None, None) => "any".to_string(),
        _ => "(by class)".to_string(),
    };
    ui.label("flip");
    egui::ComboBox::from_id_salt("flip-filter")
        .selected_text(current)
        .show_ui(ui, |ui| {
            if ui.selectable_label(false, "any").clicked() {
                s.observed_filter = None;
                s.suggested_filter = None;
            }
            for (i, j, v) in flips {
                let text = format!("{}  ({:.1} %)", name(i, j), 100.0 * v);
                if ui.selectable_label(false, text).clicked() {
                    s.suggested_filter = Some(classes[i].clone());
                    s.observed_filter = Some(classes[j].clone());
                }
            }
        })
        .response
        .on_hover_text("true class typed as observed label: the rows labelled as the second class that are likely the first");
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

/// The table's columns: title, width, and the order a click on the title gives.
fn columns(with_source: bool) -> Vec<(&'static str, f32, Option<SuspectColumn>)> {
    // The ranked worklist's column names (all but the reviewer's column), each row's
    // label source after its id when there is one, and the verdict given here.
    let sort = [
        Some(SuspectColumn::Rank),
        Some(SuspectColumn::Row),
        Some(SuspectColumn::Id),
        Some(SuspectColumn::Observed),
        Some(SuspectColumn::Suggested),
        Some(SuspectColumn::Rank),
        Some(SuspectColumn::Rank),
        Some(SuspectColumn::SecondChoice),
        Some(SuspectColumn::SecondChoiceProb),
    ];
    let widths = [50.0, 60.0, 80.0, 90.0, 90.0, 60.0, 60.0, 90.0, 60.0];
    let mut columns: Vec<_> = WORKLIST_COLUMNS[..9]
        .iter()
        .zip(widths)
        .zip(sort)
        .map(|((&t, w), s)| (t, w, s))
        .collect();
    if with_source {
        columns.insert(3, ("source", 50.0, Some(SuspectColumn::Source)));
    }
    columns.push(("verdict", 80.0, Some(SuspectColumn::Verdict)));
    columns
}

/// A click on a column title: by that column, then the other way, then back to rank.
fn next_sort(current: Option<SuspectSort>, column: SuspectColumn) -> Option<SuspectSort> {
    match current {
        Some(s) if s.column == column && !s.descending => Some(SuspectSort {
            column,
            descending: true,
        }),
        Some(s) if s.column == column => None,
        _ if column == SuspectColumn::Rank => Some(SuspectSort {
            column,
            descending: true,
        }),
        _ => Some(SuspectSort {
            column,
            descending: false,
        }),
    }
}

fn table(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let (Some(data), Some(r)) = (state.data(), state.ranking()) else {
        return;
    };
    let classes = &data.classes;
    let sources = data.sources.as_ref();
    let columns = columns(sources.is_some());
    let rows = state.table_rows();
    let mut builder = TableBuilder::new(ui)
        .id_salt("suspects-table")
        .striped(true)
        .sense(egui::Sense::click());
    if std::mem::take(&mut view.scroll_to_selected) {
        let at = view
            .selected_row()
            .and_then(|row| rows.iter().position(|&p| r.ranked[p as usize].row == row));
        if let Some(at) = at {
            builder = builder.scroll_to_row(at, Some(egui::Align::Center));
        }
    }
    for (n, &(_, width, _)) in columns.iter().enumerate() {
        builder = builder.column(if n + 1 == columns.len() {
            Column::remainder().at_least(width)
        } else {
            Column::auto().at_least(width)
        });
    }
    builder
        .header(20.0, |mut h| {
            for &(title, _, column) in &columns {
                h.col(|ui| {
                    let Some(column) = column else {
                        ui.strong(title);
                        return;
                    };
                    let arrow = match state.sort() {
                        Some(s) if s.column == column => {
                            if s.descending {
                                " (desc)"
                            } else {
                                " (asc)"
                            }
                        }
                        _ => "",
                    };
                    let clicked = ui
                        .add(
                            egui::Button::new(
                                egui::RichText::new(format!("{title}{arrow}")).strong(),
                            )
                            .frame(false),
                        )
                        .on_hover_text(
                            "sort by this column (again: the other way; a third time: by rank)",
                        )
                        .clicked();
                    if clicked {
                        out.push(Command::SortSuspects(next_sort(state.sort(), column)));
                    }
                });
            }
        })
        .body(|body| {
            // Only the rows in view are laid out, so a million rows scroll smoothly.
            body.rows(18.0, rows.len(), |mut row| {
                let position = rows[row.index()] as usize;
                let s = &r.ranked[position];
                row.set_selected(view.selected_row() == Some(s.row));
                let verdict = state.verdicts().get(s.row).map_or(String::new(), |v| {
                    if v.label == data.labels[s.row] {
                        "keep".into()
                    } else {
                        format!("as {}", classes[v.label])
                    }
                });
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
                    verdict,
                ];
                if let Some(sources) = sources {
                    let name = sources.names[sources.of_row[s.row] as usize].clone();
                    cells.insert(3, name);
                }
                for text in cells {
                    row.col(|ui| {
                        // Not selectable, so a click on the text selects the row.
                        ui.add(egui::Label::new(text).selectable(false));
                    });
                }
                if row.response().clicked() {
                    view.select_row(Some(s.row));
                }
            });
        });
}
