//! The trusted estimator (Hendrycks et al. 2018): each row of T is the mean probability
//! vector of the rows randomly audited as that class.

use ndarray::Array2;

use super::anchors::quantile;
use rayon::prelude::*;

use super::{Sample, CHUNK_ROWS};
use crate::error::{Error, Result};

pub(super) fn trusted(
    sample: &Sample,
    fallback: Option<f64>,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Result<Array2<f64>> {
    let k = sample.probs.ncols();
    let trusted = sample.trusted.ok_or_else(|| Error::Setting {
        setting: "estimator",
        problem: "trusted needs a trusted-label column (choose one as the trusted role, or \
                      name a column 'trusted')"
            .into(),
    })?;
    let (sums, counts) = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut sums = Array2::<f64>::zeros((k, k));
            let mut counts = vec![0usize; k];
            for &r in rows {
                if let Some(class) = trusted[r].filter(|_| sample.at_random(r)) {
                    counts[class] += 1;
                    for (s, &v) in sums.row_mut(class).iter_mut().zip(sample.probs.row(r)) {
                        *s += v as f64;
                    }
                }
            }
            (sums, counts)
        })
        .collect::<Vec<_>>()
        .into_iter()
        .fold(
            (Array2::<f64>::zeros((k, k)), vec![0usize; k]),
            |(mut s, mut c), (s2, c2)| {
                s += &s2;
                c.iter_mut().zip(c2).for_each(|(a, b)| *a += b);
                (s, c)
            },
        );
    let chosen = sample
        .rows
        .iter()
        .filter(|&&r| trusted[r].is_some() && !sample.at_random(r))
        .count();
    if chosen > 0 {
        warnings.push(format!(
            "{chosen} trusted label(s) from reviews left out of the trusted estimate: those rows \
             were chosen, not drawn at random, so their average would be biased"
        ));
    }
    let missing: Vec<usize> = (0..k).filter(|&c| counts[c] == 0).collect();
    if !missing.is_empty() && fallback.is_none() {
        let names: Vec<&str> = missing.iter().map(|&c| classes[c].as_str()).collect();
        return Err(Error::Usage(format!(
            "no trusted rows for the class(es) {} from a random audit; audit some at random, or \
             pass --fallback quantile",
            names.join(", ")
        )));
    }
    let mut t = sums;
    for (mut row, &count) in t.rows_mut().into_iter().zip(&counts) {
        if count > 0 {
            row.mapv_inplace(|v| v / count as f64);
        }
    }
    if let Some(q) = fallback.filter(|_| !missing.is_empty()) {
        let by_quantile = quantile(sample, q, classes, warnings);
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
