//! The Overview view, shown first once data are loaded: the few numbers a person wants
//! before any table (mislabelled rows, noisiest classes and sources, the largest flips,
//! the next step's yield), each with its interval and each a link to the view that
//! explains it. Before data are loaded it says what to do. The numbers come from
//! [`crate::workflow::overview`]; `overview_inputs` decides when to compute them.

use eframe::egui;

use super::overview_inputs::{matrix_as_estimated, start_intervals, summary};
use super::widgets::{job_progress, plain};
use crate::gui::app::{UiState, View};
use crate::gui::command::Command;
use crate::gui::dialogs::Purpose;
use crate::gui::jobs::JobKind;
use crate::gui::state::AppState;
use crate::workflow::overview::{
    percent, percent_range, percent_with, FlipCell, Mislabelled, Overview,
};
use crate::workflow::worklist::split_budget;

/// Draws the view.
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let Some(data) = state.data() else {
        return first_steps(ui, view);
    };
    start_intervals(state, view, out);
    let overview = summary(state, view);
    egui::ScrollArea::vertical()
        .id_salt("overview-view")
        .show(ui, |ui| {
            if state.editor().is_none() {
                waiting(ui, state);
            }
            if let Some(m) = &overview.mislabelled {
                mislabelled(ui, state, m, data.rows(), view, out);
            }
            intervals_status(ui, state, out);
            classes(ui, &overview, view);
            sources(ui, &overview, view);
            flips(ui, state, &overview.largest_flips, view, out);
            estimator(ui, state);
            next_step(ui, state, &overview, view);
            ui.add_space(8.0);
            ui.weak(
                "Every number here is an estimate from a model, meant to direct qualified \
                 human review, not a verdict on any row. For medical, safety or other \
                 sensitive data follow your local rules and licensed practice.",
            );
        });
}

/// Before any data: what to do.
fn first_steps(ui: &mut egui::Ui, view: &mut UiState) {
    ui.heading("Start here");
    ui.label(
        "No data yet. Open a table (CSV with a label column) in the Data view, or run \
         `flipmend demo` to try the invented recycling table. Once it is loaded, this page \
         shows how many rows are probably mislabelled, the largest flips between classes \
         and what reviewing the top of the ranking should find.",
    );
    ui.horizontal(|ui| {
        if ui.button("Go to the Data view").clicked() {
            view.view = Some(View::Data);
        }
        if ui.button("Open a table…").clicked() {
            view.dialog_requests.push(Purpose::OpenData);
        }
    });
}

fn waiting(ui: &mut egui::Ui, state: &AppState) {
    let running = [JobKind::Load, JobKind::Probabilities, JobKind::Estimate]
        .into_iter()
        .find_map(|kind| state.jobs().running(kind));
    ui.horizontal(|ui| match running {
        Some(r) => {
            ui.spinner();
            ui.label(format!("{}…", r.ticket.kind.label()));
        }
        None => {
            ui.label("No flip matrix yet: see the messages above, or the Flip matrix view.");
        }
    });
}

fn mislabelled(
    ui: &mut egui::Ui,
    state: &AppState,
    m: &Mislabelled,
    rows: usize,
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    let text = format!(
        "About {} of {} rows ({}) are probably mislabelled (an estimate)",
        count(m.rows),
        count(rows as f64),
        percent(m.share)
    );
    let link = ui.add(egui::Link::new(egui::RichText::new(text).heading()));
    if link
        .on_hover_text("the ranked rows: Suspects view")
        .clicked()
    {
        to_top_of_ranking(state, view, out);
    }
    if let (Some([low, high]), Some(share)) = (m.interval, m.share_interval(rows)) {
        let basis = if m.spread_included {
            "the bootstrap band of the class noise rates weighted by the estimated class \
             shares, and the binomial spread of the count, added in quadrature"
        } else {
            "the bootstrap band of the class noise rates weighted by the estimated class \
             shares (the count's binomial spread follows once every row is ranked)"
        };
        ui.label(format!(
            "90 % interval: {}–{} rows ({}), from {basis}.",
            count(low),
            count(high),
            percent_range(share, m.share)
        ));
    }
}

fn intervals_status(ui: &mut egui::Ui, state: &AppState, out: &mut Vec<Command>) {
    if state.intervals().is_some() && matrix_as_estimated(state) {
        return;
    }
    ui.horizontal(|ui| {
        if state.jobs().running(JobKind::Bootstrap).is_some() {
            ui.spinner();
            ui.label("computing intervals…");
            job_progress(ui, state, JobKind::Bootstrap, out);
        } else if state.intervals().is_some() {
            ui.weak("the matrix was edited by hand: the bootstrap intervals belong to the estimate, so none is shown");
        } else if state.estimate().is_some_and(|e| e.method.is_none()) {
            ui.weak("an imported matrix has no estimator to resample: no intervals");
        } else if state.estimate().is_some() {
            ui.weak("intervals after the bootstrap");
            if ui.button("Compute intervals").clicked() {
                out.push(Command::Bootstrap);
            }
        }
    });
}

fn classes(ui: &mut egui::Ui, overview: &Overview, view: &mut UiState) {
    if overview.noisiest_classes.is_empty() {
        return;
    }
    ui.add_space(6.0);
    ui.strong("Noisiest classes (share of each true class's rows typed as another)");
    for c in &overview.noisiest_classes {
        let text = format!("{}: {}", c.name, percent_with(c.rate, c.interval));
        if ui.link(text).on_hover_text("Flip matrix view").clicked() {
            view.view = Some(View::Matrix);
        }
    }
}

fn sources(ui: &mut egui::Ui, overview: &Overview, view: &mut UiState) {
    if overview.noisiest_sources.is_empty() {
        return;
    }
    ui.add_space(6.0);
    ui.strong("Noisiest label sources (share of each source's rows mislabelled)");
    for s in &overview.noisiest_sources {
        let pooled = if s.pooled {
            ", too few rows: pooled"
        } else {
            ""
        };
        let text = format!(
            "{}: {} of its {} rows{pooled}",
            s.name,
            percent_with(s.rate, s.interval),
            count(s.rows as f64)
        );
        if ui.link(text).on_hover_text("Sources view").clicked() {
            view.view = Some(View::Sources);
        }
    }
}

fn flips(
    ui: &mut egui::Ui,
    state: &AppState,
    flips: &[FlipCell],
    view: &mut UiState,
    out: &mut Vec<Command>,
) {
    if flips.is_empty() {
        return;
    }
    ui.add_space(6.0);
    ui.strong("Largest flips (share of a true class's rows typed as another class)");
    for f in flips {
        let link = ui.link(f.words());
        if link.on_hover_text("these rows: Suspects view").clicked() {
            let mut s = state.settings().clone();
            s.observed_filter = Some(f.observed_name.clone());
            s.suggested_filter = Some(f.true_name.clone());
            out.push(Command::Settings(s));
            view.view = Some(View::Suspects);
        }
    }
}

fn estimator(ui: &mut egui::Ui, state: &AppState) {
    let Some(info) = state.estimate() else {
        return;
    };
    ui.add_space(6.0);
    ui.label(format!("Matrix: {}", state.matrix_description()));
    if let Some(volume) = &info.volume {
        ui.weak(plain(volume));
    }
    for w in &info.warnings {
        ui.colored_label(ui.visuals().warn_fg_color, format!("warning: {}", plain(w)));
    }
}

fn next_step(ui: &mut egui::Ui, state: &AppState, overview: &Overview, view: &mut UiState) {
    ui.add_space(6.0);
    ui.strong("Next step");
    let Some(y) = &overview.review else {
        if state.ranking().is_none() {
            ui.label("ranking the rows…");
        } else {
            ui.label("the margin score gives no probability of a wrong label: no expected yield");
        }
        return;
    };
    let text = format!(
        "Reviewing the {} suspects a worklist lists should find about {} errors",
        count(y.rows as f64),
        count(y.expected)
    );
    // The figure is of the worklist as the Suspects view would export it, filters and
    // all, so the link keeps them.
    if ui.link(text).on_hover_text("Suspects view").clicked() {
        view.view = Some(View::Suspects);
    }
    ui.weak(format!(
        "An estimate: {}–{} if the p_wrong are calibrated (90 % binomial spread). The \
         budget is set in the Suspects view.{}",
        count(y.interval[0]),
        count(y.interval[1]),
        worklist_note(state)
    ));
}

/// What the worklist figure leaves out: its control rows, and the rows the filters hide.
fn worklist_note(state: &AppState) -> String {
    let s = state.settings();
    let (_, control) = split_budget(s.budget, s.control);
    let mut note = String::new();
    if control > 0 {
        note += &format!(
            " The worklist's other {control} rows are control rows drawn at random; they \
             are not counted here."
        );
    }
    let f = state.filter();
    if f.observed.is_some() || f.suggested.is_some() || f.source.is_some() || f.min_score > 0.0 {
        note += " Only the rows the Suspects view's filters keep are listed.";
    }
    note
}

/// The Suspects view on the whole ranking (the figures are of the unfiltered rows).
fn to_top_of_ranking(state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let mut s = state.settings().clone();
    if s.observed_filter.is_some() || s.suggested_filter.is_some() {
        s.observed_filter = None;
        s.suggested_filter = None;
        out.push(Command::Settings(s));
    }
    if state.source_filter().is_some() {
        out.push(Command::FilterSource(None));
    }
    view.view = Some(View::Suspects);
}

/// A count rounded to whole rows, with thousands separated: "12,345".
fn count(v: f64) -> String {
    if !v.is_finite() {
        return "–".into();
    }
    let digits = format!("{:.0}", v.abs());
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    if v < -0.5 {
        out.insert(0, '-');
    }
    out
}

#[cfg(test)]
mod tests {
    #[test]
    fn counts_group_thousands() {
        assert_eq!(super::count(0.4), "0");
        assert_eq!(super::count(999.6), "1,000");
        assert_eq!(super::count(1234567.0), "1,234,567");
        assert_eq!(super::count(f64::NAN), "–");
    }
}
