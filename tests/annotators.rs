//! `--labels a1,a2,a3`: several annotators per row, end to end through the binary. The
//! tables are simulated with a known true class per row (Gaussian classes from
//! `common::gaussian_classes`) and annotators of known accuracy; that a consensus of
//! unequal annotators beats their majority vote is a fact of the trade (Dawid & Skene
//! 1979), checked here against the truth.

mod common;

use common::{flipmend, gaussian_classes, TempDir};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::Value;
use std::fmt::Write as _;

/// One good annotator and two poor ones, each row labelled by two of them; a wrong label
/// is the next class. Returns the CSV text and every row's true class.
fn table(rows: usize, seed: u64) -> (String, Vec<usize>) {
    let (x, truth) = gaussian_classes(rows, 3.0, seed);
    let accuracy = [0.95, 0.65, 0.6];
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut text = String::from("id,x0,x1,a1,a2,a3\n");
    for r in 0..rows {
        let skipped = rng.random_range(0..3);
        let cells: Vec<String> = (0..3)
            .map(|a| {
                if a == skipped {
                    return String::new();
                }
                let right = rng.random::<f64>() < accuracy[a];
                let class = if right { truth[r] } else { (truth[r] + 1) % 3 };
                format!("c{class}")
            })
            .collect();
        let _ = writeln!(
            text,
            "r{r},{:.5},{:.5},{}",
            x[[r, 0]],
            x[[r, 1]],
            cells.join(",")
        );
    }
    (text, truth)
}

fn column_of(csv: &str, name: &str) -> Vec<String> {
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let at = header.iter().position(|&h| h == name).unwrap();
    lines
        .map(|l| l.split(',').nth(at).unwrap().to_string())
        .collect()
}

#[test]
fn the_consensus_beats_the_majority_and_each_annotator_is_reported() {
    let (text, truth) = table(3_000, 5);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, text).unwrap();
    let (rows, json) = (dir.path("rows.csv"), dir.path("e.json"));
    let run = flipmend(&[
        "estimate",
        "--data",
        data.to_str().unwrap(),
        "--labels",
        "a1,a2,a3",
        "--consensus-out",
        rows.to_str().unwrap(),
        "--json",
        json.to_str().unwrap(),
    ]);
    run.assert_ok();
    assert!(run.stdout.contains("Dawid & Skene"), "{}", run.stdout);
    let written = std::fs::read_to_string(&rows).unwrap();
    let right = |column: &str| {
        column_of(&written, column)
            .iter()
            .zip(&truth)
            .filter(|(c, &t)| **c == format!("c{t}"))
            .count() as f64
            / truth.len() as f64
    };
    let (consensus, majority) = (right("consensus"), right("majority"));
    assert!(
        consensus > majority + 0.03,
        "consensus {consensus}, majority {majority}"
    );
    let report: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let annotators = report["annotators"].as_array().unwrap();
    assert_eq!(annotators.len(), 3);
    assert_eq!(annotators[0]["column"], "a1");
    let accuracy: Vec<f64> = annotators
        .iter()
        .map(|a| a["accuracy"].as_f64().unwrap())
        .collect();
    assert!(
        accuracy[0] > 0.9 && accuracy[1] < 0.75 && accuracy[2] < 0.75,
        "{accuracy:?}"
    );
    for a in annotators {
        assert!(a["accuracy_low"].as_f64() <= a["accuracy"].as_f64());
        assert!(a["items"].as_u64().unwrap() > 1_500);
    }
}

#[test]
fn annotator_problems_are_clear_and_write_nothing() {
    let (text, _) = table(300, 9);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, &text).unwrap();
    let data = data.to_str().unwrap();
    let out = dir.path("rows.csv");
    let out = out.to_str().unwrap();
    let run = |labels: &str, file: &str| {
        flipmend(&[
            "estimate",
            "--data",
            file,
            "--labels",
            labels,
            "--consensus-out",
            out,
        ])
    };
    run("a1", data).assert_bad_input(&["at least two"]);
    run("a1,zz", data).assert_bad_input(&["--labels", "zz", "a1, a2, a3"]);
    // A row nobody labelled: its line and the columns.
    let silent = text
        .replacen(",c0,c0\n", ",,\n", 1)
        .replacen(",,c0\n", ",,\n", 1);
    let silent_path = dir.path("silent.csv");
    std::fs::write(&silent_path, &silent).unwrap();
    if silent != text {
        run("a1,a2,a3", silent_path.to_str().unwrap()).assert_bad_input(&[
            "line",
            "no annotator labelled this row",
            "a1, a2, a3",
        ]);
    }
    // Two annotators that never label a row together with the third.
    let mut split = String::from("id,x0,x1,a1,a2,a3\n");
    for (i, line) in text.lines().skip(1).enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        let (a1, a2, a3) = if i % 2 == 0 {
            ("c0", "c0", "")
        } else {
            ("", "", "c1")
        };
        let _ = writeln!(
            split,
            "{},{},{},{a1},{a2},{a3}",
            cells[0], cells[1], cells[2]
        );
    }
    let split_path = dir.path("split.csv");
    std::fs::write(&split_path, split).unwrap();
    run("a1,a2,a3", split_path.to_str().unwrap()).assert_bad_input(&["'a3'"]);
    assert!(!std::path::Path::new(out).exists(), "nothing written");
}

/// The wide table as a table of features and a long file of (id, annotator, label).
fn long_form(wide: &str) -> (String, String) {
    let mut table = String::from("id,x0,x1\n");
    let mut long = String::from("id,annotator,label\n");
    for line in wide.lines().skip(1) {
        let cells: Vec<&str> = line.split(',').collect();
        let _ = writeln!(table, "{},{},{}", cells[0], cells[1], cells[2]);
        for (who, label) in ["a1", "a2", "a3"].iter().zip(&cells[3..]) {
            if !label.is_empty() {
                let _ = writeln!(long, "{},{who},{label}", cells[0]);
            }
        }
    }
    (table, long)
}

#[test]
fn a_long_file_gives_the_same_consensus_as_the_columns() {
    let (wide, _) = table(1_200, 13);
    let (features, long) = long_form(&wide);
    let dir = TempDir::new();
    let write = |name: &str, text: &str| {
        let path = dir.path(name);
        std::fs::write(&path, text).unwrap();
        path.to_string_lossy().into_owned()
    };
    let (wide_path, table_path) = (write("wide.csv", &wide), write("t.csv", &features));
    let long_path = write("long.csv", &long);
    let (from_columns, from_long) = (dir.path("c.csv"), dir.path("l.csv"));
    flipmend(&[
        "estimate",
        "--data",
        &wide_path,
        "--labels",
        "a1,a2,a3",
        "--consensus-out",
        from_columns.to_str().unwrap(),
    ])
    .assert_ok();
    flipmend(&[
        "estimate",
        "--data",
        &table_path,
        "--annotations",
        &long_path,
        "--consensus-out",
        from_long.to_str().unwrap(),
    ])
    .assert_ok();
    assert_eq!(
        std::fs::read_to_string(&from_columns).unwrap(),
        std::fs::read_to_string(&from_long).unwrap()
    );
    // The same row and annotator with two labels: both lines named, nothing written.
    let conflicting = format!("{long}r0,a1,c2\nr0,a1,c0\n");
    let bad = write("bad.csv", &conflicting);
    let out = dir.path("never.csv");
    flipmend(&[
        "estimate",
        "--data",
        &table_path,
        "--annotations",
        &bad,
        "--consensus-out",
        out.to_str().unwrap(),
    ])
    .assert_bad_input(&["bad.csv", "line", "'a1'"]);
    // An id the table lacks.
    let stranger = write("stranger.csv", &format!("{long}nobody,a1,c0\n"));
    flipmend(&[
        "estimate",
        "--data",
        &table_path,
        "--annotations",
        &stranger,
    ])
    .assert_bad_input(&["stranger.csv", "nobody"]);
    assert!(!out.exists(), "nothing written");
}

#[test]
fn the_demo_panel_ranks_its_graders_and_its_consensus_beats_the_majority() {
    // demo-data/make_demo.py's invented quality panel: four graders who make the base
    // confusions 0.4, 1, 1.5 and 2.5 times as often; the true materials are in
    // recycling_truth.csv.
    let demo = format!("{}/demo-data", env!("CARGO_MANIFEST_DIR"));
    let dir = TempDir::new();
    let (rows, json) = (dir.path("rows.csv"), dir.path("e.json"));
    flipmend(&[
        "estimate",
        "--data",
        &format!("{demo}/recycling_panel.csv"),
        "--labels",
        "grader_a,grader_b,grader_c,grader_d",
        "--consensus-out",
        rows.to_str().unwrap(),
        "--json",
        json.to_str().unwrap(),
    ])
    .assert_ok();
    let truth_text = std::fs::read_to_string(format!("{demo}/recycling_truth.csv")).unwrap();
    let truth: std::collections::HashMap<String, String> = column_of(&truth_text, "id")
        .into_iter()
        .zip(column_of(&truth_text, "true_label"))
        .collect();
    let written = std::fs::read_to_string(&rows).unwrap();
    let ids = column_of(&written, "id");
    let right = |column: &str| {
        let hits = column_of(&written, column)
            .iter()
            .zip(&ids)
            .filter(|(c, id)| **c == truth[id.as_str()])
            .count();
        hits as f64 / ids.len() as f64
    };
    let (consensus, majority) = (right("consensus"), right("majority"));
    assert!(
        consensus > majority + 0.03,
        "consensus {consensus}, majority {majority}"
    );
    let report: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let accuracy: Vec<f64> = report["annotators"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a["accuracy"].as_f64().unwrap())
        .collect();
    assert!(
        accuracy.windows(2).all(|w| w[0] > w[1]),
        "graders a > b > c > d: {accuracy:?}"
    );
}
