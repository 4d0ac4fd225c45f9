//! The review yield curve: how many wrong labels reviewing the table's rows in rank
//! order should find (the sum of their calibrated probabilities of a wrong label), the
//! budget marked on it, and, once verdicts exist, what the reviewed suspects actually
//! held, with its 90 % interval, beside what was expected of those same rows.

use eframe::egui;
use egui_plot::{Legend, Line, Plot, PlotPoints, Points, VLine};

use crate::gui::app::UiState;
use crate::gui::state::AppState;
use crate::workflow::overview::yield_curve;
use crate::workflow::worklist::split_budget;

/// Points the curve is drawn with at most (a million rows are summed, not drawn).
const CURVE_POINTS: usize = 400;

/// Draws the plot (nothing for a score that is not a probability).
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState) {
    let Some(curve) = curve(state, view) else {
        ui.weak("The yield needs a probability score (posterior or self-confidence).");
        return;
    };
    let s = state.settings();
    let (suspects, _) = split_budget(s.budget, s.control);
    // Not during a round: a count that moves with each verdict would tell control rows
    // from suspects.
    let measured = state
        .verdict_summary()
        .filter(|_| state.round().is_none())
        .and_then(|v| v.listed);
    let at_budget = curve
        .iter()
        .take_while(|p| p[0] <= suspects as f64)
        .last()
        .map_or(0.0, |p| p[1]);
    ui.label(format!(
        "expected wrong labels found by reviewing the first {suspects} rows of the table: about {at_budget:.0}"
    ));
    Plot::new("review-yield")
        .height(170.0)
        .allow_scroll(false)
        .include_y(0.0)
        .include_x(0.0)
        .x_axis_label("rows reviewed (in rank order)")
        .y_axis_label("wrong labels found")
        .legend(Legend::default())
        .show(ui, |p| {
            p.line(Line::new("expected", PlotPoints::from(curve.clone())));
            p.vline(VLine::new("budget", suspects as f64));
            if let Some(m) = measured {
                let n = m.wrong.of as f64;
                let found = Points::new(
                    "found by the review (90 % interval)",
                    vec![[n, m.wrong.count as f64]],
                )
                .radius(4.0);
                p.points(found);
                p.line(Line::new(
                    "found by the review (90 % interval)",
                    vec![[n, m.wrong.low * n], [n, m.wrong.high * n]],
                ));
                if let Some(e) = m.expected {
                    p.points(Points::new("expected of those rows", vec![[n, e * n]]).radius(3.0));
                }
            }
        });
}

/// The curve over the table's rows in rank order, up to four budgets' worth, at most
/// [`CURVE_POINTS`] points; kept in `view` until the ranking or the filters change.
fn curve(state: &AppState, view: &mut UiState) -> Option<Vec<[f64; 2]>> {
    let ranking = state.ranking()?;
    let kind = ranking.kind;
    if !kind.is_probability() {
        return None;
    }
    let visible = state.visible();
    let key = {
        use std::hash::{Hash, Hasher};
        let mut h = std::hash::DefaultHasher::new();
        (ranking.matrix_version, ranking.ranked.len(), visible.len()).hash(&mut h);
        let s = state.settings();
        (
            s.budget,
            kind.name(),
            &s.observed_filter,
            &s.suggested_filter,
        )
            .hash(&mut h);
        (s.min_score.to_bits(), state.source_filter()).hash(&mut h);
        h.finish()
    };
    if let Some((k, points)) = &view.yield_cache {
        if *k == key {
            return Some(points.clone());
        }
    }
    let shown = visible.len().min(4 * state.settings().budget.max(25));
    let p_wrong = visible[..shown]
        .iter()
        .filter_map(|&p| kind.probability(ranking.ranked[p as usize].score));
    let sums = yield_curve(p_wrong);
    let step = (sums.len() / CURVE_POINTS).max(1);
    let mut points: Vec<[f64; 2]> = sums
        .iter()
        .enumerate()
        .step_by(step)
        .map(|(k, &y)| [k as f64, y])
        .collect();
    if let Some(&last) = sums.last() {
        points.push([(sums.len() - 1) as f64, last]);
    }
    view.yield_cache = Some((key, points.clone()));
    Some(points)
}
