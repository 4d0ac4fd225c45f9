//! Confident counting (Northcutt et al. 2021): per-class thresholds, the confident
//! joint, calibrated to the observed class counts and conditioned on the true class.

use ndarray::{Array2, ArrayView1, ArrayView2};
use rayon::prelude::*;

use super::{Sample, CHUNK_ROWS};

pub(super) fn counting(
    sample: &Sample,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Array2<f64> {
    let k = sample.probs.ncols();
    let mut thresholds = Thresholds::new(k);
    for &r in sample.rows {
        thresholds.row(sample.probs.row(r), sample.labels[r]);
    }
    thresholds.finish();
    let joint = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut c = Array2::<f64>::zeros((k, k));
            for &r in rows {
                if let Some(j) = confident_class(sample.probs.row(r), &thresholds.values) {
                    c[[sample.labels[r], j]] += 1.0;
                }
            }
            c
        })
        .collect::<Vec<_>>()
        .into_iter()
        .fold(Array2::<f64>::zeros((k, k)), |a, b| a + b);
    from_confident_joint(joint, &thresholds.observed, classes, warnings)
}

/// The per-class thresholds t_j: the mean self-confidence p_j over the rows observed as
/// j, summed row by row in table order.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) struct Thresholds {
    totals: Vec<f64>,
    pub(super) observed: Vec<usize>,
    pub(super) values: Vec<f64>,
    pub(super) done: bool,
}

impl Thresholds {
    pub(super) fn new(k: usize) -> Self {
        Thresholds {
            totals: vec![0.0; k],
            observed: vec![0; k],
            values: Vec::new(),
            done: false,
        }
    }

    /// One row with probabilities `p`, observed as `y`.
    pub(super) fn row(&mut self, p: ArrayView1<f32>, y: usize) {
        self.totals[y] += p[y] as f64;
        self.observed[y] += 1;
    }

    /// Rows of a part, in order.
    pub(super) fn rows(&mut self, probs: ArrayView2<f32>, labels: &[usize]) {
        for (p, &y) in probs.rows().into_iter().zip(labels) {
            self.row(p, y);
        }
    }

    /// Adds another share's sums (before the thresholds are taken).
    pub(super) fn merge(&mut self, other: &Thresholds) {
        self.totals
            .iter_mut()
            .zip(&other.totals)
            .for_each(|(a, b)| *a += b);
        self.observed
            .iter_mut()
            .zip(&other.observed)
            .for_each(|(a, b)| *a += b);
    }

    /// The thresholds from the sums (infinite for a class no row is observed as).
    pub(super) fn finish(&mut self) {
        self.values = self
            .totals
            .iter()
            .zip(&self.observed)
            .map(|(&total, &n)| {
                if n > 0 {
                    total / n as f64
                } else {
                    f64::INFINITY
                }
            })
            .collect();
        self.done = true;
    }
}

/// The class a row counts for in the confident joint: the most probable of the classes
/// whose probability reaches their threshold.
pub(super) fn confident_class(p: ArrayView1<f32>, thresholds: &[f64]) -> Option<usize> {
    let mut best: Option<(f32, usize)> = None;
    for (j, &v) in p.iter().enumerate() {
        if v as f64 >= thresholds[j] && best.is_none_or(|(b, _)| v > b) {
            best = Some((v, j));
        }
    }
    best.map(|(_, j)| j)
}

/// T from the confident joint C[observed][true] and the observed class counts.
pub(super) fn from_confident_joint(
    joint: Array2<f64>,
    observed: &[usize],
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Array2<f64> {
    let k = joint.nrows();
    // Calibrate: each observed row of C scaled to that class's observed count, then the
    // whole made a joint distribution Q(observed, true).
    let mut q = joint;
    for (mut row, &count) in q.rows_mut().into_iter().zip(observed) {
        let row_sum: f64 = row.sum();
        if row_sum > 0.0 {
            row.mapv_inplace(|v| v / row_sum * count as f64);
        }
    }
    let total: f64 = q.sum();
    if total > 0.0 {
        q.mapv_inplace(|v| v / total);
    }
    // Ours is conditioned on the true class: T[j][i] = Q(i, j) / Σ_i' Q(i', j), the
    // transpose of the paper's orientation.
    let mut t = Array2::zeros((k, k));
    for j in 0..k {
        let column: f64 = q.column(j).sum();
        if column > 0.0 {
            for i in 0..k {
                t[[j, i]] = q[[i, j]] / column;
            }
        } else {
            t[[j, j]] = 1.0;
            warnings.push(format!(
                "class '{}': no row is confidently of this class; its row was set to no flips",
                classes[j]
            ));
        }
    }
    t
}
