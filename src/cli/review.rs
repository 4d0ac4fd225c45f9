//! `flipmend review`: merge a reviewed worklist into a copy of the dataset, and report what
//! the review measured.

use std::fmt::Write as _;
use std::io::Write;
use std::path::{Path, PathBuf};

use clap::Args;

use super::args::{not_streamed, streams, TableArgs};
use crate::error::Result;
use crate::io::merged_columnar::check_merged_target;
use crate::io::review::{write_merged, Key};
use crate::io::review_table::ReviewTable;
use crate::io::{check_not_input, write_atomic, write_json};
use crate::workflow::review::{key_file_for, read_reviewed, ReviewSummary, Reviewed, SliceResult};
use crate::workflow::streamed_review::review_streamed;

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
    /// The worklist's key (which rows were control rows) [default: NAME.key.csv beside the
    /// worklist, when it exists]
    #[arg(long, value_name = "FILE")]
    pub key: Option<PathBuf>,
    /// Where to write the merged copy of the dataset: reviewed rows carry their verified
    /// label in the trusted column and how it was obtained (review or control) in its
    /// origin column, both added when absent. The input is never changed. A CSV table's
    /// copy is CSV, a Parquet or Feather table's copy is Parquet (name it .parquet).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Write the summary as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Look up the worklist's rows in one pass instead of loading the table when loading
    /// it would take more than SIZE (e.g. 800M, 4G; 0 always) [default: the memory this
    /// machine has free]
    #[arg(long, value_name = "SIZE", value_parser = super::args::parse_size)]
    pub max_memory: Option<u64>,
}

/// Runs `review`.
pub fn run(args: &ReviewArgs, out: &mut dyn Write) -> Result<()> {
    let key_file = key_file_for(&args.worklist, args.key.as_deref());
    let mut inputs = vec![args.table.data.as_path(), args.worklist.as_path()];
    inputs.extend(key_file.as_deref());
    for output in [Some(&args.out), args.json.as_ref()].into_iter().flatten() {
        check_not_input(output, &inputs)?;
    }
    if streams(args.max_memory, &args.table.data, None) {
        return run_streamed(args, out);
    }
    let data = args.table.load()?;
    check_merged_target(&data, &args.out)?;
    let read = read_reviewed(&data, &args.worklist, args.key.as_deref())?;
    let delimiter = args.table.options().delimiter_for(&args.table.data);
    write_atomic(&args.out, |w| {
        write_merged(w, &data, delimiter, &read.review)
    })?;
    finish(args, &data, &read, out)
}

/// `review` on a table too large to hold: the worklist's rows are looked up in one pass
/// and the merged copy is written part by part.
fn run_streamed(args: &ReviewArgs, out: &mut dyn Write) -> Result<()> {
    if args.table.annotations.is_some() || args.table.labels.is_some() {
        return Err(not_streamed("several annotators' labels"));
    }
    let options = args.table.options();
    let (named, read) = review_streamed(
        &args.table.data,
        &options,
        &args.worklist,
        args.key.as_deref(),
    )?;
    check_merged_target(&named, &args.out)?;
    let delimiter = options.delimiter_for(&args.table.data);
    write_atomic(&args.out, |w| {
        write_merged(w, &named, delimiter, &read.review)
    })?;
    finish(args, &named, &read, out)
}

/// Writes the JSON summary and prints the report.
fn finish(
    args: &ReviewArgs,
    data: &dyn ReviewTable,
    read: &Reviewed,
    out: &mut dyn Write,
) -> Result<()> {
    if let Some(path) = &args.json {
        write_json(path, &read.summary)?;
    }
    super::emit(
        out,
        &render(
            args,
            data,
            &read.summary,
            read.key_file.as_deref(),
            read.key.as_ref(),
        ),
    )
}

fn render(
    args: &ReviewArgs,
    data: &dyn ReviewTable,
    s: &ReviewSummary,
    key_file: Option<&Path>,
    key: Option<&Key>,
) -> String {
    let mut text = String::new();
    let _ = writeln!(
        text,
        "{}: {} reviewed rows merged",
        args.out.display(),
        s.reviewed
    );
    let _ = writeln!(text, "  confirmed (label kept):  {}", s.confirmed);
    let _ = writeln!(text, "  changed:                 {}", s.changed);
    let _ = writeln!(text, "  not reviewed:            {}", s.not_reviewed);
    if s.replaced > 0 {
        let _ = writeln!(
            text,
            "  earlier trusted labels replaced by the review: {}",
            s.replaced
        );
    }
    if let (Some(path), Some(key)) = (key_file, key) {
        let (listed, control) = key.counts();
        let _ = writeln!(
            text,
            "key {}: {listed} listed suspects, {control} control rows",
            path.display()
        );
    }
    if let Some(l) = &s.listed {
        let _ = writeln!(
            text,
            "listed suspects found wrong: {}",
            rate(l, "flipmend expected")
        );
    }
    if let Some(c) = &s.control {
        let _ = writeln!(
            text,
            "control rows found wrong:    {}",
            rate(c, "flipmend expected")
        );
    }
    if let (Some((low, mid, high)), Some(n)) = (s.missed_errors, s.unlisted_rows) {
        let _ = writeln!(
            text,
            "wrong labels left among the {n} rows not listed: about {mid:.0} (90 % interval {low:.0}–{high:.0})"
        );
    }
    for note in &s.notes {
        let _ = writeln!(text, "note: {note}");
    }
    let column = data
        .trusted_column()
        .unwrap_or(crate::data::roles::DEFAULT_TRUSTED);
    let _ = writeln!(
        text,
        "The verified labels are in the column '{column}' and their origin in '{column}_origin'; \
         `flipmend estimate --data {}` uses them all (the trusted estimator only random audits).",
        args.out.display()
    );
    let _ = writeln!(
        text,
        "These figures are estimates from a sample of reviews; where labels concern health, safety \
         or people, have qualified reviewers confirm them under your local rules."
    );
    text
}

/// "3 of 4 (75 %, 90 % interval 36–96 %; flipmend expected 90 %)".
fn rate(r: &SliceResult, expected_word: &str) -> String {
    let w = &r.wrong;
    let expected = r.expected.map_or(String::new(), |e| {
        format!("; {expected_word} {:.0} %", 100.0 * e)
    });
    format!(
        "{} of {} ({:.0} %, 90 % interval {:.0}–{:.0} %{expected})",
        w.count,
        w.of,
        100.0 * w.value,
        100.0 * w.low,
        100.0 * w.high
    )
}
