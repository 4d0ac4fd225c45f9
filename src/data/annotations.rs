//! Several labels per row: one column per annotator (`--labels a1,a2,a3`), an empty cell
//! where that annotator did not label the row. The table's observed label is then their
//! majority (ties to the class first in natural order) until the consensus of
//! `noise::annotators` replaces it.

use ndarray::{Array2, ArrayView2};

use crate::io::table_chunk::NONE;

/// The annotators' labels of every row.
#[derive(Debug, Clone, PartialEq)]
pub struct Annotations {
    /// The annotators' column names, in the order given.
    pub columns: Vec<String>,
    /// Rows × annotators: the class each annotator gave, `None` where it gave none.
    pub labels: Array2<Option<u32>>,
}

impl Annotations {
    /// The annotations from label codes in read order (row-major, [`NONE`] for an empty
    /// cell), `order` mapping a code to its class index.
    pub(crate) fn from_codes(columns: Vec<String>, codes: &[u32], order: &[usize]) -> Self {
        let annotators = columns.len();
        let rows = codes.len() / annotators.max(1);
        let labels = Array2::from_shape_fn((rows, annotators), |(r, a)| {
            let code = codes[r * annotators + a];
            (code != NONE).then(|| order[code as usize] as u32)
        });
        Annotations { columns, labels }
    }

    /// The majority label of every row, ties to the lowest class index; `None` for a row
    /// nobody labelled.
    pub fn majority(&self, classes: usize) -> Vec<Option<usize>> {
        majority_of(self.labels.view(), classes)
    }

    /// Rows each annotator labelled.
    pub fn counts(&self) -> Vec<usize> {
        self.labels
            .columns()
            .into_iter()
            .map(|c| c.iter().filter(|l| l.is_some()).count())
            .collect()
    }
}

/// Plurality vote per row, ties to the lowest class index.
fn majority_of(labels: ArrayView2<Option<u32>>, classes: usize) -> Vec<Option<usize>> {
    let mut counts = vec![0usize; classes];
    labels
        .rows()
        .into_iter()
        .map(|row| {
            counts.iter_mut().for_each(|c| *c = 0);
            for &class in row.iter().flatten() {
                counts[class as usize] += 1;
            }
            let best = (0..classes).fold(0, |b, c| if counts[c] > counts[b] { c } else { b });
            (counts[best] > 0).then_some(best)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_become_classes_and_the_majority_breaks_ties_low() {
        // Codes in order of first appearance: 0 = "b", 1 = "a"; classes sorted: a, b.
        let order = [1, 0];
        let codes = [0, 0, NONE, 1, 0, NONE, NONE, NONE, 1];
        let a = Annotations::from_codes(vec!["x".into(), "y".into(), "z".into()], &codes, &order);
        assert_eq!(a.labels[[0, 0]], Some(1));
        assert_eq!(a.labels[[1, 0]], Some(0));
        assert_eq!(a.counts(), [2, 2, 1]);
        // Row 0: b, b; row 1: a vs b, a tie broken toward a; row 2: a.
        assert_eq!(a.majority(2), [Some(1), Some(0), Some(0)]);
    }
}
