//! The library's error type.
//!
//! Every failure that a user can cause names the file and, where it applies, the line and
//! column, so the command line can print one line that says exactly where to look. The
//! binary maps [`Error::is_bad_input`] to exit code 2 and everything else to 1.

use std::fmt;
use std::path::{Path, PathBuf};

/// Two labels from one annotator for one row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Conflict {
    /// The row's id.
    pub id: String,
    /// The annotator.
    pub annotator: String,
    /// The earlier label.
    pub first: String,
    /// Its line.
    pub first_line: u64,
    /// The later label.
    pub second: String,
}

impl fmt::Display for Conflict {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "row '{}' has the label '{}' from annotator '{}', who gave it '{}' on line {}; keep one",
            self.id, self.second, self.annotator, self.first, self.first_line
        )
    }
}

/// Shorthand for results whose error is [`Error`].
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Where in an input file a problem was found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// The file as the user named it.
    pub path: PathBuf,
    /// 1-based physical line in the file, when the problem sits on one line.
    pub line: Option<u64>,
    /// 1-based field number and the column's header name, when one column is at fault.
    pub column: Option<(usize, String)>,
    /// 0-based data row, for binary files that have no lines.
    pub row: Option<usize>,
    /// The stored part holding that row, for columnar files (Parquet row groups, Arrow
    /// record batches), so the row can be found with the format's own tools.
    pub part: Option<Part>,
}

/// A row's place inside a columnar file: its part (row group or record batch) and its
/// 0-based offset there.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Part {
    /// "row group" (Parquet) or "record batch" (Arrow IPC).
    pub kind: &'static str,
    /// 0-based index of the part.
    pub index: usize,
    /// 0-based row inside the part.
    pub offset: usize,
}

impl Location {
    /// A problem with the file as a whole.
    pub fn file(path: &Path) -> Self {
        Location {
            path: path.to_path_buf(),
            line: None,
            column: None,
            row: None,
            part: None,
        }
    }

    /// A problem on one line.
    pub fn line(path: &Path, line: u64) -> Self {
        Location {
            path: path.to_path_buf(),
            line: Some(line),
            column: None,
            row: None,
            part: None,
        }
    }

    /// A problem in one data row of a file without lines (e.g. `.npy`).
    pub fn row(path: &Path, row: usize) -> Self {
        Location {
            path: path.to_path_buf(),
            line: None,
            column: None,
            row: Some(row),
            part: None,
        }
    }

    /// A problem in one data row of a columnar file, with the part that stores it.
    pub fn row_in_part(path: &Path, row: usize, part: Part) -> Self {
        Location {
            part: Some(part),
            ..Location::row(path, row)
        }
    }

    /// Adds the column (0-based index, header name) to the location.
    pub fn at_column(mut self, index: usize, name: &str) -> Self {
        self.column = Some((index + 1, name.to_string()));
        self
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.path.display())?;
        if let Some(line) = self.line {
            write!(f, ", line {line}")?;
        }
        if let Some(row) = self.row {
            write!(f, ", row {row}")?;
        }
        if let Some(part) = &self.part {
            write!(f, " ({} {}, offset {})", part.kind, part.index, part.offset)?;
        }
        if let Some((number, name)) = &self.column {
            write!(f, ", column {number} '{name}'")?;
        }
        Ok(())
    }
}

/// What is wrong with an input file. Each variant's message completes the sentence
/// "`<location>`: …".
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum Problem {
    /// The file has no bytes (or only a byte-order mark and blank lines).
    #[error("the file is empty; expected a header row naming the columns")]
    Empty,
    /// A header row but no data rows.
    #[error("the file has a header row but no data rows")]
    HeaderOnly,
    /// Two header cells carry the same name, so a role flag could not say which one it means.
    #[error("the column name '{name}' appears more than once in the header")]
    DuplicateColumn {
        /// The repeated name.
        name: String,
    },
    /// A row with a different number of fields than the header.
    #[error("this row has {found} fields but the header has {expected}{hint}")]
    Ragged {
        /// Fields in the header.
        expected: usize,
        /// Fields in this row.
        found: usize,
        /// An extra sentence, e.g. about an unquoted delimiter.
        hint: String,
    },
    /// A flag names a column the header does not have.
    #[error("{flag} names the column '{name}', which is not in the header; the columns are: {available}")]
    UnknownColumn {
        /// The flag, e.g. `--label`.
        flag: String,
        /// The name given.
        name: String,
        /// Comma-separated header names.
        available: String,
    },
    /// No `--label` was given and no column is called `label`.
    #[error("no label column: pass --label COL (no column is named 'label'); the columns are: {available}{hint}")]
    NoLabelColumn {
        /// Comma-separated header names.
        available: String,
        /// An extra sentence, e.g. suggesting `--delimiter`.
        hint: String,
    },
    /// One column was given two roles.
    #[error("the column '{name}' cannot be both the {first} and the {second}")]
    RoleClash {
        /// The column.
        name: String,
        /// First role.
        first: String,
        /// Second role.
        second: String,
    },
    /// Fewer than two classes among the labels.
    #[error("found {found} class(es) ({names}); at least 2 are needed")]
    TooFewClasses {
        /// How many.
        found: usize,
        /// Their names.
        names: String,
    },
    /// No usable feature columns.
    #[error("no numeric feature columns found{detail}")]
    NoFeatures {
        /// What was found instead.
        detail: String,
    },
    /// A feature cell that does not parse as a number.
    #[error("'{value}' is not a number")]
    NotNumber {
        /// The cell text (shortened when long).
        value: String,
    },
    /// A feature cell holding NaN or an infinity.
    #[error("'{value}' is not a finite number; features must be finite")]
    NotFinite {
        /// The cell text.
        value: String,
    },
    /// Empty cells in a feature column.
    #[error("{count} empty cell(s) in this feature column (the first is on this line); fill them, or leave the column out with --features")]
    MissingValues {
        /// How many empty cells the column has.
        count: usize,
    },
    /// A row that none of the annotator columns labels.
    #[error("no annotator labelled this row (columns {columns} are all empty); every row needs at least one label")]
    NoAnnotation {
        /// The annotator columns, comma-separated.
        columns: String,
    },
    /// The same row and annotator with two different labels in a long annotations file
    /// (boxed: it would double the size of every `Problem`).
    #[error("{0}")]
    ConflictingAnnotation(Box<Conflict>),
    /// A table row that no line of a long annotations file labels.
    #[error("no line labels the table's row '{id}'; every row needs at least one label")]
    RowWithoutAnnotation {
        /// The row's id.
        id: String,
    },
    /// An empty label cell.
    #[error("the label cell is empty; every row needs an observed label")]
    EmptyLabel,
    /// A trusted-origin cell that is not one of the origin words.
    #[error("'{found}' is not an origin of a trusted label; write audit (a random audit), review (a reviewed suspect) or control (a reviewed control row), or leave it empty for audit")]
    UnknownOrigin {
        /// The cell's text.
        found: String,
    },
    /// Bytes that are not UTF-8 where text is needed.
    #[error("the text is not valid UTF-8; save the file as UTF-8")]
    InvalidUtf8,
    /// An id that occurs twice.
    #[error("the id '{id}' was already used on {first}; ids must be unique")]
    DuplicateId {
        /// The repeated id.
        id: String,
        /// Where it first occurred ("line 9", or "row 8" in a columnar file).
        first: String,
    },
    /// A null where a feature value is needed (columnar files, which have no empty cells).
    #[error("{count} null value(s) in this feature column (the first is in this row); fill them, or leave the column out with --features")]
    NullValues {
        /// Nulls in the column.
        count: usize,
    },
    /// A column whose stored type cannot hold what its role needs.
    #[error("the column holds {found}; {expected}")]
    ColumnType {
        /// The stored type, in words.
        found: String,
        /// What the role needs.
        expected: String,
    },
    /// Probabilities that a streamed run cannot take by position.
    #[error("{detail}")]
    StreamRows {
        /// What does not line up.
        detail: String,
    },
    /// Null probabilities.
    #[error("{count} null probabilities in this column (the first is in this row)")]
    NullProbabilities {
        /// Nulls in the column.
        count: usize,
    },
    /// A columnar file that cannot be read.
    #[error("not a readable {format} file: {detail}")]
    Columnar {
        /// "Parquet" or "Arrow IPC".
        format: &'static str,
        /// The reader's explanation.
        detail: String,
    },
    /// The CSV parser itself failed (e.g. a quote that never closes).
    #[error("cannot parse this as CSV: {detail}")]
    Syntax {
        /// The parser's explanation.
        detail: String,
    },
    /// Class columns are missing from a probability file.
    #[error("no column for the class(es) {missing}; a probability file needs one column per class: {classes}")]
    ProbMissingClasses {
        /// Missing class names.
        missing: String,
        /// All class names.
        classes: String,
    },
    /// Columns in a probability file that are neither a class nor the id.
    #[error("the column(s) {extra} are not classes of the dataset (classes: {classes})")]
    ProbExtraColumns {
        /// Unexpected column names.
        extra: String,
        /// All class names.
        classes: String,
    },
    /// The probability file has a different number of rows than the dataset.
    #[error("{found} probability rows for {expected} data rows{hint}")]
    ProbRowCount {
        /// Data rows.
        expected: usize,
        /// Probability rows.
        found: usize,
        /// An extra sentence.
        hint: String,
    },
    /// A probability outside [0, 1] or NaN.
    #[error("the probability {value} is outside [0, 1]")]
    ProbOutOfRange {
        /// The value as read.
        value: String,
    },
    /// A row of probabilities that does not sum to 1.
    #[error("this row's probabilities sum to {sum:.6}, not 1 (tolerance 1e-3); pass --renormalize to rescale such rows")]
    ProbRowSum {
        /// The row sum.
        sum: f64,
    },
    /// An all-zero row cannot be renormalised.
    #[error("this row's probabilities are all zero, so it cannot be renormalised")]
    ProbZeroRow,
    /// A probability row whose id is not in the dataset.
    #[error("the id '{id}' is not in the dataset")]
    ProbUnknownId {
        /// The id.
        id: String,
    },
    /// Data rows that got no probability row.
    #[error("{count} data row(s) have no probability row, e.g. id '{example}'")]
    ProbMissingIds {
        /// How many.
        count: usize,
        /// One of them.
        example: String,
    },
    /// A flip-matrix file that is not a valid matrix for the data's classes.
    #[error("{detail}")]
    Matrix {
        /// What is wrong.
        detail: String,
    },
    /// A reviewed worklist that does not fit the dataset.
    #[error("{detail}")]
    Review {
        /// What is wrong.
        detail: String,
    },
    /// A model file that cannot be used.
    #[error("{detail}")]
    Model {
        /// What is wrong.
        detail: String,
    },
    /// A session file that cannot be restored.
    #[error("{detail}")]
    Session {
        /// What is wrong.
        detail: String,
    },
    /// A malformed `.npy` header.
    #[error("not a readable .npy file: {detail}")]
    NpyHeader {
        /// What is wrong.
        detail: String,
    },
    /// An `.npy` element type other than float32/float64.
    #[error("the .npy array holds '{descr}'; flipmend reads float32 ('<f4') or float64 ('<f8')")]
    NpyDtype {
        /// The numpy type descriptor.
        descr: String,
    },
    /// An `.npy` array of the wrong shape.
    #[error(
        "the .npy array has shape {shape}; expected ({rows}, {classes}) = (data rows, classes)"
    )]
    NpyShape {
        /// The shape as written in the header.
        shape: String,
        /// Data rows.
        rows: usize,
        /// Classes.
        classes: usize,
    },
    /// The `.npy` data is shorter or longer than its header says.
    #[error("the .npy data has {found} bytes but its header announces {expected}")]
    NpySize {
        /// Bytes announced by the header.
        expected: u64,
        /// Bytes present.
        found: u64,
    },
}

/// A problem in an input file and where it is (boxed inside [`Error`] to keep results small).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{location}: {problem}")]
pub struct InputError {
    /// Where.
    pub location: Location,
    /// What.
    pub problem: Problem,
}

/// Every error the library returns.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// An input file could not be opened or read.
    #[error("{path}: cannot read: {source}", path = path.display())]
    Read {
        /// The file.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// An input file's content is wrong.
    #[error(transparent)]
    Input(Box<InputError>),
    /// A flag or combination of flags that cannot work.
    #[error("{0}")]
    Usage(String),
    /// A setting that cannot work, named by its word in the glossary (`l2`, `max iter`,
    /// `folds`, …); the command line shows its flag instead ([`crate::cli::describe`]).
    #[error("{setting} {problem}")]
    Setting {
        /// The setting's name.
        setting: &'static str,
        /// What is wrong with its value, as the rest of the sentence.
        problem: String,
    },
    /// An output would replace one of the command's input files.
    #[error("{path}: refusing to write here because it is one of this command's input files", path = path.display())]
    WouldOverwriteInput {
        /// The output path.
        path: PathBuf,
    },
    /// An output file could not be written; nothing was left half-written.
    #[error("{path}: cannot write: {source}", path = path.display())]
    Write {
        /// The output path.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The user stopped a long job.
    #[error("cancelled")]
    Cancelled,
    /// A bug or an unexpected condition inside flipmend.
    #[error("internal error: {0}")]
    Internal(String),
}

impl Error {
    /// Builds an [`Error::Input`].
    pub fn input(location: Location, problem: Problem) -> Self {
        Error::Input(Box::new(InputError { location, problem }))
    }

    /// True when the user's files or flags caused the error (exit code 2), false for
    /// failures inside flipmend or its environment (exit code 1).
    pub fn is_bad_input(&self) -> bool {
        match self {
            Error::Read { .. } | Error::Input(_) | Error::Usage(_) | Error::Setting { .. } => true,
            Error::WouldOverwriteInput { .. } => true,
            Error::Write { .. } | Error::Internal(_) | Error::Cancelled => false,
        }
    }
}

/// Turns a `csv` crate error while reading `path` into a syntax error at its line.
pub(crate) fn csv_syntax(path: &Path) -> impl Fn(csv::Error) -> Error + Copy + '_ {
    move |e: csv::Error| {
        let line = e.position().map_or(0, |p| p.line());
        Error::input(
            Location::line(path, line),
            Problem::Syntax {
                detail: e.to_string(),
            },
        )
    }
}

/// Shortens a cell's text for a message so a huge field cannot flood the terminal.
pub(crate) fn shorten(text: &str) -> String {
    const MAX_CHARS: usize = 40;
    if text.chars().count() <= MAX_CHARS {
        text.to_string()
    } else {
        let head: String = text.chars().take(MAX_CHARS).collect();
        format!("{head}…")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn location_names_file_line_and_column() {
        let loc = Location::line(Path::new("d.csv"), 7).at_column(2, "f1");
        assert_eq!(loc.to_string(), "d.csv, line 7, column 3 'f1'");
        assert_eq!(Location::file(Path::new("d.csv")).to_string(), "d.csv");
    }

    #[test]
    fn exit_class_of_each_error() {
        let input = Error::input(Location::file(Path::new("x")), Problem::Empty);
        assert!(input.is_bad_input());
        assert!(Error::Usage("u".into()).is_bad_input());
        let setting = Error::Setting {
            setting: "max iter",
            problem: "must be at least 1".into(),
        };
        assert!(setting.is_bad_input());
        assert_eq!(setting.to_string(), "max iter must be at least 1");
        assert!(!Error::Internal("bug".into()).is_bad_input());
        let write = Error::Write {
            path: "o".into(),
            source: std::io::Error::other("full"),
        };
        assert!(!write.is_bad_input());
    }

    #[test]
    fn shorten_cuts_long_cells() {
        assert_eq!(shorten("abc"), "abc");
        let long = "x".repeat(100);
        assert_eq!(shorten(&long).chars().count(), 41);
    }
}
