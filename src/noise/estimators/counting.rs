//! Confident counting (Northcutt et al. 2021): per-class thresholds, the confident
//! joint, calibrated to the observed class counts and conditioned on the true class.

use ndarray::Array2;
use rayon::prelude::*;

use super::{Sample, CHUNK_ROWS};

pub(super) fn counting(
    sample: &Sample,
    classes: &[String],
    warnings: &mut Vec<String>,
) -> Array2<f64> {
    let k = sample.probs.ncols();
    // Thresholds t_j: mean self-confidence p_j over the rows observed as j.
    let mut totals = vec![0.0f64; k];
    let mut observed = vec![0usize; k];
    for &r in sample.rows {
        let y = sample.labels[r];
        totals[y] += sample.probs[[r, y]] as f64;
        observed[y] += 1;
    }
    let thresholds: Vec<f64> = (0..k)
        .map(|j| {
            if observed[j] > 0 {
                totals[j] / observed[j] as f64
            } else {
                f64::INFINITY
            }
        })
        .collect();
    // Confident joint C[observed][true]: a row counts for the most probable of the
    // classes whose probability reaches their threshold.
    let joint = sample
        .rows
        .par_chunks(CHUNK_ROWS)
        .map(|rows| {
            let mut c = Array2::<f64>::zeros((k, k));
            for &r in rows {
                let p = sample.probs.row(r);
                let mut best: Option<(f32, usize)> = None;
                for (j, &v) in p.iter().enumerate() {
                    if v as f64 >= thresholds[j] && best.is_none_or(|(b, _)| v > b) {
                        best = Some((v, j));
                    }
                }
                if let Some((_, j)) = best {
                    c[[sample.labels[r], j]] += 1.0;
                }
            }
            c
        })
        .collect::<Vec<_>>()
        .into_iter()
        .fold(Array2::<f64>::zeros((k, k)), |a, b| a + b);
    // Calibrate: each observed row of C scaled to that class's observed count, then the
    // whole made a joint distribution Q(observed, true).
    let mut q = joint;
    for (mut row, &count) in q.rows_mut().into_iter().zip(&observed) {
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
