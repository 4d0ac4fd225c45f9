//! Inputs at the edges of size and shape: each gives a result or a clear error in bounded
//! time and memory, never a hang or a panic.

mod common;

use std::io::Write;

use common::{flipmend, TempDir};

#[test]
fn a_table_with_many_columns_loads_in_linear_time() {
    // A million columns and three rows: any step quadratic in the column count would take
    // hours here (the checks of unique names and of roles used to be).
    let dir = TempDir::new();
    let path = dir.path("wide.csv");
    let columns = 1_000_000;
    let mut f = std::io::BufWriter::new(std::fs::File::create(&path).unwrap());
    let names: Vec<String> = (0..columns).map(|c| format!("f{c}")).collect();
    writeln!(f, "{},label", names.join(",")).unwrap();
    for (r, label) in ["a", "b", "a"].iter().enumerate() {
        let cells: Vec<String> = (0..columns).map(|c| ((c + r) % 10).to_string()).collect();
        writeln!(f, "{},{label}", cells.join(",")).unwrap();
    }
    drop(f);
    let json = dir.path("r.json");
    flipmend(&[
        "inspect",
        "--data",
        &path.to_string_lossy(),
        "--json",
        &json.to_string_lossy(),
    ])
    .assert_ok();
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(report["features"].as_array().unwrap().len(), columns);
    assert_eq!(report["rows"], 3);
}

#[test]
fn a_label_column_with_one_value_is_refused() {
    let dir = TempDir::new();
    let path = dir.path("one.csv");
    std::fs::write(&path, "x,label\n1,same\n2,same\n3,same\n").unwrap();
    flipmend(&["estimate", "--data", &path.to_string_lossy()])
        .assert_bad_input(&["found 1 class(es) (same)"]);
}

#[test]
fn a_probability_file_of_the_right_size_with_the_wrong_content() {
    let dir = TempDir::new();
    let data = dir.path("d.csv");
    std::fs::write(&data, "x,label\n1,a\n2,b\n3,a\n").unwrap();
    // Right size for 3 × 2 float64, but the header says int64 and the data is text.
    let mut bytes = Vec::new();
    flipmend::io::npy::write_2d(&mut bytes, 3, 2, &[0.5f64; 6]).unwrap();
    let at = bytes.windows(3).position(|w| w == b"<f8").unwrap();
    bytes[at..at + 3].copy_from_slice(b"<i8");
    let npy = dir.path("p.npy");
    std::fs::write(&npy, &bytes).unwrap();
    flipmend(&[
        "inspect",
        "--data",
        &data.to_string_lossy(),
        "--probs",
        &npy.to_string_lossy(),
    ])
    .assert_bad_input(&["holds '<i8'"]);
    // Right header, garbage values (NaN bit patterns).
    let mut nan = Vec::new();
    flipmend::io::npy::write_2d(&mut nan, 3, 2, &[f64::NAN; 6]).unwrap();
    std::fs::write(&npy, &nan).unwrap();
    flipmend(&[
        "inspect",
        "--data",
        &data.to_string_lossy(),
        "--probs",
        &npy.to_string_lossy(),
    ])
    .assert_bad_input(&["p.npy, row 0, column 1 'a'", "outside [0, 1]"]);
}

#[test]
fn a_single_enormous_field_is_refused_within_bounded_memory() {
    // 65 MiB without a newline after the header: one record larger than the 64 MiB limit.
    let dir = TempDir::new();
    let path = dir.path("huge.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&path).unwrap());
    writeln!(f, "x,label").unwrap();
    let chunk = vec![b'7'; 1 << 20];
    for _ in 0..65 {
        f.write_all(&chunk).unwrap();
    }
    f.write_all(b",a").unwrap();
    drop(f);
    flipmend(&["inspect", "--data", &path.to_string_lossy()])
        .assert_bad_input(&["huge.csv, line 2", "longer than 64 MiB"]);
}

/// Hands out `first`, then behaves as `then` says: another program replacing, truncating
/// or appending to the file while flipmend reads it.
struct ChangingReader {
    first: std::io::Cursor<Vec<u8>>,
    then: After,
}

enum After {
    /// The rest of the stream is these bytes (the file's content changed shape).
    Bytes(std::io::Cursor<Vec<u8>>),
    /// Reading fails (the file was removed or the disk went away).
    Fails,
}

impl std::io::Read for ChangingReader {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.first.read(buf)?;
        if n > 0 {
            return Ok(n);
        }
        match &mut self.then {
            After::Bytes(rest) => rest.read(buf),
            After::Fails => Err(std::io::Error::other(
                "the file was truncated by another program",
            )),
        }
    }
}

fn rows(from: usize, to: usize, extra: &str) -> Vec<u8> {
    (from..to)
        .map(|i| format!("{i},{}.5{extra},{}\n", i % 7, ["a", "b"][i % 2]))
        .collect::<String>()
        .into_bytes()
}

fn load(reader: ChangingReader) -> flipmend::Result<flipmend::data::Dataset> {
    // A size hint far from the truth (1 TiB), as when the file shrinks after its size was
    // read: it may only affect allocation, never the result. (It used to abort the
    // process: the loader reserved memory for the hinted size without a fallback.)
    flipmend::data::Dataset::from_reader(
        reader,
        std::path::Path::new("changing.csv"),
        Some(1 << 40),
        &flipmend::data::TableOptions::default(),
    )
}

#[test]
fn a_file_that_changes_shape_while_it_is_read_gives_a_located_error() {
    let mut first = b"id,x,label\n".to_vec();
    first.extend(rows(0, 200_000, ""));
    // From row 200,000 on, the lines carry one more field.
    let reader = ChangingReader {
        first: std::io::Cursor::new(first),
        then: After::Bytes(std::io::Cursor::new(rows(200_000, 200_010, ",9"))),
    };
    let message = load(reader).unwrap_err().to_string();
    assert!(
        message.contains("changing.csv") && message.contains("line 200002"),
        "{message}"
    );
}

#[test]
fn a_file_that_fails_while_it_is_read_gives_a_read_error() {
    let mut first = b"id,x,label\n".to_vec();
    first.extend(rows(0, 300_000, ""));
    let reader = ChangingReader {
        first: std::io::Cursor::new(first),
        then: After::Fails,
    };
    let message = load(reader).unwrap_err().to_string();
    assert!(
        message.contains("changing.csv")
            && message.contains("cannot read")
            && message.contains("truncated"),
        "{message}"
    );
}

#[test]
fn a_file_cut_short_mid_record_while_it_is_read_gives_a_located_error() {
    // The stream ends inside a record: the last line has two of its three fields.
    let mut first = b"id,x,label\n".to_vec();
    first.extend(rows(0, 100_000, ""));
    first.extend(b"100000,1.5");
    let reader = ChangingReader {
        first: std::io::Cursor::new(first),
        then: After::Bytes(std::io::Cursor::new(Vec::new())),
    };
    let message = load(reader).unwrap_err().to_string();
    assert!(message.contains("line 100002"), "{message}");
}

#[test]
fn a_probability_stream_shorter_than_its_header_says_is_refused() {
    // A .npy whose data part stops early (the file was being rewritten).
    let data = flipmend::data::Dataset::from_reader(
        &b"x,label\n1,a\n2,b\n3,a\n"[..],
        std::path::Path::new("t.csv"),
        None,
        &flipmend::data::TableOptions::default(),
    )
    .unwrap();
    let mut npy = Vec::new();
    flipmend::io::npy::write_2d(&mut npy, 3, 2, &[0.5f32, 0.5, 0.2, 0.8, 0.9, 0.1]).unwrap();
    npy.truncate(npy.len() - 6);
    let error = flipmend::data::Probabilities::from_npy_reader(
        &npy[..],
        std::path::Path::new("p.npy"),
        &data,
        &flipmend::data::ProbOptions::default(),
    )
    .unwrap_err();
    assert!(error.to_string().contains("p.npy"), "{error}");
}
