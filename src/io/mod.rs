//! Writing outputs safely (atomically, and never over one of the command's inputs), the
//! file formats flipmend reads and writes, and the worklist files exchanged with
//! annotators.

pub mod annotations_long;
pub(crate) mod arrow_cells;
pub mod batch_rows;
pub mod columnar;
pub(crate) mod csv_blocks;
pub mod csv_source;
pub(crate) mod csv_stream;
pub(crate) mod ipc_check;
pub mod matrix_csv;
pub mod merged_columnar;
pub mod model;
pub mod npy;
pub mod number;
pub(crate) mod placed_values;
pub(crate) mod probs_arrow;
pub mod probs_csv;
pub mod probs_npy;
pub mod review;
pub mod review_table;
pub mod session;
pub mod stream;
pub(crate) mod stream_file;
pub(crate) mod table_arrow;
pub(crate) mod table_chunk;
pub(crate) mod table_csv;
pub(crate) mod table_merge;
pub mod table_out;
pub mod text_column;
pub mod worklist;

use std::fs::{self, File, OpenOptions};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{Error, Result};

static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

/// Refuses `output` when it is the same file as any of `inputs` (by path after resolving
/// links, or by device and inode, which also catches hard links).
pub fn check_not_input(output: &Path, inputs: &[&Path]) -> Result<()> {
    let Ok(out_meta) = fs::metadata(output) else {
        return Ok(()); // An output that does not exist yet cannot be an input.
    };
    let out_real = fs::canonicalize(output).ok();
    for input in inputs {
        let same_path = out_real.is_some() && fs::canonicalize(input).ok() == out_real;
        let same_inode = fs::metadata(input).is_ok_and(|m| same_inode(&m, &out_meta));
        if same_path || same_inode {
            return Err(Error::WouldOverwriteInput {
                path: output.to_path_buf(),
            });
        }
    }
    Ok(())
}

#[cfg(unix)]
fn same_inode(a: &fs::Metadata, b: &fs::Metadata) -> bool {
    use std::os::unix::fs::MetadataExt;
    a.dev() == b.dev() && a.ino() == b.ino()
}

#[cfg(not(unix))]
fn same_inode(_: &fs::Metadata, _: &fs::Metadata) -> bool {
    false
}

/// Writes `path` through `write`: the bytes go to a temporary file in the same folder,
/// which is flushed, synced and then renamed over `path`. Readers see the old file or the
/// new one, never a part; on any failure the temporary file is removed and `path` is as
/// it was.
pub fn write_atomic<F>(path: &Path, write: F) -> Result<()>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let write_err = |source| Error::Write {
        path: path.to_path_buf(),
        source,
    };
    let temp = temp_path(path);
    let file = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&temp)
        .map_err(write_err)?;
    let result = fill(file, write).and_then(|()| fs::rename(&temp, path));
    if let Err(source) = result {
        let _ = fs::remove_file(&temp);
        return Err(write_err(source));
    }
    Ok(())
}

fn fill<F>(file: File, write: F) -> std::io::Result<()>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let mut out = BufWriter::with_capacity(1 << 16, file);
    write(&mut out)?;
    let file = out.into_inner().map_err(|e| e.into_error())?;
    file.sync_all()
}

fn temp_path(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let unique = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
    let temp_name = format!(".{name}.{}-{unique}.partial", std::process::id());
    path.with_file_name(temp_name)
}

/// Writes `value` as pretty JSON, atomically.
pub fn write_json<T: serde::Serialize>(path: &Path, value: &T) -> Result<()> {
    write_atomic(path, |w| {
        serde_json::to_writer_pretty(&mut *w, value).map_err(std::io::Error::other)?;
        w.write_all(b"\n")
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entries(dir: &Path) -> Vec<String> {
        let mut names: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        names
    }

    #[test]
    fn a_failing_writer_leaves_the_old_file_and_no_temp() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("out.json");
        fs::write(&path, "old").unwrap();
        let err = write_atomic(&path, |w| {
            w.write_all(b"half of the new")?;
            Err(std::io::Error::other("disk full"))
        })
        .unwrap_err();
        assert!(err.to_string().contains("disk full"));
        assert_eq!(fs::read_to_string(&path).unwrap(), "old");
        assert_eq!(entries(dir.path()), ["out.json"]);
    }

    #[test]
    fn a_successful_write_replaces_whole() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("out.txt");
        write_atomic(&path, |w| w.write_all(b"new")).unwrap();
        assert_eq!(fs::read_to_string(&path).unwrap(), "new");
        assert_eq!(entries(dir.path()), ["out.txt"]);
    }

    #[test]
    fn a_missing_folder_is_a_write_error() {
        let dir = tempfile::tempdir().unwrap();
        let err =
            write_atomic(&dir.path().join("no/such/out.txt"), |w| w.write_all(b"x")).unwrap_err();
        assert!(matches!(err, Error::Write { .. }));
    }

    #[test]
    fn inputs_are_recognised_through_other_spellings_and_links() {
        let dir = tempfile::tempdir().unwrap();
        let input = dir.path().join("data.csv");
        fs::write(&input, "x").unwrap();
        let spelled = dir.path().join(".").join("data.csv");
        assert!(check_not_input(&spelled, &[&input]).is_err());
        let link = dir.path().join("hard.csv");
        fs::hard_link(&input, &link).unwrap();
        assert!(check_not_input(&link, &[&input]).is_err());
        assert!(check_not_input(&dir.path().join("new.json"), &[&input]).is_ok());
    }
}
