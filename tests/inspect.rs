//! `flipmend inspect` on good input: the text report, the JSON keys, open data (iris),
//! quoting and the `.npy` files that numpy itself wrote.

mod common;

use common::{fixture, flipmend, TempDir};
use serde_json::Value;

fn inspect_json(args: &[&str]) -> Value {
    let dir = TempDir::new();
    let out = dir.path("report.json").to_string_lossy().into_owned();
    let mut all = vec!["inspect"];
    all.extend_from_slice(args);
    all.extend(["--json", out.as_str()]);
    flipmend(&all).assert_ok();
    serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap()
}

#[test]
fn iris_from_linfa_datasets_has_the_published_counts() {
    // UCI Iris (Fisher 1936), as shipped by the linfa-datasets crate: 150 rows,
    // 4 measurements, 3 species of 50 rows each.
    let iris = linfa_datasets::iris();
    let species = ["setosa", "versicolor", "virginica"];
    let dir = TempDir::new();
    let path = dir.path("iris.csv");
    let mut text = String::from("sepal_length,sepal_width,petal_length,petal_width,label\n");
    for (row, target) in iris.records.outer_iter().zip(iris.targets.iter()) {
        let cells: Vec<String> = row.iter().map(|v| v.to_string()).collect();
        text.push_str(&format!("{},{}\n", cells.join(","), species[*target]));
    }
    std::fs::write(&path, text).unwrap();
    let report = inspect_json(&["--data", &path.to_string_lossy()]);
    assert_eq!(report["rows"], 150);
    assert_eq!(report["features"].as_array().unwrap().len(), 4);
    let classes = report["classes"].as_array().unwrap();
    assert_eq!(classes.len(), 3);
    for (class, name) in classes.iter().zip(species) {
        assert_eq!(class["name"], name);
        assert_eq!(class["count"], 50);
        assert_eq!(class["trusted"], 0);
    }
}

#[test]
fn json_report_has_the_stable_keys() {
    let report = inspect_json(&[
        "--data",
        &fixture("good.csv"),
        "--probs",
        &fixture("probs_good.csv"),
    ]);
    for key in ["rows", "features", "classes", "ignored_columns", "warnings"] {
        assert!(report.get(key).is_some(), "missing key {key}");
    }
    assert_eq!(report["rows"], 6);
    assert_eq!(report["features"], serde_json::json!(["f1", "f2"]));
    let names: Vec<&str> = report["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["bird", "cat", "dog"]);
    assert_eq!(report["classes"][0]["trusted"], 1);
    // Agreement: rows r1..r6 have argmax cat, dog, cat, bird, dog, bird; observed
    // cat, dog, cat, bird, dog, bird → 6 of 6.
    assert_eq!(report["probabilities"]["agreement_with_observed"], 1.0);
    let mean_max = report["probabilities"]["mean_max_probability"]
        .as_f64()
        .unwrap();
    assert!((mean_max - (0.8 + 0.8 + 0.7 + 0.6 + 0.6 + 0.5) / 6.0).abs() < 1e-6);
}

#[test]
fn text_report_lists_classes_and_trusted_counts() {
    let run = flipmend(&["inspect", "--data", &fixture("good.csv")]);
    run.assert_ok();
    assert!(
        run.stdout.contains("6 rows, 3 classes, 2 features"),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout.contains("trusted (3 rows audited)"),
        "{}",
        run.stdout
    );
    let cat_line = run.stdout.lines().find(|l| l.starts_with("cat")).unwrap();
    assert_eq!(
        cat_line.split_whitespace().collect::<Vec<_>>(),
        ["cat", "2", "33.33%", "1"]
    );
}

#[test]
fn npy_files_written_by_numpy_load_like_the_csv() {
    let csv = inspect_json(&[
        "--data",
        &fixture("good.csv"),
        "--probs",
        &fixture("probs_good.csv"),
    ]);
    for npy in [
        "probs_good_f64.npy",
        "probs_good_f32.npy",
        "probs_good_fortran.npy",
    ] {
        let report = inspect_json(&["--data", &fixture("good.csv"), "--probs", &fixture(npy)]);
        let (a, b) = (&csv["probabilities"], &report["probabilities"]);
        assert_eq!(
            a["agreement_with_observed"], b["agreement_with_observed"],
            "{npy}"
        );
        let diff = a["mean_max_probability"].as_f64().unwrap()
            - b["mean_max_probability"].as_f64().unwrap();
        assert!(diff.abs() < 1e-7, "{npy}: {diff}");
    }
}

#[test]
fn quoted_fields_and_tabs() {
    let run = flipmend(&["inspect", "--data", &fixture("quoted_label.csv")]);
    run.assert_ok();
    assert!(
        run.stdout.contains("b\nc"),
        "a label with a newline inside quotes: {}",
        run.stdout
    );
    let dir = TempDir::new();
    let tsv = dir.path("data.tsv");
    std::fs::write(
        &tsv,
        std::fs::read_to_string(fixture("good.csv"))
            .unwrap()
            .replace(',', "\t"),
    )
    .unwrap();
    let report = inspect_json(&["--data", &tsv.to_string_lossy()]);
    assert_eq!(report["rows"], 6);
    let semi = inspect_json(&["--data", &fixture("semicolon.csv"), "--delimiter", ";"]);
    assert_eq!(semi["rows"], 2);
}
