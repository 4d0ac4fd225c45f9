//! `flipmend estimate` through the real binary: outputs, their round trips, determinism
//! and its bad-input cases.

mod common;

use common::{fixture, flipmend, TempDir};
use serde_json::Value;

fn demo() -> String {
    format!("{}/demo-data/recycling.csv", env!("CARGO_MANIFEST_DIR"))
}

fn estimate_json(dir: &TempDir, name: &str, args: &[&str]) -> Value {
    let out = dir.path(name).to_string_lossy().into_owned();
    let mut all = vec!["estimate"];
    all.extend_from_slice(args);
    all.extend(["--json", out.as_str()]);
    flipmend(&all).assert_ok();
    serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap()
}

#[test]
fn report_keys_matrix_file_and_reuse_of_probabilities() {
    let dir = TempDir::new();
    let matrix = dir.path("t.csv").to_string_lossy().into_owned();
    let probs = dir.path("oof.csv").to_string_lossy().into_owned();
    let data = demo();
    let report = estimate_json(
        &dir,
        "a.json",
        &[
            "--data",
            &data,
            "--out",
            &matrix,
            "--probs-out",
            &probs,
            "--bootstrap",
            "20",
        ],
    );
    for key in [
        "classes",
        "method",
        "matrix",
        "observed_prior",
        "clean_prior",
        "noise_rate",
        "expected_mislabeled",
        "expected_mislabeled_share",
        "condition_number",
        "calibration_error",
        "warnings",
        "matrix_low",
        "matrix_high",
    ] {
        assert!(report.get(key).is_some(), "missing {key}");
    }
    let k = report["classes"].as_array().unwrap().len();
    assert_eq!(k, 8);
    for row in report["matrix"].as_array().unwrap() {
        let sum: f64 = row
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .sum();
        assert!((sum - 1.0).abs() < 1e-9);
    }
    let prior_sum: f64 = report["clean_prior"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .sum();
    assert!((prior_sum - 1.0).abs() < 1e-9);
    // The out-of-fold probabilities read back give the same matrix.
    let again = estimate_json(&dir, "b.json", &["--data", &data, "--probs", &probs]);
    assert_eq!(again["matrix"], report["matrix"]);
    // The demo's 400 random audits do not favour another λ (noise::estimators::volume):
    // the default, 0.01 / 8 classes, and given as such it is the same fit.
    assert_eq!(report["volume_weight_chosen_by"], "default");
    assert_eq!(report["volume_weight"], 0.01 / 8.0);
    let given_weight = estimate_json(
        &dir,
        "g.json",
        &[
            "--data",
            &data,
            "--probs",
            &probs,
            "--volume-weight",
            "0.00125",
        ],
    );
    assert_eq!(given_weight["volume_weight_chosen_by"], "given");
    assert_eq!(given_weight["matrix"], report["matrix"]);
    // The matrix file read back gives the same matrix. Its diagnostics invert it on the
    // noisy probabilities (a file brings no clean posteriors), as a matrix estimated by
    // counting does, so the two agree exactly.
    let given = estimate_json(
        &dir,
        "c.json",
        &["--data", &data, "--probs", &probs, "--matrix", &matrix],
    );
    assert_eq!(given["matrix"], report["matrix"]);
    let counted = dir.path("counted.csv");
    let counted = counted.to_string_lossy().into_owned();
    let by_counting = estimate_json(
        &dir,
        "d.json",
        &[
            "--data", &data, "--probs", &probs, "--method", "counting", "--out", &counted,
        ],
    );
    let read_back = estimate_json(
        &dir,
        "e.json",
        &["--data", &data, "--probs", &probs, "--matrix", &counted],
    );
    assert_eq!(
        read_back["expected_mislabeled"],
        by_counting["expected_mislabeled"]
    );
}

#[test]
fn same_seed_same_output_and_another_seed_differs() {
    let dir = TempDir::new();
    let data = demo();
    let a = estimate_json(
        &dir,
        "a.json",
        &["--data", &data, "--seed", "3", "--method", "counting"],
    );
    let b = estimate_json(
        &dir,
        "b.json",
        &["--data", &data, "--seed", "3", "--method", "counting"],
    );
    let c = estimate_json(
        &dir,
        "c.json",
        &["--data", &data, "--seed", "4", "--method", "counting"],
    );
    assert_eq!(a, b);
    assert_ne!(a["matrix"], c["matrix"]);
}

#[test]
fn text_report_names_the_method_and_cautions() {
    let run = flipmend(&["estimate", "--data", &demo(), "--method", "trusted"]);
    run.assert_ok();
    assert!(
        run.stdout
            .contains("flip matrix: trusted; probabilities: out-of-fold (5 folds, seed 0)"),
        "{}",
        run.stdout
    );
    assert!(run.stdout.contains("expected mislabelled rows:"));
    assert!(run.stdout.contains("estimates for qualified human review"));
}

#[test]
fn bad_inputs_exit_2() {
    let dir = TempDir::new();
    let good = fixture("good.csv");
    let probs = fixture("probs_good.csv");
    let no_trusted = fixture("not_numeric.csv");
    flipmend(&[
        "estimate",
        "--data",
        &no_trusted,
        "--method",
        "trusted",
        "--folds",
        "2",
    ])
    .assert_bad_input(&["--method trusted needs a trusted-label column"]);
    flipmend(&[
        "estimate",
        "--data",
        &good,
        "--probs",
        &probs,
        "--quantile",
        "1.5",
    ])
    .assert_bad_input(&["--quantile must lie in (0, 1]"]);
    flipmend(&[
        "estimate",
        "--data",
        &good,
        "--probs",
        &probs,
        "--volume-weight=-0.5",
    ])
    .assert_bad_input(&["--volume-weight must be a finite number of at least 0"]);
    flipmend(&["estimate", "--data", &good, "--folds", "1"])
        .assert_bad_input(&["--folds must be between 2"]);
    flipmend(&["estimate", "--data", &good, "--l2=-1"]).assert_bad_input(&["--l2 must be"]);
    let matrix = dir.path("m.csv");
    std::fs::write(&matrix, "class,bird,cat,dog\nbird,1,0,0\ncat,0,1,0\n").unwrap();
    let matrix = matrix.to_string_lossy().into_owned();
    flipmend(&[
        "estimate", "--data", &good, "--probs", &probs, "--matrix", &matrix,
    ])
    .assert_bad_input(&["m.csv", "no row for the class 'dog'"]);
    flipmend(&[
        "estimate",
        "--data",
        &good,
        "--probs",
        &probs,
        "--matrix",
        &matrix,
        "--bootstrap",
        "5",
    ])
    .assert_bad_input(&["--bootstrap"]);
    let out = dir.path("out.csv").to_string_lossy().into_owned();
    flipmend(&[
        "estimate", "--data", &good, "--probs", &probs, "--out", &probs,
    ])
    .assert_bad_input(&["refusing to write"]);
    assert!(!std::path::Path::new(&out).exists());
}
