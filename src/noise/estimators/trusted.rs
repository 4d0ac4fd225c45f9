//! The trusted estimator (Hendrycks et al. 2018): each row of T is the mean probability
//! vector of the rows randomly audited as that class.

use ndarray::{Array2, ArrayView1};

use super::anchors::quantile;
use super::passes::{ChunkedSum, Rows};
use super::Sample;
use crate::error::{Error, Result};

pub(super) fn trusted(
    sample: &Sample,
    fallback: Option<f64>,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Result<Array2<f64>> {
    let k = sample.probs.ncols();
    let trusted = sample.trusted.ok_or_else(no_trusted_column)?;
    let mut sums = TrustedSums::new(k);
    for &r in sample.rows {
        sums.row(sample.probs.row(r), trusted[r], sample.at_random(r));
    }
    sums.end();
    let fallback = match (fallback, sums.missing()) {
        (Some(q), Some(_)) => Some((q, quantile(sample, q, classes, warnings))),
        _ => None,
    };
    from_trusted_sums(sums, fallback, classes, warnings)
}

fn no_trusted_column() -> Error {
    Error::Setting {
        setting: "estimator",
        problem: "trusted needs a trusted-label column (choose one as the trusted role, or \
                      name a column 'trusted')"
            .into(),
    }
}

/// The sums behind the trusted estimate: per class of the random audits, the sum of
/// their probability vectors (in runs of `CHUNK_ROWS` rows, the order of every chunked
/// sum) and their count; and the reviewed rows left out.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) struct TrustedSums {
    sums: ChunkedSum,
    counts: Vec<usize>,
    chosen: usize,
    /// False until a row with a trusted column was seen.
    has_column: bool,
}

impl TrustedSums {
    pub(super) fn new(k: usize) -> Self {
        TrustedSums {
            sums: ChunkedSum::new(k),
            counts: vec![0; k],
            chosen: 0,
            has_column: false,
        }
    }

    /// One row: its probabilities, trusted class and whether that came from a random
    /// audit.
    pub(super) fn row(&mut self, p: ArrayView1<f32>, trusted: Option<usize>, at_random: bool) {
        self.has_column = true;
        let counts = &mut self.counts;
        self.sums.row(|run| {
            if let Some(class) = trusted {
                if at_random {
                    counts[class] += 1;
                    for (s, &v) in run.row_mut(class).iter_mut().zip(p) {
                        *s += v as f64;
                    }
                }
            }
        });
        if trusted.is_some() && !at_random {
            self.chosen += 1;
        }
    }

    /// A part's rows, in order.
    pub(super) fn rows(&mut self, rows: &Rows) {
        for (i, p) in rows.probs.rows().into_iter().enumerate() {
            let trusted = rows.trusted.and_then(|t| t[i]);
            let at_random = rows.at_random.is_none_or(|a| a[i]);
            self.row(p, trusted, at_random);
        }
        if rows.trusted.is_none() {
            self.has_column = false;
        }
    }

    /// Adds another share's sums and counts.
    pub(super) fn merge(&mut self, other: TrustedSums) {
        self.sums.merge(other.sums);
        self.counts
            .iter_mut()
            .zip(&other.counts)
            .for_each(|(a, b)| *a += b);
        self.chosen += other.chosen;
        self.has_column |= other.has_column;
    }

    /// Ends the pass: the last short run joins the total.
    pub(super) fn end(&mut self) {
        self.sums.close();
    }

    /// The classes without a random audit, when there are any.
    pub(super) fn missing(&self) -> Option<Vec<usize>> {
        let missing: Vec<usize> = (0..self.counts.len())
            .filter(|&c| self.counts[c] == 0)
            .collect();
        (!missing.is_empty()).then_some(missing)
    }
}

/// T from the sums: each row the mean of its class's random audits; classes without one
/// take the fallback's row (the quantile estimator's, with its q), else an error.
pub(super) fn from_trusted_sums(
    sums: TrustedSums,
    fallback: Option<(f64, Array2<f64>)>,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Result<Array2<f64>> {
    if !sums.has_column {
        return Err(no_trusted_column());
    }
    let chosen = sums.chosen;
    if chosen > 0 {
        warnings.push(format!(
            "{chosen} trusted label(s) from reviews left out of the trusted estimate: those rows \
             were chosen, not drawn at random, so their average would be biased"
        ));
    }
    let missing = sums.missing().unwrap_or_default();
    let counts = sums.counts;
    if !missing.is_empty() && fallback.is_none() {
        let names: Vec<&str> = missing.iter().map(|&c| classes[c].as_str()).collect();
        return Err(Error::Usage(format!(
            "no trusted rows for the class(es) {} from a random audit; audit some at random, or \
             pass --fallback quantile",
            names.join(", ")
        )));
    }
    let mut t = sums.sums.total;
    for (mut row, &count) in t.rows_mut().into_iter().zip(&counts) {
        if count > 0 {
            row.mapv_inplace(|v| v / count as f64);
        }
    }
    if let Some((q, by_quantile)) = fallback.filter(|_| !missing.is_empty()) {
        for &c in &missing {
            t.row_mut(c).assign(&by_quantile.row(c));
            warnings.push(format!(
                "class '{}' has no trusted rows from a random audit; its row comes from the {q} \
                 quantile estimator",
                classes[c]
            ));
        }
    }
    Ok(t)
}
