//! Where each row's label came from: an annotator, a sorting station, a vendor, a
//! heuristic rule. With a source column flipmend estimates one flip matrix per source
//! (`noise::sources`) and scores each row under its own source's matrix.

use super::natural::natural_cmp;

/// The name an empty source cell gets (the rows stay, and a warning counts them).
pub const BLANK_SOURCE: &str = "(blank)";

/// The label-source column of a table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LabelSources {
    /// The column's header name.
    pub column: String,
    /// Source names in natural order (`s2` before `s10`); `of_row` indexes into them.
    pub names: Vec<String>,
    /// The source of every row.
    pub of_row: Vec<u32>,
}

impl LabelSources {
    /// Sources from codes in order of first appearance and the names of those codes:
    /// names sorted naturally, an empty name replaced by [`BLANK_SOURCE`]. Returns the
    /// sources and a warning when some cells were empty.
    pub(crate) fn from_codes(
        column: String,
        first_seen: Vec<String>,
        codes: &[u32],
    ) -> (Self, Option<String>) {
        let mut order: Vec<usize> = (0..first_seen.len()).collect();
        order.sort_by(|&a, &b| natural_cmp(&first_seen[a], &first_seen[b]));
        let mut new_code = vec![0u32; first_seen.len()];
        for (rank, &old) in order.iter().enumerate() {
            new_code[old] = rank as u32;
        }
        let names: Vec<String> = order
            .iter()
            .map(|&old| match first_seen[old].as_str() {
                "" => BLANK_SOURCE.to_string(),
                name => name.to_string(),
            })
            .collect();
        let of_row: Vec<u32> = codes.iter().map(|&c| new_code[c as usize]).collect();
        let blank = first_seen.iter().position(|n| n.is_empty()).map(|old| {
            let count = of_row.iter().filter(|&&s| s == new_code[old]).count();
            format!(
                "{count} rows have an empty '{column}' cell; they form the source '{BLANK_SOURCE}'"
            )
        });
        let sources = LabelSources {
            column,
            names,
            of_row,
        };
        (sources, blank)
    }

    /// Number of sources.
    pub fn len(&self) -> usize {
        self.names.len()
    }

    /// True when there are no sources (a table without rows).
    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }

    /// Rows per source.
    pub fn counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.names.len()];
        for &s in &self.of_row {
            counts[s as usize] += 1;
        }
        counts
    }

    /// The rows of every source, each list in row order.
    pub fn rows_by_source(&self) -> Vec<Vec<usize>> {
        let mut rows = vec![Vec::new(); self.names.len()];
        for (r, &s) in self.of_row.iter().enumerate() {
            rows[s as usize].push(r);
        }
        rows
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_sort_naturally_and_blank_cells_are_named_and_counted() {
        let seen = vec!["s10".to_string(), "".to_string(), "s2".to_string()];
        let (sources, warning) = LabelSources::from_codes("station".into(), seen, &[0, 2, 1, 0]);
        assert_eq!(sources.names, ["(blank)", "s2", "s10"]);
        assert_eq!(sources.of_row, [2, 1, 0, 2]);
        assert_eq!(sources.counts(), [1, 1, 2]);
        assert_eq!(sources.rows_by_source(), vec![vec![2], vec![1], vec![0, 3]]);
        let warning = warning.unwrap();
        assert!(
            warning.contains("1 rows") && warning.contains("'station'"),
            "{warning}"
        );
    }
}
