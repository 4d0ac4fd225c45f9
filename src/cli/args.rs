//! Flag groups shared by several commands.

use std::path::{Path, PathBuf};

use clap::Args;

use crate::data::annotations::attach_long;
use crate::data::roles::parse_delimiter;
use crate::data::Dataset;
use crate::data::{ProbOptions, TableOptions};
use crate::error::Result;
use crate::io::annotations_long::read_long;
use crate::learn::{OofParams, SoftmaxParams};
use crate::noise::{Estimator, EstimatorSettings, Method, TrustedFallback};
use crate::workflow::consensus::ConsensusPrior;
use crate::workflow::MatrixSource;

/// Which file to read and which column plays which role.
#[derive(Debug, Clone, Args)]
pub struct TableArgs {
    /// The labelled table: CSV with a header row (tab-separated when it ends in .tsv), or
    /// Parquet (.parquet) or Arrow IPC / Feather (.feather, .arrow) with the same columns.
    #[arg(long, value_name = "FILE")]
    pub data: PathBuf,
    /// Field delimiter: one character such as ';', or 'tab' [default: ',' or tab for .tsv]
    #[arg(long, value_name = "CHAR", value_parser = parse_delimiter)]
    pub delimiter: Option<u8>,
    /// Column holding the observed (possibly noisy) label [default: 'label']
    #[arg(long, value_name = "COL")]
    pub label: Option<String>,
    /// Column identifying rows [default: 'id' if present, else 0-based row numbers]
    #[arg(long, value_name = "COL")]
    pub id: Option<String>,
    /// Column holding audited labels; empty cells mean not audited [default: 'trusted' if present]
    #[arg(long, value_name = "COL")]
    pub trusted: Option<String>,
    /// Feature columns, comma-separated [default: every other column whose values are all numbers]
    #[arg(long, value_name = "A,B,..", value_delimiter = ',')]
    pub features: Option<Vec<String>>,
    /// Several label columns, one per annotator, comma-separated (an empty cell: that
    /// annotator did not label the row); each annotator's confusion matrix and each row's
    /// consensus are estimated (Dawid & Skene), and the consensus is the observed label
    #[arg(
        long,
        value_name = "A,B,..",
        value_delimiter = ',',
        conflicts_with = "label"
    )]
    pub labels: Option<Vec<String>>,
    /// Several annotators' labels as a long CSV with the columns id, annotator, label
    /// (one line per label), joined to the table by id; like --labels otherwise
    #[arg(long, value_name = "FILE", conflicts_with_all = ["label", "labels"])]
    pub annotations: Option<PathBuf>,
    /// With --labels or --annotations: each row's prior on its true class in the
    /// consensus: the classifier's out-of-sample probabilities, or one class prior shared
    /// by all rows
    #[arg(long, value_enum, default_value_t = ConsensusPrior::Classifier)]
    pub consensus_prior: ConsensusPrior,
    /// Column saying where each label came from (annotator, station, vendor, rule): one
    /// flip matrix is then estimated per source, and suspects are scored with their own
    /// source's matrix
    #[arg(long, value_name = "COL")]
    pub source: Option<String>,
}

impl TableArgs {
    /// Loads the table, and joins `--annotations` to it.
    pub fn load(&self) -> Result<Dataset> {
        self.load_with(&self.options())
    }

    /// [`TableArgs::load`] with role settings the command adjusted.
    pub fn load_with(&self, options: &TableOptions) -> Result<Dataset> {
        let Some(path) = &self.annotations else {
            return Dataset::load(&self.data, options);
        };
        let mut options = options.clone();
        options.unlabeled = true;
        let mut data = Dataset::load(&self.data, &options)?;
        let long = read_long(
            path,
            crate::io::csv_source::delimiter_for(path, self.delimiter),
        )?;
        attach_long(&mut data, &long, path)?;
        Ok(data)
    }

    /// The role flags as plain data for the library.
    pub fn options(&self) -> TableOptions {
        TableOptions {
            delimiter: self.delimiter,
            label: self.label.clone(),
            id: self.id.clone(),
            trusted: self.trusted.clone(),
            features: self.features.clone(),
            source: self.source.clone(),
            annotators: self.labels.clone(),
            exclude: Vec::new(),
            unlabeled: false,
        }
    }
}

/// A model's out-of-sample class probabilities.
#[derive(Debug, Clone, Args)]
pub struct ProbArgs {
    /// Class probabilities per row: CSV with one column per class (any order; an 'id'
    /// column joins rows by id), the same as Parquet or Feather (or one list column of K
    /// numbers per row), or a float32/float64 .npy array of shape (rows, classes) with
    /// columns in class order (the natural sort of the class names)
    #[arg(long, value_name = "FILE")]
    pub probs: Option<PathBuf>,
    /// Rescale rows of probability files (off by more than 1e-3) and matrix files (off by
    /// more than 1e-6) that do not sum to 1, instead of failing
    #[arg(long)]
    pub renormalize: bool,
}

impl ProbArgs {
    /// The reading options for the library.
    pub fn options(&self, delimiter: Option<u8>) -> ProbOptions {
        ProbOptions {
            renormalize: self.renormalize,
            delimiter,
        }
    }
}

/// Which flip-matrix estimator to use, or a matrix file instead.
#[derive(Debug, Clone, Args)]
pub struct MatrixArgs {
    /// Estimator: joint (T and a clean classifier by maximum likelihood with a
    /// minimum-volume penalty, started from counting), quantile (anchor points below the
    /// q-quantile), anchor (highest-probability rows), trusted (mean probabilities of
    /// audited rows), counting (confident counting)
    #[arg(long, value_enum, default_value_t = Estimator::Joint, conflicts_with = "matrix")]
    pub method: Estimator,
    /// Quantile for --method quantile (and for --fallback quantile), in (0, 1]
    #[arg(long, value_name = "Q", default_value_t = crate::noise::DEFAULT_QUANTILE)]
    pub quantile: f64,
    /// With --method trusted: how to estimate classes that have no trusted rows
    #[arg(long, value_enum, default_value_t = TrustedFallback::None)]
    pub fallback: TrustedFallback,
    /// With --method joint: weight λ of the minimum-volume penalty λ·ln det T against
    /// the mean log-likelihood [default: 0.01 / number of classes]
    #[arg(long, value_name = "X")]
    pub volume_weight: Option<f64>,
    /// Use this flip matrix instead of estimating one: CSV with the header
    /// class,<class names…> and one row per true class, each row summing to 1
    #[arg(long, value_name = "FILE")]
    pub matrix: Option<PathBuf>,
}

impl MatrixArgs {
    /// The estimator as library data.
    pub fn method(&self) -> Method {
        self.method.with(&EstimatorSettings {
            quantile: self.quantile,
            fallback: self.fallback,
            volume_weight: self.volume_weight,
        })
    }

    /// Where the matrix comes from.
    pub fn source(&self, renormalize: bool) -> MatrixSource {
        match &self.matrix {
            Some(path) => MatrixSource::File {
                path: path.clone(),
                renormalize,
            },
            None => MatrixSource::Estimate(self.method()),
        }
    }
}

/// The model fitted for out-of-fold probabilities when `--probs` is absent.
#[derive(Debug, Clone, Args)]
pub struct FitArgs {
    /// Folds of the cross-validation that computes out-of-fold probabilities (stratified
    /// by observed label)
    #[arg(long, value_name = "N", default_value_t = 5)]
    pub folds: usize,
    /// L2 penalty of the softmax regression: objective = mean cross-entropy + (l2/2)·‖W‖²,
    /// biases unpenalised
    #[arg(long, value_name = "X", default_value_t = 1e-3)]
    pub l2: f64,
    /// Iteration limit of each fit (L-BFGS)
    #[arg(long, value_name = "N", default_value_t = 500)]
    pub max_iter: usize,
    /// Seed of every random choice (folds, bootstrap)
    #[arg(long, value_name = "S", default_value_t = 0)]
    pub seed: u64,
}

impl FitArgs {
    /// Out-of-fold settings as library data.
    pub fn oof(&self) -> OofParams {
        OofParams {
            folds: self.folds,
            seed: self.seed,
            model: SoftmaxParams::default().l2(self.l2).max_iter(self.max_iter),
        }
    }
}

/// The inputs of every command that works from probabilities and a flip matrix: the
/// table, optional probabilities, the matrix (or estimator) and the cross-validated model.
#[derive(Debug, Clone, Args)]
pub struct PipelineArgs {
    #[command(flatten)]
    /// The table.
    pub table: TableArgs,
    #[command(flatten)]
    /// Optional probabilities.
    pub probs: ProbArgs,
    #[command(flatten)]
    /// The flip matrix or its estimator.
    pub matrix: MatrixArgs,
    #[command(flatten)]
    /// Penalty, iterations, folds and seed.
    pub fit: FitArgs,
}

impl PipelineArgs {
    /// Refuses a `--quantile` outside (0, 1] whichever estimator is chosen (it also
    /// serves `--fallback quantile`), before any file is read.
    pub fn check(&self) -> crate::error::Result<()> {
        Method::Quantile {
            q: self.matrix.quantile,
        }
        .check()
    }

    /// The files the command reads (outputs must not be any of them).
    pub fn inputs(&self) -> Vec<&Path> {
        let mut inputs = vec![self.table.data.as_path()];
        inputs.extend(self.probs.probs.as_deref());
        inputs.extend(self.matrix.matrix.as_deref());
        inputs
    }
}

/// When and how to stream a table too large to hold.
#[derive(Debug, Clone, Args)]
pub struct StreamArgs {
    /// Stream the table in two passes with bounded memory when loading it whole would
    /// take more than SIZE (e.g. 800M, 4G; 0 always streams) [default: the memory this
    /// machine has free]. A streamed run needs --probs (CSV, Parquet or Arrow IPC)
    #[arg(long, value_name = "SIZE", value_parser = parse_size)]
    pub max_memory: Option<u64>,
    /// Rows of the seeded uniform sample on which a streamed run estimates the flip matrix
    #[arg(long, value_name = "N", default_value_t = crate::workflow::streamed::DEFAULT_SAMPLE_ROWS)]
    pub sample_rows: usize,
}

impl StreamArgs {
    /// True when `table` (and `probs`, when another file) would take more memory to load
    /// than `--max-memory`, or than is free.
    pub fn streams(&self, table: &Path, probs: Option<&Path>) -> bool {
        streams(self.max_memory, table, probs)
    }
}

/// True when `table` (and `probs`, when another file) would take more memory to load
/// than `max_memory` (0: always), or than is free when it is not given.
pub fn streams(max_memory: Option<u64>, table: &Path, probs: Option<&Path>) -> bool {
    let limit = match max_memory.or_else(crate::data::footprint::available_bytes) {
        Some(limit) => limit,
        None => return false,
    };
    let table_bytes = crate::data::footprint::load_bytes(table).unwrap_or(0);
    let probs_bytes = probs
        .filter(|p| *p != table)
        .and_then(crate::data::footprint::load_bytes)
        .unwrap_or(0);
    max_memory == Some(0) || table_bytes.saturating_add(probs_bytes) > limit
}

/// The probability file a streamed run needs (a fit on every row's features would need
/// the whole table in memory).
pub fn streamed_probs(probs: Option<&Path>) -> crate::error::Result<&Path> {
    probs.ok_or_else(|| {
        crate::error::Error::Usage(
            "a streamed run needs the probabilities (--probs FILE, which may be the table's own \
             file): fitting a model on every row would need the whole table in memory"
                .into(),
        )
    })
}

/// The refusal of a setting a streamed run cannot honour yet.
pub fn not_streamed(what: &str) -> crate::error::Error {
    crate::error::Error::Usage(format!("a streamed run does not take {what} yet"))
}

/// A size in bytes: a number with an optional K, M, G or T (powers of 1024).
pub fn parse_size(text: &str) -> std::result::Result<u64, String> {
    let t = text.trim();
    let (number, unit) = match t.char_indices().find(|(_, c)| c.is_ascii_alphabetic()) {
        Some((i, _)) => (&t[..i], t[i..].trim_end_matches(['B', 'b', 'i'])),
        None => (t, ""),
    };
    let scale: u64 = match unit.to_ascii_uppercase().as_str() {
        "" => 1,
        "K" => 1 << 10,
        "M" => 1 << 20,
        "G" => 1 << 30,
        "T" => 1 << 40,
        _ => return Err(format!("'{text}' is not a size such as 800M or 4G")),
    };
    let value: f64 = number
        .trim()
        .parse()
        .map_err(|_| format!("'{text}' is not a size such as 800M or 4G"))?;
    if !(value.is_finite() && value >= 0.0) {
        return Err(format!("'{text}' is not a size such as 800M or 4G"));
    }
    Ok((value * scale as f64) as u64)
}

#[cfg(test)]
mod tests {
    use super::parse_size;

    #[test]
    fn sizes_read_with_binary_units() {
        assert_eq!(parse_size("0"), Ok(0));
        assert_eq!(parse_size("800M"), Ok(800 << 20));
        assert_eq!(parse_size("1.5G"), Ok(3 << 29));
        assert_eq!(parse_size("2GiB"), Ok(2 << 30));
        assert_eq!(parse_size("64k"), Ok(64 << 10));
        assert!(parse_size("1.5x").unwrap_err().contains("800M"));
        assert!(parse_size("-1G").is_err());
    }
}
