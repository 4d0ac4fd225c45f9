//! Streamed runs (`suspects --max-memory`), over Parquet and over CSV: with a sample as
//! large as the table they must give the in-memory worklist and key byte for byte (the same seeded control draw, the
//! same ranks, the same scores); a smaller sample still finds the planted errors; what a
//! streamed run cannot do is refused with exit code 2 and a reason.
//!
//! The table is the invented recycling demo (`demo-data/recycling.csv`), written to
//! Parquet with flipmend's own writer (the writer's round trip is tested in
//! `tests/columnar.rs` against pyarrow's files).

mod common;

use std::fs::File;
use std::path::{Path, PathBuf};

use common::{flipmend, TempDir};
use flipmend::data::{Dataset, TableOptions};
use flipmend::io::columnar::Format;
use flipmend::io::table_out::{CellKind, OutColumn, TableWriter};

fn demo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/recycling.csv")
}

/// The demo as Parquet (id, features, label, trusted) and its out-of-fold probabilities
/// as Parquet (id and one column per class).
fn demo_parquet(dir: &TempDir) -> (PathBuf, PathBuf) {
    let data = Dataset::load(&demo(), &TableOptions::default()).unwrap();
    let table = dir.path("demo.parquet");
    let mut columns = vec![OutColumn::new("id", CellKind::Text)];
    columns.extend(
        data.feature_names
            .iter()
            .map(|n| OutColumn::new(n.clone(), CellKind::Float)),
    );
    columns.push(OutColumn::new("label", CellKind::Text));
    columns.push(OutColumn::new("trusted", CellKind::Text));
    let mut file = File::create(&table).unwrap();
    let mut w = TableWriter::new(&mut file, Format::Parquet, &columns).unwrap();
    for r in 0..data.rows() {
        let mut cells = vec![data.id(r).into_owned()];
        cells.extend(data.features.row(r).iter().map(|v| v.to_string()));
        cells.push(data.classes[data.labels[r]].clone());
        let trusted = data.trusted.as_ref().unwrap()[r];
        cells.push(trusted.map_or(String::new(), |t| data.classes[t].clone()));
        w.row(&cells).unwrap();
    }
    w.finish().unwrap();
    let probs = dir.path("probs.parquet");
    let run = flipmend(&[
        "estimate",
        "--data",
        table.to_str().unwrap(),
        "--method",
        "counting",
        "--probs-out",
        probs.to_str().unwrap(),
    ]);
    run.assert_ok();
    (table, probs)
}

fn suspects(table: &Path, probs: &Path, out: &Path, extra: &[&str]) -> common::Run {
    let mut args = vec![
        "suspects",
        "--data",
        table.to_str().unwrap(),
        "--probs",
        probs.to_str().unwrap(),
        "--budget",
        "300",
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    flipmend(&args)
}

fn read(path: &Path) -> String {
    std::fs::read_to_string(path).unwrap()
}

/// `suspects` loaded and streamed with the whole table as the sample: the worklists and
/// their keys must be equal byte for byte. Returns the loaded run's worklist.
fn same_worklist_loaded_and_streamed(dir: &TempDir, table: &Path, probs: &Path) -> PathBuf {
    let (memory, streamed) = (dir.path("memory.csv"), dir.path("streamed.csv"));
    suspects(table, probs, &memory, &[]).assert_ok();
    let whole_sample = ["--max-memory", "0", "--sample-rows", "1000000"];
    let run = suspects(table, probs, &streamed, &whole_sample);
    run.assert_ok();
    let stdout = &run.stdout;
    assert!(stdout.contains("streamed in two passes"), "{stdout}");
    assert_eq!(read(&memory), read(&streamed), "the worklist");
    assert_eq!(
        read(&dir.path("memory.key.csv")),
        read(&dir.path("streamed.key.csv")),
        "the key: slices, ranks and verdicts"
    );
    memory
}

#[test]
fn a_streamed_run_with_the_whole_table_as_sample_gives_the_in_memory_worklist() {
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    same_worklist_loaded_and_streamed(&dir, &table, &probs);
    // Without control rows the ranked worklist is the same too.
    let (a, b) = (dir.path("a.csv"), dir.path("b.csv"));
    suspects(&table, &probs, &a, &["--control", "0"]).assert_ok();
    suspects(&table, &probs, &b, &["--control", "0", "--max-memory", "0"]).assert_ok();
    assert_eq!(read(&a), read(&b));
}

#[test]
fn a_small_sample_still_ranks_the_planted_errors_first() {
    // The demo's truth file (invented data) says which rows were flipped.
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    let out = dir.path("w.csv");
    let run = suspects(
        &table,
        &probs,
        &out,
        &[
            "--max-memory",
            "0",
            "--sample-rows",
            "3000",
            "--control",
            "0",
        ],
    );
    run.assert_ok();
    assert!(
        run.stdout.contains("a seeded uniform sample of 3000"),
        "{}",
        run.stdout
    );
    let truth_path = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/recycling_truth.csv");
    let truth: std::collections::HashMap<String, String> = read(&truth_path)
        .lines()
        .skip(1)
        .filter_map(|l| l.split_once(','))
        .map(|(a, b)| (a.to_string(), b.to_string()))
        .collect();
    let worklist = read(&out);
    let mut lines = worklist.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let (id, observed) = (
        header.iter().position(|h| *h == "id").unwrap(),
        header.iter().position(|h| *h == "observed").unwrap(),
    );
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    let wrong = rows.iter().filter(|r| truth[r[id]] != r[observed]).count();
    let precision = wrong as f64 / rows.len() as f64;
    // The in-memory default reaches about 0.9 here (README's validity table: demo P@F
    // 0.893); a 3,000-row sample must stay close.
    assert!(precision > 0.8, "precision {precision}");
}

#[test]
fn what_a_streamed_run_cannot_do_is_refused() {
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    let out = dir.path("w.csv");
    let demo = demo();
    let csv = demo.to_str().unwrap();
    flipmend(&["suspects", "--data", csv, "--max-memory", "0"])
        .assert_bad_input(&["needs the probabilities"]);
    let npy = dir.path("p.npy");
    std::fs::write(&npy, b"\x93NUMPY").unwrap();
    flipmend(&[
        "suspects",
        "--data",
        csv,
        "--probs",
        npy.to_str().unwrap(),
        "--max-memory",
        "0",
    ])
    .assert_bad_input(&["CSV, Parquet or Arrow IPC", "p.npy"]);
    suspects(
        &table,
        &probs,
        &out,
        &["--max-memory", "0", "--classes", "glass"],
    )
    .assert_bad_input(&["--classes"]);
    let run = suspects(&table, &probs, &out, &["--max-memory", "1.5x"]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(
        run.stderr.contains("not a size such as 800M"),
        "{}",
        run.stderr
    );
}

fn matrix_of(json: &Path) -> Vec<Vec<f64>> {
    let report: serde_json::Value = serde_json::from_str(&read(json)).unwrap();
    serde_json::from_value(report["matrix"].clone()).unwrap()
}

/// `estimate --method METHOD` loaded and streamed (on a sample of 500 of the 8,000
/// rows): the two matrices.
fn estimate_both(
    dir: &TempDir,
    table: &Path,
    probs: &Path,
    method: &str,
) -> (Vec<Vec<f64>>, Vec<Vec<f64>>) {
    let run = |name: &str, extra: &[&str]| {
        let json = dir.path(name);
        let mut args = vec![
            "estimate",
            "--data",
            table.to_str().unwrap(),
            "--probs",
            probs.to_str().unwrap(),
            "--method",
            method,
            "--json",
            json.to_str().unwrap(),
        ];
        args.extend_from_slice(extra);
        let run = flipmend(&args);
        run.assert_ok();
        (run.stdout, matrix_of(&json))
    };
    let (_, whole) = run("whole.json", &[]);
    let (stdout, streamed) = run(
        "streamed.json",
        &["--max-memory", "0", "--sample-rows", "500"],
    );
    assert!(stdout.contains("streamed: 8000 rows"), "{stdout}");
    (whole, streamed)
}

/// `review` of `reviewed` (its key beside it) against `table`, loaded and streamed: for
/// each, the printed report (the copy's name replaced), the JSON summary and the bytes
/// of the merged copy (named `.EXTENSION`).
fn review_both(
    dir: &TempDir,
    table: &Path,
    reviewed: &Path,
    extension: &str,
) -> [(String, String, Vec<u8>); 2] {
    let review = |name: &str, extra: &[&str]| {
        let out = dir.path(&format!("{name}.{extension}"));
        let json = dir.path(&format!("{name}.json"));
        let mut args = vec![
            "review",
            "--data",
            table.to_str().unwrap(),
            "--worklist",
            reviewed.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--json",
            json.to_str().unwrap(),
        ];
        args.extend_from_slice(extra);
        let run = flipmend(&args);
        run.assert_ok();
        let stdout = run.stdout.replace(out.to_str().unwrap(), "OUT");
        (stdout, read(&json), std::fs::read(&out).unwrap())
    };
    [
        review("merged-whole", &[]),
        review("merged-streamed", &["--max-memory", "0"]),
    ]
}

#[test]
fn estimators_that_read_every_row_give_the_in_memory_matrix_from_any_sample() {
    // anchor, quantile, trusted and counting run as passes over every row: with a
    // sample of 500 of the 8,000 rows their matrix must still be the in-memory one, to
    // the last bit (the quantile through three histogram passes, the sums in the same
    // order).
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    for method in ["anchor", "quantile", "trusted", "counting"] {
        let (whole, streamed) = estimate_both(&dir, &table, &probs, method);
        assert_eq!(whole, streamed, "{method}");
    }
    // The suspects ranked under such a matrix are the in-memory ones too.
    let (a, b) = (dir.path("a.csv"), dir.path("b.csv"));
    suspects(&table, &probs, &a, &["--method", "counting"]).assert_ok();
    suspects(
        &table,
        &probs,
        &b,
        &[
            "--method",
            "counting",
            "--max-memory",
            "0",
            "--sample-rows",
            "500",
        ],
    )
    .assert_ok();
    assert_eq!(read(&a), read(&b));
}

/// The demo's observed labels as one-hot probabilities in Parquet (id and one column
/// per class), row r taken from demo row `source(r)`, with the cell `blank` (row, class)
/// left null.
fn one_hot_probs(
    dir: &TempDir,
    name: &str,
    source: impl Fn(usize) -> usize,
    blank: Option<(usize, usize)>,
) -> PathBuf {
    let data = Dataset::load(&demo(), &TableOptions::default()).unwrap();
    let probs = dir.path(name);
    let mut columns = vec![OutColumn::new("id", CellKind::Text)];
    columns.extend(
        data.classes
            .iter()
            .map(|c| OutColumn::new(c.clone(), CellKind::Float)),
    );
    let mut file = File::create(&probs).unwrap();
    let mut w = TableWriter::new(&mut file, Format::Parquet, &columns).unwrap();
    for r in 0..data.rows() {
        let from = source(r);
        let mut cells = vec![data.id(from).into_owned()];
        cells.extend((0..data.classes.len()).map(|c| {
            let value = if c == data.labels[from] { "1" } else { "0" };
            let null = blank == Some((r, c));
            if null { "" } else { value }.to_string()
        }));
        w.row(&cells).unwrap();
    }
    w.finish().unwrap();
    probs
}

#[test]
fn probabilities_in_another_row_order_are_refused_with_the_row() {
    let dir = TempDir::new();
    let (table, _) = demo_parquet(&dir);
    // Probabilities whose first two rows are swapped.
    let source = |r: usize| match r {
        0 => 1,
        1 => 0,
        r => r,
    };
    let probs = one_hot_probs(&dir, "swapped.parquet", source, None);
    suspects(&table, &probs, &dir.path("w.csv"), &["--max-memory", "0"]).assert_bad_input(&[
        "swapped.parquet",
        "row 0",
        "table's row order",
    ]);
}

/// The blind worklist at `worklist` with verdicts filled in: every third item kept, every
/// third relabelled `glass`, the rest left blank (a mix of confirmations, changes and
/// rows not reviewed; some rows are already audited in the demo).
fn fill_review(worklist: &Path, to: &Path) {
    let text = read(worklist);
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    let mut out = format!("{header}\n");
    for (i, line) in lines.enumerate() {
        let verdict = ["keep", "glass", ""][i % 3];
        out.push_str(&format!("{line}{verdict}\n"));
    }
    std::fs::write(to, out).unwrap();
}

#[test]
fn a_streamed_review_gives_the_in_memory_report_and_merged_copy() {
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    let worklist = dir.path("w.csv");
    suspects(&table, &probs, &worklist, &[]).assert_ok();
    let reviewed = dir.path("reviewed.csv");
    fill_review(&worklist, &reviewed);
    std::fs::copy(dir.path("w.key.csv"), dir.path("reviewed.key.csv")).unwrap();
    let [whole, streamed] = review_both(&dir, &table, &reviewed, "parquet");
    assert!(whole.0.contains("control rows found wrong"), "{}", whole.0);
    assert_eq!(streamed.0, whole.0, "the printed report");
    assert_eq!(streamed.1, whole.1, "the JSON summary");
    assert!(
        streamed.2 == whole.2,
        "the merged Parquet copy, byte for byte"
    );
}

#[test]
fn a_streamed_review_checks_every_cell_against_the_table() {
    let dir = TempDir::new();
    let (table, probs) = demo_parquet(&dir);
    let worklist = dir.path("w.csv");
    suspects(&table, &probs, &worklist, &["--control", "0"]).assert_ok();
    let text = read(&worklist);
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    // Line 3 claims another observed label than the table holds.
    let mut cells: Vec<String> = lines[2].split(',').map(str::to_string).collect();
    cells[3] = if cells[3] == "glass" {
        "paper"
    } else {
        "glass"
    }
    .to_string();
    lines[2] = cells.join(",");
    let edited = dir.path("edited.csv");
    std::fs::write(&edited, lines.join("\n") + "\n").unwrap();
    flipmend(&[
        "review",
        "--data",
        table.to_str().unwrap(),
        "--worklist",
        edited.to_str().unwrap(),
        "--out",
        dir.path("m.parquet").to_str().unwrap(),
        "--max-memory",
        "0",
    ])
    .assert_bad_input(&["edited.csv", "line 3", "observed", "in the data"]);
    assert!(!dir.path("m.parquet").exists(), "nothing half-written");
}

/// The demo's own CSV and its out-of-fold probabilities as CSV (`--probs-out`).
fn demo_csv(dir: &TempDir) -> (PathBuf, PathBuf) {
    let probs = dir.path("probs.csv");
    flipmend(&[
        "estimate",
        "--data",
        demo().to_str().unwrap(),
        "--method",
        "counting",
        "--probs-out",
        probs.to_str().unwrap(),
    ])
    .assert_ok();
    (demo(), probs)
}

#[test]
fn a_streamed_csv_run_gives_the_in_memory_worklist_matrices_and_review() {
    let dir = TempDir::new();
    let (table, probs) = demo_csv(&dir);
    let memory = same_worklist_loaded_and_streamed(&dir, &table, &probs);
    for method in ["anchor", "quantile", "trusted", "counting"] {
        let (whole, streamed) = estimate_both(&dir, &table, &probs, method);
        assert_eq!(whole, streamed, "{method}");
    }
    // The review of that worklist: the same report and the same merged CSV copy.
    let reviewed = dir.path("reviewed.csv");
    fill_review(&memory, &reviewed);
    std::fs::copy(dir.path("memory.key.csv"), dir.path("reviewed.key.csv")).unwrap();
    let [whole, streamed] = review_both(&dir, &table, &reviewed, "csv");
    assert!(whole.0.contains("control rows found wrong"), "{}", whole.0);
    assert!(
        streamed == whole,
        "the report, the summary and the merged CSV copy"
    );
}

/// A small table and probability file written as text.
fn write(dir: &TempDir, name: &str, text: &str) -> PathBuf {
    let path = dir.path(name);
    std::fs::write(&path, text).unwrap();
    path
}

#[test]
fn a_streamed_csv_run_reads_quoted_and_blank_lines_as_the_in_memory_one() {
    // A quoted id over two lines and a blank line: rows and lines part, and both runs
    // must still agree on every row.
    let dir = TempDir::new();
    let table = write(
        &dir,
        "t.csv",
        "id,x,label\n\"a\nb\",1,cat\nr1,2,dog\n\nr2,3,cat\nr3,4,dog\nr4,5,cat\nr5,6,dog\n",
    );
    let probs = write(
        &dir,
        "p.csv",
        "id,cat,dog\n\"a\nb\",0.1,0.9\nr1,0.8,0.2\n\nr2,0.7,0.3\nr3,0.4,0.6\nr4,0.9,0.1\nr5,0.3,0.7\n",
    );
    let (a, b) = (dir.path("a.csv"), dir.path("b.csv"));
    suspects(&table, &probs, &a, &["--control", "0"]).assert_ok();
    suspects(&table, &probs, &b, &["--control", "0", "--max-memory", "0"]).assert_ok();
    assert_eq!(read(&a), read(&b));
    assert!(read(&a).contains("\"a\nb\""), "{}", read(&a));
}

#[test]
fn bad_csv_cells_in_a_streamed_run_are_reported_at_their_line_and_column() {
    let dir = TempDir::new();
    let run = |table: &Path, probs: &Path| {
        suspects(table, probs, &dir.path("w.csv"), &["--max-memory", "0"])
    };
    let good_table = "id,x,label\nr0,1,cat\nr1,2,dog\nr2,3,cat\n";
    let good_probs = "id,cat,dog\nr0,0.1,0.9\nr1,0.8,0.2\nr2,0.7,0.3\n";
    let table = write(&dir, "t.csv", good_table);
    let ragged = write(&dir, "ragged.csv", "id,x,label\nr0,1,cat\nr1,2,dog,9\n");
    run(&ragged, &table).assert_bad_input(&["ragged.csv", "line 3", "4 fields"]);
    let words = write(&dir, "words.csv", &good_probs.replace("0.8", "high"));
    run(&table, &words).assert_bad_input(&["words.csv", "line 3", "'cat'", "'high'"]);
    let sums = write(&dir, "sums.csv", &good_probs.replace("0.7,0.3", "0.7,0.7"));
    run(&table, &sums).assert_bad_input(&["sums.csv", "line 4", "sum to 1.4"]);
    // After a blank line the rows sit one line lower, and the report follows them.
    let blank = good_probs
        .replacen("\nr1", "\n\nr1", 1)
        .replace("0.7,0.3", "0.7,0.7");
    let blank = write(&dir, "blank.csv", &blank);
    run(&table, &blank).assert_bad_input(&["blank.csv", "line 5", "sum to 1.4"]);
    let swapped = good_probs.replace("r0,", "rX,");
    let swapped = write(&dir, "order.csv", &swapped);
    run(&table, &swapped).assert_bad_input(&["order.csv", "line 2", "'rX'", "table's row order"]);
    let short = write(&dir, "short.csv", "id,cat,dog\nr0,0.1,0.9\n");
    run(&table, &short).assert_bad_input(&["short.csv", "end after 1 rows"]);
    let long = write(&dir, "long.csv", &format!("{good_probs}r3,0.5,0.5\n"));
    run(&table, &long).assert_bad_input(&["long.csv", "line 5", "more rows than the table's 3"]);
}

#[test]
fn a_null_probability_in_a_streamed_parquet_run_names_its_row_group_and_offset() {
    let dir = TempDir::new();
    let (table, _) = demo_parquet(&dir);
    let probs = one_hot_probs(&dir, "holes.parquet", |r| r, Some((5, 0)));
    suspects(&table, &probs, &dir.path("w.csv"), &["--max-memory", "0"])
        .assert_bad_input(&["holes.parquet", "row 5 (row group 0, offset 5)"]);
}
