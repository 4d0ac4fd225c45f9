//! Benchmark of the loaders: table CSV, probability CSV and `.npy`.
//!
//! `cargo bench --bench load` generates a seeded synthetic table (200,000 × 32, 10
//! classes, with ids and a sparse trusted column) in a temp folder and times each loader
//! (median of 5 runs after one warm-up). `cargo bench --bench load -- FILE.csv` times the
//! table loader on your own file instead (e.g. one from shared/bench/make_data.py).
//! Peak memory is a property of the whole process: measure it with
//! `/usr/bin/time -f %M target/release/flipmend inspect --data FILE`.

use std::io::Write;
use std::path::Path;

use flipmend::data::{Dataset, ProbOptions, Probabilities, TableOptions};
use flipmend::io::npy;

mod common;

use common::Rng;

const RUNS: usize = 5;

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with("--"))
        .collect();
    if let Some(path) = args.first() {
        let size = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
        bench("table csv (your file)", size, || {
            Dataset::load(Path::new(path), &TableOptions::default()).map(|d| d.rows())
        });
        return;
    }
    cell_parsers();
    let dir = tempfile::tempdir().expect("temp dir");
    let (rows, features, classes) = (200_000, 32, 10);
    let data_path = dir.path().join("data.csv");
    write_table(&data_path, rows, features, classes);
    let size = std::fs::metadata(&data_path).map(|m| m.len()).unwrap_or(0);
    bench("table csv 200000x32", size, || {
        Dataset::load(&data_path, &TableOptions::default()).map(|d| d.rows())
    });
    let data =
        Dataset::load(&data_path, &TableOptions::default()).expect("the generated table loads");
    let probs = probabilities(rows, classes);
    let csv_path = dir.path().join("probs.csv");
    write_probs_csv(&csv_path, &data, &probs, classes);
    let npy_path = dir.path().join("probs.npy");
    let mut bytes = Vec::new();
    npy::write_2d(&mut bytes, rows, classes, &probs).expect("in memory");
    std::fs::write(&npy_path, bytes).expect("write npy");
    let options = ProbOptions::default();
    for (name, path) in [
        ("probs csv 200000x10 (joined by id)", &csv_path),
        ("probs npy f32 200000x10", &npy_path),
    ] {
        let size = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
        bench(name, size, || {
            Probabilities::load(path, &data, &options).map(|p| p.values.nrows())
        });
    }
}

/// Our cell parser (short-decimal fast path, then fast-float2) against fast-float2's own
/// partial parser alone, on the cells the table writer below produces (`{:.6}`), side by
/// side in one run. `io::number` keeps its fast path only while the first line is faster.
fn cell_parsers() {
    let mut rng = Rng(0x5EED_F11B_3E4D_0003);
    let cells: Vec<String> = (0..1_000_000)
        .map(|_| format!("{:.6}", (rng.unit() - 0.5) * 8.0))
        .collect();
    let ours = || {
        cells
            .iter()
            .map(|c| flipmend::io::number::parse_f64(c.as_bytes()).unwrap_or(0.0))
            .sum::<f64>()
    };
    let library = || {
        cells
            .iter()
            .map(
                |c| match fast_float2::parse_partial::<f64, _>(c.as_bytes()) {
                    Ok((v, used)) if used == c.len() => v,
                    _ => 0.0,
                },
            )
            .sum::<f64>()
    };
    assert_eq!(ours().to_bits(), library().to_bits(), "both parse alike");
    for (name, parse) in [
        (
            "cell parser: ours (fast path + fast-float2)",
            &ours as &dyn Fn() -> f64,
        ),
        ("cell parser: fast-float2 parse_partial", &library),
    ] {
        let (median, _) = common::time(RUNS, || {
            std::hint::black_box(parse());
        });
        let ns_per_cell = median.as_secs_f64() * 1e9 / cells.len() as f64;
        println!("{name:<44} median {ns_per_cell:>6.2} ns per cell");
    }
}

fn bench<T>(name: &str, bytes: u64, mut run: impl FnMut() -> flipmend::Result<T>) {
    let (median, fastest) = common::time(RUNS, || {
        run().unwrap_or_else(|e| panic!("{name}: {e}"));
    });
    let median = median.as_secs_f64();
    let mib_per_sec = bytes as f64 / (1 << 20) as f64 / median;
    println!(
        "{name:<40} median {median:>8.4} s  min {:>8.4} s  {mib_per_sec:>7.1} MiB/s",
        fastest.as_secs_f64()
    );
}

fn write_table(path: &Path, rows: usize, features: usize, classes: usize) {
    let mut rng = Rng(0x5EED_F11B_3E4D_0001);
    let mut out = std::io::BufWriter::new(std::fs::File::create(path).expect("create"));
    let names: Vec<String> = (0..features).map(|f| format!("f{f}")).collect();
    writeln!(out, "id,{},label,trusted", names.join(",")).expect("write");
    for r in 0..rows {
        let label = rng.next() as usize % classes;
        let cells: Vec<String> = (0..features)
            .map(|_| format!("{:.6}", (rng.unit() - 0.5) * 8.0))
            .collect();
        let trusted = if r % 50 == 0 {
            format!("c{label}")
        } else {
            String::new()
        };
        writeln!(out, "{r},{},c{label},{trusted}", cells.join(",")).expect("write");
    }
}

fn probabilities(rows: usize, classes: usize) -> Vec<f32> {
    let mut rng = Rng(0x5EED_F11B_3E4D_0002);
    let mut flat = Vec::with_capacity(rows * classes);
    for _ in 0..rows {
        let raw: Vec<f64> = (0..classes).map(|_| rng.unit() + 0.01).collect();
        let total: f64 = raw.iter().sum();
        flat.extend(raw.iter().map(|v| (v / total) as f32));
    }
    flat
}

fn write_probs_csv(path: &Path, data: &Dataset, probs: &[f32], classes: usize) {
    let mut out = std::io::BufWriter::new(std::fs::File::create(path).expect("create"));
    writeln!(out, "id,{}", data.classes.join(",")).expect("write");
    for (r, row) in probs.chunks(classes).enumerate() {
        let cells: Vec<String> = row.iter().map(|v| v.to_string()).collect();
        writeln!(out, "{},{}", data.id(r), cells.join(",")).expect("write");
    }
}
