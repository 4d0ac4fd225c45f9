//! The labelled table: features, observed labels, optional ids and trusted labels. Its
//! CSV is read by [`crate::io::table_csv`] and checked into a [`Dataset`] by
//! `data::assemble`.

use std::borrow::Cow;
use std::fs::File;
use std::io::Read;
use std::path::{Path, PathBuf};

use ndarray::Array2;

use super::assemble::Assembly;
use super::origin::Origin;
use super::roles::TableOptions;
use crate::error::{Error, Result};
use crate::io::columnar::{guarded, Format};
use crate::io::table_arrow::read_columnar_table;
use crate::io::table_csv::{read_table, BLOCK_BYTES};

/// Strings stored back to back, so a million ids cost one allocation, not a million.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct StringColumn {
    text: String,
    ends: Vec<usize>,
}

impl StringColumn {
    /// The `i`-th string.
    pub fn get(&self, i: usize) -> &str {
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        &self.text[start..self.ends[i]]
    }

    /// Number of strings.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// True when there are no strings.
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    pub(crate) fn append(&mut self, text: &str, ends: &[usize]) {
        let base = self.text.len();
        self.text.push_str(text);
        self.ends.extend(ends.iter().map(|e| e + base));
    }
}

/// A column that no role uses, and why.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct IgnoredColumn {
    /// Header name.
    pub name: String,
    /// Why it is not a feature.
    pub reason: String,
}

/// Empty cells in a column that may have them (the trusted column, ignored columns).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct MissingCount {
    /// Header name.
    pub column: String,
    /// Empty cells.
    pub count: usize,
}

/// A loaded, validated labelled table.
#[derive(Debug, Clone)]
pub struct Dataset {
    /// The file it came from, as the user named it.
    pub path: PathBuf,
    /// All header names in file order.
    pub header: Vec<String>,
    /// Name of the observed-label column (`None` only for tables loaded for prediction,
    /// whose `labels` are then empty).
    pub label_column: Option<String>,
    /// Name of the id column, when there is one.
    pub id_column: Option<String>,
    /// Name of the trusted-label column, when there is one.
    pub trusted_column: Option<String>,
    /// Name of the column that says how each trusted label was obtained, when there is
    /// one (the trusted column's name + `_origin`).
    pub origin_column: Option<String>,
    /// Names of the feature columns, in the order of `features`' columns.
    pub feature_names: Vec<String>,
    /// Row-major `rows × features`, all finite.
    pub features: Array2<f64>,
    /// Class names in natural order; labels index into this.
    pub classes: Vec<String>,
    /// Observed label of each row.
    pub labels: Vec<usize>,
    /// Trusted (audited) label of each row, `None` where not audited; `None` as a whole
    /// when the table has no trusted column.
    pub trusted: Option<Vec<Option<usize>>>,
    /// How each row's trusted label was obtained; `None` when the table has no origin
    /// column (every trusted label then counts as a random audit).
    pub trusted_origins: Option<Vec<Origin>>,
    /// Several annotators' labels per row, when `--labels` named their columns; `labels`
    /// then holds their majority until a consensus replaces it.
    pub annotations: Option<super::annotations::Annotations>,
    /// The label-source column, when one was named.
    pub sources: Option<super::sources::LabelSources>,
    /// Ids from the id column; rows are identified by 0-based row number when absent.
    pub ids: Option<StringColumn>,
    /// Columns no role uses.
    pub ignored: Vec<IgnoredColumn>,
    /// Empty cells in columns where they are allowed.
    pub missing: Vec<MissingCount>,
    /// Things the user should know that do not stop the work.
    pub warnings: Vec<String>,
}

impl Dataset {
    /// Loads a CSV, Parquet or Arrow IPC file, by its extension (see [`TableOptions`]
    /// for the role rules, which are the same for every format).
    pub fn load(path: &Path, options: &TableOptions) -> Result<Self> {
        let format = Format::of(path);
        if format.is_columnar() {
            let (plan, cells) =
                guarded(path, format, || read_columnar_table(path, options, format))?;
            return Assembly { path, cells }.finish(plan);
        }
        let file = File::open(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let size_hint = file.metadata().map(|m| m.len()).ok();
        Self::from_reader(file, path, size_hint, options)
    }

    /// Loads CSV from any reader; `path` names the source in messages.
    pub fn from_reader<R: Read + Send>(
        reader: R,
        path: &Path,
        size_hint: Option<u64>,
        options: &TableOptions,
    ) -> Result<Self> {
        read_in_blocks(reader, path, size_hint, options, BLOCK_BYTES)
    }

    /// A table from CSV text named `d.csv`, with the default roles: the unit tests'
    /// fixture.
    #[cfg(test)]
    pub(crate) fn from_csv_text(text: &str) -> Self {
        Self::from_reader(
            text.as_bytes(),
            Path::new("d.csv"),
            None,
            &TableOptions::default(),
        )
        .unwrap()
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.features.nrows()
    }

    /// The id of `row`: its id cell, or its 0-based row number when there is no id column.
    pub fn id(&self, row: usize) -> Cow<'_, str> {
        match &self.ids {
            Some(ids) => Cow::Borrowed(ids.get(row)),
            None => Cow::Owned(row.to_string()),
        }
    }

    /// Observed rows per class.
    pub fn class_counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.classes.len()];
        for &label in &self.labels {
            counts[label] += 1;
        }
        counts
    }

    /// How `row`'s trusted label was obtained (meaningful where it has one).
    pub fn origin(&self, row: usize) -> Origin {
        self.trusted_origins
            .as_ref()
            .map_or(Origin::Audit, |o| o[row])
    }

    /// The trusted labels that came from a random audit ([`Origin::is_random_sample`]),
    /// the others removed; `None` when the table has no trusted column.
    pub fn randomly_audited(&self) -> Option<Vec<Option<usize>>> {
        let trusted = self.trusted.as_ref()?;
        Some(
            trusted
                .iter()
                .enumerate()
                .map(|(r, &t)| t.filter(|_| self.origin(r).is_random_sample()))
                .collect(),
        )
    }

    /// Trusted rows of each origin, in the order of [`Origin::ALL`].
    pub fn trusted_by_origin(&self) -> [usize; 3] {
        let mut counts = [0; 3];
        for (r, t) in self.trusted.iter().flatten().enumerate() {
            if t.is_some() {
                let origin = self.origin(r);
                counts[Origin::ALL.iter().position(|&o| o == origin).unwrap_or(0)] += 1;
            }
        }
        counts
    }

    /// Trusted rows per class (zeros when there is no trusted column).
    pub fn trusted_counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.classes.len()];
        for label in self.trusted.iter().flatten().flatten() {
            counts[*label] += 1;
        }
        counts
    }
}

/// Reads the table in blocks of about `block_bytes` and makes the dataset of its cells.
fn read_in_blocks<R: Read + Send>(
    reader: R,
    path: &Path,
    size_hint: Option<u64>,
    options: &TableOptions,
    block_bytes: usize,
) -> Result<Dataset> {
    let (plan, cells) = read_table(reader, path, options, size_hint, block_bytes)?;
    Assembly { path, cells }.finish(plan)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn load(text: &str, options: &TableOptions) -> Result<Dataset> {
        Dataset::from_reader(text.as_bytes(), Path::new("t.csv"), None, options)
    }

    fn err(text: &str) -> String {
        load(text, &TableOptions::default())
            .unwrap_err()
            .to_string()
    }

    #[test]
    fn loads_roles_features_and_natural_class_order() {
        let text = "id,x,label,trusted,note,y\na,1,c10,,n,2\nb,3,c2,c10,m,4\nc,5,c2,,,6\n";
        let d = load(text, &TableOptions::default()).unwrap();
        assert_eq!(d.classes, ["c2", "c10"]);
        assert_eq!(d.labels, [1, 0, 0]);
        assert_eq!(d.trusted, Some(vec![None, Some(1), None]));
        assert_eq!(d.feature_names, ["x", "y"]);
        assert_eq!(
            d.features.as_slice().unwrap(),
            &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
        );
        assert_eq!(d.id(1), "b");
        assert_eq!(d.ignored[0].name, "note");
        assert_eq!(
            d.missing,
            vec![
                MissingCount {
                    column: "trusted".into(),
                    count: 2
                },
                MissingCount {
                    column: "note".into(),
                    count: 1
                }
            ]
        );
    }

    #[test]
    fn the_origin_column_says_how_each_trusted_label_was_obtained() {
        let text = "x,label,trusted,trusted_origin\n1,a,a,review\n2,b,,\n3,b,a,\n4,a,b,control\n";
        let d = load(text, &TableOptions::default()).unwrap();
        assert_eq!(d.origin_column.as_deref(), Some("trusted_origin"));
        assert_eq!(d.feature_names, ["x"], "the origin column is not a feature");
        let origins: Vec<Origin> = (0..4).map(|r| d.origin(r)).collect();
        let expected = [
            Origin::Review,
            Origin::Audit,
            Origin::Audit,
            Origin::Control,
        ];
        assert_eq!(origins, expected);
        assert_eq!(d.randomly_audited(), Some(vec![None, None, Some(0), None]));
        assert_eq!(d.trusted_by_origin(), [1, 1, 1]);
        let plain = load("x,label,trusted\n1,a,a\n2,b,\n", &TableOptions::default()).unwrap();
        assert_eq!(plain.origin(0), Origin::Audit);
        assert_eq!(plain.trusted_by_origin(), [1, 0, 0]);
    }

    #[test]
    fn trusted_only_class_joins_the_class_list() {
        let d = load("x,label,trusted\n1,a,\n2,b,z\n", &TableOptions::default()).unwrap();
        assert_eq!(d.classes, ["a", "b", "z"]);
        assert!(d
            .warnings
            .iter()
            .any(|w| w.contains("'z' occurs only as a trusted label")));
    }

    #[test]
    fn row_numbers_serve_as_ids_without_an_id_column() {
        let d = load("x,label\n1,a\n2,b\n", &TableOptions::default()).unwrap();
        assert_eq!(d.id(1), "1");
        assert!(d.ids.is_none());
    }

    #[test]
    fn empty_and_header_only_files() {
        assert!(err("").contains("empty"));
        assert!(err("\u{feff}").contains("empty"));
        assert!(err("x,label\n").contains("no data rows"));
    }

    #[test]
    fn feature_errors_name_line_and_column() {
        let options = TableOptions {
            features: Some(vec!["x".into()]),
            ..Default::default()
        };
        let e = load("x,label\n1,a\nabc,b\n", &options)
            .unwrap_err()
            .to_string();
        assert_eq!(e, "t.csv, line 3, column 1 'x': 'abc' is not a number");
        assert!(err("x,label\n1,a\n,b\n").contains("line 3, column 1 'x': 1 empty cell"));
        assert!(
            err("x,label\n1,a\ninf,b\n").contains("line 3, column 1 'x': 'inf' is not a finite")
        );
    }

    #[test]
    fn structural_errors() {
        assert!(
            err("x,label\n1,a\n2\n").contains("line 3: this row has 1 fields but the header has 2")
        );
        assert!(
            err("x,label\n1,a\n2,\n").contains("line 3, column 2 'label': the label cell is empty")
        );
        assert!(err("x,label\n1,a\n2,a\n").contains("found 1 class"));
        assert!(err("id,x,label\nq,1,a\nq,2,b\n")
            .contains("line 3, column 1 'id': the id 'q' was already used on line 2"));
        assert!(err("label,note\na,x\nb,y\n").contains("no numeric feature columns"));
    }

    #[test]
    fn invalid_utf8_in_a_label_is_reported() {
        let bytes = b"x,label\n1,a\n2,\xff\xfe\n";
        let e = Dataset::from_reader(
            &bytes[..],
            Path::new("t.csv"),
            None,
            &TableOptions::default(),
        )
        .unwrap_err();
        assert!(
            e.to_string()
                .contains("line 3, column 2 'label': the text is not valid UTF-8"),
            "{e}"
        );
    }

    #[test]
    fn quoted_fields_with_newlines_keep_line_numbers_true() {
        let text = "x,label,note\n1,a,\"two\nlines\"\nbad,b,z\n";
        let options = TableOptions {
            features: Some(vec!["x".into()]),
            ..Default::default()
        };
        let e = load(text, &options).unwrap_err().to_string();
        assert!(e.contains("line 4, column 1 'x'"), "{e}");
    }

    #[test]
    fn many_blocks_give_the_same_table_as_one() {
        // Rows well beyond one block, so merging across blocks and threads is exercised.
        let mut text = String::from("id,a,b,label\n");
        let rows = 100_000;
        for i in 0..rows {
            text.push_str(&format!("r{i},{},{}.5,c{}\n", i % 97, i % 13, i % 11));
        }
        let block_bytes = 64 << 10;
        assert!(text.len() > 20 * block_bytes);
        let options = TableOptions::default();
        let d = read_in_blocks(
            text.as_bytes(),
            Path::new("t.csv"),
            Some(text.len() as u64),
            &options,
            block_bytes,
        )
        .unwrap();
        assert_eq!(d.rows(), rows);
        assert_eq!(d.features[[rows - 1, 0]], ((rows - 1) % 97) as f64);
        assert_eq!(d.features[[12345, 1]], (12345 % 13) as f64 + 0.5);
        assert_eq!(d.id(rows - 1), format!("r{}", rows - 1));
        assert_eq!(
            d.classes[d.labels[rows - 1]],
            format!("c{}", (rows - 1) % 11)
        );
        assert_eq!(d.classes.len(), 11);
    }

    /// Values are parsed straight into the final array, each block into a slice sized by
    /// its line count: blocks with blank lines (fewer rows than lines), blocks read by
    /// the `csv` crate whose bare carriage returns end records (more rows than lines),
    /// CRLF endings, no newline at the end, and a size hint that is far too small or
    /// absent must all leave every row's values in file order.
    #[test]
    fn values_land_in_file_order_whatever_the_blocks_hold() {
        let rows = 20_000;
        let mut text = String::from("id,a,b,label,note\n");
        for i in 0..rows {
            let note = if i % 700 == 3 { "\"q\"\"x\"" } else { "" };
            let end = match i % 500 {
                7 if i % 700 != 3 => "\r\n",
                11 => "\n\n",
                _ if i % 700 == 3 && i + 1 < rows => "\r",
                _ => "\n",
            };
            text.push_str(&format!(
                "r{i},{},{}.5,c{},{note}{end}",
                i % 97,
                i % 13,
                i % 3
            ));
        }
        let text = text.trim_end_matches('\n');
        let options = TableOptions {
            features: Some(vec!["a".into(), "b".into()]),
            ..Default::default()
        };
        for size_hint in [Some(text.len() as u64), Some(100), None] {
            let d = read_in_blocks(
                text.as_bytes(),
                Path::new("t.csv"),
                size_hint,
                &options,
                4 << 10,
            )
            .unwrap();
            assert_eq!(d.rows(), rows, "{size_hint:?}");
            for i in 0..rows {
                let row = [d.features[[i, 0]], d.features[[i, 1]]];
                let want = [(i % 97) as f64, (i % 13) as f64 + 0.5];
                assert_eq!(row, want, "row {i}, size hint {size_hint:?}");
                assert_eq!(d.id(i), format!("r{i}"));
            }
        }
    }

    #[test]
    fn the_first_repeated_id_in_file_order_is_reported() {
        // 40,000 ids (all shards busy); "id7" repeats at row 30,000 and "id5" at row
        // 35,000: a serial scan meets row 30,000 first, so that is the one named, with
        // the line of its first occurrence (row 7 is on line 9).
        let mut text = String::from("id,x,label\n");
        for row in 0..40_000 {
            let id = match row {
                30_000 => "id7".to_string(),
                35_000 => "id5".to_string(),
                _ => format!("id{row}"),
            };
            text.push_str(&format!("{id},{row},a\n"));
        }
        let message = err(&text);
        assert!(
            message.contains("line 30002")
                && message.contains("'id7'")
                && message.contains("line 9"),
            "{message}"
        );
    }
}
