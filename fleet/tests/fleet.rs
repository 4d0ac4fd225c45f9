//! The distributed runner against the single-machine one (flipmend's own command line,
//! the code the `flipmend` binary runs) on the same rows: a seeded table with a known
//! flip matrix (invented fruit-sorting labels), written once as one Parquet file and
//! once as several files of several row groups. The matrix must agree to 1e-9 and the
//! worklist and its key byte for byte, in this process and on an in-process Ballista
//! cluster (a scheduler and an executor over localhost gRPC).

use std::path::{Path, PathBuf};
use std::sync::Arc;

use clap::Parser;
use datafusion::arrow::array::{ArrayRef, Float64Array, RecordBatch, StringArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::parquet::file::properties::WriterProperties;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const CLASSES: [&str; 4] = ["apple", "kiwi", "lime", "plum"];
/// The generating flip matrix (rows: true class).
const FLIPS: [[f64; 4]; 4] = [
    [0.80, 0.15, 0.05, 0.00],
    [0.10, 0.85, 0.05, 0.00],
    [0.00, 0.10, 0.90, 0.00],
    [0.05, 0.00, 0.15, 0.80],
];

/// `rows` rows: id, label, trusted (a random tenth audited), one probability column per
/// class (rounded to 2 decimals, so that many rows tie).
fn table(rows: usize, seed: u64) -> RecordBatch {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (mut ids, mut labels, mut trusted) = (Vec::new(), Vec::new(), Vec::new());
    let mut probs = vec![Vec::new(); 4];
    for r in 0..rows {
        let truth = rng.random_range(0..4);
        let draw: f64 = rng.random();
        let mut acc = 0.0;
        let observed = (0..4)
            .find(|&j| {
                acc += FLIPS[truth][j];
                draw < acc
            })
            .unwrap_or(3);
        // A clean classifier's posterior, seen through the flips.
        let logits: Vec<f64> = (0..4)
            .map(|c| if c == truth { 2.5 } else { 0.0 } + rng.random::<f64>() * 1.5)
            .collect();
        let total: f64 = logits.iter().map(|l| l.exp()).sum();
        let clean: Vec<f64> = logits.iter().map(|l| l.exp() / total).collect();
        let noisy: Vec<f64> = (0..4)
            .map(|j| (0..4).map(|i| clean[i] * FLIPS[i][j]).sum::<f64>())
            .collect();
        let mut rounded: Vec<f64> = noisy.iter().map(|p| (p * 100.0).round() / 100.0).collect();
        let rest: f64 = rounded[..3].iter().sum();
        rounded[3] = ((1.0 - rest) * 100.0).round() / 100.0;
        ids.push(format!("F{r:05}"));
        labels.push(CLASSES[observed]);
        trusted.push((rng.random::<f64>() < 0.1).then_some(CLASSES[truth]));
        for (c, p) in rounded.into_iter().enumerate() {
            probs[c].push(p);
        }
    }
    let mut fields = vec![
        Field::new("id", DataType::Utf8, false),
        Field::new("label", DataType::Utf8, false),
        Field::new("trusted", DataType::Utf8, true),
    ];
    let mut columns: Vec<ArrayRef> = vec![
        Arc::new(StringArray::from(ids)),
        Arc::new(StringArray::from(labels)),
        Arc::new(StringArray::from(trusted)),
    ];
    for (c, values) in probs.into_iter().enumerate() {
        fields.push(Field::new(CLASSES[c], DataType::Float64, false));
        columns.push(Arc::new(Float64Array::from(values)));
    }
    RecordBatch::try_new(Arc::new(Schema::new(fields)), columns).unwrap()
}

fn write(path: &Path, batch: &RecordBatch, group_rows: usize) {
    let props = WriterProperties::builder()
        .set_max_row_group_row_count(Some(group_rows))
        .build();
    let file = std::fs::File::create(path).unwrap();
    let mut writer = ArrowWriter::try_new(file, batch.schema(), Some(props)).unwrap();
    writer.write(batch).unwrap();
    writer.close().unwrap();
}

/// The rows as one file and as a folder of files cut at uneven places.
fn files(dir: &Path) -> (PathBuf, PathBuf) {
    let batch = table(6000, 7);
    let whole = dir.join("whole.parquet");
    write(&whole, &batch, 1000);
    let parts = dir.join("parts");
    std::fs::create_dir(&parts).unwrap();
    let cuts = [0, 1700, 1701, 4200, 6000];
    for (i, w) in cuts.windows(2).enumerate() {
        let name = parts.join(format!("part-{i}.parquet"));
        write(&name, &batch.slice(w[0], w[1] - w[0]), 600);
    }
    (whole, parts)
}

/// flipmend's own command `line` (words split at spaces), run as the binary runs it.
fn single(line: &str) -> String {
    let words = std::iter::once("flipmend").chain(line.split_whitespace());
    let cli = flipmend::cli::Cli::try_parse_from(words).unwrap();
    let mut out = Vec::new();
    flipmend::cli::run(cli, &mut out).unwrap();
    String::from_utf8(out).unwrap()
}

/// This runner's command `line`.
fn fleet(line: &str) -> flipmend::Result<String> {
    let words = std::iter::once("flipmend-fleet").chain(line.split_whitespace());
    let cli = flipmend_fleet::cli::Cli::try_parse_from(words).unwrap();
    let mut out = Vec::new();
    flipmend_fleet::cli::run(cli, &mut out)?;
    Ok(String::from_utf8(out).unwrap())
}

fn matrix(json: &Path) -> Vec<Vec<f64>> {
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(json).unwrap()).unwrap();
    serde_json::from_value(report["matrix"].clone()).unwrap()
}

fn assert_close(a: &[Vec<f64>], b: &[Vec<f64>], what: &str) {
    for (ra, rb) in a.iter().zip(b) {
        for (x, y) in ra.iter().zip(rb) {
            assert!((x - y).abs() <= 1e-9, "{what}: {a:?} against {b:?}");
        }
    }
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn the_engine_gives_the_single_machine_matrix_and_worklist() {
    let dir = tempfile::tempdir().unwrap();
    let (whole, parts) = files(dir.path());
    let (whole, parts) = (s(&whole), s(&parts));
    let out = |name: &str| dir.path().join(name);
    let one = format!("--data {whole} --probs {whole} --max-memory 0 --sample-rows 2500");
    let many = format!("--data {parts} --probs {parts} --sample-rows 2500 --partitions 3");
    // Every estimator in this process; the default and one that reads every row on an
    // in-process Ballista cluster too.
    let runs = [
        ("joint", ""),
        ("joint", "--standalone"),
        ("counting", ""),
        ("trusted", "--standalone"),
        ("anchor", ""),
        ("quantile", ""),
    ];
    for (method, engine) in runs {
        let (a, b) = (
            out(&format!("{method}-a.json")),
            out(&format!("{method}{engine}-b.json")),
        );
        single(&format!(
            "estimate {one} --method {method} --json {}",
            s(&a)
        ));
        fleet(&format!(
            "estimate {many} --method {method} --json {} {engine}",
            s(&b)
        ))
        .unwrap();
        assert_close(&matrix(&a), &matrix(&b), &format!("{method} {engine}"));
    }
    for (method, engine) in [("joint", "--standalone"), ("counting", "")] {
        let (a, b) = (
            out(&format!("w-{method}-a.csv")),
            out(&format!("w-{method}-b.csv")),
        );
        let job = format!("--method {method} --budget 150");
        single(&format!("suspects {one} {job} --out {}", s(&a)));
        fleet(&format!("suspects {many} {job} --out {} {engine}", s(&b))).unwrap();
        let read = |p: &Path| std::fs::read(p).unwrap();
        assert_eq!(read(&a), read(&b), "worklist, {method} {engine}");
        let key = |p: &Path| read(&p.with_extension("key.csv"));
        assert_eq!(key(&a), key(&b), "worklist key, {method} {engine}");
    }
}

#[test]
fn a_bad_cell_in_one_file_is_bad_input_named_by_its_table_row() {
    let dir = tempfile::tempdir().unwrap();
    let (_, parts) = files(dir.path());
    // The second file's rows (table rows 1700 to 1709) do not sum to 1.
    let batch = table(10, 3);
    let mut columns = batch.columns().to_vec();
    columns[3] = Arc::new(Float64Array::from(vec![0.9; 10]));
    let bad = RecordBatch::try_new(batch.schema(), columns).unwrap();
    write(&parts.join("part-1.parquet"), &bad, 5);
    let parts = s(&parts);
    let err = fleet(&format!(
        "suspects --data {parts} --probs {parts} --budget 10"
    ))
    .unwrap_err();
    assert!(err.is_bad_input(), "{err}");
    // Workers meet the bad rows in any order.
    let message = err.to_string();
    assert!(
        message.contains("row 170") && message.contains("sum to"),
        "{err}"
    );
}

#[test]
fn probabilities_in_other_files_are_refused_with_the_reason() {
    let dir = tempfile::tempdir().unwrap();
    let (whole, parts) = files(dir.path());
    let line = format!("estimate --data {} --probs {}", s(&parts), s(&whole));
    let err = fleet(&line).unwrap_err();
    assert!(err.to_string().contains("table's own files"), "{err}");
}
