//! Probabilities written as CSV and as `.npy` load to the same array.

use std::path::Path;

use flipmend::data::{Dataset, ProbOptions, Probabilities, TableOptions};
use flipmend::io::npy;

#[test]
fn csv_and_npy_round_trip_to_the_same_array() {
    let dir = tempfile::tempdir().unwrap();
    let classes = ["c0", "c1", "c2", "c10"];
    let rows = 500;
    let mut data = String::from("id,x,label\n");
    let mut probs_csv = String::from("id,c10,c2,c1,c0\n"); // columns deliberately out of order
    let mut flat = Vec::with_capacity(rows * 4);
    for r in 0..rows {
        data.push_str(&format!("row{r},{},{}\n", r as f64 * 0.5, classes[r % 4]));
        let raw: Vec<f64> = (0..4)
            .map(|c| 1.0 + ((r * 7 + c * 13) % 17) as f64)
            .collect();
        let total: f64 = raw.iter().sum();
        let p: Vec<f32> = raw.iter().map(|v| (v / total) as f32).collect();
        probs_csv.push_str(&format!("row{r},{},{},{},{}\n", p[3], p[2], p[1], p[0]));
        flat.extend_from_slice(&p);
    }
    // Shuffle the CSV's row order: rows are joined by id, not position.
    let mut lines: Vec<&str> = probs_csv.lines().collect();
    lines[1..].reverse();
    let probs_csv = lines.join("\n");
    let data_path = dir.path().join("data.csv");
    std::fs::write(&data_path, data).unwrap();
    let dataset = Dataset::load(&data_path, &TableOptions::default()).unwrap();
    assert_eq!(dataset.classes, ["c0", "c1", "c2", "c10"]);
    let csv_path = dir.path().join("p.csv");
    std::fs::write(&csv_path, probs_csv).unwrap();
    let npy_path = dir.path().join("p.npy");
    let mut bytes = Vec::new();
    npy::write_2d(&mut bytes, rows, 4, &flat).unwrap();
    std::fs::write(&npy_path, bytes).unwrap();
    let options = ProbOptions::default();
    let from_csv = Probabilities::load(&csv_path, &dataset, &options).unwrap();
    let from_npy = Probabilities::load(&npy_path, &dataset, &options).unwrap();
    assert_eq!(
        from_csv.values, from_npy.values,
        "f32 values print and parse back exactly"
    );
    assert_eq!(from_npy.values.as_slice().unwrap(), &flat[..]);
    assert_eq!(Path::new(&from_npy.path), npy_path);
}
