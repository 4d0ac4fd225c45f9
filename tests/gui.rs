//! The desktop app driven headless with egui_kittest (the egui project's test harness):
//! real clicks on labelled widgets, then assertions on the app state and on files.
#![cfg(feature = "gui")]

mod common;

use std::path::PathBuf;

use eframe::egui::{Key, Modifiers};
use egui_kittest::kittest::Queryable;
use egui_kittest::Harness;
use flipmend::gui::app::{FlipmendApp, Persisted, View};
use flipmend::gui::command::Command;
use flipmend::gui::dialogs::Purpose;
use flipmend::gui::jobs::{JobFailure, JobKind};
use flipmend::gui::source_edit::MatrixTarget;
use flipmend::gui::state::{AppState, JobOutput};
use flipmend::io::session::{MatrixOrigin, Roles};
use flipmend::workflow::ranking::Matrices;

use common::app::{app_on_demo, app_on_demo_with_stations, set_path, settle, state};
use common::TempDir;

fn order(s: &AppState) -> Vec<usize> {
    s.ranking()
        .as_ref()
        .unwrap()
        .ranked
        .iter()
        .map(|r| r.row)
        .collect()
}

#[test]
fn demo_opens_and_every_view_draws() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    let s = state(&h);
    let data = s.data().expect("the demo loaded");
    assert_eq!(data.rows(), 8000);
    assert_eq!(data.classes.len(), 8);
    assert!(s.probs().is_some() && s.editor().is_some() && s.ranking().is_some());
    for (title, view) in [
        ("Flip matrix", View::Matrix),
        ("Sources", View::Sources),
        ("Suspects", View::Suspects),
        ("Compare", View::Retrain),
        ("Data", View::Data),
    ] {
        h.get_by_label(title).click();
        h.run_steps(2);
        assert_eq!(h.state().ui.view(), view, "{title}");
    }
    // The class table shows the demo's classes.
    h.get_by_label("pet_bottle");
}

#[test]
fn editing_a_cell_renormalises_its_row_reranks_and_undoes() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    let before = state(&h).editor().unwrap().matrix().clone();
    let ranking_before = order(state(&h));
    let classes = state(&h).data().unwrap().classes.clone();
    let i = classes.iter().position(|c| c == "pet_bottle").unwrap();
    let j = classes.iter().position(|c| c == "hdpe_jug").unwrap();
    h.get_by_label("T pet_bottle → hdpe_jug")
        .set_value_accesskit(0.3);
    h.run_steps(2);
    settle(&mut h);
    let e = state(&h).editor().unwrap();
    let after = e.matrix().clone();
    assert!((after[[i, j]] - 0.3).abs() < 1e-9);
    assert!(
        (after.row(i).sum() - 1.0).abs() < 1e-9,
        "the row still sums to 1"
    );
    // The other cells of the row keep their proportions (checked on two of them).
    let (a, b) = (i, (0..8).find(|&c| c != i && c != j).unwrap());
    let ratio_before = before[[i, a]] / before[[i, b]];
    let ratio_after = after[[i, a]] / after[[i, b]];
    assert!((ratio_before - ratio_after).abs() < 1e-9 * ratio_before.abs().max(1.0));
    assert_eq!(e.origin(), MatrixOrigin::Edited);
    let ranking = state(&h).ranking().unwrap();
    assert_eq!(
        ranking.matrix_version,
        e.version(),
        "re-ranked for the edit"
    );
    assert_ne!(
        order(state(&h)),
        ranking_before,
        "the suspect order changed"
    );
    h.get_by_label("Undo").click();
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(state(&h).editor().unwrap().matrix(), &before);
    assert_eq!(order(state(&h)), ranking_before);
    // The keyboard shortcuts: Ctrl+Shift+Z redoes the edit, Ctrl+Z undoes it again.
    h.key_press_modifiers(Modifiers::COMMAND | Modifiers::SHIFT, Key::Z);
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(state(&h).editor().unwrap().matrix(), &after);
    h.key_press_modifiers(Modifiers::COMMAND, Key::Z);
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(state(&h).editor().unwrap().matrix(), &before);
}

#[test]
fn a_worklist_goes_out_and_its_review_comes_back() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.get_by_label("Suspects").click();
    h.run_steps(2);
    let mut settings = state(&h).settings().clone();
    settings.budget = 25;
    h.state_mut().push(Command::Settings(settings));
    let out = dir.path("worklist.csv");
    set_path(&mut h, Purpose::ExportWorklist, &out);
    h.get_by_label("Export").click();
    h.run_steps(2);
    settle(&mut h);
    let text = std::fs::read_to_string(&out).expect("the worklist was written");
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 26, "header + budget rows");
    // Blind: 23 suspects and 2 control rows (5 % of 25, rounded up), nothing telling them
    // apart; the key beside it says which is which.
    assert_eq!(lines[0], "item,row,id,observed,review");
    let key = std::fs::read_to_string(dir.path("worklist.key.csv")).expect("the key was written");
    assert_eq!(key.lines().filter(|l| l.contains(",control,")).count(), 2);
    assert_eq!(key.lines().filter(|l| l.contains(",listed,")).count(), 23);
    // A reviewer changes the label of the first 10 rows and keeps it on 5.
    let classes = state(&h).data().unwrap().classes.clone();
    let reviewed = dir.path("reviewed.csv");
    std::fs::copy(dir.path("worklist.key.csv"), dir.path("reviewed.key.csv")).unwrap();
    let mut body = vec![lines[0].to_string()];
    for (n, line) in lines[1..].iter().enumerate() {
        let mut cells: Vec<String> = line.split(',').map(String::from).collect();
        let other = classes.iter().find(|c| **c != cells[3]).unwrap().clone();
        cells[4] = match n {
            0..=9 => other,
            10..=14 => "keep".into(),
            _ => String::new(),
        };
        body.push(cells.join(","));
    }
    std::fs::write(&reviewed, body.join("\n") + "\n").unwrap();
    set_path(&mut h, Purpose::ImportReview, &reviewed);
    h.get_by_label("Import").click();
    h.run_steps(2);
    settle(&mut h);
    let r = state(&h).review().expect("the review was read");
    assert_eq!(r.summary.confirmed + r.summary.changed, 15);
    assert_eq!(r.summary.changed, 10);
    assert_eq!(r.review.not_reviewed, 10);
    let reviewed_rows =
        |s: &Option<flipmend::workflow::review::SliceResult>| s.map_or(0, |s| s.wrong.of);
    assert_eq!(
        reviewed_rows(&r.summary.listed) + reviewed_rows(&r.summary.control),
        15,
        "the key sorted every verdict into its slice"
    );
}

#[test]
fn a_control_share_of_zero_exports_the_ranked_worklist() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.get_by_label("Suspects").click();
    h.run_steps(2);
    let mut settings = state(&h).settings().clone();
    settings.budget = 10;
    settings.control = 0.0;
    h.state_mut().push(Command::Settings(settings));
    let out = dir.path("ranked.csv");
    set_path(&mut h, Purpose::ExportWorklist, &out);
    h.get_by_label("Export").click();
    h.run_steps(2);
    settle(&mut h);
    let text = std::fs::read_to_string(&out).expect("the worklist was written");
    assert_eq!(
        text.lines().count(),
        11,
        "header + budget rows, no control rows"
    );
    assert!(text.starts_with("rank,row,id,observed,suggested,score,p_wrong"));
    assert!(
        !dir.path("ranked.key.csv").exists(),
        "no key without control rows"
    );
}

#[test]
fn a_broken_table_shows_its_error_and_keeps_the_previous_data() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    let broken = dir.path("broken.csv");
    std::fs::write(&broken, "a,b,label\n1,2,x\n3,4\n5,6,y\n").unwrap();
    set_path(&mut h, Purpose::OpenData, &broken);
    // A load shows the Overview; the table's path and roles are in the Data view.
    h.get_by_label("Data").click();
    h.run_steps(1);
    h.get_by_label("Load table").click();
    h.run_steps(2);
    settle(&mut h);
    let error = state(&h)
        .last_error()
        .expect("an error is shown")
        .to_string();
    assert!(
        error.contains("broken.csv") && error.contains("line 3"),
        "{error}"
    );
    h.get_by_label_contains("line 3");
    assert_eq!(
        state(&h).data().unwrap().rows(),
        8000,
        "the demo stays loaded"
    );
}

#[test]
fn a_panicking_worker_is_reported_and_the_app_goes_on() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.state_mut()
        .state
        .spawn_job(JobKind::Test, |_| -> Result<JobOutput, JobFailure> {
            panic!("simulated fault in a worker")
        });
    settle(&mut h);
    let error = state(&h).last_error().unwrap().to_string();
    assert!(
        error.contains("internal error") && error.contains("simulated fault"),
        "{error}"
    );
    // The app still works: an edit is applied and re-ranked.
    h.state_mut().push(Command::SetCell {
        row: 0,
        col: 1,
        value: 0.2,
    });
    h.run_steps(1);
    settle(&mut h);
    let e = state(&h).editor().unwrap();
    assert!((e.matrix()[[0, 1]] - 0.2).abs() < 1e-12);
    assert_eq!(state(&h).ranking().unwrap().matrix_version, e.version());
}

#[test]
fn a_failed_save_loses_nothing_and_a_session_restores_the_edits() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.state_mut().push(Command::SetCell {
        row: 2,
        col: 4,
        value: 0.25,
    });
    h.run_steps(1);
    settle(&mut h);
    let edited = state(&h).editor().unwrap().matrix().clone();
    let nowhere = dir.path("no-such-folder/s.json");
    h.state_mut()
        .push(Command::SaveSession(Some(nowhere.clone())));
    h.run_steps(1);
    let error = state(&h).last_error().unwrap().to_string();
    assert!(error.contains("not saved"), "{error}");
    assert!(!nowhere.exists());
    assert_eq!(
        state(&h).editor().unwrap().matrix(),
        &edited,
        "nothing lost"
    );
    let file = dir.path("s.json");
    h.state_mut().push(Command::SaveSession(Some(file.clone())));
    h.run_steps(1);
    assert!(file.exists());

    let mut fresh = Harness::builder()
        .with_size([1400.0, 900.0])
        .build_eframe(|cc| FlipmendApp::new(&cc.egui_ctx, Persisted::default()));
    fresh.state_mut().push(Command::OpenSession(file));
    fresh.run_steps(1);
    settle(&mut fresh);
    let e = state(&fresh)
        .editor()
        .expect("the session's data and matrix are back");
    assert_eq!(e.matrix(), &edited);
    assert_eq!(e.origin(), MatrixOrigin::Edited);
    assert!(
        e.is_changed(2, 4),
        "the edit is still marked against the fresh estimate"
    );
}

#[test]
fn retraining_compares_the_corrections_and_saves_a_model_predict_reads() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""));
    h.get_by_label("Compare").click();
    h.run_steps(2);
    h.get_by_label("Train and compare").click();
    h.run_steps(2);
    settle(&mut h);
    let r = state(&h).retrained().expect("trained");
    let names: Vec<&str> = r
        .comparison
        .report
        .models
        .iter()
        .map(|m| m.correction)
        .collect();
    assert_eq!(names, ["none", "forward", "backward", "prune"]);
    assert_eq!(
        r.comparison.report.train_rows + r.comparison.report.holdout_rows,
        8000
    );
    let model = dir.path("forward.json");
    set_path(&mut h, Purpose::SaveModel, &model);
    h.get_by_label("Save model").scroll_to_me();
    h.run_steps(3);
    h.get_by_label("Save model").click();
    h.run_steps(2);
    settle(&mut h);
    let messages = format!("{:?}", state(&h).messages());
    let file = std::fs::File::open(&model).expect(&messages);
    let (saved, _) = flipmend::io::model::read_model(file, &model).expect("a readable model");
    assert_eq!(
        saved.correction, "forward",
        "the first correction is preselected"
    );
    assert_eq!(saved.classes.len(), 8);
}

#[test]
fn many_classes_get_a_scrolling_grid_and_the_largest_flips() {
    // 14 classes (more than the 12 a grid shows whole), 50 rows each, two features that
    // place each class on a circle: a table small enough to cross-validate in a moment.
    let dir = TempDir::new();
    let path = dir.path("fourteen.csv");
    let mut text = String::from("x,y,label\n");
    for r in 0..700 {
        let class = r % 14;
        let angle = class as f64 / 14.0 * std::f64::consts::TAU;
        let jitter = ((r * 7919) % 100) as f64 / 400.0;
        text.push_str(&format!(
            "{:.4},{:.4},k{class}\n",
            angle.cos() + jitter,
            angle.sin() - jitter
        ));
    }
    std::fs::write(&path, text).unwrap();
    let mut h = Harness::builder()
        .with_size([1400.0, 900.0])
        .build_eframe(|cc| FlipmendApp::new(&cc.egui_ctx, Persisted::default()));
    h.state_mut()
        .push(Command::LoadData(path, Roles::default()));
    h.run_steps(1);
    settle(&mut h);
    assert_eq!(state(&h).editor().expect("estimated").classes(), 14);
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label("Largest flips");
}

#[test]
fn a_source_column_gives_each_station_its_matrix_in_the_flip_matrix_view() {
    // The invented demo's stations differ by design (demo-data/README.md): S4's operator
    // confuses every pair twice as often as the base rates, S1's half as often.
    let dir = TempDir::new();
    let mut h = app_on_demo_with_stations(&dir.path(""));
    let by_source = state(&h)
        .estimate()
        .and_then(|e| e.by_source.clone())
        .expect("one matrix per station");
    let rate = |name: &str| {
        by_source
            .sources
            .iter()
            .find(|s| s.name == name)
            .unwrap()
            .noise_rate
    };
    assert!(rate("S4") > rate("S2") && rate("S2") > rate("S1"));
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label("Label sources");
    h.get_by_label("S4");
}

/// The index of the station called `name`.
fn station(s: &AppState, name: &str) -> usize {
    let sources = s.data().unwrap().sources.as_ref().unwrap();
    sources.names.iter().position(|n| n == name).unwrap()
}

/// Asserts that every `step`-th ranked row's verdict is what `noise::scores` gives for
/// that row alone under its own station's current matrix (on the estimate's clean
/// posteriors): the command line's per-source scoring.
fn assert_each_row_under_its_station(s: &AppState, step: usize) {
    use flipmend::noise::posterior::Flip;
    use flipmend::noise::scores::{score_selected, ScoreKind};
    let editors = s.source_editors().unwrap();
    let clean = s.estimate().unwrap().clean.clone().unwrap();
    let data = s.data().unwrap();
    let of_row = &data.sources.as_ref().unwrap().of_row;
    let ranking = s.ranking().unwrap();
    assert!(ranking.is_complete());
    for verdict in ranking.ranked.iter().step_by(step) {
        let own = editors
            .editor(of_row[verdict.row] as usize)
            .unwrap()
            .matrix();
        let rows = [verdict.row];
        let alone = score_selected(
            ScoreKind::Posterior,
            clean.view(),
            &data.labels,
            Some(Flip::clean(own)),
            &rows,
        );
        assert_eq!(alone[0], *verdict, "row {}", verdict.row);
    }
}

#[test]
fn a_stations_matrix_is_edited_and_its_rows_are_ranked_under_it() {
    let dir = TempDir::new();
    let mut h = app_on_demo_with_stations(&dir.path(""));
    assert!(state(&h).ranks_by_source());
    assert_each_row_under_its_station(state(&h), 97);
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label_contains("each row is ranked under its own source's matrix");
    h.get_by_label("S4").click();
    h.run_steps(2);
    let s4 = station(state(&h), "S4");
    assert_eq!(state(&h).shown_matrix(), MatrixTarget::Source(s4));
    let estimated = state(&h).source_editors().unwrap().estimated().clone();
    assert_eq!(
        state(&h).shown_editor().unwrap().matrix(),
        &estimated.sources[s4].matrix,
        "the grid shows S4's matrix"
    );
    let ranking_before = order(state(&h));
    h.get_by_label("T pet_bottle → hdpe_jug")
        .set_value_accesskit(0.4);
    h.run_steps(2);
    settle(&mut h);
    let s = state(&h);
    let classes = &s.data().unwrap().classes;
    let (i, j) = (
        classes.iter().position(|c| c == "pet_bottle").unwrap(),
        classes.iter().position(|c| c == "hdpe_jug").unwrap(),
    );
    let editors = s.source_editors().unwrap();
    assert!((editors.editor(s4).unwrap().matrix()[[i, j]] - 0.4).abs() < 1e-9);
    let s1 = station(s, "S1");
    assert_eq!(
        editors.editor(s1).unwrap().matrix(),
        &estimated.sources[s1].matrix
    );
    // The overall matrix is the library's mix of the stations' matrices as they now are.
    let mix = estimated.with_matrices(editors.matrices()).overall;
    assert_eq!(s.editor().unwrap().matrix(), &mix);
    assert_eq!(
        s.ranking().unwrap().matrix_version,
        s.editor().unwrap().version()
    );
    assert_ne!(order(s), ranking_before, "S4's rows moved");
    assert_each_row_under_its_station(s, 97);
    h.get_by_label("Undo").click();
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(state(&h).editor().unwrap().matrix(), &estimated.overall);
    assert_eq!(order(state(&h)), ranking_before);
}

#[test]
fn editing_the_overall_matrix_with_stations_ranks_every_row_under_it() {
    let dir = TempDir::new();
    let mut h = app_on_demo_with_stations(&dir.path(""));
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label("overall").click();
    h.run_steps(2);
    h.get_by_label("T pet_bottle → hdpe_jug")
        .set_value_accesskit(0.3);
    h.run_steps(2);
    settle(&mut h);
    let s = state(&h);
    assert!(!s.ranks_by_source());
    let overall = s.editor().unwrap().matrix().clone();
    match &s.ranking().unwrap().matrices {
        Matrices::One(m) => assert_eq!(m, &overall),
        Matrices::BySource { .. } => panic!("still ranked by station"),
    }
    h.run_steps(2);
    h.get_by_label_contains("every row is ranked under the overall matrix");
    h.get_by_label("Reset to estimate").click();
    h.run_steps(2);
    settle(&mut h);
    assert!(
        state(&h).ranks_by_source(),
        "the stations' matrices are back"
    );
    assert_each_row_under_its_station(state(&h), 97);
}

#[test]
fn a_station_in_the_sources_view_opens_its_suspects_and_its_matrix() {
    let dir = TempDir::new();
    let mut h = app_on_demo_with_stations(&dir.path(""));
    h.get_by_label("Sources").click();
    h.run_steps(2);
    h.get_by_label("rank");
    h.get_by_label("S4 heatmap");
    h.get_by_label("S2").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Suspects);
    let s2 = station(state(&h), "S2");
    assert_eq!(state(&h).source_filter(), Some(s2 as u32));
    let s = state(&h);
    let of_row = &s.data().unwrap().sources.as_ref().unwrap().of_row;
    let ranking = s.ranking().unwrap();
    let station_rows = of_row.iter().filter(|&&o| o as usize == s2).count();
    assert_eq!(
        s.visible().len(),
        station_rows,
        "every S2 row, and only those"
    );
    assert!(s
        .visible()
        .iter()
        .all(|&p| of_row[ranking.ranked[p as usize].row] as usize == s2));
    h.get_by_label_contains("showing only the rows labelled by S2");
    // A heatmap opens that station's matrix in the Flip matrix view.
    h.get_by_label("Sources").click();
    h.run_steps(2);
    h.get_by_label("S1 heatmap").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Matrix);
    let s1 = station(state(&h), "S1");
    assert_eq!(state(&h).shown_matrix(), MatrixTarget::Source(s1));
}

#[test]
fn annotators_columns_give_a_consensus_and_a_table_of_annotators() {
    // demo-data/make_demo.py's invented quality panel: four graders who make the base
    // confusions 0.4, 1, 1.5 and 2.5 times as often, two or three graders an item.
    let panel = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-data/recycling_panel.csv");
    let mut h = Harness::builder()
        .with_size([1400.0, 900.0])
        .build_eframe(|cc| FlipmendApp::new(&cc.egui_ctx, Persisted::default()));
    let graders: Vec<String> = ["grader_a", "grader_b", "grader_c", "grader_d"]
        .map(String::from)
        .to_vec();
    let roles = Roles {
        annotators: Some(graders.clone()),
        ..Roles::default()
    };
    h.state_mut().push(Command::LoadData(panel, roles));
    h.run_steps(1);
    settle(&mut h);
    let s = state(&h);
    let found = s.consensus().expect("a consensus of the graders").clone();
    assert_eq!(found.columns, graders);
    let accuracy: Vec<f64> = found
        .consensus
        .annotators
        .iter()
        .map(|a| a.accuracy)
        .collect();
    assert!(accuracy.windows(2).all(|w| w[0] > w[1]), "{accuracy:?}");
    // The consensus is the observed label the estimate and the ranking used.
    assert_eq!(s.data().unwrap().labels, found.consensus.consensus);
    assert!(s.ranking().is_some() && s.estimate().is_some());
    h.get_by_label("Data").click();
    h.run_steps(2);
    h.get_by_label("Annotators");
    h.get_by_label("grader_d");
}
