//! Benchmark of the flip-matrix estimators and diagnostics on given probabilities, and of
//! out-of-fold probabilities on a synthetic table.
//!
//! `cargo bench --bench estimate` times, on 1,000,000 rows × 10 classes of seeded
//! synthetic probabilities (labels drawn from them, 2 % trusted), each estimator, the
//! diagnostics (clean posteriors of every row, calibration), suspect scoring and ranking,
//! and a bootstrap of 20
//! resamples; then out-of-fold probabilities (5 folds) for 100,000 × 32 × 10 Gaussian
//! rows; then what `suspects` does after loading on 1,000,000 × 100 classes. Median of 5 runs after a warm-up (3 for the slow stages).

mod common;

use common::Rng;
use flipmend::learn::{out_of_fold, OofParams};
use flipmend::noise::bootstrap::bootstrap;
use flipmend::noise::diagnostics::diagnose_with_expected;
use flipmend::noise::posterior::{expected_from_scores, Flip};
use flipmend::noise::scores::{
    rank, rank_values, score_rows, score_selected, score_values, ScoreKind,
};
use flipmend::noise::{diagnose, estimate, Method, Sample};
use ndarray::Array2;

fn main() {
    let (rows, k) = (1_000_000, 10);
    let (probs, labels, trusted) = synthetic_probabilities(rows, k);
    let all: Vec<usize> = (0..rows).collect();
    let classes: Vec<String> = (0..k).map(|c| format!("c{c}")).collect();
    let sample = Sample {
        probs: probs.view(),
        labels: &labels,
        trusted: Some(&trusted),
        origins: None,
        rows: &all,
        own_probabilities: false,
    };
    for method in [
        Method::Anchor,
        Method::Quantile { q: 0.97 },
        Method::Trusted {
            fallback_quantile: None,
        },
        Method::Counting,
    ] {
        let name = format!("estimate {} 1000000x10", method.name());
        bench(&name, 5, || {
            estimate(&method, &sample, &classes).unwrap();
        });
    }
    let t = estimate(&Method::Quantile { q: 0.97 }, &sample, &classes)
        .unwrap()
        .matrix;
    bench("diagnose (posteriors, ECE) 1000000x10", 5, || {
        diagnose(&t, probs.view(), &labels, &classes, true);
    });
    bench("suspects: posterior scores + ranking 1000000x10", 5, || {
        let mut scores = score_rows(
            ScoreKind::Posterior,
            probs.view(),
            &labels,
            Some(Flip::noisy(&t)),
        );
        rank(&mut scores);
    });
    bench("suspects: posterior scores alone 1000000x10", 5, || {
        std::hint::black_box(score_rows(
            ScoreKind::Posterior,
            probs.view(),
            &labels,
            Some(Flip::noisy(&t)),
        ));
    });
    bench(
        "suspects: posterior kernel alone, one thread 1000000x10",
        5,
        || {
            let post = flipmend::noise::posterior::Posterior::new(&t);
            let (mut clean, mut out) = (vec![0.0; k], vec![0.0; k]);
            let mut total = 0.0;
            for (r, &label) in labels.iter().enumerate() {
                post.given_observed(
                    probs.row(r).as_slice().unwrap(),
                    label,
                    &mut clean,
                    &mut out,
                );
                total += out[label];
            }
            std::hint::black_box(total);
        },
    );
    bench(
        "suspects: posterior score values alone 1000000x10",
        5,
        || {
            std::hint::black_box(flipmend::noise::scores::score_values(
                ScoreKind::Posterior,
                probs.view(),
                &labels,
                Some(Flip::noisy(&t)),
            ));
        },
    );
    let unranked = score_rows(
        ScoreKind::Posterior,
        probs.view(),
        &labels,
        Some(Flip::noisy(&t)),
    );
    bench("suspects: ranking alone 1000000", 5, || {
        let mut s = unranked.clone();
        rank(&mut s);
    });
    // What the desktop app does after each matrix cell edit (aim: under 50 ms, so editing
    // stays above 20 frames per second).
    bench(
        "app: cell edit to re-ranked table (head ranking) 1000000x10",
        7,
        || {
            let mut edited = t.clone();
            edited[[0, 1]] += 0.01;
            edited[[0, 0]] -= 0.01;
            let r = flipmend::workflow::ranking::rank_rows_head(
                probs.view(),
                &labels,
                Flip::noisy(&edited),
                ScoreKind::Posterior,
                1,
                flipmend::workflow::ranking::HEAD_ROWS,
            );
            std::hint::black_box(r.ranked.len());
        },
    );
    bench("suspects: self scores + ranking 1000000x10", 5, || {
        let mut scores = score_rows(ScoreKind::SelfConfidence, probs.view(), &labels, None);
        rank(&mut scores);
    });
    bench("bootstrap quantile B=20 1000000x10", 3, || {
        bootstrap(&Method::Quantile { q: 0.97 }, &sample, &classes, 20, 1).unwrap();
    });
    let (x, y) = synthetic_table(100_000, 32, k);
    let params = OofParams::default();
    bench("out-of-fold 5 folds 100000x32x10", 3, || {
        out_of_fold(x.view(), &y, k, &params, &mut |_, _| true).unwrap();
    });
    drop((probs, labels, trusted));
    many_classes();
}

/// What `flipmend suspects` does after loading, with 100 classes: the quantile estimate,
/// the posterior score of every row (one pass; its sum is the diagnosis's expected count),
/// the diagnosis, the ranking and the full verdicts of the 1,000 listed rows.
fn many_classes() {
    let (rows, k) = (1_000_000, 100);
    if std::env::var("FLIPMEND_BENCH").is_ok_and(|f| !"estimate + scores 1000000x100".contains(&f))
    {
        return;
    }
    let (probs, labels, _) = synthetic_probabilities(rows, k);
    let all: Vec<usize> = (0..rows).collect();
    let classes: Vec<String> = (0..k).map(|c| format!("c{c}")).collect();
    let sample = Sample {
        probs: probs.view(),
        labels: &labels,
        trusted: None,
        origins: None,
        rows: &all,
        own_probabilities: false,
    };
    bench(
        "estimate + scores 1000000x100 (quantile T, posterior, diagnose, rank, top 1000)",
        3,
        || {
            let t = estimate(&Method::Quantile { q: 0.97 }, &sample, &classes)
                .unwrap()
                .matrix;
            let scores = score_values(
                ScoreKind::Posterior,
                probs.view(),
                &labels,
                Some(Flip::noisy(&t)),
            );
            let expected = expected_from_scores(&scores);
            diagnose_with_expected(&t, probs.view(), &labels, &classes, true, Some(expected));
            let order = rank_values(&scores, scores.len());
            let listed = score_selected(
                ScoreKind::Posterior,
                probs.view(),
                &labels,
                Some(Flip::noisy(&t)),
                &order[..1000],
            );
            std::hint::black_box(listed);
        },
    );
    bench("quantile estimate alone 1000000x100", 3, || {
        estimate(&Method::Quantile { q: 0.97 }, &sample, &classes).unwrap();
    });
}

/// Runs one benchmark; with `FLIPMEND_BENCH=text` only those whose name contains `text`
/// (handy under a profiler).
fn bench(name: &str, runs: usize, run: impl FnMut()) {
    if std::env::var("FLIPMEND_BENCH").is_ok_and(|f| !name.contains(&f)) {
        return;
    }
    let (median, fastest) = common::time(runs, run);
    println!(
        "{name:<44} median {:>8.4} s  min {:>8.4} s",
        median.as_secs_f64(),
        fastest.as_secs_f64()
    );
}

/// Rows peaked on a random class; labels drawn from each row's probabilities.
fn synthetic_probabilities(rows: usize, k: usize) -> (Array2<f32>, Vec<usize>, Vec<Option<usize>>) {
    let mut rng = Rng(0x5EED_0E57_1A7E_0001);
    let mut probs = Array2::<f32>::zeros((rows, k));
    let mut labels = Vec::with_capacity(rows);
    let mut trusted = Vec::with_capacity(rows);
    for r in 0..rows {
        let peak = (rng.unit() * k as f64) as usize % k;
        let raw: Vec<f64> = (0..k)
            .map(|c| {
                if c == peak {
                    3.0 + 6.0 * rng.unit()
                } else {
                    rng.unit()
                }
            })
            .collect();
        let total: f64 = raw.iter().sum();
        let mut u = rng.unit() * total;
        let mut label = k - 1;
        for (c, v) in raw.iter().enumerate() {
            probs[[r, c]] = (v / total) as f32;
            if u < *v && label == k - 1 {
                label = c;
            }
            u -= v;
        }
        labels.push(label);
        trusted.push((r % 50 == 0).then_some(peak));
    }
    (probs, labels, trusted)
}

fn synthetic_table(rows: usize, d: usize, k: usize) -> (Array2<f64>, Vec<usize>) {
    let mut rng = Rng(0x5EED_0E57_1A7E_0002);
    let means: Vec<f64> = (0..k * d).map(|_| 2.0 * rng.unit() - 1.0).collect();
    let labels: Vec<usize> = (0..rows).map(|r| r % k).collect();
    let x = Array2::from_shape_fn((rows, d), |(r, j)| {
        means[labels[r] * d + j] + (rng.unit() - 0.5) * 3.0
    });
    (x, labels)
}
