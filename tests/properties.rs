//! Properties of the core on random inputs (proptest, with a fixed seed so every run
//! checks the same cases): estimators, scores, priors, losses and gradients, file round
//! trips, and parsers that must never panic on arbitrary bytes.

use std::path::Path;

use flipmend::data::{Dataset, ProbOptions, Probabilities, TableOptions};
use flipmend::io::matrix_csv::{read_matrix_csv, write_matrix_csv};
use flipmend::io::model::read_model;
use flipmend::learn::loss::{Backward, Forward, DEFAULT_BACKWARD_CAP};
use flipmend::learn::{CrossEntropy, RowLoss};
use flipmend::noise::diagnostics::clean_prior;
use flipmend::noise::linalg::inverse;
use flipmend::noise::matrix::validate;
use flipmend::noise::posterior::Flip;
use flipmend::noise::scores::{rank, score_rows, ScoreKind};
use flipmend::noise::{estimate, Method, Sample};
use ndarray::Array2;
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};

fn config(cases: u32) -> Config {
    Config {
        cases,
        rng_seed: RngSeed::Fixed(20261201),
        failure_persistence: None,
        ..Config::default()
    }
}

/// Classes, raw probability rows, observed labels, trusted labels.
type Problem = (usize, Vec<Vec<f64>>, Vec<usize>, Vec<Option<usize>>);

/// A random problem: probabilities (rows sum to 1), labels, trusted labels.
fn problem() -> impl Strategy<Value = Problem> {
    (2usize..6, 1usize..40).prop_flat_map(|(k, n)| {
        (
            Just(k),
            prop::collection::vec(prop::collection::vec(0.0f64..1.0, k), n),
            prop::collection::vec(0..k, n),
            prop::collection::vec(prop::option::weighted(0.3, 0..k), n),
        )
    })
}

fn normalized(raw: &[Vec<f64>], k: usize) -> Array2<f32> {
    let mut p = Array2::<f32>::zeros((raw.len(), k));
    for (r, row) in raw.iter().enumerate() {
        let total: f64 = row.iter().sum::<f64>() + 1e-9 * k as f64;
        for c in 0..k {
            p[[r, c]] = ((row[c] + 1e-9) / total) as f32;
        }
    }
    p
}

/// A random row-stochastic matrix with a dominant diagonal (so it is invertible).
fn flip_matrix(k: usize) -> impl Strategy<Value = Array2<f64>> {
    prop::collection::vec(0.0f64..1.0, k * k).prop_map(move |v| {
        let mut t = Array2::from_shape_vec((k, k), v).unwrap();
        for i in 0..k {
            t[[i, i]] += k as f64;
            let s: f64 = t.row(i).sum();
            t.row_mut(i).mapv_inplace(|x| x / s);
        }
        t
    })
}

fn names(k: usize) -> Vec<String> {
    (0..k).map(|c| format!("c{c}")).collect()
}

proptest! {
    #![proptest_config(config(200))]

    #[test]
    fn estimators_return_stochastic_matrices((k, raw, labels, trusted) in problem()) {
        let p = normalized(&raw, k);
        let rows: Vec<usize> = (0..labels.len()).collect();
        let sample = Sample { probs: p.view(), labels: &labels, trusted: Some(&trusted), origins: None, rows: &rows, own_probabilities: false };
        for method in [Method::Anchor, Method::Quantile { q: 0.97 }, Method::Trusted { fallback_quantile: Some(0.9) }, Method::Counting] {
            let t = estimate(&method, &sample, &names(k)).unwrap().matrix;
            prop_assert!(validate(&t).is_ok(), "{:?}: {:?}", method, t);
            prop_assert!(t.iter().all(|v| v.is_finite() && *v >= 0.0));
        }
    }

    #[test]
    fn scores_are_bounded_and_the_ranking_is_a_deterministic_permutation(
        ((k, raw, labels, _), t) in problem().prop_flat_map(|p| { let k = p.0; (Just(p), flip_matrix(k)) })
    ) {
        let p = normalized(&raw, k);
        for kind in [ScoreKind::Posterior, ScoreKind::SelfConfidence, ScoreKind::Margin] {
            let scores = score_rows(kind, p.view(), &labels, Some(Flip::noisy(&t)));
            let (low, high) = if kind == ScoreKind::Margin { (-1.0 - 1e-9, 1.0 + 1e-9) } else { (-1e-9, 1.0 + 1e-9) };
            // The probability scores rank by odds (any value but NaN); as shown they are
            // probabilities.
            prop_assert!(scores.iter().all(|s| !s.score.is_nan() && kind.shown(s.score) >= low
                && kind.shown(s.score) <= high && s.suggested < k && s.second_choice < k));
            let mut a = scores.clone();
            let mut b = scores;
            rank(&mut a);
            rank(&mut b);
            prop_assert_eq!(&a, &b);
            let mut rows: Vec<usize> = a.iter().map(|s| s.row).collect();
            rows.sort_unstable();
            prop_assert_eq!(rows, (0..labels.len()).collect::<Vec<_>>());
            prop_assert!(a.windows(2).all(|w| w[0].score > w[1].score || (w[0].score == w[1].score && w[0].row < w[1].row)));
        }
    }

    #[test]
    fn the_clean_prior_lies_on_the_simplex(t in (2usize..6).prop_flat_map(flip_matrix), shares in prop::collection::vec(0.01f64..1.0, 6)) {
        let k = t.nrows();
        let total: f64 = shares[..k].iter().sum();
        let observed: Vec<f64> = shares[..k].iter().map(|s| s / total).collect();
        let prior = clean_prior(&t, &observed, &mut Vec::new());
        prop_assert!(prior.iter().all(|p| *p >= 0.0));
        prop_assert!((prior.iter().sum::<f64>() - 1.0).abs() < 1e-9);
    }

    #[test]
    fn forward_loss_is_non_negative_and_gradients_match_finite_differences(
        t in (2usize..5).prop_flat_map(flip_matrix),
        z in prop::collection::vec(-4.0f64..4.0, 5),
        label in 0usize..5,
    ) {
        let k = t.nrows();
        let (z, label) = (&z[..k], label % k);
        let forward = Forward::new(t.clone());
        prop_assert!(forward.loss_and_grad(&mut z.to_vec(), label) >= 0.0);
        let t_inv = inverse(&t).unwrap();
        // The guarded backward loss's floor is smooth, so its gradient is checked too.
        let losses: [(&str, Box<dyn RowLoss>); 4] = [
            ("cross-entropy", Box::new(CrossEntropy)),
            ("forward", Box::new(forward)),
            ("backward", Box::new(Backward::new(t_inv.clone(), None))),
            ("guarded backward", Box::new(Backward::new(t_inv, Some(DEFAULT_BACKWARD_CAP)))),
        ];
        for (name, loss) in &losses {
            let mut grad = z.to_vec();
            loss.loss_and_grad(&mut grad, label);
            for j in 0..k {
                let h = 1e-6;
                let (mut up, mut down) = (z.to_vec(), z.to_vec());
                up[j] += h;
                down[j] -= h;
                let numeric = (loss.loss_and_grad(&mut up, label) - loss.loss_and_grad(&mut down, label)) / (2.0 * h);
                prop_assert!((numeric - grad[j]).abs() < 1e-5 * (1.0 + numeric.abs()), "{} entry {}: {} vs {}", name, j, numeric, grad[j]);
            }
        }
        // The guarded backward loss is bounded below: each ℓ_k = −ln(q_k + e^−c) lies in
        // [−ln(1 + e^−c), c], so the row's loss is at least c·Σ(negative weights) −
        // ln(1 + e^−c)·Σ(positive weights).
        let guarded = Backward::new(inverse(&t).unwrap(), Some(DEFAULT_BACKWARD_CAP));
        let weights = inverse(&t).unwrap().row(label).to_vec();
        let negative: f64 = weights.iter().filter(|w| **w < 0.0).sum();
        let positive: f64 = weights.iter().filter(|w| **w > 0.0).sum();
        let floor = negative * DEFAULT_BACKWARD_CAP - positive * (-DEFAULT_BACKWARD_CAP).exp().ln_1p();
        prop_assert!(guarded.loss_and_grad(&mut z.to_vec(), label) >= floor - 1e-9);
    }

    #[test]
    fn matrix_files_round_trip_exactly(t in (2usize..7).prop_flat_map(flip_matrix)) {
        let k = t.nrows();
        let mut bytes = Vec::new();
        write_matrix_csv(&mut bytes, &t, &names(k)).unwrap();
        let (back, warnings) = read_matrix_csv(&bytes[..], Path::new("m.csv"), &names(k), false).unwrap();
        prop_assert_eq!(back, t);
        prop_assert!(warnings.is_empty());
    }
}

proptest! {
    #![proptest_config(config(250))]

    /// Arbitrary bytes as a table, a probability file (CSV and .npy), a matrix, a reviewed
    /// worklist or a model: every reader answers Ok or Err and never panics.
    #[test]
    fn parsers_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..400), text in "[a-c0-9,;\"\n\\.\\-e ]{0,200}") {
        let good = Dataset::from_reader("id,x,label\nr1,1,a\nr2,2,b\n".as_bytes(), Path::new("d.csv"), None, &TableOptions::default()).unwrap();
        for input in [&bytes[..], text.as_bytes()] {
            let _ = Dataset::from_reader(input, Path::new("t.csv"), None, &TableOptions::default());
            let _ = Probabilities::from_csv_reader(input, Path::new("p.csv"), &good, &ProbOptions::default());
            let _ = Probabilities::from_npy_reader(input, Path::new("p.npy"), &good, &ProbOptions::default());
            let _ = read_matrix_csv(input, Path::new("m.csv"), &good.classes, true);
            let _ = flipmend::io::review::read_review(input, Path::new("w.csv"), &good);
            let _ = read_model(input, Path::new("m.json"));
        }
        // A real header in front of random bytes reaches deeper into the row parsers.
        let mut table = b"id,x,label,trusted\n".to_vec();
        table.extend_from_slice(text.as_bytes());
        let _ = Dataset::from_reader(&table[..], Path::new("t.csv"), None, &TableOptions::default());
        let mut npy = Vec::new();
        flipmend::io::npy::write_2d(&mut npy, 2, 2, &[0.5f32, 0.5, 0.5, 0.5]).unwrap();
        let cut = bytes.len().min(npy.len());
        npy[..cut].copy_from_slice(&bytes[..cut]);
        let _ = Probabilities::from_npy_reader(&npy[..], Path::new("p.npy"), &good, &ProbOptions::default());
    }
}
