//! Column roles: which header column is the label, the id, the trusted label and the
//! features. Flags arrive as plain data ([`TableOptions`]) and are resolved against the
//! header into a [`ColumnPlan`] before any data row is read.

use std::path::Path;

use super::origin::origin_column;
use crate::error::{Error, Location, Problem, Result};

/// Default name of the observed-label column.
pub const DEFAULT_LABEL: &str = "label";
/// Default name of the id column (used when present).
pub const DEFAULT_ID: &str = "id";
/// Default name of the trusted-label column (used when present).
pub const DEFAULT_TRUSTED: &str = "trusted";

/// How to read a labelled table: the role flags as the user gave them.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct TableOptions {
    /// Field delimiter; `None` means tab for `.tsv` files and comma otherwise.
    pub delimiter: Option<u8>,
    /// Observed-label column; default [`DEFAULT_LABEL`].
    pub label: Option<String>,
    /// Id column; default [`DEFAULT_ID`] when the header has it, else row numbers.
    pub id: Option<String>,
    /// Trusted-label column; default [`DEFAULT_TRUSTED`] when the header has it.
    pub trusted: Option<String>,
    /// Feature columns in the order given; default every other all-numeric column.
    pub features: Option<Vec<String>>,
    /// Several label columns, one per annotator (an empty cell: that annotator did not
    /// label the row); the observed label is then their consensus. Replaces `label`.
    pub annotators: Option<Vec<String>>,
    /// Column that says where each row's label came from (annotator, station, vendor,
    /// rule); no default, since a per-source estimate changes every figure.
    pub source: Option<String>,
    /// Columns that must never become features (e.g. the `--truth` column of a synthetic
    /// benchmark), each with the flag that named it.
    pub exclude: Vec<(String, String)>,
    /// The label column may be absent (tables to predict on).
    pub unlabeled: bool,
}

impl TableOptions {
    /// The delimiter for `path`: the explicit one, else tab for `.tsv`, else comma.
    pub fn delimiter_for(&self, path: &Path) -> u8 {
        crate::io::csv_source::delimiter_for(path, self.delimiter)
    }
}

/// Parses a `--delimiter` value: one ASCII character, or `tab` / `\t`.
pub fn parse_delimiter(text: &str) -> Result<u8, String> {
    match text {
        "tab" | "\\t" | "\t" => Ok(b'\t'),
        "comma" => Ok(b','),
        "semicolon" => Ok(b';'),
        _ if text.len() == 1 && text.is_ascii() && text != "\"" && text != "\n" => {
            Ok(text.as_bytes()[0])
        }
        _ => Err(format!(
            "'{text}' is not a delimiter; give one character such as ';' or the word 'tab'"
        )),
    }
}

/// The resolved role of every header field.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ColumnPlan {
    /// Header names, in file order.
    pub header: Vec<String>,
    /// Field index of the observed label (`None` only for unlabeled tables).
    pub label: Option<usize>,
    /// Field index of the id column, if any.
    pub id: Option<usize>,
    /// Field index of the trusted label, if any.
    pub trusted: Option<usize>,
    /// Field index of the trusted labels' origin (the trusted column's name + `_origin`),
    /// if any.
    pub origin: Option<usize>,
    /// Field index of the label-source column, if any.
    pub source: Option<usize>,
    /// Field indices of the annotators' label columns (empty without `--labels`).
    pub annotators: Vec<usize>,
    /// Field indices parsed as numbers: the features when `explicit`, else candidates.
    pub numeric: Vec<usize>,
    /// True when `--features` fixed the feature list.
    pub explicit: bool,
}

impl ColumnPlan {
    /// Resolves the role flags against a header.
    pub fn resolve(path: &Path, header: &[String], options: &TableOptions) -> Result<Self> {
        check_unique(path, header)?;
        let index: rustc_hash::FxHashMap<&str, usize> = header
            .iter()
            .enumerate()
            .map(|(i, h)| (h.as_str(), i))
            .collect();
        let find = |name: &str| index.get(name).copied();
        let lookup = |flag: &str, name: &str| {
            find(name).ok_or_else(|| {
                Error::input(
                    Location::line(path, 1),
                    Problem::UnknownColumn {
                        flag: flag.into(),
                        name: name.into(),
                        available: header.join(", "),
                    },
                )
            })
        };
        let annotators = annotator_fields(path, options, &lookup)?;
        let label = match &options.label {
            Some(_) if !annotators.is_empty() => {
                return Err(Error::Usage(
                    "give either one label column (--label) or several (--labels), not both".into(),
                ))
            }
            Some(name) => Some(lookup("--label", name)?),
            None if !annotators.is_empty() => None,
            None if options.unlabeled => find(DEFAULT_LABEL),
            None => Some(find(DEFAULT_LABEL).ok_or_else(|| no_label(path, header))?),
        };
        let id = match &options.id {
            Some(name) => Some(lookup("--id", name)?),
            None => find(DEFAULT_ID).filter(|&i| Some(i) != label),
        };
        let trusted = match &options.trusted {
            Some(name) => Some(lookup("--trusted", name)?),
            None => find(DEFAULT_TRUSTED).filter(|&i| Some(i) != label && Some(i) != id),
        };
        let origin = trusted
            .and_then(|t| find(&origin_column(&header[t])))
            .filter(|&i| Some(i) != label && Some(i) != id);
        let source = match &options.source {
            Some(name) => Some(lookup("--source", name)?),
            None => None,
        };
        let roles = [
            ("label", label),
            ("id column", id),
            ("trusted label", trusted),
            ("trusted origin", origin),
            ("label source", source),
        ];
        check_clashes(path, header, &roles)?;
        for &a in &annotators {
            if let Some((role, _)) = roles.iter().find(|(_, r)| *r == Some(a)) {
                return Err(clash(path, &header[a], role, "an annotator's labels"));
            }
        }
        let mut excluded = Vec::with_capacity(options.exclude.len());
        for (flag, name) in &options.exclude {
            let i = lookup(flag, name)?;
            if let Some((role, _)) = roles.iter().find(|(_, r)| *r == Some(i)) {
                return Err(clash(path, name, role, &format!("{flag} column")));
            }
            excluded.push(i);
        }
        excluded.extend_from_slice(&annotators);
        let is_role = |i: usize| roles.iter().any(|(_, r)| *r == Some(i)) || excluded.contains(&i);
        let (numeric, explicit) = match &options.features {
            Some(names) => (
                chosen_features(path, names, &roles, &excluded, &lookup)?,
                true,
            ),
            None => ((0..header.len()).filter(|&i| !is_role(i)).collect(), false),
        };
        Ok(ColumnPlan {
            header: header.to_vec(),
            label,
            id,
            trusted,
            origin,
            source,
            annotators,
            numeric,
            explicit,
        })
    }
}

/// The fields `--labels` names, in its order; fewer than two, or one named twice, is an
/// error (one column is `--label`'s job).
fn annotator_fields(
    path: &Path,
    options: &TableOptions,
    lookup: &dyn Fn(&str, &str) -> Result<usize>,
) -> Result<Vec<usize>> {
    let Some(names) = &options.annotators else {
        return Ok(Vec::new());
    };
    let mut fields = Vec::with_capacity(names.len());
    for name in names {
        let i = lookup("--labels", name)?;
        if fields.contains(&i) {
            return Err(Error::Usage(format!(
                "--labels names the column '{name}' twice ({})",
                path.display()
            )));
        }
        fields.push(i);
    }
    if fields.len() < 2 {
        return Err(Error::Usage(
            "--labels needs at least two annotators' columns; one label column is --label".into(),
        ));
    }
    Ok(fields)
}

/// The fields `--features` names, in its order without repeats; a name that is another
/// role's column or an excluded one is an error.
fn chosen_features(
    path: &Path,
    names: &[String],
    roles: &[(&str, Option<usize>)],
    excluded: &[usize],
    lookup: &dyn Fn(&str, &str) -> Result<usize>,
) -> Result<Vec<usize>> {
    let mut fields = Vec::with_capacity(names.len());
    let mut chosen = rustc_hash::FxHashSet::default();
    for name in names {
        let i = lookup("--features", name)?;
        if let Some((role, _)) = roles.iter().find(|(_, r)| *r == Some(i)) {
            return Err(clash(path, name, role, "a feature"));
        }
        if excluded.contains(&i) {
            return Err(clash(path, name, "excluded column", "a feature"));
        }
        if chosen.insert(i) {
            fields.push(i);
        }
    }
    Ok(fields)
}

fn check_unique(path: &Path, header: &[String]) -> Result<()> {
    let mut seen = rustc_hash::FxHashSet::default();
    for (i, name) in header.iter().enumerate() {
        if !seen.insert(name.as_str()) {
            let problem = Problem::DuplicateColumn { name: name.clone() };
            return Err(Error::input(
                Location::line(path, 1).at_column(i, name),
                problem,
            ));
        }
    }
    Ok(())
}

fn check_clashes(path: &Path, header: &[String], roles: &[(&str, Option<usize>)]) -> Result<()> {
    for (a, (role_a, col_a)) in roles.iter().enumerate() {
        for (role_b, col_b) in &roles[a + 1..] {
            if let (Some(x), Some(y)) = (col_a, col_b) {
                if x == y {
                    return Err(clash(path, &header[*x], role_a, role_b));
                }
            }
        }
    }
    Ok(())
}

fn clash(path: &Path, name: &str, first: &str, second: &str) -> Error {
    let problem = Problem::RoleClash {
        name: name.into(),
        first: first.into(),
        second: second.into(),
    };
    Error::input(Location::line(path, 1), problem)
}

fn no_label(path: &Path, header: &[String]) -> Error {
    let hint = delimiter_hint(header);
    Error::input(
        Location::line(path, 1),
        Problem::NoLabelColumn {
            available: header.join(", "),
            hint,
        },
    )
}

/// A sentence suggesting `--delimiter` when a one-column header looks delimited otherwise.
pub(crate) fn delimiter_hint(header: &[String]) -> String {
    if header.len() != 1 {
        return String::new();
    }
    let h = &header[0];
    for (ch, flag) in [(';', ";"), ('\t', "tab"), (',', ","), ('|', "|")] {
        if h.contains(ch) {
            return format!(
                " (the header has one column containing '{}': try --delimiter '{flag}')",
                ch.escape_default()
            );
        }
    }
    String::new()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header(names: &[&str]) -> Vec<String> {
        names.iter().map(|s| s.to_string()).collect()
    }

    fn plan(names: &[&str], options: &TableOptions) -> Result<ColumnPlan> {
        ColumnPlan::resolve(Path::new("t.csv"), &header(names), options)
    }

    #[test]
    fn defaults_pick_named_columns() {
        let p = plan(
            &["id", "a", "label", "trusted", "b"],
            &TableOptions::default(),
        )
        .unwrap();
        assert_eq!((p.label, p.id, p.trusted), (Some(2), Some(0), Some(3)));
        assert_eq!(p.numeric, vec![1, 4]);
        assert!(!p.explicit);
    }

    #[test]
    fn explicit_features_keep_their_order() {
        let options = TableOptions {
            features: Some(vec!["b".into(), "a".into()]),
            ..Default::default()
        };
        let p = plan(&["a", "label", "b", "c"], &options).unwrap();
        assert_eq!(p.numeric, vec![2, 0]);
        assert!(p.explicit);
    }

    #[test]
    fn missing_label_lists_columns_and_hints_delimiter() {
        let err = plan(&["a;b;label"], &TableOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("no label column") && err.contains("a;b;label"),
            "{err}"
        );
        assert!(err.contains("--delimiter ';'"), "{err}");
    }

    #[test]
    fn unknown_column_names_the_flag() {
        let options = TableOptions {
            label: Some("y".into()),
            ..Default::default()
        };
        let err = plan(&["a", "label"], &options).unwrap_err().to_string();
        assert!(
            err.contains("--label names the column 'y'") && err.contains("a, label"),
            "{err}"
        );
    }

    #[test]
    fn a_column_cannot_hold_two_roles() {
        let options = TableOptions {
            id: Some("label".into()),
            ..Default::default()
        };
        let err = plan(&["a", "label"], &options).unwrap_err().to_string();
        assert!(err.contains("cannot be both"), "{err}");
        let options = TableOptions {
            features: Some(vec!["label".into()]),
            ..Default::default()
        };
        assert!(plan(&["a", "label"], &options).is_err());
    }

    #[test]
    fn duplicate_header_names_are_refused() {
        let err = plan(&["a", "a", "label"], &TableOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("column 2 'a'") && err.contains("more than once"),
            "{err}"
        );
    }

    #[test]
    fn delimiter_words_and_tsv_default() {
        assert_eq!(parse_delimiter("tab"), Ok(b'\t'));
        assert_eq!(parse_delimiter(";"), Ok(b';'));
        assert!(parse_delimiter("ab").is_err());
        let o = TableOptions::default();
        assert_eq!(o.delimiter_for(Path::new("x.TSV")), b'\t');
        assert_eq!(o.delimiter_for(Path::new("x.csv")), b',');
    }
}
