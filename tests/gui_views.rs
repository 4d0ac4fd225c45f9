//! The Flip matrix heatmap and the Compare view driven headless with egui_kittest: real
//! clicks on labelled widgets, then assertions on the app state (the harness helpers are
//! copied from `tests/gui.rs`).
#![cfg(feature = "gui")]

mod common;

use egui_kittest::kittest::Queryable;
use egui_kittest::Harness;
use flipmend::gui::app::{FlipmendApp, View};
use flipmend::gui::command::Command;
use flipmend::gui::source_edit::MatrixTarget;
use flipmend::io::session::Roles;

use common::app::{app, app_on_demo_as as app_on_demo, settle, state};
use common::TempDir;

fn filters(h: &Harness<'_, FlipmendApp>) -> (Option<String>, Option<String>) {
    let s = state(h).settings();
    (s.observed_filter.clone(), s.suggested_filter.clone())
}

#[test]
fn a_flips_open_button_opens_its_suspects_and_a_click_on_the_value_does_not() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""), Roles::default());
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    // A click on the value itself starts editing it: still the Flip matrix, no filters.
    h.get_by_label("T pet_bottle → hdpe_jug").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Matrix);
    assert_eq!(filters(&h), (None, None));
    // The open button of the flip from true pet_bottle to label hdpe_jug: rows labelled
    // hdpe_jug (the column) whose suggested class is pet_bottle (the row).
    h.get_by_label("open suspects pet_bottle → hdpe_jug")
        .click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Suspects);
    assert_eq!(
        filters(&h),
        (Some("hdpe_jug".into()), Some("pet_bottle".into()))
    );
    let m = state(&h).editor().unwrap().matrix().clone();
    assert_eq!(
        state(&h).editor().unwrap().version(),
        state(&h).ranking().unwrap().matrix_version,
        "opening the suspects changed no cell"
    );
    // The other direction of the same pair gives the other filters.
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label("open suspects hdpe_jug → pet_bottle")
        .click();
    h.run_steps(2);
    assert_eq!(
        filters(&h),
        (Some("pet_bottle".into()), Some("hdpe_jug".into()))
    );
    assert_eq!(state(&h).editor().unwrap().matrix(), &m);
}

#[test]
fn a_stations_flip_opens_the_suspects_of_that_station() {
    let dir = TempDir::new();
    let roles = Roles {
        source: Some("station".into()),
        ..Roles::default()
    };
    let mut h = app_on_demo(&dir.path(""), roles);
    let sources = state(&h).current_sources().expect("stations").clone();
    let s4 = sources
        .sources
        .iter()
        .position(|s| s.name == "S4")
        .expect("the demo's station S4");
    h.state_mut()
        .push(Command::SelectMatrix(MatrixTarget::Source(s4)));
    h.get_by_label("Flip matrix").click();
    h.run_steps(2);
    h.get_by_label("open suspects cardboard → paper").click();
    h.run_steps(2);
    settle(&mut h);
    assert_eq!(h.state().ui.view(), View::Suspects);
    assert_eq!(
        filters(&h),
        (Some("paper".into()), Some("cardboard".into()))
    );
    assert_eq!(state(&h).source_filter(), Some(s4 as u32));
}

#[test]
fn the_compare_view_lists_the_changed_rows_and_a_click_opens_one() {
    let dir = TempDir::new();
    let mut h = app_on_demo(&dir.path(""), Roles::default());
    h.get_by_label("Compare").click();
    h.run_steps(2);
    h.get_by_label("Train and compare").click();
    h.run_steps(2);
    settle(&mut h);
    let c = state(&h).retrained().expect("trained").comparison.clone();
    // The first correction (forward) is set against none until another is picked.
    let changed: Vec<usize> = (0..c.holdout.len())
        .filter(|&i| c.predictions[0][i] != c.predictions[1][i])
        .map(|i| c.holdout[i])
        .collect();
    assert!(!changed.is_empty(), "forward changed some predictions");
    let shown = format!(
        "holdout rows whose prediction changed from none to forward: {} (click a row to \
         inspect it)",
        changed.len()
    );
    h.get_by_label(&shown).scroll_to_me();
    h.run_steps(3);
    let row = changed[0];
    assert_eq!(h.state().ui.selected_row(), None);
    h.get_by_label(&format!("row {row}")).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.selected_row(), Some(row));
    assert_eq!(h.state().ui.view(), View::Suspects);
}

#[test]
fn a_parquet_table_opens_like_its_csv() {
    // The demo written as Parquet by flipmend's own writer (the CSV's columns, typed).
    use flipmend::data::{Dataset, TableOptions};
    use flipmend::io::columnar::Format;
    use flipmend::io::table_out::{CellKind, OutColumn, TableWriter};
    let dir = TempDir::new();
    let csv = flipmend::gui::demo_file(&dir.path("")).unwrap();
    let data = Dataset::load(&csv, &TableOptions::default()).unwrap();
    let mut columns = vec![OutColumn::new("id", CellKind::Text)];
    let features = data.feature_names.iter();
    columns.extend(features.map(|f| OutColumn::new(f, CellKind::Float)));
    columns.push(OutColumn::new("label", CellKind::Text));
    columns.push(OutColumn::new("trusted", CellKind::Text));
    let mut bytes = Vec::new();
    let mut writer = TableWriter::new(&mut bytes, Format::Parquet, &columns).unwrap();
    for row in 0..data.rows() {
        let mut cells = vec![data.id(row).into_owned()];
        cells.extend(data.features.row(row).iter().map(|v| v.to_string()));
        cells.push(data.classes[data.labels[row]].clone());
        let trusted = data.trusted.as_ref().and_then(|t| t[row]);
        cells.push(trusted.map_or(String::new(), |c| data.classes[c].clone()));
        writer.row(&cells).unwrap();
    }
    writer.finish().unwrap();
    let parquet = dir.path("recycling.parquet");
    std::fs::write(&parquet, bytes).unwrap();

    let mut h = app();
    h.state_mut()
        .push(Command::LoadData(parquet, Roles::default()));
    h.run_steps(1);
    settle(&mut h);
    let loaded = state(&h).data().expect("the Parquet table loads");
    assert_eq!(loaded.rows(), data.rows());
    assert_eq!(loaded.classes, data.classes);
    assert_eq!(loaded.features, data.features);
    assert!(
        state(&h).estimate().is_some(),
        "and is estimated like the CSV"
    );
}
