//! The command line: flags parsed into plain data, then turned into library calls.

mod annotators;
mod args;
mod compare;
mod estimate;
mod inspect;
mod predict;
mod review;
mod sources;
mod suspects;
mod train;

use std::io::Write;

use clap::{Parser, Subcommand};

pub use args::{FitArgs, MatrixArgs, ProbArgs, TableArgs};
pub use compare::CompareArgs;
pub use estimate::{run_on as estimate_on, EstimateArgs};
pub use inspect::InspectArgs;
pub use predict::PredictArgs;
pub use review::ReviewArgs;
pub use suspects::{run_on as suspects_on, SuspectsArgs};
pub use train::TrainArgs;

use crate::error::{Error, Result};

/// flipmend: measure how labels flip between classes, find the rows most likely
/// mislabelled, and train models that account for the noise.
#[derive(Debug, Parser)]
#[command(name = "flipmend", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Option<Command>,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Load a labelled table (and optionally model probabilities) and report what was read:
    /// rows, features, classes with counts, trusted labels, ignored columns, problems.
    Inspect(InspectArgs),
    /// Estimate the flip matrix T (T[i][j] = P(observed j | true i)) from out-of-sample
    /// probabilities (given with --probs, or computed by k-fold cross-validation), with
    /// the noise summary, diagnostics and warnings.
    Estimate(EstimateArgs),
    /// Rank the rows most likely mislabelled and write a relabel worklist for annotators
    /// (rank,row,id,observed,suggested,score,second_choice,second_choice_prob,review).
    Suspects(SuspectsArgs),
    /// Merge a reviewed worklist into a copy of the dataset: reviewed rows get their
    /// verified label in the trusted column. The input file is never changed.
    Review(ReviewArgs),
    /// Train a softmax regression with a noise correction (none, forward, backward, prune)
    /// and save it as a model file for `predict`.
    Train(TrainArgs),
    /// Predict classes and probabilities for a table with a saved model.
    Predict(PredictArgs),
    /// Train every correction (none, forward, backward, prune) on one stratified split with
    /// the same flip matrix and compare them on the held-out rows.
    Compare(CompareArgs),
    /// Open the desktop app (also what `flipmend` alone does), optionally on a table, its
    /// probabilities or a saved session.
    #[cfg(feature = "gui")]
    Gui(GuiArgs),
    /// Open the desktop app on the built-in demo data (an invented recycling plant).
    #[cfg(feature = "gui")]
    Demo,
}

/// Flags of `flipmend gui`.
#[cfg(feature = "gui")]
#[derive(Debug, Clone, Default, clap::Args)]
pub struct GuiArgs {
    /// A labelled table to load at start
    #[arg(value_name = "DATA")]
    pub data: Option<std::path::PathBuf>,
    /// Out-of-sample probabilities for it (CSV by id, .npy, Parquet or Feather)
    #[arg(long, value_name = "FILE")]
    pub probs: Option<std::path::PathBuf>,
    /// A saved session to restore (its data, roles, matrix and settings)
    #[arg(long, value_name = "FILE")]
    pub session: Option<std::path::PathBuf>,
    /// Observed-label column of DATA (default: label)
    #[arg(long, value_name = "COLUMN")]
    pub label: Option<String>,
    /// Label-source column of DATA (one flip matrix per source)
    #[arg(long, value_name = "COLUMN")]
    pub source: Option<String>,
    /// Several annotators' label columns of DATA, comma-separated: their consensus is the
    /// observed label
    #[arg(long, value_name = "A,B,..", value_delimiter = ',')]
    pub labels: Option<Vec<String>>,
}

/// Runs a parsed command line, writing its report to `out`.
pub fn run(cli: Cli, out: &mut dyn Write) -> Result<()> {
    match cli.command {
        Some(Command::Inspect(args)) => inspect::run(&args, out),
        Some(Command::Estimate(args)) => estimate::run(&args, out),
        Some(Command::Suspects(args)) => suspects::run(&args, out),
        Some(Command::Review(args)) => review::run(&args, out),
        Some(Command::Train(args)) => train::run(&args, out),
        Some(Command::Predict(args)) => predict::run(&args, out),
        Some(Command::Compare(args)) => compare::run(&args, out),
        #[cfg(feature = "gui")]
        Some(Command::Gui(args)) => crate::gui::run(crate::gui::Launch {
            data: args.data,
            probs: args.probs,
            session: args.session,
            roles: crate::io::session::Roles {
                label: args.label,
                source: args.source,
                annotators: args.labels,
                ..Default::default()
            },
        }),
        #[cfg(feature = "gui")]
        Some(Command::Demo) => crate::gui::run(crate::gui::demo_launch()?),
        #[cfg(feature = "gui")]
        None => crate::gui::run(crate::gui::Launch::default()),
        #[cfg(not(feature = "gui"))]
        None => {
            let help = <Cli as clap::CommandFactory>::command()
                .render_help()
                .to_string();
            emit(out, &help)
        }
    }
}

/// Prints a command's stage times on standard error when `FLIPMEND_TIMING` is set
/// (standard output keeps the report alone).
pub(crate) fn report_stages(stages: &crate::timing::Stages) {
    if crate::timing::wanted() {
        eprintln!("flipmend timing: {}", stages.line());
    }
}

/// Column width for names: the longest name in characters, and at least `min`.
pub(crate) fn name_width<'a>(names: impl Iterator<Item = &'a str>, min: usize) -> usize {
    names.map(|n| n.chars().count()).max().unwrap_or(0).max(min)
}

/// Writes a report; a closed pipe (`flipmend … | head`) is not an error.
pub(crate) fn emit(out: &mut dyn Write, text: &str) -> Result<()> {
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(crate::Error::Write {
            path: "standard output".into(),
            source: e,
        }),
        _ => Ok(()),
    }
}

/// The flag of each setting a library error may name ([`Error::Setting`]).
const SETTING_FLAGS: [(&str, &str); 6] = [
    ("l2", "--l2"),
    ("max iter", "--max-iter"),
    ("folds", "--folds"),
    ("volume weight", "--volume-weight"),
    ("quantile", "--quantile"),
    ("estimator", "--method"),
];

/// An error as the command line says it: a setting is named by its flag.
pub fn describe(error: &Error) -> String {
    match error {
        Error::Setting { setting, problem } => {
            let flag = SETTING_FLAGS
                .iter()
                .find(|(name, _)| name == setting)
                .map_or(*setting, |(_, flag)| flag);
            format!("{flag} {problem}")
        }
        other => other.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_setting_is_named_by_its_flag_and_other_errors_as_they_are() {
        let setting = |setting| Error::Setting {
            setting,
            problem: "is wrong".into(),
        };
        for (name, flag) in SETTING_FLAGS {
            assert_eq!(describe(&setting(name)), format!("{flag} is wrong"));
        }
        assert_eq!(describe(&setting("colour")), "colour is wrong");
        assert_eq!(describe(&Error::Usage("as is".into())), "as is");
    }
}
