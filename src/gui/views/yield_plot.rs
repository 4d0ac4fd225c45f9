//! The review yield curve: how many wrong labels reviewing the table's rows in rank
//! order should find (the sum of their calibrated probabilities of a wrong label), the
//! budget marked on it, and, once verdicts exist, what the reviewed suspects actually
//! held, with its 90 % interval, beside what was expected of those same rows.

use eframe::egui;
use egui_plot::{Legend, Line, Plot, PlotPoints, Points, VLine};

use crate::gui::app::UiState;
use crate::gui::state::AppState;
use crate::noise::scores::RowScore;
use crate::workflow::overview::{worklist_yield, yield_curve, ReviewYield};
use crate::workflow::ranking::Ranking;
use crate::workflow::worklist::split_budget;

/// Points the curve is drawn with at most (a million rows are summed, not drawn).
const CURVE_POINTS: usize = 400;

/// Draws the plot (nothing for a score that is not a probability).
pub fn show(ui: &mut egui::Ui, state: &AppState, view: &mut UiState) {
    let Some(YieldFigures {
        points: curve,
        found,
    }) = figures_cached(state, view)
    else {
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
    ui.label(format!(
        "expected wrong labels found by reviewing the first {} rows of the table (the \
         suspects a worklist lists): about {:.0}",
        found.rows, found.expected
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

/// The plot's figures: the curve and the expected findings of the worklist's suspects.
#[derive(Debug, Clone)]
pub(crate) struct YieldFigures {
    /// The curve over the table's rows in rank order, at most [`CURVE_POINTS`] points.
    points: Vec<[f64; 2]>,
    /// Σ p_wrong over exactly the listed suspects (never read off the thinned curve).
    found: ReviewYield,
}

/// The figures, kept in `view` until the ranking, the filters or the budget change.
fn figures_cached(state: &AppState, view: &mut UiState) -> Option<YieldFigures> {
    // Asked before the worklist head is built: a margin ranking is never cached.
    let ranking = state.ranking().filter(|r| r.kind.is_probability())?;
    let visible = state.visible();
    let key = {
        use std::hash::{Hash, Hasher};
        let mut h = std::hash::DefaultHasher::new();
        (ranking.matrix_version, ranking.ranked.len(), visible.len()).hash(&mut h);
        let s = state.settings();
        (
            s.budget,
            s.control.to_bits(),
            ranking.kind.name(),
            &s.observed_filter,
            &s.suggested_filter,
        )
            .hash(&mut h);
        (s.min_score.to_bits(), state.source_filter()).hash(&mut h);
        h.finish()
    };
    if let Some((k, figures)) = &view.yield_cache {
        if *k == key {
            return Some(figures.clone());
        }
    }
    let listed = state.worklist_listed();
    let figures = figures(ranking, visible, &listed, state.settings().budget)?;
    view.yield_cache = Some((key, figures.clone()));
    Some(figures)
}

/// The curve over `table` (positions in the ranking, in rank order) up to four budgets'
/// worth, thinned to at most [`CURVE_POINTS`] points, and the expected findings of the
/// `listed` suspects; none for a score that is not a probability.
fn figures(
    ranking: &Ranking,
    table: &[u32],
    listed: &[(RowScore, usize)],
    budget: usize,
) -> Option<YieldFigures> {
    let kind = ranking.kind;
    let found = worklist_yield(kind, listed)?;
    let shown = table.len().min(4 * budget.max(25));
    let p_wrong = table[..shown]
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
    Some(YieldFigures { points, found })
}

#[cfg(test)]
mod tests {
    use ndarray::Array2;

    use super::*;
    use crate::noise::posterior::Flip;
    use crate::noise::scores::ScoreKind;
    use crate::workflow::ranking::rank_rows;
    use crate::workflow::worklist::listed_head;

    #[test]
    fn the_figure_is_summed_over_exactly_the_listed_rows_not_read_off_the_thinned_curve() {
        // 1,000 rows of one observed class, p_wrong falling from 0.95 by 0.0009 a row,
        // so the ranking keeps the rows' order and no two rows tie.
        let rows = 1000;
        let p_wrong: Vec<f32> = (0..rows).map(|r| 0.95 - 0.0009 * r as f32).collect();
        let mut probs = Array2::<f32>::zeros((rows, 2));
        for (r, &p) in p_wrong.iter().enumerate() {
            probs[[r, 0]] = 1.0 - p;
            probs[[r, 1]] = p;
        }
        let eye = Array2::eye(2);
        let ranking = rank_rows(
            probs.view(),
            &vec![0; rows],
            Flip::noisy(&eye),
            ScoreKind::SelfConfidence,
            0,
        );
        // A budget of 250 with 5 % control lists 237 suspects; the curve over 1,000 rows
        // is thinned to every second point, so it has no point at 237.
        let (suspects, _) = split_budget(250, 0.05);
        assert_eq!(suspects, 237);
        let table: Vec<u32> = (0..rows as u32).collect();
        let listed = listed_head(&ranking, &table, suspects);
        let figures = figures(&ranking, &table, &listed, 250).unwrap();
        assert!(figures.points.iter().all(|p| p[0] != suspects as f64));
        let by_hand: f64 = p_wrong[..suspects].iter().map(|&p| p as f64).sum();
        assert_eq!(figures.found.rows, suspects);
        assert!(
            (figures.found.expected - by_hand).abs() < 1e-4,
            "{} against {by_hand}",
            figures.found.expected
        );
        // Read off the thinned curve, the figure would miss the 237th row's p_wrong.
        let thinned = figures
            .points
            .iter()
            .take_while(|p| p[0] <= suspects as f64)
            .last()
            .unwrap()[1];
        let missed = p_wrong[suspects - 1] as f64;
        assert!((by_hand - thinned - missed).abs() < 1e-4);
        assert!(missed > 0.5);
    }
}
