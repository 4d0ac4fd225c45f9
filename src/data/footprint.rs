//! Will a table fit? The memory a load would take, estimated before reading it, against
//! the memory the machine has free, so the app can refuse a table that would push the
//! machine into swap (a frozen desktop) with a message instead.

use std::path::Path;

use crate::io::columnar::{ColumnarFile, Format};

/// Peak memory of a load over the size of its numeric array, measured on 1,000,000 × 32
/// (`benches/vs_pyarrow_parquet.sh`, `benches/vs_pandas_load.sh`): Parquet 1.46×, CSV
/// 1.63×; rounded up.
const PEAK_OVER_VALUES: f64 = 1.7;
/// Bytes a typical numeric CSV file takes per value: the 1,000,000 × 32 benchmark file
/// holds 32,000,000 values in 267 MiB, 8.7 bytes each. A file of shorter cells holds more
/// values than this counts, so its estimate is low; the load then goes ahead as before.
const CSV_BYTES_PER_VALUE: f64 = 8.0;

/// The memory loading `path` would take at its peak, in bytes; `None` when it cannot be
/// told without reading the file (then the load just goes ahead).
pub fn load_bytes(path: &Path) -> Option<u64> {
    let format = Format::of(path);
    let values = if format.is_columnar() {
        let file = ColumnarFile::open(path, format).ok()?;
        let columns = file.schema.fields().len() as f64;
        file.rows() as f64 * columns
    } else {
        std::fs::metadata(path).ok()?.len() as f64 / CSV_BYTES_PER_VALUE
    };
    Some((values * 8.0 * PEAK_OVER_VALUES) as u64)
}

/// Memory the system can give without swapping (Linux `MemAvailable`), in bytes; `None`
/// elsewhere.
pub fn available_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    parse_available(&text)
}

fn parse_available(meminfo: &str) -> Option<u64> {
    let line = meminfo.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// Why `path` should not be loaded here, when it needs more memory than is free.
pub fn too_large(path: &Path) -> Option<String> {
    too_large_with(path, available_bytes()?)
}

/// [`too_large`] with `free` bytes free.
fn too_large_with(path: &Path, free: u64) -> Option<String> {
    let need = load_bytes(path)?;
    (need > free).then(|| {
        format!(
            "{} would need about {:.1} GiB of memory to load and this machine has {:.1} GiB free; {}",
            path.display(),
            need as f64 / GIB,
            free as f64 / GIB,
            stream_offer(path)
        )
    })
}

/// What to do instead of loading: the command line's streamed run, two passes in
/// bounded memory over a CSV, Parquet or Arrow IPC table alike.
fn stream_offer(path: &Path) -> String {
    format!(
        "the command line ranks it in two passes with bounded memory: \
         flipmend suspects --data {0} --probs PROBS --budget 1000 --out worklist.csv \
         (PROBS may be {0} itself when it holds the class columns)",
        path.display()
    )
}

const GIB: f64 = (1u64 << 30) as f64;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn meminfo_available_is_read_in_bytes() {
        let text = "MemTotal:       24000000 kB\nMemFree:  100 kB\nMemAvailable:   2048 kB\n";
        assert_eq!(parse_available(text), Some(2048 * 1024));
        assert_eq!(parse_available("MemTotal: 1 kB\n"), None);
    }

    #[test]
    fn a_parquet_table_is_sized_from_its_footer() {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/good.parquet");
        // 6 rows × 5 columns × 8 bytes × the measured peak factor.
        assert_eq!(
            load_bytes(&path),
            Some((6.0 * 5.0 * 8.0 * PEAK_OVER_VALUES) as u64)
        );
        assert!(too_large_with(&path, 1 << 20).is_none());
        let message = too_large_with(&path, 100).expect("refused with 100 bytes free");
        assert!(
            message.contains("good.parquet would need about 0.0 GiB"),
            "{message}"
        );
        assert!(
            message.contains("flipmend suspects --data") && message.contains("good.parquet"),
            "a columnar file is offered the streamed run: {message}"
        );
    }

    #[test]
    fn a_csv_table_is_sized_from_its_bytes_and_offered_the_streamed_run() {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/recycling.csv");
        let bytes = std::fs::metadata(&path).unwrap().len() as f64;
        let expected = bytes / CSV_BYTES_PER_VALUE * 8.0 * PEAK_OVER_VALUES;
        assert_eq!(load_bytes(&path), Some(expected as u64));
        let message = too_large_with(&path, 100).expect("refused with 100 bytes free");
        assert!(
            message.contains("flipmend suspects --data") && message.contains("recycling.csv"),
            "a CSV file is offered the streamed run too: {message}"
        );
    }
}
