//! The row inspector: why a row is suspect (its scores, the model's probabilities, its
//! features beside the typical values of two classes, its label source) and the
//! verdict buttons, with keyboard shortcuts so a reviewer goes through hundreds of rows
//! without the mouse. During a review round flipmend's opinion (rank, score, suggested
//! class, probabilities) is hidden, so listed suspects and random control rows are
//! judged alike.

use eframe::egui;

use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::state::AppState;
use crate::noise::scores::RowScore;

/// Classes reachable by a digit key (1–9).
const DIGIT_CLASSES: usize = 9;

/// Draws the inspector of `view.selected_row()`, and reads the review keys.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let Some(data) = state.data() else { return };
    keys(ui, state, view, out);
    let Some(row) = view.selected_row().filter(|&r| r < data.rows()) else {
        ui.heading("Row inspector");
        ui.label("Click a row of the table (or start a review round) to see why it is suspect and give a verdict.");
        shortcuts_help(ui);
        return;
    };
    let blind = state.round().is_some_and(|r| r.slice_of(row).is_some());
    let score = row_score(state, row);
    header(ui, state, row, blind, score.as_ref());
    verdict_buttons(ui, state, view, row, out);
    ui.separator();
    if blind {
        ui.weak("Review round: flipmend's scores, suggestion and probabilities are hidden so that every row of the round is judged alike.");
    } else {
        probabilities(ui, state, row);
    }
    features(ui, state, view, row, score.filter(|_| !blind));
    shortcuts_help(ui);
}

/// The row's entry in the ranking.
fn row_score(state: &AppState, row: usize) -> Option<RowScore> {
    let ranking = state.ranking()?;
    ranking.ranked.get(state.ranking_position(row)?).copied()
}

fn header(ui: &mut egui::Ui, state: &AppState, row: usize, blind: bool, score: Option<&RowScore>) {
    let Some(data) = state.data() else { return };
    ui.heading(format!("Row {row} · id {}", data.id(row)));
    ui.horizontal_wrapped(|ui| {
        ui.label(format!("observed: {}", data.classes[data.labels[row]]));
        if let Some(sources) = &data.sources {
            ui.label(format!(
                "· label source: {}",
                sources.names[sources.of_row[row] as usize]
            ));
        }
        if let Some(t) = data.trusted.as_ref().and_then(|t| t[row]) {
            ui.label(format!(
                "· trusted ({}): {}",
                data.origin(row).name(),
                data.classes[t]
            ));
        }
    });
    if blind {
        if let Some((done, rows)) = state.round_progress() {
            ui.label(format!("review round: {done} of {rows} rows judged"));
        }
        return;
    }
    let (Some(s), Some(ranking)) = (score, state.ranking()) else {
        return;
    };
    let rank = state.ranking_position(row).map_or(0, |p| p + 1);
    let p_wrong = ranking
        .kind
        .probability(s.score)
        .map_or(String::new(), |p| {
            format!(" · P(label wrong) {:.1} %", 100.0 * p)
        });
    ui.label(format!(
        "rank {rank} of {} · suggested: {} · score {:.2}{p_wrong}",
        ranking.rows,
        data.classes[s.suggested],
        ranking.kind.written(s.score)
    ));
}

fn verdict_buttons(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    row: usize,
    out: &mut Vec<Command>,
) {
    let Some(data) = state.data() else { return };
    let observed = data.labels[row];
    let given = state.verdicts().get(row).map(|v| v.label);
    match given {
        Some(l) if l == observed => ui.strong("verdict: keep the label"),
        Some(l) => ui.strong(format!("verdict: relabel as {}", data.classes[l])),
        None => ui.label("no verdict yet"),
    };
    ui.horizontal_wrapped(|ui| {
        if ui
            .button("Keep (K)")
            .on_hover_text("the observed label is right")
            .clicked()
        {
            judge(state, view, row, observed, out);
        }
        if ui
            .button("Skip (S)")
            .on_hover_text("no verdict; next row")
            .clicked()
        {
            move_selection(state, view, 1, true);
        }
        if ui
            .add_enabled(state.verdicts().can_undo(), egui::Button::new("Undo (U)"))
            .clicked()
        {
            out.push(Command::UndoVerdict);
        }
    });
    ui.horizontal_wrapped(|ui| {
        ui.label("relabel as:");
        for (c, name) in data.classes.iter().enumerate() {
            let text = if c < DIGIT_CLASSES {
                format!("{} {name}", c + 1)
            } else {
                name.clone()
            };
            let chosen = given == Some(c);
            if ui
                .add_enabled(c != observed, egui::Button::new(text).selected(chosen))
                .clicked()
            {
                judge(state, view, row, c, out);
            }
        }
    });
}

/// Gives the verdict and moves on to the next row still to judge.
fn judge(state: &AppState, view: &mut UiState, row: usize, label: usize, out: &mut Vec<Command>) {
    out.push(Command::Verdict { row, label });
    move_selection(state, view, 1, true);
}

/// How many rows the arrows move through, the selected one's place among them, and the
/// row at each place.
type Sequence<'a> = (usize, Option<usize>, Box<dyn Fn(usize) -> usize + 'a>);

/// The rows the arrows move through: the round's rows in review order, else the
/// table's lines; (how many, the selected one's place, the row at a place).
fn sequence(state: &AppState, selected: Option<usize>) -> Sequence<'_> {
    if let Some(round) = state.round() {
        let at = selected.and_then(|r| round.rows.iter().position(|x| x.row == r));
        return (round.rows.len(), at, Box::new(move |i| round.rows[i].row));
    }
    let (Some(ranking), lines) = (state.ranking(), state.table_rows()) else {
        return (0, None, Box::new(|i| i));
    };
    let at = selected.and_then(|r| state.table_line(r));
    (
        lines.len(),
        at,
        Box::new(move |i| ranking.ranked[lines[i] as usize].row),
    )
}

/// Selects the row `step` places on (negative: back) from the selected one; with
/// `unjudged`, skips rows that already have a verdict (in a round).
pub fn move_selection(state: &AppState, view: &mut UiState, step: isize, unjudged: bool) {
    let (len, at, row_at) = sequence(state, view.selected_row());
    let skip_judged = unjudged && state.round().is_some();
    let mut i = at.map_or(0, |i| i as isize + step);
    while (0..len as isize).contains(&i) {
        let row = row_at(i as usize);
        if !(skip_judged && state.verdicts().get(row).is_some() && Some(row) != view.selected_row())
        {
            view.select_row(Some(row));
            view.scroll_to_selected = true;
            return;
        }
        i += step.signum();
    }
}

/// The review keys, when no text field has the keyboard: digits relabel, K keeps,
/// Enter takes the suggestion, S skips, the arrows move, U undoes and R redoes.
fn keys(ui: &egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    if ui.ctx().egui_wants_keyboard_input() {
        return;
    }
    let Some(data) = state.data() else { return };
    let pressed = |k: egui::Key| ui.input(|i| i.key_pressed(k) && i.modifiers.is_none());
    if pressed(egui::Key::ArrowDown) {
        move_selection(state, view, 1, false);
    }
    if pressed(egui::Key::ArrowUp) {
        move_selection(state, view, -1, false);
    }
    if pressed(egui::Key::U) {
        out.push(Command::UndoVerdict);
    }
    if pressed(egui::Key::R) {
        out.push(Command::RedoVerdict);
    }
    let Some(row) = view.selected_row().filter(|&r| r < data.rows()) else {
        return;
    };
    if pressed(egui::Key::S) {
        move_selection(state, view, 1, true);
    }
    if pressed(egui::Key::K) {
        judge(state, view, row, data.labels[row], out);
    }
    let blind = state.round().is_some_and(|r| r.slice_of(row).is_some());
    if pressed(egui::Key::Enter) && !blind {
        if let Some(s) = row_score(state, row) {
            judge(state, view, row, s.suggested, out);
        }
    }
    for (c, key) in DIGITS.iter().enumerate().take(data.classes.len()) {
        if pressed(*key) && c != data.labels[row] {
            judge(state, view, row, c, out);
        }
    }
}

const DIGITS: [egui::Key; DIGIT_CLASSES] = [
    egui::Key::Num1,
    egui::Key::Num2,
    egui::Key::Num3,
    egui::Key::Num4,
    egui::Key::Num5,
    egui::Key::Num6,
    egui::Key::Num7,
    egui::Key::Num8,
    egui::Key::Num9,
];

fn shortcuts_help(ui: &mut egui::Ui) {
    ui.weak("Keys: arrow up/down move · K keep · 1–9 relabel as that class · Enter take the suggestion · S skip · U undo · R redo");
}

/// The model's probabilities of every class for the row, and the clean posterior when
/// the estimate fitted one, as bars: one line per class, so every class name is read
/// in full whatever the number of classes.
fn probabilities(ui: &mut egui::Ui, state: &AppState, row: usize) {
    let (Some(data), Some(probs)) = (state.data(), state.probs()) else {
        return;
    };
    let clean = state
        .estimate()
        .and_then(|e| e.clean.clone())
        .filter(|c| c.nrows() > row);
    let bar = |ui: &mut egui::Ui, p: f64| {
        let p = if p.is_finite() {
            p.clamp(0.0, 1.0)
        } else {
            0.0
        };
        ui.add(
            egui::ProgressBar::new(p as f32)
                .desired_width(110.0)
                .text(format!("{:.1} %", 100.0 * p)),
        );
    };
    egui::Grid::new("inspector-probs")
        .num_columns(3)
        .show(ui, |ui| {
            ui.strong("class");
            ui.strong("model (observed label)")
                .on_hover_text("the out-of-sample probability of each observed label");
            if clean.is_some() {
                ui.strong("true class (estimate)")
                    .on_hover_text("the joint fit's probability that the row truly is each class");
            }
            ui.end_row();
            for (c, name) in data.classes.iter().enumerate() {
                if c == data.labels[row] {
                    ui.strong(name);
                } else {
                    ui.label(name);
                }
                bar(ui, f64::from(probs.values[[row, c]]));
                if let Some(clean) = &clean {
                    bar(ui, f64::from(clean[[row, c]]));
                }
                ui.end_row();
            }
        });
}

/// The row's feature values beside the typical values of its observed class and of a
/// class to compare with (the suggested one unless the reviewer picks another).
fn features(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    row: usize,
    score: Option<RowScore>,
) {
    let (Some(data), Some(typical)) = (state.data(), state.typical()) else {
        return;
    };
    let observed = data.labels[row];
    let other = view
        .compare_class()
        .or(score.map(|s| s.suggested))
        .filter(|&c| c < data.classes.len());
    ui.horizontal(|ui| {
        ui.label("compare with");
        egui::ComboBox::from_id_salt("inspector-compare")
            .selected_text(other.map_or("choose a class", |c| data.classes[c].as_str()))
            .show_ui(ui, |ui| {
                for (c, name) in data.classes.iter().enumerate() {
                    if ui.selectable_label(other == Some(c), name).clicked() {
                        view.compare_with(c);
                    }
                }
            });
    });
    let from = |c: usize| match typical.from[c] {
        crate::data::typical::TypicalFrom::Trusted => "trusted rows",
        crate::data::typical::TypicalFrom::Observed => "observed rows",
        crate::data::typical::TypicalFrom::Nothing => "no rows",
    };
    ui.weak(format!(
        "typical = median of the class's {} ({} rows){}",
        from(observed),
        typical.rows[observed],
        other.map_or(String::new(), |c| format!(
            "; {}: its {} ({} rows)",
            data.classes[c],
            from(c),
            typical.rows[c]
        ))
    ));
    egui::Grid::new("inspector-features")
        .striped(true)
        .num_columns(4)
        .show(ui, |ui| {
            ui.strong("feature");
            ui.strong("this row");
            ui.strong(&data.classes[observed]);
            ui.strong(other.map_or("", |c| data.classes[c].as_str()));
            ui.end_row();
            for (j, name) in data.feature_names.iter().enumerate() {
                let x = data.features[[row, j]];
                let a = typical.medians[[observed, j]];
                let b = other.map(|c| typical.medians[[c, j]]);
                ui.label(name);
                // The typical value the row is nearer to is marked.
                let nearer_b = b.is_some_and(|b| (x - b).abs() < (x - a).abs());
                ui.label(format!("{x:.3}"));
                mark(ui, a, !nearer_b);
                match b {
                    Some(b) => mark(ui, b, nearer_b),
                    None => {
                        ui.label("");
                    }
                }
                ui.end_row();
            }
        });
}

/// A typical value, strong when the row's value is nearer to it.
fn mark(ui: &mut egui::Ui, value: f64, nearer: bool) {
    let text = if value.is_finite() {
        format!("{value:.3}")
    } else {
        "–".into()
    };
    if nearer {
        ui.strong(text);
    } else {
        ui.weak(text);
    }
}
