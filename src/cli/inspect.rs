//! `flipmend inspect`: what was read, and what is wrong with it.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;

use super::args::{ProbArgs, TableArgs};
use crate::data::summary::{RowCount, TableSummary};
use crate::data::Probabilities;
use crate::error::Result;
use crate::io::{check_not_input, write_json};

/// Flags of `flipmend inspect`.
#[derive(Debug, Clone, Args)]
pub struct InspectArgs {
    #[command(flatten)]
    /// The table.
    pub table: TableArgs,
    #[command(flatten)]
    /// Optional probabilities.
    pub probs: ProbArgs,
    /// Also write the report as JSON to this file
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

/// Runs `inspect`.
pub fn run(args: &InspectArgs, out: &mut dyn Write) -> Result<()> {
    let mut inputs = vec![args.table.data.as_path()];
    inputs.extend(args.probs.probs.as_deref());
    if let Some(json) = &args.json {
        check_not_input(json, &inputs)?;
    }
    let data = args.table.load()?;
    let probs = match &args.probs.probs {
        Some(path) => Some(Probabilities::load(
            path,
            &data,
            &args.probs.options(args.table.delimiter),
        )?),
        None => None,
    };
    let summary = TableSummary::new(&data, probs.as_ref());
    if let Some(json) = &args.json {
        write_json(json, &summary)?;
    }
    super::emit(out, &render(&summary))
}

/// The report as aligned text.
/// `name rows, name rows, …`.
fn counts(list: &[RowCount]) -> String {
    let parts: Vec<String> = list
        .iter()
        .map(|c| format!("{} {}", c.name, c.rows))
        .collect();
    parts.join(", ")
}

pub fn render(s: &TableSummary) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "{}: {} rows, {} classes, {} features",
        s.file,
        s.rows,
        s.classes.len(),
        s.features.len()
    );
    let _ = writeln!(t, "label column: {}", s.label_column);
    let _ = writeln!(
        t,
        "id column:    {}",
        s.id_column
            .as_deref()
            .unwrap_or("(none; rows are numbered from 0)")
    );
    let trusted = match &s.trusted_column {
        Some(c) => format!("{c} ({} rows audited)", s.trusted_rows),
        None => "(none)".into(),
    };
    let _ = writeln!(t, "trusted:      {trusted}");
    let _ = writeln!(t, "features:     {}", s.features.join(", "));
    if let Some(sources) = &s.label_sources {
        let _ = writeln!(
            t,
            "label source: {} ({})",
            sources.column,
            counts(&sources.sources)
        );
    }
    if let Some(annotators) = &s.annotators {
        let _ = writeln!(
            t,
            "annotators:   {} (rows labelled; the label below is their majority)",
            counts(annotators)
        );
    }
    let _ = writeln!(t);
    let width = super::name_width(s.classes.iter().map(|c| c.name.as_str()), 5);
    let _ = writeln!(
        t,
        "{:<width$}  {:>10}  {:>7}  {:>8}",
        "class", "rows", "share", "trusted"
    );
    for c in &s.classes {
        let _ = writeln!(
            t,
            "{:<width$}  {:>10}  {:>6.2}%  {:>8}",
            c.name,
            c.count,
            100.0 * c.share,
            c.trusted
        );
    }
    if !s.ignored_columns.is_empty() {
        let _ = writeln!(t, "\nignored columns:");
        for c in &s.ignored_columns {
            let _ = writeln!(t, "  {}: {}", c.name, c.reason);
        }
    }
    if !s.missing_values.is_empty() {
        let _ = writeln!(t, "\nempty cells:");
        for m in &s.missing_values {
            let _ = writeln!(t, "  {}: {}", m.column, m.count);
        }
    }
    if let Some(p) = &s.probabilities {
        let _ = writeln!(t, "\nprobabilities: {}", p.file);
        let _ = writeln!(
            t,
            "  mean top probability:          {:.4}",
            p.mean_max_probability
        );
        let _ = writeln!(
            t,
            "  top class = observed label on: {:.2}% of rows",
            100.0 * p.agreement_with_observed
        );
    }
    for w in &s.warnings {
        let _ = writeln!(t, "\nwarning: {w}");
    }
    t
}
