//! The Overview view driven headless with egui_kittest: shown first once data are
//! loaded, its flips are the matrix's largest off-diagonal cells, every number opens the
//! view that explains it, and the expected yield is the sum of p_wrong over the suspects
//! a worklist lists, the same figure as the Suspects view's yield plot.
//! Expected values are computed here from the app state, not taken from the view's code.
#![cfg(feature = "gui")]

mod common;

use std::path::Path;

use egui_kittest::kittest::{NodeT, Queryable};
use egui_kittest::Harness;
use flipmend::gui::app::{FlipmendApp, View};
use flipmend::gui::command::Command;
use flipmend::gui::jobs::JobKind;
use flipmend::io::session::Roles;
use flipmend::workflow::worklist::split_budget;

use common::app::{app, app_on_demo_as, settle, state};

/// The demo loaded with `roles`, every job (the Overview's bootstrap included) done.
fn app_on_demo(dir: &Path, roles: Roles) -> Harness<'static, FlipmendApp> {
    let mut h = app_on_demo_as(dir, roles);
    // The frame after the estimate starts the intervals; wait for them too.
    h.run_steps(2);
    settle(&mut h);
    h
}

/// Labels of the widgets whose label contains `part`, in drawing order (AccessKit keeps
/// a plain label's text as its value).
fn labels(h: &Harness<'_, FlipmendApp>, part: &str) -> Vec<String> {
    h.query_all_by_label_contains(part)
        .filter_map(|n| n.accesskit_node().label().or(n.accesskit_node().value()))
        .collect()
}

#[test]
fn before_data_it_says_what_to_do_and_opens_the_data_view() {
    let mut h = app();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Overview);
    h.get_by_label_contains("No data yet");
    h.get_by_label("Go to the Data view").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Data);
}

#[test]
fn after_a_load_the_overview_lists_the_largest_flips_and_they_open_their_suspects() {
    let dir = tempfile::tempdir().unwrap();
    let mut h = app();
    // Another view is open when the table arrives: the Overview replaces it.
    h.state_mut().ui.view = Some(View::Retrain);
    let demo = flipmend::gui::demo_file(dir.path()).unwrap();
    h.state_mut()
        .push(Command::LoadData(demo, Roles::default()));
    h.run_steps(1);
    settle(&mut h);
    assert_eq!(h.state().ui.view(), View::Overview, "shown after the load");
    // The intervals were started once for this estimate, then arrive.
    h.run_steps(2);
    let started = state(&h).jobs().running(JobKind::Bootstrap).is_some();
    assert!(
        started || state(&h).intervals().is_some(),
        "the bootstrap starts"
    );
    h.get_by_label("computing intervals…");
    // Cancelled, it is not started again for the same estimate; the button starts it.
    h.state_mut().push(Command::Cancel(JobKind::Bootstrap));
    h.run_steps(3);
    assert!(state(&h).jobs().running(JobKind::Bootstrap).is_none());
    assert!(state(&h).intervals().is_none());
    h.get_by_label("intervals after the bootstrap");
    h.get_by_label("Compute intervals").click();
    h.run_steps(1);
    assert!(state(&h).jobs().running(JobKind::Bootstrap).is_some());
    settle(&mut h);
    assert!(state(&h).intervals().is_some());
    h.run_steps(3);
    assert!(
        state(&h).jobs().running(JobKind::Bootstrap).is_none(),
        "not started twice"
    );

    // The five largest off-diagonal cells of the current matrix, largest first.
    let s = state(&h);
    let classes = s.data().unwrap().classes.clone();
    let t = s.editor().unwrap().matrix().clone();
    let k = classes.len();
    let mut cells: Vec<(usize, usize)> = (0..k)
        .flat_map(|i| (0..k).map(move |j| (i, j)))
        .filter(|(i, j)| i != j)
        .collect();
    cells.sort_by(|a, b| t[*b].total_cmp(&t[*a]));
    // The flips, not the section titles that explain them.
    let shown: Vec<String> = labels(&h, " typed as ")
        .into_iter()
        .filter(|l| {
            classes
                .iter()
                .any(|c| l.starts_with(&format!("{c} typed as ")))
        })
        .collect();
    assert_eq!(shown.len(), 5, "{shown:?}");
    for (label, &(i, j)) in shown.iter().zip(&cells[..5]) {
        let words = format!("{} typed as {}: ", classes[i], classes[j]);
        assert!(label.starts_with(&words), "{label} should be {words}…");
        // The cell's value in percent, then its 90 % interval in brackets.
        let value = 100.0 * t[[i, j]];
        let rounded = if value >= 9.5 {
            format!("{value:.0} %")
        } else {
            format!("{value:.1} %")
        };
        assert!(label.contains(&rounded) && label.contains('('), "{label}");
    }

    // Clicking the largest flip opens the Suspects view filtered to it.
    let (i, j) = cells[0];
    h.get_by_label(&shown[0]).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Suspects);
    let s = state(&h);
    assert_eq!(s.settings().observed_filter.as_deref(), Some(&*classes[j]));
    assert_eq!(s.settings().suggested_filter.as_deref(), Some(&*classes[i]));
    let ranking = s.ranking().unwrap();
    let labels_of = &s.data().unwrap().labels;
    assert!(!s.visible().is_empty());
    for &p in s.visible() {
        let row = &ranking.ranked[p as usize];
        assert_eq!((labels_of[row.row], row.suggested), (j, i));
    }
}

#[test]
fn the_yield_is_the_listed_suspects_p_wrong_sum_and_each_number_opens_its_view() {
    let dir = tempfile::tempdir().unwrap();
    let roles = Roles {
        source: Some("station".into()),
        ..Roles::default()
    };
    let mut h = app_on_demo(dir.path(), roles);
    assert_eq!(h.state().ui.view(), View::Overview);
    // The expected yield: Σ p_wrong over the suspects a worklist lists, the top rows of
    // the ranking up to the budget less its control rows.
    let s = state(&h);
    let (suspects, _) = split_budget(s.settings().budget, s.settings().control);
    let ranking = s.ranking().unwrap();
    let expected: f64 = ranking.ranked[..suspects]
        .iter()
        .map(|r| ranking.kind.probability(r.score).unwrap())
        .sum();
    let text = format!(
        "Reviewing the {suspects} suspects a worklist lists should find about {} errors",
        expected.round()
    );
    h.get_by_label(&text);
    // The headline count with its interval, once the bootstrap is in.
    h.get_by_label_contains("are probably mislabelled (an estimate)");
    let interval = labels(&h, "90 % interval:");
    assert_eq!(interval.len(), 1, "{interval:?}");
    // Against the demo's truth (demo-data/recycling_truth.csv, written by its generator,
    // make_demo.py, beside the table): the number of rows whose label is not the true
    // material lies inside the interval the Overview shows.
    let (low, high) = rows_in(&interval[0]);
    let wrong = wrong_labels_of_the_demo();
    assert!(
        low <= wrong && wrong <= high,
        "{wrong} outside {}",
        interval[0]
    );

    // A class's noise rate opens the Flip matrix view, a source the Sources view.
    let (noise, source) = {
        let s = state(&h);
        let t = s.editor().unwrap().matrix();
        let classes = &s.data().unwrap().classes;
        let worst = (0..classes.len())
            .max_by(|&a, &b| t[[b, b]].total_cmp(&t[[a, a]]))
            .unwrap();
        let sources = s.current_sources().unwrap();
        let noisiest = &sources.sources[sources.noisiest_first()[0]].name;
        (
            format!(
                "{}: {:.0} %",
                classes[worst],
                100.0 * (1.0 - t[[worst, worst]])
            ),
            format!("{noisiest}: "),
        )
    };
    let class_link: Vec<String> = labels(&h, &noise)
        .into_iter()
        .filter(|l| l.starts_with(&noise))
        .collect();
    assert!(!class_link.is_empty(), "{noise}");
    h.get_by_label(&class_link[0]).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Matrix);
    go_overview(&mut h);
    let source_link: Vec<String> = labels(&h, &source)
        .into_iter()
        .filter(|l| l.starts_with(&source) && l.contains(" rows"))
        .collect();
    assert_eq!(source_link.len(), 1, "{source}");
    h.get_by_label(&source_link[0]).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Sources);

    // Under a filter the yield is of the worklist the Suspects view would export now:
    // the filtered table's top rows. Its link keeps the filter, and the yield plot
    // there shows the same figure.
    let mut filtered = state(&h).settings().clone();
    let class = state(&h).data().unwrap().classes[0].clone();
    filtered.observed_filter = Some(class.clone());
    h.state_mut().push(Command::Settings(filtered));
    go_overview(&mut h);
    let (rows, expected) = {
        let s = state(&h);
        let (data, ranking) = (s.data().unwrap(), s.ranking().unwrap());
        let of_class: Vec<f64> = ranking
            .ranked
            .iter()
            .filter(|r| data.classes[data.labels[r.row]] == class)
            .take(suspects)
            .map(|r| ranking.kind.probability(r.score).unwrap())
            .collect();
        (of_class.len(), of_class.iter().sum::<f64>())
    };
    let text = format!(
        "Reviewing the {rows} suspects a worklist lists should find about {} errors",
        expected.round()
    );
    h.get_by_label_contains("Only the rows the Suspects view's filters keep are listed.");
    h.get_by_label(&text).click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Suspects);
    assert_eq!(state(&h).settings().observed_filter, Some(class));
    h.get_by_label(&format!(
        "expected wrong labels found by reviewing the first {rows} rows of the table (the \
         suspects a worklist lists): about {}",
        expected.round()
    ));
}

/// "90 % interval: 868–1,207 rows (…" → (868, 1207).
fn rows_in(label: &str) -> (usize, usize) {
    let range = label
        .trim_start_matches("90 % interval: ")
        .split(" rows")
        .next()
        .unwrap();
    let (low, high) = range.split_once('–').expect(label);
    let number = |s: &str| s.replace(',', "").parse::<usize>().expect(label);
    (number(low), number(high))
}

/// Rows of the demo table whose label differs from the true material.
fn wrong_labels_of_the_demo() -> usize {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let read = |name: &str| std::fs::read_to_string(root.join(name)).unwrap();
    let truth: std::collections::HashMap<String, String> = read("recycling_truth.csv")
        .lines()
        .skip(1)
        .filter_map(|l| l.split_once(','))
        .map(|(id, t)| (id.to_string(), t.trim().to_string()))
        .collect();
    let table = read("recycling.csv");
    let header: Vec<&str> = table.lines().next().unwrap().split(',').collect();
    let label = header.iter().position(|c| *c == "label").unwrap();
    table
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|cells| truth[cells[0]] != cells[label])
        .count()
}

fn go_overview(h: &mut Harness<'_, FlipmendApp>) {
    h.get_by_label("Overview").click();
    h.run_steps(2);
    assert_eq!(h.state().ui.view(), View::Overview);
}
