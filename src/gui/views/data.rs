//! The Data view: open a table, choose column roles (checked as they change), see the
//! classes, and get out-of-sample probabilities.

use eframe::egui;

use super::widgets::path_row;
use crate::gui::app::UiState;
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::jobs::JobKind;
use crate::gui::state::AppState;
use crate::io::session::Roles;
use crate::workflow::ProbSource;

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    egui::ScrollArea::vertical().show(ui, |ui| {
        ui.heading("Data table");
        ui.label("A CSV (or TSV), Parquet or Feather table with feature columns and an observed label; optionally an id and a partly audited trusted label. Drop a file on the window, browse, or type a path.");
        let draft = view.roles_draft.clone().unwrap_or_else(|| state.session().roles.clone());
        if let Some(path) = path_row(ui, view, Purpose::OpenData, "Load table", "path to a .csv, .tsv, .parquet or .feather") {
            out.push(Command::LoadData(path, draft.clone()));
        }
        if let Some(running) = state.jobs().running(JobKind::Load) {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label("reading the table…");
                if ui.button("Cancel").clicked() {
                    out.push(Command::Cancel(running.ticket.kind));
                }
            });
        }
        if state.data().is_some() {
            ui.separator();
            roles(ui, state, view, draft, out);
            ui.separator();
            classes(ui, state);
            ui.separator();
            if state.consensus().is_some() {
                super::annotators::table(ui, state);
                ui.separator();
            }
            probabilities(ui, state, view, out);
        }
    });
}

fn roles(
    ui: &mut egui::Ui,
    state: &AppState,
    view: &mut UiState,
    mut draft: Roles,
    out: &mut Vec<Command>,
) {
    let Some(data) = state.data() else { return };
    ui.heading("Column roles");
    let before = draft.clone();
    egui::Grid::new("roles").num_columns(2).show(ui, |ui| {
        ui.label("observed label");
        column_picker(
            ui,
            "label",
            &data.header,
            &mut draft.label,
            data.label_column.as_deref(),
        );
        ui.end_row();
        ui.label("id");
        column_picker(
            ui,
            "id",
            &data.header,
            &mut draft.id,
            data.id_column.as_deref(),
        );
        ui.end_row();
        ui.label("trusted label");
        column_picker(
            ui,
            "trusted",
            &data.header,
            &mut draft.trusted,
            data.trusted_column.as_deref(),
        );
        ui.end_row();
        ui.label("label source")
            .on_hover_text("the column saying who or what gave each label (annotator, station, vendor, rule): one flip matrix per source");
        source_picker(ui, &data.header, &mut draft.source);
        ui.end_row();
        ui.label("annotators' labels").on_hover_text(
            "several label columns, one per annotator (an empty cell: that annotator did not \
             label the row); their consensus becomes the observed label",
        );
        super::annotators::picker(ui, &data.header, &mut draft);
        ui.end_row();
        ui.label("delimiter");
        let mut text = draft.delimiter.clone().unwrap_or_default();
        ui.add(
            egui::TextEdit::singleline(&mut text)
                .hint_text("automatic (tab for .tsv)")
                .desired_width(160.0),
        );
        draft.delimiter = (!text.is_empty()).then_some(text);
        ui.end_row();
    });
    egui::CollapsingHeader::new(format!("features ({} in use)", data.feature_names.len()))
        .id_salt("features")
        .show(ui, |ui| features(ui, state, &mut draft));
    if draft != before {
        view.roles_draft = Some(draft.clone());
    }
    let check = state.check_roles(&draft);
    ui.horizontal(|ui| {
        match &check {
            Ok(()) => ui.colored_label(
                ui.visuals().weak_text_color(),
                "roles are valid for this header",
            ),
            Err(e) => ui.colored_label(ui.visuals().error_fg_color, e),
        };
    });
    let changed = draft != state.session().roles;
    if ui
        .add_enabled(
            check.is_ok() && changed,
            egui::Button::new("Apply roles (reload)"),
        )
        .clicked()
    {
        out.push(Command::LoadData(data.path.clone(), draft));
        view.roles_draft = None;
    }
    if !data.ignored.is_empty() {
        let names: Vec<&str> = data.ignored.iter().map(|c| c.name.as_str()).collect();
        ui.label(format!("not used: {}", names.join(", ")));
    }
}

/// A header column picker; `None` is "automatic", and `current` says what it resolved to.
fn column_picker(
    ui: &mut egui::Ui,
    id: &str,
    header: &[String],
    choice: &mut Option<String>,
    current: Option<&str>,
) {
    let shown = match (choice.as_deref(), current) {
        (Some(c), _) => c.to_string(),
        (None, Some(c)) => format!("automatic ({c})"),
        (None, None) => "automatic (none)".into(),
    };
    egui::ComboBox::from_id_salt(id)
        .selected_text(shown)
        .show_ui(ui, |ui| {
            ui.selectable_value(choice, None, "automatic");
            for h in header {
                ui.selectable_value(choice, Some(h.clone()), h);
            }
        });
}

/// The label-source column: none unless chosen (a per-source estimate changes every
/// figure, so it is never picked automatically).
fn source_picker(ui: &mut egui::Ui, header: &[String], choice: &mut Option<String>) {
    egui::ComboBox::from_id_salt("source")
        .selected_text(choice.clone().unwrap_or_else(|| "none".into()))
        .show_ui(ui, |ui| {
            ui.selectable_value(choice, None, "none");
            for h in header {
                ui.selectable_value(choice, Some(h.clone()), h);
            }
        });
}

fn features(ui: &mut egui::Ui, state: &AppState, draft: &mut Roles) {
    let Some(data) = state.data() else { return };
    let mut chosen: Vec<String> = draft
        .features
        .clone()
        .unwrap_or_else(|| data.feature_names.clone());
    ui.horizontal(|ui| {
        if ui.button("all numeric columns").clicked() {
            draft.features = None;
        }
    });
    if super::widgets::column_checkboxes(ui, "feature-list", &data.header, &mut chosen) {
        draft.features = Some(chosen);
    }
}

fn classes(ui: &mut egui::Ui, state: &AppState) {
    let Some(data) = state.data() else { return };
    ui.heading("Classes");
    let (counts, trusted) = state.class_counts();
    let n = data.rows().max(1) as f64;
    egui::Grid::new("classes")
        .striped(true)
        .num_columns(4)
        .show(ui, |ui| {
            ui.strong("class");
            ui.strong("rows");
            ui.strong("share");
            ui.strong("trusted");
            ui.end_row();
            for (i, c) in data.classes.iter().enumerate() {
                ui.label(c);
                ui.label(counts[i].to_string());
                ui.label(format!("{:.1}%", 100.0 * counts[i] as f64 / n));
                ui.label(if data.trusted.is_some() {
                    trusted[i].to_string()
                } else {
                    "–".into()
                });
                ui.end_row();
            }
        });
    for w in &data.warnings {
        ui.colored_label(ui.visuals().warn_fg_color, super::widgets::plain(w));
    }
}

fn probabilities(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    ui.heading("Out-of-sample probabilities");
    ui.label("Each row's class probabilities from a model that did not see that row. In-sample probabilities make the flip matrix look like the identity.");
    match state.probs() {
        Some(p) => ui.label(format!("in use: {}", p.source.describe())),
        None => ui.label("none yet"),
    };
    if let Some(path) = path_row(
        ui,
        view,
        Purpose::OpenProbabilities,
        "Load probabilities",
        "probabilities: .csv (by id), .npy, .parquet or .feather",
    ) {
        out.push(Command::LoadProbabilities(path));
    }
    let mut s = state.settings().clone();
    ui.horizontal(|ui| {
        ui.label("or compute them:");
        ui.add(
            egui::DragValue::new(&mut s.folds)
                .range(2..=20)
                .prefix("folds "),
        );
        super::widgets::fit_settings(ui, &mut s);
        if ui.button("Compute out-of-fold").clicked() {
            out.push(Command::ComputeProbabilities);
        }
    });
    if s != *state.settings() {
        out.push(Command::Settings(s));
    }
    ui.horizontal(|ui| super::widgets::job_progress(ui, state, JobKind::Probabilities, out));
    if matches!(state.probs().map(|p| &p.source), Some(ProbSource::File(_))) {
        ui.label("A probability file is trusted to be out-of-sample; the Flip matrix view warns when it looks in-sample.");
    }
}
