//! The Overview's bookkeeping, apart from its drawing: noticing a new load, starting the
//! bootstrap once per estimate, and the summary, computed again only when what it reads
//! changes (summing every row's spread each frame would cost milliseconds on a million
//! rows).

use std::hash::{Hash, Hasher};
use std::sync::Arc;

use rustc_hash::FxHasher;

use crate::gui::app::{UiState, View};
use crate::gui::command::Command;
use crate::gui::jobs::JobKind;
use crate::gui::state::AppState;
use crate::io::session::MatrixOrigin;
use crate::workflow::overview::{summarize, Inputs, Overview};

/// Notices a successful load (a new data generation) and shows the Overview then.
pub fn follow_loads(state: &AppState, view: &mut UiState) {
    let generation = state.data_generation();
    if generation != view.seen_generation {
        view.seen_generation = generation;
        if state.data().is_some() {
            view.view = Some(View::Overview);
        }
    }
}

/// Starts the bootstrap once per estimate, when the estimate can be resampled and the
/// ranking and diagnostics no longer need the cores.
pub fn start_intervals(state: &AppState, view: &mut UiState, out: &mut Vec<Command>) {
    let number = state.estimate_number();
    let resamplable = state.estimate().is_some_and(|e| e.method.is_some());
    let busy = [
        JobKind::Probabilities,
        JobKind::Estimate,
        JobKind::Bootstrap,
        JobKind::Rank,
        JobKind::Diagnose,
    ]
    .into_iter()
    .any(|kind| state.jobs().running(kind).is_some());
    if resamplable && state.intervals().is_none() && !busy && view.intervals_started != Some(number)
    {
        view.intervals_started = Some(number);
        out.push(Command::Bootstrap);
    }
}

/// The intervals of the estimate apply to the current matrix only while nobody edited it.
pub fn matrix_as_estimated(state: &AppState) -> bool {
    let overall = state
        .editor()
        .is_some_and(|e| e.origin() == MatrixOrigin::Estimated);
    let sources = state
        .source_editors()
        .is_none_or(|s| s.edited_names().is_empty());
    overall && sources
}

/// The summary, computed again only when what it reads changed.
pub fn summary(state: &AppState, view: &mut UiState) -> Arc<Overview> {
    let (Some(data), Some(editor)) = (state.data(), state.editor()) else {
        return Arc::new(Overview::default());
    };
    let estimated = matrix_as_estimated(state);
    let inputs = Inputs {
        classes: &data.classes,
        matrix: editor.matrix().view(),
        interval: state.intervals().filter(|_| estimated),
        diagnostics: state.diagnostics().map(|(d, _)| d),
        sources: state.current_sources(),
        source_intervals: state.source_intervals().filter(|_| estimated),
        ranking: state.ranking().map(|r| r.as_ref()),
        rows: data.rows(),
        listed: &[],
    };
    let key = fingerprint(state, &inputs);
    match &view.overview {
        Some((k, o)) if *k == key => o.clone(),
        _ => {
            // The worklist head is built only here: it holds up to a budget of rows.
            let listed = state.worklist_listed();
            let o = Arc::new(summarize(&Inputs {
                listed: &listed,
                ..inputs
            }));
            view.overview = Some((key, o.clone()));
            o
        }
    }
}

/// What the summary depends on, hashed: the data, the values of the matrix, of its
/// intervals and of the sources' noise rates, the diagnostics' version, the ranking (its
/// score, matrix version, length and sum), and what picks the worklist head from it
/// (budget, control share, filters, and the filtered rows' count).
fn fingerprint(state: &AppState, inputs: &Inputs) -> u64 {
    let mut h = FxHasher::default();
    let mut floats = |values: &mut dyn Iterator<Item = f64>| {
        values.for_each(|v| v.to_bits().hash(&mut h));
    };
    floats(&mut inputs.matrix.iter().copied());
    if let Some(i) = inputs.interval {
        floats(&mut i.low.iter().chain(i.high.iter()).copied());
    }
    if let Some(s) = inputs.sources {
        floats(&mut s.sources.iter().map(|s| s.noise_rate));
    }
    if let Some(i) = inputs.source_intervals {
        floats(&mut i.noise_rates.iter().flatten().copied());
    }
    if let Some(r) = inputs.ranking {
        floats(&mut r.expected_errors.into_iter());
        std::mem::discriminant(&r.kind).hash(&mut h);
        (r.matrix_version, r.ranked.len(), r.rows).hash(&mut h);
    }
    let diagnosed = state.diagnostics().map(|(_, v)| *v);
    (state.data_generation(), diagnosed).hash(&mut h);
    let (settings, filter) = (state.settings(), state.filter());
    (settings.budget, settings.control.to_bits()).hash(&mut h);
    (filter.observed, filter.suggested, filter.source).hash(&mut h);
    (filter.min_score.to_bits(), state.visible().len()).hash(&mut h);
    (inputs.interval.is_some(), inputs.source_intervals.is_some()).hash(&mut h);
    h.finish()
}
