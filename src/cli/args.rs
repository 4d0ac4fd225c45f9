//! Flag groups shared by several commands.

use std::path::PathBuf;

use clap::Args;

use crate::data::roles::parse_delimiter;
use crate::data::{ProbOptions, TableOptions};

/// Which file to read and which column plays which role.
#[derive(Debug, Clone, Args)]
pub struct TableArgs {
    /// The labelled table: CSV with a header row (tab-separated when it ends in .tsv).
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
}

impl TableArgs {
    /// The role flags as plain data for the library.
    pub fn options(&self) -> TableOptions {
        TableOptions {
            delimiter: self.delimiter,
            label: self.label.clone(),
            id: self.id.clone(),
            trusted: self.trusted.clone(),
            features: self.features.clone(),
        }
    }
}

/// A model's out-of-sample class probabilities.
#[derive(Debug, Clone, Args)]
pub struct ProbArgs {
    /// Class probabilities per row: CSV with one column per class (any order; an 'id'
    /// column joins rows by id) or a float32/float64 .npy array of shape (rows, classes)
    /// with columns in class order (the natural sort of the class names)
    #[arg(long, value_name = "FILE")]
    pub probs: Option<PathBuf>,
    /// Rescale probability rows that do not sum to 1 (within 1e-3) instead of failing
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
