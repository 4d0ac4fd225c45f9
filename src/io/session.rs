//! The session file: what the desktop app needs to pick up where the user left off —
//! file paths, column roles, the (possibly hand-edited) flip matrix and the settings.
//! JSON, versioned. Data are not copied into it: it points at the files.

use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Location, Problem, Result};
use crate::learn::train::Correction;
use crate::noise::matrix::validate;
use crate::noise::scores::ScoreKind;
use crate::noise::{Estimator, TrustedFallback};

/// The `format` field of every session file.
pub const SESSION_FORMAT: &str = "flipmend-session";
/// The newest session version this build reads; written when the session holds
/// verdicts given in the app (or a review round).
pub const SESSION_VERSION: u32 = 3;
/// The version a session with label-source matrices but no verdicts is written as.
pub const SESSION_VERSION_SOURCES: u32 = 2;
/// The version a session without label-source matrices is written as (version 1 has no
/// `source_matrices`), so that older flipmend reads it.
pub const SESSION_VERSION_ONE_MATRIX: u32 = 1;
/// Session files larger than this are refused before parsing (a session holds paths, a
/// K×K matrix and settings; even 1,000 classes stay far below it).
pub const SESSION_MAX_BYTES: u64 = 64 << 20;

/// Where the matrix on screen came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MatrixOrigin {
    /// An estimator's output, untouched.
    Estimated,
    /// Changed by hand since it was estimated or imported.
    Edited,
    /// Read from a matrix CSV (or a session), untouched since.
    Imported,
}

impl MatrixOrigin {
    /// The word the status bar shows.
    pub fn label(self) -> &'static str {
        match self {
            MatrixOrigin::Estimated => "estimated",
            MatrixOrigin::Edited => "edited",
            MatrixOrigin::Imported => "imported",
        }
    }
}

/// Column roles as the user chose them (`None`: the default rule).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Roles {
    /// Field delimiter as typed (`,`, `tab`, `;` …).
    pub delimiter: Option<String>,
    /// Observed-label column.
    pub label: Option<String>,
    /// Id column.
    pub id: Option<String>,
    /// Trusted-label column.
    pub trusted: Option<String>,
    /// Feature columns.
    pub features: Option<Vec<String>>,
    /// Label-source column (one flip matrix per source).
    pub source: Option<String>,
    /// Several annotators' label columns (one per annotator): their consensus is then
    /// the observed label.
    pub annotators: Option<Vec<String>>,
}

/// Every setting a session restores.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Settings {
    /// Folds of the out-of-fold probabilities.
    pub folds: usize,
    /// Seed of every random choice.
    pub seed: u64,
    /// L2 penalty of every fit.
    pub l2: f64,
    /// Iteration limit of every fit.
    pub max_iter: usize,
    /// Estimator.
    pub estimator: Estimator,
    /// What the trusted estimator does for classes without randomly audited rows.
    pub fallback: TrustedFallback,
    /// Quantile of the quantile estimator.
    pub quantile: f64,
    /// Editing a cell leaves the diagonal alone.
    pub keep_diagonal: bool,
    /// Bootstrap resamples.
    pub resamples: usize,
    /// Suspect score.
    pub score: ScoreKind,
    /// Rows on the worklist at most.
    pub budget: usize,
    /// Share of the worklist given to control rows (0: a ranked worklist without them).
    pub control: f64,
    /// Only rows scoring at least this.
    pub min_score: f64,
    /// Only rows observed as this class.
    pub observed_filter: Option<String>,
    /// Only rows suggested as this class.
    pub suggested_filter: Option<String>,
    /// Corrections to train besides `none`.
    pub corrections: Vec<Correction>,
    /// Holdout share of the comparison.
    pub holdout: f64,
    /// Optional labelled test table.
    pub test: Option<PathBuf>,
    /// Read from sessions written when the theme was kept in them, and ignored: the
    /// theme is the app's preference, so opening a session does not switch it.
    #[serde(rename = "dark", skip_serializing)]
    pub ignored_dark: Option<bool>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            folds: 5,
            seed: 0,
            l2: 1e-3,
            max_iter: 500,
            estimator: Estimator::Joint,
            fallback: TrustedFallback::None,
            quantile: crate::noise::DEFAULT_QUANTILE,
            keep_diagonal: false,
            resamples: 20,
            score: ScoreKind::Posterior,
            budget: 500,
            control: crate::workflow::worklist::DEFAULT_CONTROL_SHARE,
            min_score: 0.0,
            observed_filter: None,
            suggested_filter: None,
            corrections: vec![Correction::Forward, Correction::Backward, Correction::Prune],
            holdout: 0.2,
            test: None,
            ignored_dark: None,
        }
    }
}

/// A matrix as the session stores it, with the classes it belongs to.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SessionMatrix {
    /// Class names of rows and columns.
    pub classes: Vec<String>,
    /// Rows = true class.
    pub values: Vec<Vec<f64>>,
    /// Where it came from.
    pub origin: MatrixOrigin,
}

/// A label source's matrix as the user changed it (a session keeps only changed ones:
/// the others are estimated again).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SessionSourceMatrix {
    /// The source's name (a value of the source column).
    pub source: String,
    /// Its matrix.
    pub matrix: SessionMatrix,
}

/// A verdict given in the app, as a session keeps it: the row by number and id (checked
/// when the session is opened), the class by name, how the row came to be reviewed.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SessionVerdict {
    /// 0-based data row.
    pub row: usize,
    /// Its id (its row number when the table has no id column).
    pub id: String,
    /// The class it truly is.
    pub label: String,
    /// `review` or `control` (or `audit`).
    pub origin: String,
}

/// A row of the review round under way, as a session keeps it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SessionRoundRow {
    /// 0-based data row.
    pub row: usize,
    /// Its id.
    pub id: String,
    /// `listed` or `control`.
    pub slice: String,
    /// 1-based rank when the round started.
    pub rank: usize,
    /// Its score then.
    pub score: f64,
    /// The class suggested then.
    pub suggested: String,
    /// The second choice then.
    pub second_choice: String,
    /// Its probability.
    pub second_choice_prob: f64,
}

/// A whole session.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Session {
    /// Always [`SESSION_FORMAT`].
    pub format: String,
    /// File version.
    pub version: u32,
    /// The labelled table.
    pub data: Option<PathBuf>,
    /// Column roles.
    #[serde(default)]
    pub roles: Roles,
    /// A probability file (absent: out-of-fold probabilities are computed).
    pub probs: Option<PathBuf>,
    /// The flip matrix as last shown.
    pub matrix: Option<SessionMatrix>,
    /// Label sources whose matrices were changed by hand (version 2).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub source_matrices: Vec<SessionSourceMatrix>,
    /// Settings.
    #[serde(default)]
    pub settings: Settings,
    /// Verdicts given in the app (version 3).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub verdicts: Vec<SessionVerdict>,
    /// The review round under way in the app, in review order (version 3).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub round: Vec<SessionRoundRow>,
    /// The score the round's rows were ranked by (version 3).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub round_score: Option<ScoreKind>,
    /// The round has ended (its rows still key its verdicts) (version 3).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub round_closed: bool,
}

impl Session {
    /// An empty session with default settings.
    pub fn new() -> Self {
        Session {
            format: SESSION_FORMAT.into(),
            version: SESSION_VERSION_ONE_MATRIX,
            data: None,
            roles: Roles::default(),
            probs: None,
            matrix: None,
            source_matrices: Vec::new(),
            settings: Settings::default(),
            verdicts: Vec::new(),
            round: Vec::new(),
            round_score: None,
            round_closed: false,
        }
    }
}

impl Default for Session {
    fn default() -> Self {
        Session::new()
    }
}

/// Reads and checks a session file. `path` names it in messages.
pub fn read_session<R: Read>(reader: R, path: &Path) -> Result<Session> {
    let bad = |detail: String| Error::input(Location::file(path), Problem::Session { detail });
    let mut text = String::new();
    reader
        .take(SESSION_MAX_BYTES + 1)
        .read_to_string(&mut text)
        .map_err(|e| bad(format!("not a readable session file: {e}")))?;
    if text.len() as u64 > SESSION_MAX_BYTES {
        return Err(bad(format!(
            "the session file is larger than {} MiB; it is not a flipmend session",
            SESSION_MAX_BYTES >> 20
        )));
    }
    let value: serde_json::Value = serde_json::from_str(&text).map_err(|e| at(path, &e))?;
    if value.get("format").and_then(|f| f.as_str()) != Some(SESSION_FORMAT) {
        return Err(bad(format!(
            "not a flipmend session file (no \"format\": \"{SESSION_FORMAT}\")"
        )));
    }
    let version = value.get("version").and_then(|v| v.as_u64());
    match version {
        None => return Err(bad("the session file has no version".into())),
        Some(v) if v > SESSION_VERSION as u64 => {
            return Err(bad(format!(
                "the session file is version {v}, made by a newer flipmend; this one reads up to version {SESSION_VERSION}"
            )))
        }
        Some(_) => {}
    }
    // Parse the text again (not the Value) so that a type error names its line and column.
    let session: Session = serde_json::from_str(&text).map_err(|e| at(path, &e))?;
    check(&session).map_err(bad)?;
    Ok(session)
}

fn at(path: &Path, e: &serde_json::Error) -> Error {
    let location = Location {
        path: path.to_path_buf(),
        line: Some(e.line() as u64),
        column: None,
        row: None,
        part: None,
    };
    Error::input(
        location,
        Problem::Session {
            detail: format!("not a valid session file: {e}"),
        },
    )
}

/// Settings and matrix within their ranges.
fn check(s: &Session) -> std::result::Result<(), String> {
    let t = &s.settings;
    if t.folds < 2 {
        return Err(format!("folds must be at least 2, not {}", t.folds));
    }
    if !(t.l2.is_finite() && t.l2 >= 0.0) {
        return Err(format!("l2 must be finite and non-negative, not {}", t.l2));
    }
    if !(t.quantile > 0.0 && t.quantile <= 1.0) {
        return Err(format!("quantile must lie in (0, 1], not {}", t.quantile));
    }
    if !(t.holdout > 0.0 && t.holdout < 1.0) {
        return Err(format!("holdout must lie in (0, 1), not {}", t.holdout));
    }
    if !t.min_score.is_finite() {
        return Err("min_score must be a number".into());
    }
    if !crate::workflow::worklist::valid_control_share(t.control) {
        return Err(format!("control must lie in [0, 0.5), not {}", t.control));
    }
    if t.resamples > 10_000 {
        return Err(format!(
            "resamples must be at most 10000, not {}",
            t.resamples
        ));
    }
    if let Some(m) = &s.matrix {
        check_matrix(m, "the session's matrix")?;
    }
    for m in &s.source_matrices {
        check_matrix(
            &m.matrix,
            &format!("the matrix of label source '{}'", m.source),
        )?;
    }
    Ok(())
}

fn check_matrix(m: &SessionMatrix, what: &str) -> std::result::Result<(), String> {
    let k = m.classes.len();
    if m.values.len() != k || m.values.iter().any(|r| r.len() != k) {
        return Err(format!("{what} must be {k}×{k} for its {k} classes"));
    }
    let flat: Vec<f64> = m.values.iter().flatten().copied().collect();
    let t = ndarray::Array2::from_shape_vec((k, k), flat).map_err(|e| e.to_string())?;
    validate(&t).map_err(|e| format!("{what}: {e}"))
}

/// Writes a session (pretty JSON).
pub fn write_session(out: &mut dyn Write, session: &Session) -> std::io::Result<()> {
    serde_json::to_writer_pretty(&mut *out, session)?;
    out.write_all(b"\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn text(s: &Session) -> String {
        let mut out = Vec::new();
        write_session(&mut out, s).unwrap();
        String::from_utf8(out).unwrap()
    }

    fn read(t: &str) -> Result<Session> {
        read_session(t.as_bytes(), Path::new("s.json"))
    }

    fn sample() -> Session {
        let mut s = Session::new();
        s.data = Some("demo.csv".into());
        s.roles.label = Some("material".into());
        s.matrix = Some(SessionMatrix {
            classes: vec!["a".into(), "b".into()],
            values: vec![vec![0.9, 0.1], vec![0.25, 0.75]],
            origin: MatrixOrigin::Edited,
        });
        s.settings.quantile = 0.95;
        s
    }

    #[test]
    fn a_session_round_trips_exactly() {
        let s = sample();
        assert_eq!(read(&text(&s)).unwrap(), s);
    }

    #[test]
    fn wrong_format_version_or_shape_is_refused() {
        let cases = [
            (
                "{\"format\": \"other\", \"version\": 1}",
                "not a flipmend session",
            ),
            ("{\"format\": \"flipmend-session\"}", "has no version"),
            (
                "{\"format\": \"flipmend-session\", \"version\": 9}",
                "newer flipmend",
            ),
            (
                "{\"format\": \"flipmend-session\",\n \"version\": 1,\n \"data\": 5}",
                "line 3",
            ),
            ("[1, 2", "not a valid session file"),
        ];
        for (input, expected) in cases {
            let message = read(input).unwrap_err().to_string();
            assert!(message.contains(expected), "{input}: {message}");
        }
    }

    #[test]
    fn source_matrices_round_trip_and_a_bad_one_names_its_source() {
        let mut s = sample();
        s.version = SESSION_VERSION_SOURCES;
        let matrix = s.matrix.clone().unwrap();
        s.source_matrices = vec![SessionSourceMatrix {
            source: "S4".into(),
            matrix,
        }];
        assert_eq!(read(&text(&s)).unwrap(), s);
        s.source_matrices[0].matrix.values[0] = vec![0.7, 0.7];
        let message = read(&text(&s)).unwrap_err().to_string();
        assert!(message.contains("label source 'S4'"), "{message}");
        // Without source matrices the key is not written at all (a version 1 file).
        assert!(!text(&sample()).contains("source_matrices"));
    }

    #[test]
    fn verdicts_and_a_round_round_trip_and_are_left_out_when_there_are_none() {
        let mut s = sample();
        s.version = SESSION_VERSION;
        s.verdicts = vec![SessionVerdict {
            row: 4,
            id: "B1-00004".into(),
            label: "b".into(),
            origin: "control".into(),
        }];
        s.round = vec![SessionRoundRow {
            row: 4,
            id: "B1-00004".into(),
            slice: "control".into(),
            rank: 812,
            score: 0.03,
            suggested: "a".into(),
            second_choice: "b".into(),
            second_choice_prob: 0.01,
        }];
        s.round_score = Some(ScoreKind::Posterior);
        assert_eq!(read(&text(&s)).unwrap(), s);
        let plain = text(&sample());
        assert!(!plain.contains("verdicts") && !plain.contains("round"));
    }

    #[test]
    fn a_bad_matrix_or_setting_is_refused() {
        let mut s = sample();
        s.matrix.as_mut().unwrap().values[1] = vec![0.5, 0.2];
        assert!(read(&text(&s)).unwrap_err().to_string().contains("sum"));
        let mut s = sample();
        s.matrix.as_mut().unwrap().values.pop();
        assert!(read(&text(&s)).unwrap_err().to_string().contains("2×2"));
        let mut s = sample();
        s.settings.folds = 1;
        assert!(read(&text(&s)).unwrap_err().to_string().contains("folds"));
        // An unknown correction name is refused by name (serde's unknown-variant message).
        let s = sample();
        let bad = text(&s).replacen("\"forward\"", "\"sideways\"", 1);
        assert!(bad.contains("sideways"));
        assert!(read(&bad).unwrap_err().to_string().contains("sideways"));
        let mut s = sample();
        s.settings.control = 0.6;
        assert!(read(&text(&s))
            .unwrap_err()
            .to_string()
            .contains("control must lie in [0, 0.5)"));
    }

    #[test]
    fn a_session_written_before_the_control_share_reads_with_the_default() {
        let mut value: serde_json::Value = serde_json::from_str(&text(&sample())).unwrap();
        value["settings"].as_object_mut().unwrap().remove("control");
        let s = read(&value.to_string()).unwrap();
        assert_eq!(
            s.settings.control,
            crate::workflow::worklist::DEFAULT_CONTROL_SHARE
        );
    }
}
