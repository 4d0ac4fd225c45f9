//! `--source`: one flip matrix per label source, end to end through the binary, on
//! simulated tables with a known matrix per source (Gaussian classes from
//! `common::gaussian_classes`, labels flipped by each source's own pair-noise matrix as
//! defined by Han et al., NeurIPS 2018).

mod common;

use common::{flip, flipmend, gaussian_classes, pair_flip, TempDir};
use ndarray::Array2;
use serde_json::Value;
use std::fmt::Write as _;

/// A table whose rows cycle through the sources, each source's labels flipped by its
/// matrix; returns the CSV text and, per source, the rows' (true, observed) pairs.
fn table(rows: usize, rates: &[f64], seed: u64) -> (String, Vec<Vec<(usize, usize)>>) {
    let (x, truth) = gaussian_classes(rows, 3.0, seed);
    let sources = rates.len();
    let mut observed = vec![0; rows];
    for (s, &rate) in rates.iter().enumerate() {
        let mine: Vec<usize> = (0..rows).filter(|r| r / 3 % sources == s).collect();
        let flipped = flip(
            &mine.iter().map(|&r| truth[r]).collect::<Vec<_>>(),
            &pair_flip(3, rate),
            seed + s as u64 + 1,
        );
        for (&r, o) in mine.iter().zip(flipped) {
            observed[r] = o;
        }
    }
    let mut text = String::from("id,x0,x1,station,label\n");
    let mut pairs = vec![Vec::new(); sources];
    for r in 0..rows {
        let s = r / 3 % sources;
        let _ = writeln!(
            text,
            "r{r},{:.5},{:.5},st{s},c{}",
            x[[r, 0]],
            x[[r, 1]],
            observed[r]
        );
        pairs[s].push((truth[r], observed[r]));
    }
    (text, pairs)
}

fn mean_abs(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    (a - b).mapv(f64::abs).mean().unwrap()
}

fn matrix_of(value: &Value) -> Array2<f64> {
    let rows: Vec<Vec<f64>> = serde_json::from_value(value.clone()).unwrap();
    let k = rows.len();
    Array2::from_shape_vec((k, k), rows.concat()).unwrap()
}

#[test]
fn per_source_matrices_come_within_twice_their_oracles_error() {
    // The target: at 5,000 rows per source, each source's error is within 2× the
    // error of the matrix counted from that source's true labels (the oracle).
    let rates = [0.05, 0.2, 0.35];
    let (text, pairs) = table(15_000, &rates, 41);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, text).unwrap();
    let json = dir.path("e.json");
    let run = flipmend(&[
        "estimate",
        "--data",
        data.to_str().unwrap(),
        "--source",
        "station",
        "--json",
        json.to_str().unwrap(),
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("label sources (column 'station')"),
        "{}",
        run.stdout
    );
    let report: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(report["source_column"], "station");
    let sources = report["sources"].as_array().unwrap();
    assert_eq!(sources.len(), 3);
    for (s, &rate) in rates.iter().enumerate() {
        let truth = pair_flip(3, rate);
        let mut counts = Array2::<f64>::zeros((3, 3));
        pairs[s].iter().for_each(|&(t, o)| counts[[t, o]] += 1.0);
        let totals = counts.sum_axis(ndarray::Axis(1));
        let oracle = Array2::from_shape_fn((3, 3), |(i, j)| counts[[i, j]] / totals[i]);
        let ours = mean_abs(&matrix_of(&sources[s]["matrix"]), &truth);
        let best = mean_abs(&oracle, &truth);
        assert!(
            ours <= 2.0 * best,
            "source {s}: {ours:.4} vs oracle {best:.4}"
        );
        assert_eq!(sources[s]["name"], format!("st{s}"));
        assert_eq!(sources[s]["noise_rank"], 3 - s, "noisiest first");
    }
    assert!(report["sources_test"]["p_value"].as_f64().unwrap() <= 0.01);
}

#[test]
fn the_worklist_carries_the_source_and_scores_use_it() {
    let (text, _) = table(3_000, &[0.02, 0.3], 7);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, text).unwrap();
    let out = dir.path("w.csv");
    let run = flipmend(&[
        "suspects",
        "--data",
        data.to_str().unwrap(),
        "--source",
        "station",
        "--budget",
        "50",
        "--control",
        "0",
        "--out",
        out.to_str().unwrap(),
    ]);
    run.assert_ok();
    let worklist = std::fs::read_to_string(&out).unwrap();
    let header: Vec<&str> = worklist.lines().next().unwrap().split(',').collect();
    let at = header
        .iter()
        .position(|&c| c == "source")
        .expect("a source column");
    assert_eq!(
        &header[..6],
        ["rank", "row", "id", "observed", "suggested", "score"]
    );
    // The noisy source's rows dominate the head of the ranking.
    let noisy = worklist
        .lines()
        .skip(1)
        .filter(|l| l.split(',').nth(at) == Some("st1"))
        .count();
    assert!(noisy >= 40, "{noisy} of 50 from the noisy source");
}

#[test]
fn source_problems_are_clear() {
    let (text, _) = table(600, &[0.1, 0.2], 3);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, &text).unwrap();
    let data = data.to_str().unwrap();
    // An unknown column: exit 2, the flag and the columns named.
    flipmend(&["estimate", "--data", data, "--source", "vendor"])
        .assert_bad_input(&["--source", "vendor", "station"]);
    // A column that already has a role.
    flipmend(&["estimate", "--data", data, "--source", "label"]).assert_bad_input(&["label"]);
    // Anchor estimators cannot be split by source.
    flipmend(&[
        "estimate", "--data", data, "--source", "station", "--method", "anchor",
    ])
    .assert_bad_input(&["joint, counting or trusted"]);
    // A source with one row: a warning, and it takes the overall matrix.
    let lonely = text.replacen("st0,", "solo,", 1);
    let path = dir.path("lonely.csv");
    std::fs::write(&path, lonely).unwrap();
    let run = flipmend(&[
        "estimate",
        "--data",
        path.to_str().unwrap(),
        "--source",
        "station",
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("source 'solo' has 1 rows") && run.stdout.contains("(overall matrix)"),
        "{}",
        run.stdout
    );
    assert_eq!(dir.files(), ["d.csv", "lonely.csv"], "nothing else written");
}

#[test]
fn inspect_counts_the_rows_of_each_source() {
    let (text, _) = table(900, &[0.1, 0.2, 0.3], 5);
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, text).unwrap();
    let json = dir.path("i.json");
    let run = flipmend(&[
        "inspect",
        "--data",
        data.to_str().unwrap(),
        "--source",
        "station",
        "--json",
        json.to_str().unwrap(),
    ]);
    run.assert_ok();
    // Rows cycle through the sources three at a time: 300 each.
    assert!(
        run.stdout
            .contains("label source: station (st0 300, st1 300, st2 300)"),
        "{}",
        run.stdout
    );
    let report: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(report["label_sources"]["column"], "station");
    assert_eq!(report["label_sources"]["sources"][2]["name"], "st2");
    assert_eq!(report["label_sources"]["sources"][2]["rows"], 300);
}
