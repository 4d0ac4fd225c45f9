//! Small pieces the views share.

use std::path::PathBuf;

use eframe::egui;

use crate::gui::app::UiState;
use crate::gui::dialogs::Purpose;

/// A typed-path field with a Browse… button (native dialog) and an action button.
/// Returns the typed path when the action button is pressed (or Enter in the field).
pub fn path_row(
    ui: &mut egui::Ui,
    view: &mut UiState,
    purpose: Purpose,
    action: &str,
    hint: &str,
) -> Option<PathBuf> {
    let mut chosen = None;
    ui.horizontal(|ui| {
        let text = view.path(purpose);
        let field = ui.add(
            egui::TextEdit::singleline(text)
                .hint_text(hint)
                .desired_width(340.0),
        );
        let entered = field.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter));
        let typed = text.trim().to_string();
        if ui
            .button("Browse…")
            .on_hover_text("native file dialog")
            .clicked()
        {
            view.dialog_requests.push(purpose);
        }
        let go = ui.add_enabled(!typed.is_empty(), egui::Button::new(action));
        if (go.clicked() || entered) && !typed.is_empty() {
            chosen = Some(PathBuf::from(typed));
        }
    });
    chosen
}

/// A share as a percentage, or a dash.
pub fn pct(v: Option<f64>) -> String {
    v.map_or("–".into(), |v| format!("{:.2}%", 100.0 * v))
}

/// A class picker with an "any" entry; returns the new choice when it changed.
pub fn class_filter(
    ui: &mut egui::Ui,
    id: &str,
    classes: &[String],
    current: &Option<String>,
) -> Option<Option<String>> {
    let mut choice = current.clone();
    egui::ComboBox::from_id_salt(id)
        .selected_text(choice.clone().unwrap_or_else(|| "any".into()))
        .show_ui(ui, |ui| {
            ui.selectable_value(&mut choice, None, "any");
            for c in classes {
                ui.selectable_value(&mut choice, Some(c.clone()), c);
            }
        });
    (choice != *current).then_some(choice)
}

/// Names the integer ticks of a bar chart with one bar (group) per name.
pub fn index_axis(
    names: &[String],
) -> impl Fn(egui_plot::GridMark, &std::ops::RangeInclusive<f64>) -> String + 'static {
    let names = names.to_vec();
    move |mark, _| {
        let i = mark.value.round();
        if (mark.value - i).abs() > 1e-6 || i < 0.0 {
            return String::new();
        }
        names.get(i as usize).cloned().unwrap_or_default()
    }
}

/// Library messages use a few mathematical characters the bundled font lacks; they are
/// spelled out in ASCII for display (the command line keeps them).
pub fn plain(text: &str) -> std::borrow::Cow<'_, str> {
    const SWAPS: [(char, &str); 8] = [
        ('⁻', "^-"),
        ('¹', "1"),
        ('²', "^2"),
        ('→', "->"),
        ('−', "-"),
        ('≤', "<="),
        ('≥', ">="),
        ('≈', "~"),
    ];
    if !text
        .chars()
        .any(|c| SWAPS.iter().any(|(from, _)| *from == c))
    {
        return std::borrow::Cow::Borrowed(text);
    }
    let mut out = String::with_capacity(text.len() + 8);
    for c in text.chars() {
        match SWAPS.iter().find(|(from, _)| *from == c) {
            Some((_, to)) => out.push_str(to),
            None => out.push(c),
        }
    }
    std::borrow::Cow::Owned(out)
}

/// Penalty, iteration limit and seed of every fit (shared by the Data and Compare views).
pub fn fit_settings(ui: &mut egui::Ui, s: &mut crate::io::session::Settings) {
    ui.add(
        egui::DragValue::new(&mut s.l2)
            .speed(1e-4)
            .range(0.0..=10.0)
            .prefix("l2 "),
    );
    ui.add(
        egui::DragValue::new(&mut s.max_iter)
            .range(1..=10_000)
            .prefix("max iter "),
    );
    ui.add(egui::DragValue::new(&mut s.seed).prefix("seed "));
}

/// The progress bar and Cancel button of the running job of `kind`, if one runs.
pub fn job_progress(
    ui: &mut egui::Ui,
    state: &crate::gui::state::AppState,
    kind: crate::gui::jobs::JobKind,
    out: &mut Vec<crate::gui::command::Command>,
) {
    let Some(running) = state.jobs().running(kind) else {
        return;
    };
    ui.add(
        egui::ProgressBar::new(running.control.progress())
            .desired_width(240.0)
            .show_percentage(),
    );
    if ui.button("Cancel").clicked() {
        out.push(crate::gui::command::Command::Cancel(kind));
    }
}

/// A scrolling list of the header's columns with a checkbox each; ticking or unticking
/// edits `chosen`, which is then put back in header order (so the result does not depend
/// on click order). True when it changed.
pub fn column_checkboxes(
    ui: &mut egui::Ui,
    id: &str,
    header: &[String],
    chosen: &mut Vec<String>,
) -> bool {
    let mut changed = false;
    egui::ScrollArea::vertical()
        .max_height(170.0)
        .id_salt(id)
        .show(ui, |ui| {
            for name in header {
                let mut on = chosen.contains(name);
                if ui.checkbox(&mut on, name).changed() {
                    changed = true;
                    if on {
                        chosen.push(name.clone());
                    } else {
                        chosen.retain(|c| c != name);
                    }
                }
            }
        });
    if changed {
        chosen.sort_by_key(|c| header.iter().position(|h| h == c));
    }
    changed
}
