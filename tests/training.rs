//! Corrected training: the claim of Patrini et al. (2017) on an open dataset, the model
//! file round trip through `predict`, and the `train` / `compare` / `predict` commands.

mod common;

use common::{fixture, flip, flipmend, iris_x10, TempDir};
use flipmend::io::model::{
    read_model, write_model, ModelFile, TrainingMetrics, TrainingSettings, MODEL_FORMAT,
    MODEL_VERSION,
};
use flipmend::learn::metrics::accuracy;
use flipmend::learn::softmax::Standardized;
use flipmend::learn::train::{predict_classes, train, Correction, TrainInputs};
use flipmend::learn::SoftmaxParams;
use ndarray::Array2;

fn demo() -> String {
    format!("{}/demo-data/recycling.csv", env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn forward_beats_none_under_heavy_pair_flip_noise() {
    // Patrini et al. (CVPR 2017): with the true T, forward correction recovers accuracy
    // that plain cross-entropy loses to class-dependent noise. 40 % pair flips on iris:
    // T[i][i] = 0.6, T[i][i+1 mod 3] = 0.4 (Han et al. 2018's pair flip).
    let (x, truth) = iris_x10(3);
    let t = Array2::from_shape_fn((3, 3), |(i, j)| {
        if i == j {
            0.6
        } else if j == (i + 1) % 3 {
            0.4
        } else {
            0.0
        }
    });
    let observed = flip(&truth, &t, 4);
    let rows: Vec<usize> = (0..truth.len()).collect();
    let params = SoftmaxParams::default();
    let clean_accuracy = |correction| {
        let trained = train(
            x.view(),
            &rows,
            &observed,
            3,
            correction,
            TrainInputs {
                matrix: Some(&t),
                probs: None,
                start: None,
                cancel: None,
                by_source: None,
                standardized: None,
            },
            &params,
        )
        .unwrap();
        accuracy(
            &predict_classes(&trained.model.predict_proba(x.view(), None)),
            &truth,
        )
        .unwrap()
    };
    let (none, forward) = (
        clean_accuracy(Correction::None),
        clean_accuracy(Correction::Forward),
    );
    eprintln!(
        "iris, 40% pair flip: accuracy against clean labels: none {none:.4}, forward {forward:.4}"
    );
    assert!(
        forward > none + 0.05,
        "forward {forward:.4} vs none {none:.4}"
    );
}

#[test]
fn rows_standardised_once_give_every_correction_the_same_fit() {
    // compare standardises its training rows once for all corrections; each fit must be
    // the one that standardises its own rows, bit for bit (iris from linfa-datasets, 30 %
    // pair flips). Prune drops rows, so it must take its own path and still agree.
    let (x, truth) = iris_x10(3);
    let t = Array2::from_shape_fn((3, 3), |(i, j)| match (i, j) {
        _ if i == j => 0.7,
        _ if j == (i + 1) % 3 => 0.3,
        _ => 0.0,
    });
    let observed = flip(&truth, &t, 9);
    let rows: Vec<usize> = (0..truth.len()).collect();
    let probs = Array2::from_shape_fn((truth.len(), 3), |(r, c)| {
        if c == observed[r] {
            0.8f32
        } else {
            0.1
        }
    });
    let prepared = Standardized::new(x.view(), None);
    for correction in [
        Correction::None,
        Correction::Forward,
        Correction::Backward,
        Correction::Prune,
    ] {
        let fit = |standardized| {
            let inputs = TrainInputs {
                matrix: Some(&t),
                probs: Some(probs.view()),
                start: None,
                cancel: None,
                by_source: None,
                standardized,
            };
            let params = SoftmaxParams::default();
            train(x.view(), &rows, &observed, 3, correction, inputs, &params).unwrap()
        };
        let (own, shared) = (fit(None), fit(Some(&prepared)));
        assert_eq!(own.model.weights, shared.model.weights, "{correction:?}");
        assert_eq!(own.model.bias, shared.model.bias, "{correction:?}");
        assert_eq!(own.dropped, shared.dropped, "{correction:?}");
    }
}

fn model_file(
    model: &flipmend::learn::SoftmaxModel,
    classes: &[&str],
    features: &[&str],
) -> ModelFile {
    ModelFile {
        format: MODEL_FORMAT.into(),
        version: MODEL_VERSION,
        classes: classes.iter().map(|s| s.to_string()).collect(),
        features: features.iter().map(|s| s.to_string()).collect(),
        standardization: model.standardizer.clone(),
        weights: model
            .weights
            .rows()
            .into_iter()
            .map(|r| r.to_vec())
            .collect(),
        bias: model.bias.clone(),
        correction: "none".into(),
        matrix: None,
        settings: TrainingSettings {
            l2: 1e-3,
            max_iter: 500,
            seed: 0,
            matrix_source: None,
        },
        metrics: TrainingMetrics {
            objective: 0.0,
            iterations: 0,
            converged: true,
            rows: 0,
            dropped_rows: 0,
            accuracy_observed: 0.0,
            accuracy_trusted: None,
        },
        data_hash: String::new(),
    }
}

#[test]
fn predict_reproduces_in_process_predictions_exactly() {
    let (x, truth) = iris_x10(5);
    let rows: Vec<usize> = (0..truth.len()).collect();
    let trained = train(
        x.view(),
        &rows,
        &truth,
        3,
        Correction::None,
        TrainInputs {
            matrix: None,
            probs: None,
            start: None,
            cancel: None,
            by_source: None,
            standardized: None,
        },
        &SoftmaxParams::default(),
    )
    .unwrap();
    let in_process = trained.model.predict_proba(x.view(), None);
    let dir = TempDir::new();
    let model_path = dir.path("model.json");
    let file = model_file(
        &trained.model,
        &["setosa", "versicolor", "virginica"],
        &["a", "b", "c", "d"],
    );
    let mut bytes = Vec::new();
    write_model(&mut bytes, &file).unwrap();
    std::fs::write(&model_path, &bytes).unwrap();
    let (back, _) = read_model(&bytes[..], &model_path).unwrap();
    assert_eq!(back, file, "the model file round-trips exactly");
    let data_path = dir.path("x.csv");
    let mut text = String::from("a,b,c,d\n");
    for row in x.rows() {
        text.push_str(
            &row.iter()
                .map(|v| v.to_string())
                .collect::<Vec<_>>()
                .join(","),
        );
        text.push('\n');
    }
    std::fs::write(&data_path, text).unwrap();
    let preds = dir.path("p.csv");
    flipmend(&[
        "predict",
        "--model",
        &model_path.to_string_lossy(),
        "--data",
        &data_path.to_string_lossy(),
        "--out",
        &preds.to_string_lossy(),
    ])
    .assert_ok();
    let mut rdr = csv::Reader::from_path(&preds).unwrap();
    assert_eq!(
        rdr.headers().unwrap(),
        vec!["id", "predicted", "setosa", "versicolor", "virginica"]
    );
    let names = ["setosa", "versicolor", "virginica"];
    let predicted = predict_classes(&in_process);
    for (r, record) in rdr.records().enumerate() {
        let record = record.unwrap();
        assert_eq!(&record[0], r.to_string());
        assert_eq!(&record[1], names[predicted[r]]);
        for c in 0..3 {
            assert_eq!(
                record[2 + c].parse::<f64>().unwrap().to_bits(),
                in_process[[r, c]].to_bits(),
                "row {r} class {c}"
            );
        }
    }
}

#[test]
fn train_compare_and_predict_commands() {
    let dir = TempDir::new();
    let data = demo();
    for correction in ["none", "forward", "backward", "prune"] {
        let model = dir.path(&format!("{correction}.json"));
        let run = flipmend(&[
            "train",
            "--data",
            &data,
            "--correction",
            correction,
            "--method",
            "counting",
            "--out",
            &model.to_string_lossy(),
        ]);
        run.assert_ok();
        assert!(
            run.stdout
                .contains("accuracy on the training rows against observed labels"),
            "{}",
            run.stdout
        );
        let json: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&model).unwrap()).unwrap();
        assert_eq!(json["format"], "flipmend-model");
        assert_eq!(json["correction"], correction);
        assert_eq!(json["matrix"].is_null(), correction == "none");
    }
    let report = dir.path("compare.json");
    flipmend(&[
        "compare",
        "--data",
        &data,
        "--method",
        "counting",
        "--json",
        &report.to_string_lossy(),
    ])
    .assert_ok();
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report).unwrap()).unwrap();
    let models = json["models"].as_array().unwrap();
    let names: Vec<&str> = models
        .iter()
        .map(|m| m["correction"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["none", "forward", "backward", "prune"]);
    for key in [
        "holdout_accuracy_observed",
        "estimated_clean_accuracy",
        "test_accuracy",
        "trusted_accuracy",
        "per_class_recall",
        "confusion",
        "changed_vs_none",
    ] {
        assert!(models[0].get(key).is_some(), "missing {key}");
    }
    assert!(models[0]["test_accuracy"].is_null());
    assert_eq!(models[0]["changed_vs_none"], 0);
    let holdout: u64 = models[0]["confusion"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r.as_array().unwrap().iter().map(|v| v.as_u64().unwrap()))
        .sum();
    assert!(holdout > 0);
    // Prune drops about the expected number of mislabelled training rows: the invented
    // demo's labels are wrong on about 13 % of rows (demo-data/README.md), so far fewer
    // than half of them go, and the model still learns (a regression once summed the
    // posterior odds instead of probabilities and dropped all but one row).
    let prune = &models[3];
    let dropped = prune["dropped_rows"].as_u64().unwrap();
    assert!(
        (200..2_000).contains(&dropped),
        "prune dropped {dropped} rows"
    );
    let accuracy = |m: &serde_json::Value| m["trusted_accuracy"].as_f64().unwrap();
    assert!(accuracy(prune) > accuracy(&models[0]) - 0.05);
}

#[test]
fn bad_model_and_prediction_inputs_exit_2() {
    let dir = TempDir::new();
    let model = dir.path("m.json");
    let model_text = model.to_string_lossy().into_owned();
    let out = dir.path("p.csv").to_string_lossy().into_owned();
    flipmend(&[
        "train",
        "--data",
        &fixture("good.csv"),
        "--correction",
        "none",
        "--out",
        &model_text,
    ])
    .assert_ok();
    flipmend(&[
        "predict",
        "--model",
        &model_text,
        "--data",
        &fixture("one_class.csv"),
        "--out",
        &out,
    ])
    .assert_bad_input(&[
        "one_class.csv: the model needs the feature column 'f2'",
        "its columns: f1, label",
    ]);
    let mut json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&model).unwrap()).unwrap();
    json["version"] = serde_json::json!(99);
    let newer = dir.path("newer.json");
    std::fs::write(&newer, json.to_string()).unwrap();
    flipmend(&[
        "predict",
        "--model",
        &newer.to_string_lossy(),
        "--data",
        &fixture("good.csv"),
        "--out",
        &out,
    ])
    .assert_bad_input(&["version 99", "newer flipmend"]);
    json["version"] = serde_json::json!(1);
    json["bias"] = serde_json::json!([0.0]);
    let broken = dir.path("broken.json");
    std::fs::write(&broken, json.to_string()).unwrap();
    flipmend(&[
        "predict",
        "--model",
        &broken.to_string_lossy(),
        "--data",
        &fixture("good.csv"),
        "--out",
        &out,
    ])
    .assert_bad_input(&["the bias must have 3 numbers"]);
    std::fs::write(&broken, "{not json").unwrap();
    flipmend(&[
        "predict",
        "--model",
        &broken.to_string_lossy(),
        "--data",
        &fixture("good.csv"),
        "--out",
        &out,
    ])
    .assert_bad_input(&["not valid JSON"]);
    flipmend(&[
        "train",
        "--data",
        &fixture("good.csv"),
        "--correction",
        "forward",
        "--faithful",
        "--out",
        &out,
    ])
    .assert_bad_input(&["--faithful applies to --correction backward only"]);
    flipmend(&[
        "compare",
        "--data",
        &fixture("good.csv"),
        "--holdout",
        "1.5",
    ])
    .assert_bad_input(&["--holdout must lie strictly between 0 and 1"]);
    assert!(!std::path::Path::new(&out).exists());
}
