//! `flipmend review`: merge a reviewed worklist into a copy of the dataset.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;

use super::args::TableArgs;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::worklist::{read_review, write_merged};
use crate::io::{check_not_input, write_atomic};

/// Flags of `flipmend review`.
#[derive(Debug, Clone, Args)]
pub struct ReviewArgs {
    #[command(flatten)]
    /// The dataset the worklist was made from.
    pub table: TableArgs,
    /// The worklist with its review column filled in: a class name, 'keep' to confirm the
    /// observed label, or empty for not reviewed
    #[arg(long, value_name = "FILE")]
    pub worklist: PathBuf,
    /// Where to write the merged copy of the dataset (reviewed rows carry their verified
    /// label in the trusted column, which is added when absent). The input is never changed.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

/// Runs `review`.
pub fn run(args: &ReviewArgs, out: &mut dyn Write) -> Result<()> {
    check_not_input(
        &args.out,
        &[args.table.data.as_path(), args.worklist.as_path()],
    )?;
    let data = Dataset::load(&args.table.data, &args.table.options())?;
    let file = std::fs::File::open(&args.worklist).map_err(|source| Error::Read {
        path: args.worklist.clone(),
        source,
    })?;
    let review = read_review(file, &args.worklist, &data)?;
    let delimiter = args.table.options().delimiter_for(&args.table.data);
    write_atomic(&args.out, |w| write_merged(w, &data, delimiter, &review))?;
    let replaced = review
        .verdicts
        .iter()
        .filter(|v| {
            data.trusted
                .as_ref()
                .and_then(|t| t[v.row])
                .is_some_and(|earlier| earlier != v.label)
        })
        .count();
    let mut text = String::new();
    let _ = writeln!(
        text,
        "{}: {} reviewed rows merged",
        args.out.display(),
        review.verdicts.len()
    );
    let _ = writeln!(
        text,
        "  confirmed (label kept):  {}",
        review.confirmed(&data)
    );
    let _ = writeln!(text, "  changed:                 {}", review.changed(&data));
    let _ = writeln!(text, "  not reviewed:            {}", review.not_reviewed);
    if replaced > 0 {
        let _ = writeln!(
            text,
            "  earlier trusted labels replaced by the review: {replaced}"
        );
    }
    let column = data
        .trusted_column
        .as_deref()
        .unwrap_or(crate::data::roles::DEFAULT_TRUSTED);
    let _ = writeln!(
        text,
        "The verified labels are in the column '{column}'; `flipmend estimate --data {} --method trusted` uses them.",
        args.out.display()
    );
    super::emit(out, &text)
}
