//! What `inspect` reports about a table (and, optionally, its probabilities).

use serde::Serialize;

use super::probs::Probabilities;
use super::table::{Dataset, IgnoredColumn, MissingCount};

/// Above this agreement and mean top probability, probabilities look fitted on the same
/// rows (in-sample), which would make every flip matrix look like the identity.
const IN_SAMPLE_SUSPICION: f64 = 0.98;

/// One class's counts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ClassSummary {
    /// Class name.
    pub name: String,
    /// Rows observed with this label.
    pub count: usize,
    /// `count / rows`.
    pub share: f64,
    /// Rows whose trusted label is this class.
    pub trusted: usize,
}

/// Rows per label source, or per annotator (rows it labelled).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RowCount {
    /// The source's or annotator's name.
    pub name: String,
    /// Its rows.
    pub rows: usize,
}

/// The label-source column and the rows of each source.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SourceSummary {
    /// The column's name.
    pub column: String,
    /// Rows per source, sources in natural order.
    pub sources: Vec<RowCount>,
}

/// Summary of a probability file against the observed labels.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProbSummary {
    /// The file.
    pub file: String,
    /// Mean over rows of the largest probability.
    pub mean_max_probability: f64,
    /// Share of rows whose most probable class is the observed label.
    pub agreement_with_observed: f64,
}

/// The table report (`flipmend inspect`); field names are the JSON keys.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TableSummary {
    /// The data file.
    pub file: String,
    /// Data rows.
    pub rows: usize,
    /// Feature columns used, in order.
    pub features: Vec<String>,
    /// Observed-label column.
    pub label_column: String,
    /// Id column, if any.
    pub id_column: Option<String>,
    /// Trusted-label column, if any.
    pub trusted_column: Option<String>,
    /// Per class, in class order.
    pub classes: Vec<ClassSummary>,
    /// Rows that carry a trusted label.
    pub trusted_rows: usize,
    /// Columns that no role uses, with the reason.
    pub ignored_columns: Vec<IgnoredColumn>,
    /// Empty cells where they are allowed (trusted and ignored columns).
    pub missing_values: Vec<MissingCount>,
    /// The label-source column and the rows of each source, when one was named.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub label_sources: Option<SourceSummary>,
    /// The rows each annotator labelled, with several annotators per row (the observed
    /// label is then their majority).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub annotators: Option<Vec<RowCount>>,
    /// The probability file, when one was given.
    pub probabilities: Option<ProbSummary>,
    /// Things to know that did not stop the work.
    pub warnings: Vec<String>,
}

impl TableSummary {
    /// Summarises `data` and, when given, `probs`.
    pub fn new(data: &Dataset, probs: Option<&Probabilities>) -> Self {
        let counts = data.class_counts();
        let trusted = data.trusted_counts();
        let rows = data.rows();
        let classes = data
            .classes
            .iter()
            .enumerate()
            .map(|(i, name)| ClassSummary {
                name: name.clone(),
                count: counts[i],
                share: counts[i] as f64 / rows as f64,
                trusted: trusted[i],
            })
            .collect();
        let mut warnings = data.warnings.clone();
        let probabilities = probs.map(|p| {
            warnings.extend(p.warnings.iter().cloned());
            let summary = ProbSummary {
                file: p.path.display().to_string(),
                mean_max_probability: p.mean_max(),
                agreement_with_observed: p.agreement(&data.labels),
            };
            if summary.agreement_with_observed > IN_SAMPLE_SUSPICION && summary.mean_max_probability > IN_SAMPLE_SUSPICION {
                warnings.push(format!(
                    "the probabilities agree with the observed labels on {:.1}% of rows with a mean top probability of {:.3}: \
                     were they computed on the rows the model was trained on? In-sample probabilities hide label noise",
                    100.0 * summary.agreement_with_observed,
                    summary.mean_max_probability
                ));
            }
            summary
        });
        TableSummary {
            file: data.path.display().to_string(),
            rows,
            features: data.feature_names.clone(),
            label_column: data.label_column.clone().unwrap_or_default(),
            id_column: data.id_column.clone(),
            trusted_column: data.trusted_column.clone(),
            classes,
            trusted_rows: trusted.iter().sum(),
            ignored_columns: data.ignored.clone(),
            missing_values: data.missing.clone(),
            label_sources: data.sources.as_ref().map(|s| SourceSummary {
                column: s.column.clone(),
                sources: s
                    .names
                    .iter()
                    .zip(s.counts())
                    .map(|(n, rows)| RowCount {
                        name: n.clone(),
                        rows,
                    })
                    .collect(),
            }),
            annotators: data.annotations.as_ref().map(|a| {
                a.columns
                    .iter()
                    .zip(a.counts())
                    .map(|(name, rows)| RowCount {
                        name: name.clone(),
                        rows,
                    })
                    .collect()
            }),
            probabilities,
            warnings,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::ProbOptions;
    use std::path::Path;

    #[test]
    fn counts_shares_and_in_sample_warning() {
        let text = "x,label,trusted\n1,a,a\n2,a,\n3,b,a\n4,b,b\n";
        let d = Dataset::from_csv_text(text);
        let p = Probabilities::from_csv_reader(
            "a,b\n1,0\n1,0\n0,1\n0,1\n".as_bytes(),
            Path::new("p.csv"),
            &d,
            &ProbOptions::default(),
        )
        .unwrap();
        let s = TableSummary::new(&d, Some(&p));
        assert_eq!(s.rows, 4);
        assert_eq!(
            s.classes[0],
            ClassSummary {
                name: "a".into(),
                count: 2,
                share: 0.5,
                trusted: 2
            }
        );
        assert_eq!(s.trusted_rows, 3);
        assert_eq!(
            s.probabilities.as_ref().unwrap().agreement_with_observed,
            1.0
        );
        assert!(s.warnings.iter().any(|w| w.contains("In-sample")));
    }
}
