//! Out-of-sample class probabilities from any model, one row per data row.
//!
//! Probabilities are stored as `f32`: they lie in [0, 1], where f32 keeps about seven
//! significant digits, far finer than any model's calibration, and halves the memory of
//! a million-row, hundred-class array. Sums and means over them are taken in f64.

use std::fs::File;
use std::io::{BufReader, Read};
use std::path::{Path, PathBuf};

use ndarray::Array2;

use rayon::prelude::*;

use super::table::Dataset;
use crate::error::{Error, Location, Problem, Result};
use crate::io::columnar::{guarded, Format};
use crate::io::npy::{self, read_up_to};
use crate::io::probs_arrow::read_probs_columnar;
use crate::io::probs_csv::read_probs_csv;
use crate::io::probs_npy::read_probs_npy;

/// Largest allowed distance of a row sum from 1 before the row is refused (or rescaled).
pub const ROW_SUM_TOLERANCE: f64 = 1e-3;

/// How to read a probability file.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ProbOptions {
    /// Rescale rows whose sum is off by more than [`ROW_SUM_TOLERANCE`] instead of failing.
    pub renormalize: bool,
    /// CSV delimiter; `None`: tab for `.tsv`, else comma.
    pub delimiter: Option<u8>,
}

/// A validated `rows × classes` probability array aligned with a [`Dataset`].
#[derive(Debug, Clone)]
pub struct Probabilities {
    /// The file it came from.
    pub path: PathBuf,
    /// Row `i` is p(class | row `i` of the dataset); columns in the dataset's class order.
    pub values: Array2<f32>,
    /// Things done to the input (e.g. rows renormalised).
    pub warnings: Vec<String>,
}

impl Probabilities {
    /// Loads `path` as Parquet or Arrow IPC (by extension), `.npy` (by extension or magic
    /// bytes) or CSV, aligned to `data`.
    pub fn load(path: &Path, data: &Dataset, options: &ProbOptions) -> Result<Self> {
        let format = Format::of(path);
        if format.is_columnar() {
            let mut loaded = guarded(path, format, || read_probs_columnar(path, data, format))?;
            loaded.check_rows(options.renormalize)?;
            return Ok(Probabilities {
                path: path.to_path_buf(),
                values: loaded.values,
                warnings: loaded.warnings,
            });
        }
        let read_err = |source| Error::Read {
            path: path.to_path_buf(),
            source,
        };
        let mut file = File::open(path).map_err(read_err)?;
        let size = file.metadata().map_err(read_err)?.len();
        let mut magic = [0u8; 6];
        let n = read_up_to(&mut file, &mut magic).map_err(read_err)?;
        let is_npy = &magic[..n] == npy::MAGIC
            || path
                .extension()
                .and_then(|e| e.to_str())
                .is_some_and(|e| e.eq_ignore_ascii_case("npy"));
        let file = File::open(path).map_err(read_err)?;
        let mut loaded = if is_npy {
            read_probs_npy(
                BufReader::with_capacity(1 << 20, file),
                path,
                Some(size),
                data,
            )?
        } else {
            read_probs_csv(file, path, data, options.delimiter)?
        };
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            warnings: loaded.warnings,
        })
    }

    /// Builds from an `.npy` byte stream (used by tests and fuzzing).
    pub fn from_npy_reader<R: Read>(
        reader: R,
        path: &Path,
        data: &Dataset,
        options: &ProbOptions,
    ) -> Result<Self> {
        let mut loaded = read_probs_npy(reader, path, None, data)?;
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            warnings: loaded.warnings,
        })
    }

    /// Builds from a CSV byte stream (used by tests and fuzzing).
    pub fn from_csv_reader<R: Read>(
        reader: R,
        path: &Path,
        data: &Dataset,
        options: &ProbOptions,
    ) -> Result<Self> {
        let mut loaded = read_probs_csv(reader, path, data, options.delimiter)?;
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            warnings: loaded.warnings,
        })
    }

    /// Mean over rows of the largest probability.
    pub fn mean_max(&self) -> f64 {
        let total: f64 = self
            .values
            .rows()
            .into_iter()
            .map(|r| r.iter().fold(0.0f32, |m, &v| m.max(v)) as f64)
            .sum();
        total / self.values.nrows().max(1) as f64
    }

    /// Share of rows whose most probable class is the observed label (ties: first class).
    pub fn agreement(&self, labels: &[usize]) -> f64 {
        let hits = self
            .values
            .rows()
            .into_iter()
            .zip(labels)
            .filter(|(r, &y)| argmax(r.as_slice().unwrap_or(&[])) == y)
            .count();
        hits as f64 / labels.len().max(1) as f64
    }
}

/// Index of the largest value; the first one on ties.
pub fn argmax(row: &[f32]) -> usize {
    let mut best = 0;
    for (i, &v) in row.iter().enumerate() {
        if v > row[best] {
            best = i;
        }
    }
    best
}

/// Probabilities read (by [`crate::io::probs_csv`] or [`crate::io::probs_npy`]) but not yet
/// checked row by row.
pub(crate) struct Loaded<'a> {
    pub(crate) path: &'a Path,
    pub(crate) values: Array2<f32>,
    /// File line of each row (CSV), for messages.
    pub(crate) lines: Option<Vec<u64>>,
    pub(crate) warnings: Vec<String>,
}

impl Loaded<'_> {
    fn locate(&self, row: usize) -> Location {
        match &self.lines {
            Some(lines) => Location::line(self.path, lines[row]),
            None => Location::row(self.path, row),
        }
    }

    /// Refuses rows that do not sum to 1, or rescales them when asked.
    fn check_rows(&mut self, renormalize: bool) -> Result<()> {
        let mut fixed = 0usize;
        // The sums are checked on every core; the (usually no) rows that fail are then
        // handled in order, so the first one is the one reported.
        let row_sum = |row: ndarray::ArrayView1<f32>| row.iter().map(|&v| v as f64).sum::<f64>();
        let off: Vec<usize> = (0..self.values.nrows())
            .into_par_iter()
            .with_min_len(4096)
            .filter(|&row| (row_sum(self.values.row(row)) - 1.0).abs() > ROW_SUM_TOLERANCE)
            .collect();
        for row in off {
            let sum = row_sum(self.values.row(row));
            if !renormalize {
                return Err(Error::input(self.locate(row), Problem::ProbRowSum { sum }));
            }
            if sum <= 0.0 {
                return Err(Error::input(self.locate(row), Problem::ProbZeroRow));
            }
            self.values
                .row_mut(row)
                .mapv_inplace(|v| (v as f64 / sum) as f32);
            fixed += 1;
        }
        if fixed > 0 {
            self.warnings.push(format!(
                "{fixed} probability row(s) did not sum to 1 within {ROW_SUM_TOLERANCE} and were rescaled (--renormalize)"
            ));
        }
        Ok(())
    }
}

/// Checks one value, as read, for the range [0, 1] (a hair above 1 from rounding is let
/// through and clipped).
pub(crate) fn checked(value: f64, text: impl FnOnce() -> String) -> Result<f32, Problem> {
    if !(0.0..=1.0 + 1e-6).contains(&value) {
        return Err(Problem::ProbOutOfRange { value: text() });
    }
    Ok(value.min(1.0) as f32)
}
