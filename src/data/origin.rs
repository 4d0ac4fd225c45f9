//! How each trusted label was obtained. Only a random audit is a random sample of the
//! rows; a review of listed suspects is a sample chosen because the rows looked wrong,
//! and a control row is random only among the rows not listed. Estimators that average
//! trusted rows as a sample of their class (the `trusted` estimator, accuracy on trusted
//! rows) use random audits alone; the joint fit uses every trusted row through its
//! likelihood, which stays unbiased when the choice depends only on (x, observed label).

use serde::{Deserialize, Serialize};

/// Suffix of the column that records the origin of the trusted column's labels
/// (`trusted_origin` beside `trusted`).
pub const ORIGIN_SUFFIX: &str = "_origin";

/// How a trusted label was obtained.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Origin {
    /// A random audit: the rows were picked without looking at them (the default for a
    /// trusted column without an origin column, and for an empty origin cell).
    #[default]
    Audit,
    /// A review of rows listed as suspects.
    Review,
    /// A review of a control row: drawn at random from the rows a worklist did not list.
    Control,
}

impl Origin {
    /// Every origin, in the order of their codes.
    pub const ALL: [Origin; 3] = [Origin::Audit, Origin::Review, Origin::Control];

    /// The word in the origin column.
    pub fn name(self) -> &'static str {
        match self {
            Origin::Audit => "audit",
            Origin::Review => "review",
            Origin::Control => "control",
        }
    }

    /// Reads an origin cell; an empty cell is a random audit.
    pub fn parse(cell: &str) -> Option<Origin> {
        match cell.trim() {
            "" => Some(Origin::Audit),
            word => Origin::ALL
                .into_iter()
                .find(|o| o.name().eq_ignore_ascii_case(word)),
        }
    }

    /// True when the rows with this origin are a uniform random sample of the table.
    pub fn is_random_sample(self) -> bool {
        self == Origin::Audit
    }
}

/// The name of the origin column of a trusted column.
pub fn origin_column(trusted_column: &str) -> String {
    format!("{trusted_column}{ORIGIN_SUFFIX}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn origin_words_round_trip_and_empty_means_audit() {
        for o in Origin::ALL {
            assert_eq!(Origin::parse(o.name()), Some(o));
            assert_eq!(Origin::parse(&o.name().to_uppercase()), Some(o));
        }
        assert_eq!(Origin::parse(""), Some(Origin::Audit));
        assert_eq!(Origin::parse("guess"), None);
    }

    #[test]
    fn only_a_random_audit_counts_as_a_random_sample() {
        assert!(Origin::Audit.is_random_sample());
        assert!(!Origin::Review.is_random_sample());
        assert!(!Origin::Control.is_random_sample());
    }
}
