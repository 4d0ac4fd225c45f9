//! Reviewing inside the desktop app (egui_kittest, the egui project's test harness):
//! selecting a suspect, verdicts by key, review rounds with control rows, verdicts that
//! reach the estimate exactly as a merged table read by the command line's route does,
//! sessions that keep them, and the table's order and search.
#![cfg(feature = "gui")]

mod common;

use eframe::egui::Key;
use egui_kittest::kittest::Queryable;
use egui_kittest::Harness;
use flipmend::data::origin::Origin;
use flipmend::data::{Dataset, TableOptions};
use flipmend::gui::app::{FlipmendApp, Persisted, View};
use flipmend::gui::command::Command;
use flipmend::gui::dialogs::Purpose;
use flipmend::gui::state::{SuspectColumn, SuspectSort};
use flipmend::io::review::{write_merged, Review};
use flipmend::io::write_atomic;
use flipmend::workflow::review::read_reviewed;

use common::app::{app_on_demo, set_path, settle, state};
use common::TempDir;

/// The data rows of the table, top to bottom.
fn table_rows(h: &Harness<'_, FlipmendApp>) -> Vec<usize> {
    let s = state(h);
    let ranking = s.ranking().unwrap();
    s.table_rows()
        .iter()
        .map(|&p| ranking.ranked[p as usize].row)
        .collect()
}

fn to_suspects(h: &mut Harness<'_, FlipmendApp>) {
    h.get_by_label("Suspects").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Suspects);
}

#[test]
fn a_clicked_suspect_is_judged_by_keys_and_the_estimate_follows() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    to_suspects(&mut h);
    let rows = table_rows(&h);
    let data = state(&h).data().unwrap().clone();
    // Click the top row by its id.
    h.get_by_label(&data.id(rows[0])).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.selected_row(), Some(rows[0]));
    h.get_by_label("Keep (K)");
    // A class chosen to compare the row with belongs to that row.
    h.state_mut().ui.compare_with(data.classes.len() - 1);
    let matrix_before = state(&h).editor().unwrap().matrix().clone();
    // K keeps the label, and the inspector moves on; 2 relabels the next row as class 2
    // (or, when that is its own label, nothing happens and the row stays).
    h.key_press(Key::K);
    h.run_steps(2);
    assert_eq!(h.state().ui.selected_row(), Some(rows[1]));
    assert_eq!(
        h.state().ui.compare_class(),
        None,
        "the next row: its suggested class"
    );
    let second_label = if data.labels[rows[1]] == 1 { 0 } else { 1 };
    h.key_press(if second_label == 1 {
        Key::Num2
    } else {
        Key::Num1
    });
    h.run_steps(2);
    settle(&mut h);
    let s = state(&h);
    let v = s.verdicts();
    assert_eq!(v.len(), 2);
    assert_eq!(v.get(rows[0]).unwrap().label, data.labels[rows[0]]);
    assert_eq!(v.get(rows[1]).unwrap().label, second_label);
    assert!(v.verdicts().iter().all(|v| v.origin == Origin::Review));
    assert_ne!(
        s.editor().unwrap().matrix(),
        &matrix_before,
        "the matrix was estimated again with the verdicts"
    );
    let summary = s.verdict_summary().unwrap();
    assert_eq!((summary.confirmed, summary.changed), (1, 1));
    // U takes the last verdict back.
    h.key_press(Key::U);
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(state(&h).verdicts().len(), 1);
}

#[test]
fn verdicts_reach_the_estimate_exactly_as_the_merged_table_does() {
    // The reference is the command line's route: `review` writes the merged copy, and
    // `estimate` reads it.
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    let data = state(&h).data().unwrap().clone();
    let rows = table_rows(&h);
    for (n, &row) in rows.iter().take(40).enumerate() {
        let label = (data.labels[row] + n % 3) % data.classes.len();
        h.state_mut().push(Command::Verdict { row, label });
    }
    h.run_steps(1);
    settle(&mut h);
    let s = state(&h);
    let review = Review {
        verdicts: s.verdicts().verdicts().to_vec(),
        not_reviewed: 0,
    };
    let merged = dir.path("merged.csv");
    write_atomic(&merged, |w| write_merged(w, data.as_ref(), b',', &review)).unwrap();
    let back = Dataset::load(&merged, &TableOptions::default()).unwrap();
    let probs = s.probs().unwrap();
    // The estimator as the app runs it (its volume weight chosen from the audits).
    let method = s.method();
    let expected = flipmend::workflow::estimate_on_all_rows(&back, probs, &method).unwrap();
    let got = s.editor().unwrap().matrix();
    let largest = (got - &expected.matrix)
        .iter()
        .fold(0.0f64, |m, d| m.max(d.abs()));
    assert!(largest < 1e-9, "largest difference {largest}");
}

#[test]
fn a_round_hides_the_scores_and_its_control_rows_measure_what_the_list_missed() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    to_suspects(&mut h);
    let mut settings = state(&h).settings().clone();
    settings.budget = 40;
    h.state_mut().push(Command::Settings(settings));
    h.run_steps(1);
    h.get_by_label("Start review round").click();
    h.run_steps(2);
    let round = state(&h).round().expect("a round").clone();
    assert_eq!(round.rows.len(), 40);
    let control = round
        .rows
        .iter()
        .filter(|r| r.slice == flipmend::io::worklist::Slice::Control)
        .count();
    assert_eq!(control, 2, "5 % of 40");
    // The first row of the round opens without flipmend's opinion.
    h.get_by_label("Next row to judge").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.selected_row(), Some(round.rows[0].row));
    assert!(h.query_by_label_contains("suggested:").is_none());
    // Judge every row: keep all but every third, which becomes class 0 (or 1).
    let data = state(&h).data().unwrap().clone();
    for (n, r) in round.rows.iter().enumerate() {
        let observed = data.labels[r.row];
        let label = match n % 3 {
            0 => usize::from(observed == 0),
            _ => observed,
        };
        h.state_mut().push(Command::Verdict { row: r.row, label });
    }
    h.run_steps(1);
    settle(&mut h);
    let s = state(&h);
    for r in &round.rows {
        let origin = s.verdicts().get(r.row).unwrap().origin;
        assert_eq!(origin, r.slice.origin(), "row {}", r.row);
    }
    let in_app = s.verdict_summary().unwrap().clone();
    // The yield plot states what the budget should find: the sum of p_wrong over the
    // table's first 38 rows (the round's listed share).
    let ranking = s.ranking().unwrap();
    let expected: f64 = s.visible()[..38]
        .iter()
        .map(|&p| {
            ranking
                .kind
                .probability(ranking.ranked[p as usize].score)
                .unwrap()
        })
        .sum();
    h.get_by_label(&format!(
        "expected wrong labels found by reviewing the first 38 rows of the table (the \
         suspects a worklist lists): about {expected:.0}"
    ));
    // Written as a reviewed worklist, `review`'s reader measures the same.
    let out = dir.path("round.csv");
    set_path(&mut h, Purpose::ExportVerdicts, &out);
    h.get_by_label("Write verdicts").click();
    h.run_steps(2);
    settle(&mut h);
    let read = read_reviewed(data.as_ref(), &out, None).unwrap();
    // The key writes p_wrong to six decimals.
    for (file, app) in [
        (read.summary.listed, in_app.listed),
        (read.summary.control, in_app.control),
    ] {
        let (file, app) = (file.unwrap(), app.unwrap());
        assert_eq!(file.wrong, app.wrong);
        assert!((file.expected.unwrap() - app.expected.unwrap()).abs() < 1e-6);
    }
    assert_eq!(read.summary.missed_errors, in_app.missed_errors);
    // The findings wait for the end of the round (counts that move with each verdict
    // would tell the control rows apart); ended, the round still keys its verdicts.
    assert!(h.query_by_label_contains("listed suspects:").is_none());
    h.get_by_label("End round").click();
    h.run_steps(2);
    assert!(state(&h).round().is_none());
    h.get_by_label_contains("listed suspects:");
    h.get_by_label_contains("wrong labels left among the");
    assert_eq!(in_app.control.unwrap().wrong.of, 2);
}

#[test]
fn a_session_keeps_the_verdicts_and_the_round() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.state_mut().push(Command::StartRound);
    h.run_steps(1);
    let rows: Vec<usize> = state(&h)
        .round()
        .unwrap()
        .rows
        .iter()
        .map(|r| r.row)
        .collect();
    for &row in &rows[..5] {
        h.state_mut().push(Command::Verdict { row, label: 0 });
    }
    h.run_steps(1);
    settle(&mut h);
    let path = dir.path("s.json");
    h.state_mut().push(Command::SaveSession(Some(path.clone())));
    h.run_steps(1);
    let saved: Vec<_> = state(&h).verdicts().verdicts().to_vec();
    let matrix = state(&h).editor().unwrap().matrix().clone();

    let mut fresh = Harness::builder()
        .with_size([1400.0, 900.0])
        .build_eframe(|cc| FlipmendApp::new(&cc.egui_ctx, Persisted::default()));
    fresh.state_mut().push(Command::OpenSession(path));
    fresh.run_steps(1);
    settle(&mut fresh);
    let s = state(&fresh);
    assert_eq!(s.verdicts().verdicts(), saved.as_slice());
    assert_eq!(s.round().unwrap().rows.len(), rows.len());
    assert_eq!(s.editor().unwrap().matrix(), &matrix);
}

#[test]
fn the_table_sorts_by_a_column_and_finds_an_id() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    to_suspects(&mut h);
    h.get_by_label("id").click();
    h.run_steps(2);
    assert_eq!(
        state(&h).sort(),
        Some(SuspectSort {
            column: SuspectColumn::Id,
            descending: false
        })
    );
    let data = state(&h).data().unwrap().clone();
    let ids: Vec<String> = table_rows(&h)
        .iter()
        .map(|&r| data.id(r).into_owned())
        .collect();
    assert!(ids.windows(2).all(|w| w[0] <= w[1]), "ascending ids");
    // Twice more: descending, then back to rank order.
    h.get_by_label("id (asc)").click();
    h.run_steps(2);
    h.get_by_label("id (desc)").click();
    h.run_steps(2);
    assert_eq!(state(&h).sort(), None);
    // Search: the id of the row ranked 100th.
    let wanted = table_rows(&h)[99];
    h.state_mut().ui.id_search = data.id(wanted).into_owned();
    h.run_steps(1);
    h.get_by_label("Find").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.selected_row(), Some(wanted));
    assert!(h
        .query_by_label_contains(&format!("Row {wanted} ·"))
        .is_some());
}

#[test]
fn a_matrix_changed_by_hand_is_not_replaced_by_verdicts() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.state_mut().push(Command::SetCell {
        row: 0,
        col: 1,
        value: 0.2,
    });
    h.state_mut().push(Command::EndGesture);
    h.run_steps(1);
    settle(&mut h);
    let edited = state(&h).editor().unwrap().matrix().clone();
    h.state_mut().push(Command::Verdict { row: 3, label: 2 });
    h.run_steps(1);
    settle(&mut h);
    assert!(!state(&h).follows_estimate());
    assert_eq!(state(&h).editor().unwrap().matrix(), &edited);
}
