//! The estimators run as passes and split among workers whose states merge in any order
//! (what a distributed engine does with partial aggregates) against one pass over every
//! row, on a seeded simulation with a known flip matrix. Probabilities are rounded to
//! two decimals so that many rows tie for each class's largest value: the merged
//! anchors must still be the rows first in the table.

use ndarray::{Array2, ArrayView2, Axis, Slice};
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::passes::{Passes, Rows};
use super::Method;

const K: usize = 4;

/// Probabilities, observed labels, trusted labels, and whether each came at random.
type Data = (Array2<f32>, Vec<usize>, Vec<Option<usize>>, Vec<bool>);

/// `n` rows of rounded, normalised probabilities, labels drawn from them, and a trusted
/// label on every fifth row (two in three of those from a review, not at random).
fn table(n: usize, seed: u64) -> Data {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut probs = Array2::<f32>::zeros((n, K));
    let mut labels = Vec::with_capacity(n);
    for mut row in probs.rows_mut() {
        let class = rng.random_range(0..K);
        for (c, v) in row.iter_mut().enumerate() {
            let base = if c == class { 3.0 } else { 0.3 };
            *v = (base * rng.random::<f32>() * 100.0).round() / 100.0 + 0.01;
        }
        let sum: f32 = row.sum();
        row.mapv_inplace(|v| ((v / sum) * 100.0).round() / 100.0);
        let sum: f32 = row.sum();
        row.mapv_inplace(|v| v / sum);
        let flip = rng.random::<f64>() < 0.2;
        labels.push(if flip { (class + 1) % K } else { class });
    }
    let trusted = (0..n)
        .map(|i| (i % 5 == 0).then_some((i / 5) % K))
        .collect();
    let at_random = (0..n).map(|i| i % 15 == 0).collect();
    (probs, labels, trusted, at_random)
}

fn names() -> Vec<String> {
    (0..K).map(|c| format!("c{c}")).collect()
}

fn view<'a>(
    probs: ArrayView2<'a, f32>,
    labels: &'a [usize],
    trusted: &'a [Option<usize>],
    at_random: &'a [bool],
    first_row: usize,
) -> Rows<'a> {
    Rows {
        first_row,
        probs,
        labels,
        trusted: Some(trusted),
        at_random: Some(at_random),
    }
}

/// One pass after another over all rows, in parts of `part` rows.
fn in_one_stream(method: &Method, data: &Data) -> Array2<f64> {
    let (probs, labels, trusted, at_random) = data;
    let mut passes = Passes::new(method, K).unwrap();
    while passes.wants_pass() {
        for start in (0..labels.len()).step_by(700) {
            let end = (start + 700).min(labels.len());
            passes.rows(&view(
                probs.slice_axis(Axis(0), Slice::from(start..end)),
                &labels[start..end],
                &trusted[start..end],
                &at_random[start..end],
                start,
            ));
        }
        passes.end_pass();
    }
    passes.finish(&names(), &mut Vec::new()).unwrap()
}

/// Each pass split into shares of random sizes, each fed by one "worker", merged back
/// in a shuffled order.
fn by_workers(method: &Method, data: &Data, seed: u64) -> Array2<f64> {
    let (probs, labels, trusted, at_random) = data;
    let n = labels.len();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut driver = Passes::new(method, K).unwrap();
    while driver.wants_pass() {
        let mut cuts: Vec<usize> = (0..6).map(|_| rng.random_range(0..=n)).collect();
        cuts.extend([0, n]);
        cuts.sort_unstable();
        let mut shares: Vec<Passes> = cuts
            .windows(2)
            .map(|w| {
                let mut share = driver.share();
                let (start, end) = (w[0], w[1]);
                share.rows(&view(
                    probs.slice_axis(Axis(0), Slice::from(start..end)),
                    &labels[start..end],
                    &trusted[start..end],
                    &at_random[start..end],
                    start,
                ));
                share
            })
            .collect();
        shares.shuffle(&mut rng);
        for share in shares {
            driver.merge(share).unwrap();
        }
        driver.end_pass();
    }
    driver.finish(&names(), &mut Vec::new()).unwrap()
}

#[test]
fn estimators_split_among_workers_give_the_one_pass_matrix() {
    let data = table(5000, 3);
    let methods = [
        Method::Anchor,
        Method::Quantile { q: 0.97 },
        Method::Counting,
        Method::Trusted {
            fallback_quantile: None,
        },
    ];
    for method in &methods {
        let whole = in_one_stream(method, &data);
        for seed in 0..5 {
            let merged = by_workers(method, &data, seed);
            let gap = (&whole - &merged)
                .mapv(f64::abs)
                .fold(0.0f64, |a, &b| a.max(b));
            assert!(
                gap < 1e-9,
                "{method:?}, seed {seed}: {gap}\n{whole}\n{merged}"
            );
            if matches!(method, Method::Anchor | Method::Quantile { .. }) {
                assert_eq!(
                    whole, merged,
                    "{method:?}: the anchors are the rows first in the table"
                );
            }
        }
    }
}

#[test]
fn the_trusted_fallback_merges_through_its_quantile_passes() {
    // No trusted row of class 3 from a random audit: the fallback's quantile passes
    // run after the sums, and they merge too.
    let (probs, labels, mut trusted, at_random) = table(3000, 5);
    for t in trusted.iter_mut() {
        if *t == Some(3) {
            *t = Some(2);
        }
    }
    let data = (probs, labels, trusted, at_random);
    let method = Method::Trusted {
        fallback_quantile: Some(0.97),
    };
    let whole = in_one_stream(&method, &data);
    let merged = by_workers(&method, &data, 9);
    let gap = (&whole - &merged)
        .mapv(f64::abs)
        .fold(0.0f64, |a, &b| a.max(b));
    assert!(gap < 1e-9, "{gap}");
}

#[test]
fn states_of_different_passes_do_not_merge() {
    let data = table(100, 1);
    let mut ahead = Passes::new(&Method::Counting, K).unwrap();
    let behind = ahead.share();
    ahead.rows(&view(data.0.view(), &data.1, &data.2, &data.3, 0));
    ahead.end_pass();
    assert!(ahead.merge(behind).is_err());
}
