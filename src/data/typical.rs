//! Typical feature values of each class, for a reviewer who asks "does this row look
//! like a cardboard or like a paper?": the median of every feature over the class's
//! trusted rows, or over the rows observed as the class when too few are trusted.
//!
//! Medians rather than means so that one odd row (or a mislabelled one, which is what
//! is being looked for) does not move them. At most [`TYPICAL_ROWS_PER_CLASS`] rows per
//! class are read, spread evenly over the table, so a million-row table costs the same
//! as a small one.

use ndarray::Array2;

use super::Dataset;

/// Rows per class the medians read at most.
pub const TYPICAL_ROWS_PER_CLASS: usize = 2_000;

/// Trusted rows a class needs for its medians to come from them.
pub const MIN_TRUSTED_ROWS: usize = 5;

/// Where a class's typical values come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TypicalFrom {
    /// Its trusted rows (audited or reviewed).
    Trusted,
    /// Its observed rows (labels that are themselves partly wrong).
    Observed,
    /// No row has it.
    Nothing,
}

/// Every class's median feature values.
#[derive(Debug, Clone, PartialEq)]
pub struct Typical {
    /// `classes × features`; not a number where the class has no rows.
    pub medians: Array2<f64>,
    /// Where each class's medians come from.
    pub from: Vec<TypicalFrom>,
    /// How many rows each class's medians read.
    pub rows: Vec<usize>,
}

/// The typical values of every class of `data`.
pub fn typical_values(data: &Dataset) -> Typical {
    let k = data.classes.len();
    let f = data.features.ncols();
    let mut medians = Array2::from_elem((k, f), f64::NAN);
    let mut from = Vec::with_capacity(k);
    let mut counts = Vec::with_capacity(k);
    for class in 0..k {
        let trusted = rows_of(data, class, true);
        let (rows, source) = if trusted.len() >= MIN_TRUSTED_ROWS {
            (trusted, TypicalFrom::Trusted)
        } else {
            let observed = rows_of(data, class, false);
            let source = if observed.is_empty() {
                TypicalFrom::Nothing
            } else {
                TypicalFrom::Observed
            };
            (observed, source)
        };
        let rows = spread(&rows, TYPICAL_ROWS_PER_CLASS);
        let mut column = Vec::with_capacity(rows.len());
        for j in 0..f {
            column.clear();
            column.extend(rows.iter().map(|&r| data.features[[r, j]]));
            medians[[class, j]] = median(&mut column);
        }
        from.push(source);
        counts.push(rows.len());
    }
    Typical {
        medians,
        from,
        rows: counts,
    }
}

/// The rows whose trusted (or observed) label is `class`.
fn rows_of(data: &Dataset, class: usize, trusted: bool) -> Vec<usize> {
    if trusted {
        let Some(t) = &data.trusted else {
            return Vec::new();
        };
        (0..data.rows()).filter(|&r| t[r] == Some(class)).collect()
    } else {
        (0..data.rows())
            .filter(|&r| data.labels[r] == class)
            .collect()
    }
}

/// At most `cap` of `rows`, evenly spaced (all of them when there are fewer).
fn spread(rows: &[usize], cap: usize) -> Vec<usize> {
    if rows.len() <= cap {
        return rows.to_vec();
    }
    (0..cap).map(|i| rows[i * rows.len() / cap]).collect()
}

/// The median (the mean of the two middle values for an even count); not a number for
/// no values.
fn median(values: &mut [f64]) -> f64 {
    let n = values.len();
    if n == 0 {
        return f64::NAN;
    }
    let (_, &mut upper, _) = values.select_nth_unstable_by(n / 2, f64::total_cmp);
    if n % 2 == 1 {
        return upper;
    }
    let lower = values[..n / 2]
        .iter()
        .copied()
        .fold(f64::NEG_INFINITY, f64::max);
    (lower + upper) / 2.0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn medians_match_hand_computed_values() {
        // Worked by hand: cat rows x = 1, 2, 10 → 2; dog rows x = 4, 6 → 5.
        let d = Dataset::from_csv_text("x,label\n1,cat\n4,dog\n2,cat\n10,cat\n6,dog\n");
        let t = typical_values(&d);
        assert_eq!(t.medians[[0, 0]], 2.0);
        assert_eq!(t.medians[[1, 0]], 5.0);
        assert_eq!(t.from, [TypicalFrom::Observed, TypicalFrom::Observed]);
        assert_eq!(t.rows, [3, 2]);
    }

    #[test]
    fn enough_trusted_rows_replace_the_observed_ones() {
        // Six trusted cats at x = 100..105 (median 102.5); the observed cats sit near 0.
        let mut text = String::from("x,label,trusted\n");
        for i in 0..6 {
            text.push_str(&format!("{},cat,cat\n", 100 + i));
        }
        for i in 0..20 {
            text.push_str(&format!("{i},cat,\n"));
        }
        text.push_str("7,dog,\n");
        let t = typical_values(&Dataset::from_csv_text(&text));
        assert_eq!(t.medians[[0, 0]], 102.5);
        assert_eq!(t.from[0], TypicalFrom::Trusted);
        assert_eq!(t.from[1], TypicalFrom::Observed);
    }

    #[test]
    fn the_median_agrees_with_sorting() {
        let mut values: Vec<f64> = (0..101).map(|i| ((i * 37) % 101) as f64).collect();
        let mut sorted = values.clone();
        sorted.sort_by(f64::total_cmp);
        assert_eq!(median(&mut values), sorted[50]);
        assert!(median(&mut []).is_nan());
        assert_eq!(spread(&[1, 2, 3, 4], 2), [1, 3]);
    }
}
