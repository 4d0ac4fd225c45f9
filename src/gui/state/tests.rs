//! The app state driven without a window: the stamp check, re-runs after edits, undo,
//! each save on its own, and a session's round trip. The table is a small seeded
//! three-class simulation written for each test (features shifted by class, a few labels
//! flipped), enough for every job to run in well under a second.

use std::path::PathBuf;
use std::sync::atomic::{AtomicU64, Ordering};

use super::*;
use crate::io::session::MatrixOrigin;

/// A fresh folder under the system's temporary folder.
fn temp_dir() -> PathBuf {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let dir = std::env::temp_dir().join(format!("flipmend-state-{}-{n}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// A deterministic stream in [−0.5, 0.5) (a fixed congruential sequence): the tables'
/// feature noise.
pub(super) fn jitter(seed: u64) -> impl FnMut() -> f64 {
    let mut state = seed;
    move || {
        state = state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1);
        (state >> 33) as f64 / (1u64 << 31) as f64 - 0.5
    }
}

/// 300 rows, three classes, two features shifted by class; every 10th label moved to the
/// next class. Deterministic (a fixed congruential sequence, no randomness).
fn small_table(dir: &std::path::Path) -> PathBuf {
    let mut text = String::from("id,x1,x2,label\n");
    let mut next = jitter(12_345);
    for r in 0..300 {
        let class = r % 3;
        let observed = if r % 10 == 0 { (class + 1) % 3 } else { class };
        let x1 = class as f64 * 2.0 + next();
        let x2 = (class as f64 - 1.0).abs() * 2.0 + next();
        text.push_str(&format!("r{r},{x1:.4},{x2:.4},c{observed}\n"));
    }
    let path = dir.join("table.csv");
    std::fs::write(&path, text).unwrap();
    path
}

fn new_state() -> AppState {
    AppState::new(Arc::new(|| {}))
}

/// A state with the small table loaded and every job it starts finished.
fn loaded(dir: &std::path::Path) -> AppState {
    let mut s = new_state();
    s.apply(Command::LoadData(small_table(dir), Roles::default()));
    s.settle(60.0);
    assert!(s.last_error().is_none(), "{:?}", s.last_error());
    s
}

#[test]
fn a_result_from_replaced_data_is_dropped_and_a_save_is_not() {
    let mut s = new_state();
    s.data_generation = 2;
    let interval = || Interval {
        low: Array2::zeros((2, 2)),
        high: Array2::ones((2, 2)),
    };
    s.accept(Stamped {
        generation: 1,
        output: JobOutput::Intervals(interval(), 0),
    });
    assert!(s.intervals().is_none(), "stale: dropped");
    s.accept(Stamped {
        generation: 2,
        output: JobOutput::Intervals(interval(), 0),
    });
    assert!(s.intervals().is_some(), "current: kept");
    s.intervals = None;
    s.accept(Stamped {
        generation: 2,
        output: JobOutput::Intervals(interval(), 7),
    });
    assert!(s.intervals().is_none(), "another estimate's: dropped");
    s.accept(Stamped {
        generation: 1,
        output: JobOutput::Saved("wrote x".into()),
    });
    assert_eq!(
        s.messages().last().unwrap().text,
        "wrote x",
        "saves read no data"
    );
}

#[test]
fn an_edit_reranks_and_undo_restores_the_matrix_and_the_ranking() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    let before = s.editor().unwrap().matrix().clone();
    assert_eq!(
        s.ranking().unwrap().matrix_version,
        s.editor().unwrap().version()
    );
    s.apply(Command::SetCell {
        row: 0,
        col: 1,
        value: 0.3,
    });
    s.apply(Command::EndGesture);
    s.settle(60.0);
    let e = s.editor().unwrap();
    assert!((e.matrix()[[0, 1]] - 0.3).abs() < 1e-12);
    assert_eq!(s.ranking().unwrap().matrix_version, e.version());
    assert_eq!(s.diagnostics().unwrap().1, e.version(), "diagnosed for it");
    s.apply(Command::Undo);
    s.settle(60.0);
    assert_eq!(s.editor().unwrap().matrix(), &before);
    assert_eq!(
        s.ranking().unwrap().matrix_version,
        s.editor().unwrap().version()
    );
}

#[test]
fn edits_while_a_ranking_runs_rerun_it_once_for_the_last_matrix() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    // Several edits in a row, without waiting: the rankings they start cannot all run
    // at once; the last matrix must be the one ranked in the end.
    for value in [0.10, 0.20, 0.25, 0.30] {
        s.apply(Command::SetCell {
            row: 1,
            col: 2,
            value,
        });
    }
    s.apply(Command::EndGesture);
    s.settle(60.0);
    let version = s.editor().unwrap().version();
    assert_eq!(s.ranking().unwrap().matrix_version, version);
    assert!(s.ranking().unwrap().is_complete());
    assert_eq!(s.diagnostics().unwrap().1, version);
}

#[test]
fn every_save_is_its_own_job_and_a_failed_one_is_reported() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    let missing = dir.join("no-such-folder").join("m.csv");
    let fine = dir.join("m.csv");
    // Two saves started in the same frame: the first must not be cancelled by the
    // second, and its error must reach the messages.
    s.apply(Command::ExportMatrix(missing));
    s.apply(Command::ExportMatrix(fine.clone()));
    s.settle(60.0);
    assert!(fine.exists());
    assert!(s.last_error().is_some(), "the failed save is reported");
    let wrote = s
        .messages()
        .iter()
        .filter(|m| m.text.starts_with("wrote"))
        .count();
    assert_eq!(wrote, 1);
}

#[test]
fn a_saved_session_restores_the_edited_matrix_and_not_the_theme() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    s.apply(Command::SetCell {
        row: 2,
        col: 0,
        value: 0.2,
    });
    s.apply(Command::EndGesture);
    s.settle(60.0);
    let edited = s.editor().unwrap().matrix().clone();
    let path = dir.join("s.flipmend.json");
    s.apply(Command::SaveSession(Some(path.clone())));
    assert_eq!(s.session_path(), Some(path.as_path()));
    let text = std::fs::read_to_string(&path).unwrap();
    assert!(!text.contains("\"dark\""), "the theme is not in sessions");

    let mut t = new_state();
    t.apply(Command::OpenSession(path));
    t.settle(60.0);
    assert!(t.last_error().is_none(), "{:?}", t.last_error());
    let restored = t.editor().unwrap().matrix();
    assert!((restored - &edited).iter().all(|d| d.abs() < 1e-12));
    assert_eq!(t.editor().unwrap().origin(), MatrixOrigin::Edited);
}

#[test]
fn a_probability_file_named_before_the_table_is_read_with_it() {
    let dir = temp_dir();
    let mut s = new_state();
    let missing = dir.join("absent.csv");
    s.apply(Command::UseProbabilitiesFile(missing.clone()));
    s.apply(Command::LoadData(small_table(&dir), Roles::default()));
    s.settle(60.0);
    assert_eq!(s.session().probs.as_deref(), Some(missing.as_path()));
    let error = s.last_error().expect("the absent file is reported");
    assert!(error.contains("absent.csv"), "{error}");
}

#[test]
fn verdicts_outside_a_round_are_summarised_without_the_missing_key_note() {
    let dir = temp_dir();
    let mut s = loaded(&dir);
    // Row 0 is labelled c1 (every 10th label moved): a verdict of c0 changes it.
    s.apply(Command::Verdict { row: 0, label: 0 });
    s.apply(Command::Verdict { row: 1, label: 1 });
    let summary = s.verdict_summary().expect("two verdicts");
    assert_eq!((summary.reviewed, summary.changed), (2, 1));
    assert!(summary.notes.is_empty(), "{:?}", summary.notes);
    std::fs::remove_dir_all(dir).ok();
}
