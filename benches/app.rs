//! The desktop app's state on a million rows, without a window: load a 1,000,000 × 32
//! table with 10 classes and its probabilities (.npy), then edit matrix cells and time
//! each edit until the re-ranked table is in the state (what the next frame draws: the
//! head of the new ranking), and until the whole ranking is in order. Aim: under 50 ms
//! per edit. Reports peak memory (VmHWM) at the end.
//!
//! Run: `cargo bench --bench app`.

mod common;

use std::io::Write;
use std::path::Path;
use std::sync::Arc;
use std::time::{Duration, Instant};

use common::Rng;
use flipmend::gui::command::Command;
use flipmend::gui::state::AppState;
use flipmend::io::session::Roles;

const ROWS: usize = 1_000_000;
const FEATURES: usize = 32;
const CLASSES: usize = 10;

fn main() {
    let dir = std::env::temp_dir().join("flipmend-bench-app");
    std::fs::create_dir_all(&dir).expect("a temp folder");
    let (data, probs) = (dir.join("table.csv"), dir.join("probs.npy"));
    write_inputs(&data, &probs);
    let mut state = AppState::new(Arc::new(|| {}));
    state.apply(Command::UseProbabilitiesFile(probs.clone()));
    let started = Instant::now();
    state.apply(Command::LoadData(data, Roles::default()));
    state.settle(600.0);
    println!(
        "app: load 1000000x32 table + .npy probabilities, estimate, rank, diagnose: {:.2} s",
        started.elapsed().as_secs_f64()
    );
    assert!(state.ranking().is_some(), "{:?}", state.messages());
    let mut latencies: Vec<Duration> = Vec::new();
    let mut complete: Vec<Duration> = Vec::new();
    for edit in 0..15 {
        let value = 0.05 + 0.003 * edit as f64;
        let started = Instant::now();
        state.apply(Command::SetCell {
            row: edit % CLASSES,
            col: (edit + 1) % CLASSES,
            value,
        });
        state.apply(Command::EndGesture);
        let version = state.editor().unwrap().version();
        while state.ranking().map(|r| r.matrix_version) != Some(version) {
            state.poll();
            std::thread::sleep(Duration::from_micros(200));
        }
        latencies.push(started.elapsed());
        while !state.ranking().is_some_and(|r| r.is_complete()) {
            state.poll();
            std::thread::sleep(Duration::from_micros(200));
        }
        complete.push(started.elapsed());
        state.settle(60.0);
    }
    latencies.sort();
    complete.sort();
    println!(
        "app: cell edit to re-ranked table 1000000x10 (15 edits)  median {:.1} ms  min {:.1} ms  max {:.1} ms",
        ms(latencies[latencies.len() / 2]),
        ms(latencies[0]),
        ms(latencies[latencies.len() - 1])
    );
    println!(
        "app: cell edit to the whole ranking in order (15 edits)  median {:.1} ms",
        ms(complete[complete.len() / 2])
    );
    review_steps(&mut state);
    println!("app: peak memory (VmHWM) {} MiB", peak_mib());
}

/// What a reviewer waits for on the UI thread: sorting the suspects table by a column,
/// giving a verdict (the trusted labels rebuilt; the new estimate runs in the
/// background), and each class's typical values (computed at load).
fn review_steps(state: &mut AppState) {
    use flipmend::gui::state::{SuspectColumn, SuspectSort};
    for column in [
        SuspectColumn::SecondChoiceProb,
        SuspectColumn::Id,
        SuspectColumn::Row,
    ] {
        let started = Instant::now();
        state.apply(Command::SortSuspects(Some(SuspectSort {
            column,
            descending: false,
        })));
        println!(
            "app: sort the 1000000-row suspects table by {column:?}: {:.1} ms",
            ms(started.elapsed())
        );
    }
    state.apply(Command::SortSuspects(None));
    // Back to the estimate: a matrix changed by hand does not follow verdicts.
    state.apply(Command::ResetMatrix);
    state.settle(600.0);
    let mut verdicts: Vec<Duration> = Vec::new();
    for row in 0..15 {
        let started = Instant::now();
        state.apply(Command::Verdict { row, label: 0 });
        verdicts.push(started.elapsed());
    }
    verdicts.sort();
    println!(
        "app: a verdict on the UI thread (15 verdicts)  median {:.1} ms  max {:.1} ms",
        ms(verdicts[verdicts.len() / 2]),
        ms(verdicts[verdicts.len() - 1])
    );
    let started = Instant::now();
    state.settle(600.0);
    println!(
        "app: the estimate and ranking with the verdicts, in the background: {:.2} s",
        started.elapsed().as_secs_f64()
    );
    let data = state.data().expect("data").clone();
    let started = Instant::now();
    let typical = flipmend::data::typical::typical_values(&data);
    println!(
        "app: typical values of {} classes (at load): {:.1} ms",
        typical.rows.len(),
        ms(started.elapsed())
    );
}

fn ms(d: Duration) -> f64 {
    d.as_secs_f64() * 1000.0
}

fn peak_mib() -> u64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|kb| kb.parse::<u64>().ok())
        .map_or(0, |kb| kb / 1024)
}

/// A table whose label depends on the features, and probabilities that agree with it
/// most of the time (seeded; written once and reused).
fn write_inputs(data: &Path, probs: &Path) {
    if data.exists() && probs.exists() {
        return;
    }
    let mut rng = Rng(0x5EED_0A99_0000_0001);
    let mut csv = std::io::BufWriter::new(std::fs::File::create(data).expect("table"));
    let header: Vec<String> = (0..FEATURES).map(|f| format!("f{f}")).collect();
    writeln!(csv, "{},label", header.join(",")).unwrap();
    let mut values: Vec<f32> = Vec::with_capacity(ROWS * CLASSES);
    for _ in 0..ROWS {
        let class = (rng.next() % CLASSES as u64) as usize;
        let mut line = String::new();
        for f in 0..FEATURES {
            let centre = if f % CLASSES == class { 2.0 } else { 0.0 };
            line.push_str(&format!("{:.4},", centre + rng.unit() * 2.0 - 1.0));
        }
        let observed = if rng.unit() < 0.2 {
            (class + 1) % CLASSES
        } else {
            class
        };
        writeln!(csv, "{line}c{observed}").unwrap();
        let mut row: Vec<f64> = (0..CLASSES).map(|_| rng.unit()).collect();
        row[class] += 4.0;
        row[(class + 1) % CLASSES] += 0.8;
        let total: f64 = row.iter().sum();
        values.extend(row.iter().map(|v| (v / total) as f32));
    }
    csv.flush().unwrap();
    write_npy(probs, &values, ROWS, CLASSES);
}

/// A little-endian f4 .npy file, C order (format version 1.0).
fn write_npy(path: &Path, values: &[f32], rows: usize, cols: usize) {
    let mut header =
        format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut out = std::io::BufWriter::new(std::fs::File::create(path).expect("npy"));
    out.write_all(b"\x93NUMPY\x01\x00").unwrap();
    out.write_all(&(header.len() as u16).to_le_bytes()).unwrap();
    out.write_all(header.as_bytes()).unwrap();
    for v in values {
        out.write_all(&v.to_le_bytes()).unwrap();
    }
    out.flush().unwrap();
}
