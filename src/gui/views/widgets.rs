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

/// The fill of a matrix cell: stronger for larger values (square root, so that small
/// flips stay visible), readable under the cell text in both themes.
pub fn heat(value: f64, dark: bool) -> egui::Color32 {
    let alpha = (25.0 + 200.0 * value.clamp(0.0, 1.0).sqrt()) as u8;
    if dark {
        egui::Color32::from_rgba_unmultiplied(70, 140, 255, alpha / 2)
    } else {
        egui::Color32::from_rgba_unmultiplied(40, 110, 230, alpha / 2)
    }
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
