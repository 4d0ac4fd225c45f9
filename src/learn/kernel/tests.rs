//! The fused kernel against the losses' own definitions: every `RowLoss` evaluated a row
//! at a time on logits computed by plain dot products (the reference; each loss is
//! checked against published worked examples in `loss.rs`), on seeded random problems
//! whose sizes reach every tile shape: classes that fill 1, 2, 3 and 4 vectors, feature
//! counts below and above a tile, and row counts that leave partial tiles and blocks.

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::summed_loss_and_grad;
use crate::learn::loss::{Backward, CrossEntropy, Forward, ForwardBySource, RowLoss};
use crate::noise::linalg::inverse;

/// Row-stochastic matrix with `stay` on the diagonal and the rest spread at random.
fn flip_matrix(k: usize, stay: f64, rng: &mut ChaCha8Rng) -> Array2<f64> {
    let mut t = Array2::from_shape_fn((k, k), |_| rng.random::<f64>() + 0.05);
    for (i, mut row) in t.rows_mut().into_iter().enumerate() {
        row[i] = 0.0;
        let off: f64 = row.sum();
        row.mapv_inplace(|v| v * (1.0 - stay) / off);
        row[i] = stay;
    }
    t
}

/// The summed loss and gradient (weights row-major, then biases) a row at a time.
fn reference(
    x: &Array2<f64>,
    labels: &[usize],
    loss: &dyn RowLoss,
    weights: &[f64],
    bias: &[f64],
) -> (f64, Vec<f64>) {
    let (d, k) = (x.ncols(), bias.len());
    let mut grad = vec![0.0; k * d + k];
    let mut total = 0.0;
    for (r, row) in x.rows().into_iter().enumerate() {
        let mut z: Vec<f64> = (0..k)
            .map(|c| bias[c] + (0..d).map(|j| weights[c * d + j] * row[j]).sum::<f64>())
            .collect();
        total += loss.loss_and_grad_at(&mut z, labels[r], r);
        for c in 0..k {
            for j in 0..d {
                grad[c * d + j] += z[c] * row[j];
            }
            grad[k * d + c] += z[c];
        }
    }
    (total, grad)
}

fn assert_close(fused: f64, reference: f64, scale: f64, what: &str) {
    assert!(
        (fused - reference).abs() <= 1e-10 * scale.max(1.0),
        "{what}: fused {fused} vs reference {reference}"
    );
}

#[test]
fn every_fused_loss_matches_its_row_definition_at_every_tile_shape() {
    let mut rng = ChaCha8Rng::seed_from_u64(19);
    for &k in &[2usize, 3, 5, 10, 13, 17] {
        for &(n, d) in &[(1usize, 1usize), (7, 5), (1030, 32), (515, 9)] {
            let x = Array2::from_shape_fn((n, d), |_| rng.random::<f64>() * 4.0 - 2.0);
            let labels: Vec<usize> = (0..n).map(|_| rng.random_range(0..k)).collect();
            let weights: Vec<f64> = (0..k * d).map(|_| rng.random::<f64>() - 0.5).collect();
            let bias: Vec<f64> = (0..k).map(|_| rng.random::<f64>() - 0.5).collect();
            let t = flip_matrix(k, 0.7, &mut rng);
            let t2 = flip_matrix(k, 0.55, &mut rng);
            let t_inv = inverse(&t).expect("diagonally dominant");
            let sources: Vec<u32> = (0..n).map(|_| rng.random_range(0..2)).collect();
            let losses: Vec<(&str, Box<dyn RowLoss>)> = vec![
                ("cross-entropy", Box::new(CrossEntropy)),
                ("forward", Box::new(Forward::new(t.clone()))),
                (
                    "forward by source",
                    Box::new(ForwardBySource::new(&[t.clone(), t2], sources, t.clone())),
                ),
                ("backward", Box::new(Backward::new(t_inv.clone(), None))),
                (
                    "guarded backward",
                    Box::new(Backward::new(t_inv, Some(3.0))),
                ),
            ];
            for (name, loss) in &losses {
                let fused_loss = loss.fused().expect("the kernel knows this loss");
                let mut grad = vec![f64::NAN; k * d + k];
                let fused =
                    summed_loss_and_grad(x.view(), &labels, fused_loss, &weights, &bias, &mut grad)
                        .expect("contiguous rows");
                let (want, want_grad) = reference(&x, &labels, loss.as_ref(), &weights, &bias);
                let what = format!("{name}, n {n} d {d} k {k}");
                assert_close(fused, want, want.abs(), &what);
                for (i, (g, w)) in grad.iter().zip(&want_grad).enumerate() {
                    assert_close(*g, *w, n as f64, &format!("{what}, gradient entry {i}"));
                }
            }
        }
    }
}

#[test]
fn rows_that_are_not_contiguous_are_left_to_the_row_path() {
    let x = Array2::<f64>::zeros((4, 3));
    let mut grad = vec![0.0; 2 * 3 + 2];
    let columns = x.t();
    let answer = summed_loss_and_grad(
        columns,
        &[0, 1, 0],
        CrossEntropy.fused().expect("known"),
        &[0.0; 8],
        &[0.0; 2],
        &mut grad,
    );
    assert!(answer.is_none());
}

/// The joint fit's loss a row at a time, from its definition (`noise::joint`'s module
/// doc): −ln Σ_c T_g[c][y]·q_c, or −ln q_c* − ln T_g[c*][y] for a row of known clean
/// class c*; the gradient in the kernel's order (weights, biases, then each T_g).
fn joint_reference(
    x: &Array2<f64>,
    labels: &[usize],
    flips: &[Array2<f64>],
    group: &[u32],
    clean: &[Option<usize>],
    weights: &[f64],
    bias: &[f64],
) -> (f64, Vec<f64>) {
    let (d, k) = (x.ncols(), bias.len());
    let mut grad = vec![0.0; k * d + k + flips.len() * k * k];
    let mut total = 0.0;
    for (r, row) in x.rows().into_iter().enumerate() {
        let z: Vec<f64> = (0..k)
            .map(|c| bias[c] + (0..d).map(|j| weights[c * d + j] * row[j]).sum::<f64>())
            .collect();
        let top = z.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        let e: Vec<f64> = z.iter().map(|v| (v - top).exp()).collect();
        let q: Vec<f64> = e.iter().map(|v| v / e.iter().sum::<f64>()).collect();
        let (g, y) = (group[r] as usize, labels[r]);
        let t = &flips[g];
        let at = k * d + k + g * k * k;
        let dz: Vec<f64> = match clean[r] {
            Some(c) => {
                total -= q[c].ln() + t[[c, y]].ln();
                grad[at + c * k + y] -= 1.0 / t[[c, y]];
                (0..k).map(|l| q[l] - f64::from(u8::from(l == c))).collect()
            }
            None => {
                let s: f64 = (0..k).map(|c| q[c] * t[[c, y]]).sum();
                total -= s.ln();
                (0..k).for_each(|c| grad[at + c * k + y] -= q[c] / s);
                (0..k).map(|c| q[c] - q[c] * t[[c, y]] / s).collect()
            }
        };
        for c in 0..k {
            for j in 0..d {
                grad[c * d + j] += dz[c] * row[j];
            }
            grad[k * d + c] += dz[c];
        }
    }
    (total, grad)
}

#[test]
fn the_joint_likelihood_matches_its_row_definition_at_every_tile_shape() {
    let mut rng = ChaCha8Rng::seed_from_u64(23);
    for &k in &[2usize, 3, 5, 10, 13] {
        for &(n, d) in &[(1usize, 1usize), (7, 5), (1030, 10), (2500, 3)] {
            let x = Array2::from_shape_fn((n, d), |_| rng.random::<f64>() * 4.0 - 2.0);
            let labels: Vec<usize> = (0..n).map(|_| rng.random_range(0..k)).collect();
            let weights: Vec<f64> = (0..k * d).map(|_| rng.random::<f64>() - 0.5).collect();
            let bias: Vec<f64> = (0..k).map(|_| rng.random::<f64>() - 0.5).collect();
            let flips = [flip_matrix(k, 0.7, &mut rng), flip_matrix(k, 0.5, &mut rng)];
            let group: Vec<u32> = (0..n).map(|_| rng.random_range(0..2)).collect();
            let clean: Vec<Option<usize>> = (0..n)
                .map(|_| rng.random_bool(0.3).then(|| rng.random_range(0..k)))
                .collect();
            // columns[(g·K + y)·K + c] = T_g[c][y]
            let columns: Vec<f64> = flips
                .iter()
                .flat_map(|t| t.t().iter().copied().collect::<Vec<_>>())
                .collect();
            let loss = super::FusedLoss::Joint {
                columns: &columns,
                group_of_row: Some(&group),
                clean: Some(&clean),
            };
            let mut grad = vec![f64::NAN; k * d + k + 2 * k * k];
            let fused = summed_loss_and_grad(x.view(), &labels, loss, &weights, &bias, &mut grad)
                .expect("contiguous rows");
            let (want, want_grad) =
                joint_reference(&x, &labels, &flips, &group, &clean, &weights, &bias);
            let what = format!("joint, n {n} d {d} k {k}");
            assert_close(fused, want, want.abs(), &what);
            for (i, (g, w)) in grad.iter().zip(&want_grad).enumerate() {
                assert_close(*g, *w, n as f64, &format!("{what}, gradient entry {i}"));
            }
        }
    }
}
