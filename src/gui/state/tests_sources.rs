//! Label sources in the app state, driven without a window: editing one source's matrix
//! (its figures, the mix and the ranking follow), editing the overall matrix (one matrix
//! for every row until reset), undo per matrix, the source filter, intervals, and what a
//! session cannot keep. Expected values come from the library (`with_matrices`,
//! `score_selected`), never typed in.

use std::path::{Path, PathBuf};

use super::*;
use crate::gui::source_edit::MatrixTarget;
use crate::learn::train::Correction;
use crate::noise::posterior::Flip;
use crate::noise::scores::{score_selected, ScoreKind};
use crate::workflow::compare::{compare, CompareInputs, CompareSettings, Comparison, MatrixChoice};
use crate::workflow::ranking::Matrices;

fn temp_dir() -> PathBuf {
    use std::sync::atomic::{AtomicU64, Ordering};
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let name = format!("flipmend-sources-{}-{n}", std::process::id());
    let dir = std::env::temp_dir().join(name);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// 600 rows, three classes, two sources: `calm` (rows 0, 2, 4, …) moves every 20th of
/// its labels to the next class, `loud` every 4th. Deterministic (a fixed congruential
/// sequence).
fn table_with_sources(dir: &Path) -> PathBuf {
    let mut text = String::from("id,x1,x2,who,label\n");
    let mut next = super::tests::jitter(98_765);
    for r in 0..600 {
        let class = (r / 2) % 3;
        let (who, every) = if r % 2 == 0 {
            ("calm", 20)
        } else {
            ("loud", 4)
        };
        let observed = if (r / 2) % every == 0 {
            (class + 1) % 3
        } else {
            class
        };
        let x1 = class as f64 * 2.0 + next();
        let x2 = (class as f64 - 1.0).abs() * 2.0 + next();
        text.push_str(&format!("r{r},{x1:.4},{x2:.4},{who},c{observed}\n"));
    }
    let path = dir.join("sources.csv");
    std::fs::write(&path, text).unwrap();
    path
}

fn loaded(dir: &Path) -> AppState {
    let mut s = AppState::new(Arc::new(|| {}));
    let roles = Roles {
        source: Some("who".into()),
        ..Roles::default()
    };
    s.apply(Command::LoadData(table_with_sources(dir), roles));
    s.settle(120.0);
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    assert!(s.source_editors().is_some(), "one matrix per source");
    s
}

fn set(s: &mut AppState, row: usize, col: usize, value: f64) {
    s.apply(Command::SetCell { row, col, value });
    s.apply(Command::EndGesture);
}

/// Every ranked row's verdict is the library's single-matrix verdict under its own
/// source's matrix, on the estimate's clean posteriors.
fn assert_ranked_by_source(s: &AppState) {
    let ranking = s.ranking().unwrap();
    assert!(ranking.is_complete());
    let Matrices::BySource { matrices, .. } = &ranking.matrices else {
        panic!("ranked under one matrix")
    };
    assert_eq!(matrices, &s.source_editors().unwrap().matrices());
    let clean = s.estimate().unwrap().clean.clone().unwrap();
    let labels = &s.data().unwrap().labels;
    let of_row = s.row_sources().unwrap();
    for verdict in ranking.ranked.iter().step_by(7) {
        let own = &matrices[of_row[verdict.row] as usize];
        let flip = Some(Flip::clean(own));
        let alone = score_selected(
            ScoreKind::Posterior,
            clean.view(),
            labels,
            flip,
            &[verdict.row],
        );
        assert_eq!(alone[0], *verdict, "row {}", verdict.row);
    }
}

#[test]
fn a_source_edit_updates_that_matrix_the_mix_and_the_ranking_and_undoes() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    assert!(s.ranks_by_source());
    assert_ranked_by_source(&s);
    let estimated = s.source_editors().unwrap().estimated().clone();
    assert_eq!(
        s.editor().unwrap().matrix(),
        &estimated.overall,
        "the overall is the mix"
    );
    s.apply(Command::SelectMatrix(MatrixTarget::Source(1)));
    set(&mut s, 0, 1, 0.3);
    s.settle(60.0);
    let editors = s.source_editors().unwrap();
    assert!((editors.editor(1).unwrap().matrix()[[0, 1]] - 0.3).abs() < 1e-12);
    assert_eq!(
        editors.editor(0).unwrap().matrix(),
        &estimated.sources[0].matrix
    );
    let expected = estimated.with_matrices(editors.matrices());
    assert_eq!(
        s.current_sources().unwrap(),
        &expected,
        "noise rates and mix"
    );
    assert_eq!(s.editor().unwrap().matrix(), &expected.overall);
    assert_ne!(expected.overall, estimated.overall);
    let version = s.editor().unwrap().version();
    assert_eq!(s.ranking().unwrap().matrix_version, version);
    assert_eq!(s.diagnostics().unwrap().1, version);
    assert!(s.ranks_by_source());
    assert_ranked_by_source(&s);
    assert!(
        s.matrix_description().contains("loud"),
        "{}",
        s.matrix_description()
    );
    // Undo is that source's: back to its estimate, and the mix with it.
    s.apply(Command::Undo);
    s.settle(60.0);
    assert_eq!(
        s.shown_editor().unwrap().matrix(),
        &estimated.sources[1].matrix
    );
    assert_eq!(s.editor().unwrap().matrix(), &estimated.overall);
    assert_ranked_by_source(&s);
}

#[test]
fn an_overall_edit_ranks_every_row_under_it_until_reset() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    set(&mut s, 2, 0, 0.2);
    s.settle(60.0);
    assert!(!s.ranks_by_source());
    let overall = s.editor().unwrap().matrix().clone();
    match &s.ranking().unwrap().matrices {
        Matrices::One(m) => assert_eq!(m, &overall),
        other => panic!("expected the one edited matrix, got {other:?}"),
    }
    // A source edit meanwhile changes that source, not the hand-edited overall matrix.
    s.apply(Command::SelectMatrix(MatrixTarget::Source(0)));
    set(&mut s, 1, 1, 0.6);
    s.settle(60.0);
    assert_eq!(s.editor().unwrap().matrix(), &overall);
    assert!(!s.ranks_by_source());
    // Resetting the overall matrix gives it back to the sources: their current mix.
    s.apply(Command::SelectMatrix(MatrixTarget::Overall));
    s.apply(Command::ResetMatrix);
    s.settle(60.0);
    assert!(s.ranks_by_source());
    let mix = &s.current_sources().unwrap().overall;
    assert_eq!(s.editor().unwrap().matrix(), mix);
    assert_ranked_by_source(&s);
}

#[test]
fn quick_source_edits_end_ranked_for_the_last_matrices() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    s.apply(Command::SelectMatrix(MatrixTarget::Source(0)));
    for value in [0.05, 0.1, 0.15, 0.2] {
        s.apply(Command::SetCell {
            row: 1,
            col: 2,
            value,
        });
    }
    s.apply(Command::EndGesture);
    s.settle(60.0);
    assert_eq!(
        s.ranking().unwrap().matrix_version,
        s.editor().unwrap().version()
    );
    assert_ranked_by_source(&s);
    s.apply(Command::Undo);
    s.settle(60.0);
    let estimated = s.source_editors().unwrap().estimated().clone();
    assert_eq!(
        s.shown_editor().unwrap().matrix(),
        &estimated.sources[0].matrix,
        "one drag, one undo step"
    );
}

#[test]
fn the_source_filter_keeps_only_that_sources_rows() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    s.apply(Command::FilterSource(Some(1)));
    let of_row = s.row_sources().unwrap().to_vec();
    let ranking = s.ranking().unwrap().clone();
    assert_eq!(s.visible().len(), 300, "every row of 'loud'");
    assert!(s
        .visible()
        .iter()
        .all(|&i| of_row[ranking.ranked[i as usize].row] == 1));
    assert!(s.visible().windows(2).all(|w| w[0] < w[1]), "rank order");
    s.apply(Command::FilterSource(Some(5)));
    assert!(s.last_error().unwrap().contains("no label source"));
    assert_eq!(s.source_filter(), Some(1), "a bad choice changes nothing");
    s.apply(Command::FilterSource(None));
    assert_eq!(s.visible().len(), 600);
}

#[test]
fn the_bootstrap_gives_every_sources_noise_rate_an_interval() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    let mut settings = s.settings().clone();
    settings.resamples = 3;
    s.apply(Command::Settings(settings));
    s.apply(Command::Bootstrap);
    s.settle(120.0);
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    let intervals = s.source_intervals().expect("intervals by source");
    assert_eq!(intervals.noise_rates.len(), 2);
    assert_eq!(
        s.intervals(),
        Some(&intervals.overall),
        "the mix's intervals"
    );
    for (source, [low, high]) in s
        .current_sources()
        .unwrap()
        .sources
        .iter()
        .zip(&intervals.noise_rates)
    {
        assert!(low <= high && (0.0..=1.0).contains(low), "{}", source.name);
    }
}

#[test]
fn a_new_estimate_drops_the_intervals_of_the_old_one_even_while_they_run() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    let mut settings = s.settings().clone();
    settings.resamples = 3;
    s.apply(Command::Settings(settings.clone()));
    s.apply(Command::Bootstrap);
    settings.estimator = crate::noise::Estimator::Counting;
    s.apply(Command::Settings(settings));
    s.settle(120.0);
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    assert_eq!(
        s.estimate().unwrap().method.as_ref().map(|m| m.name()),
        Some("counting")
    );
    assert!(
        s.source_editors().is_some(),
        "counting fits one matrix per source too"
    );
    assert!(s.source_intervals().is_none() && s.intervals().is_none());
    assert!(s.ranks_by_source());
    assert_ranked_by_source(&s);
}

#[test]
fn a_matrix_csv_goes_into_the_source_shown_and_a_session_keeps_it() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    s.apply(Command::SelectMatrix(MatrixTarget::Source(0)));
    let file = dir.join("calm.csv");
    s.apply(Command::ExportMatrix(file.clone()));
    s.settle(60.0);
    s.apply(Command::SelectMatrix(MatrixTarget::Source(1)));
    s.apply(Command::ImportMatrix(file));
    s.settle(60.0);
    let editors = s.source_editors().unwrap();
    let calm = editors.editor(0).unwrap().matrix().clone();
    let loud = editors.editor(1).unwrap().matrix().clone();
    assert!(
        (&calm - &loud).iter().all(|d| d.abs() < 1e-9),
        "loud now holds calm's matrix"
    );
    assert!(editors.is_edited(1) && !editors.is_edited(0));
    assert!(s.ranks_by_source(), "the sources are kept");
    let mix = s.editor().unwrap().matrix().clone();
    let session = dir.join("s.json");
    s.apply(Command::SaveSession(Some(session.clone())));
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    // A fresh app opens the session: loud's changed matrix and the mix come back, and
    // the rows are ranked under them.
    let mut t = AppState::new(Arc::new(|| {}));
    t.apply(Command::OpenSession(session));
    t.settle(120.0);
    assert!(t.last_error().is_none(), "{:?}", t.last_error());
    let editors = t.source_editors().unwrap();
    assert!(editors.is_edited(1) && !editors.is_edited(0));
    let restored = editors.editor(1).unwrap().matrix();
    assert!((restored - &loud).iter().all(|d| d.abs() < 1e-12));
    let mix_again = t.editor().unwrap().matrix();
    assert!((mix_again - &mix).iter().all(|d| d.abs() < 1e-12));
    assert!(t.ranks_by_source());
    assert_ranked_by_source(&t);
}

#[test]
fn retraining_ranked_by_source_gives_forward_each_sources_matrix() {
    // The same comparison through the library with the mix as the one matrix: `none` is
    // the same model, forward differs because the app handed it every source's matrix.
    let dir = temp_dir();
    let mut s = loaded(&dir);
    assert!(s.ranks_by_source());
    s.apply(Command::Retrain);
    s.settle(120.0);
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    let app = s.retrained().expect("a comparison").comparison.clone();
    let settings = CompareSettings {
        holdout: s.settings().holdout,
        fit: s.oof_params(),
        corrections: s.settings().corrections.clone(),
    };
    let mix = s.editor().unwrap().matrix().clone();
    let inputs = CompareInputs {
        data: s.data().unwrap(),
        probs: s.probs().map(|p| p.as_ref()),
        matrix: MatrixChoice::Given(&mix),
        test: None,
    };
    let one = compare(inputs, &settings, None, &mut |_, _| true).unwrap();
    let model = |c: &Comparison, which: Correction| {
        c.models
            .iter()
            .find(|(k, _)| *k == which)
            .unwrap()
            .1
            .clone()
    };
    assert_eq!(model(&app, Correction::None), model(&one, Correction::None));
    assert_ne!(
        model(&app, Correction::Forward),
        model(&one, Correction::Forward)
    );
    std::fs::remove_dir_all(dir).ok();
}
