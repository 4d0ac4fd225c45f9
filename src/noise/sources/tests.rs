//! Per-source matrices on simulations with a known truth: clean posteriors drawn at
//! random, true classes drawn from them, each source's labels flipped by its own matrix.

use ndarray::{array, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::*;

/// A simulated table: noisy probabilities p̃ = Σ_s share_s·T_sᵀq (what a model trained
/// on the pooled labels would learn), labels, sources and the true classes.
struct World {
    probs: Array2<f32>,
    labels: Vec<usize>,
    truth: Vec<usize>,
    of_row: Vec<u32>,
    names: Vec<String>,
}

fn draw(matrices: &[Array2<f64>], rows: usize, seed: u64) -> World {
    let k = matrices[0].nrows();
    let s_count = matrices.len();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut probs = Array2::<f32>::zeros((rows, k));
    let (mut labels, mut truth, mut of_row) = (vec![], vec![], vec![]);
    for r in 0..rows {
        // A confident clean posterior around a random class (Bayes accuracy ~0.9).
        let centre = rng.random_range(0..k);
        let mut q: Vec<f64> = (0..k).map(|_| rng.random::<f64>() * 0.35).collect();
        q[centre] += 2.5 + rng.random::<f64>() * 2.0;
        let total: f64 = q.iter().sum();
        q.iter_mut().for_each(|v| *v /= total);
        let true_class = pick(&q, rng.random());
        let source = rng.random_range(0..s_count);
        let observed = pick(&matrices[source].row(true_class).to_vec(), rng.random());
        for j in 0..k {
            let noisy: f64 = (0..s_count)
                .map(|s| (0..k).map(|c| q[c] * matrices[s][[c, j]]).sum::<f64>())
                .sum::<f64>()
                / s_count as f64;
            probs[[r, j]] = noisy as f32;
        }
        labels.push(observed);
        truth.push(true_class);
        of_row.push(source as u32);
    }
    let names = (0..s_count).map(|s| format!("s{s}")).collect();
    World {
        probs,
        labels,
        truth,
        of_row,
        names,
    }
}

fn pick(weights: &[f64], u: f64) -> usize {
    let mut acc = 0.0;
    for (i, w) in weights.iter().enumerate() {
        acc += w;
        if u < acc {
            return i;
        }
    }
    weights.len() - 1
}

fn pair_noise(k: usize, rate: f64) -> Array2<f64> {
    Array2::from_shape_fn((k, k), |(i, j)| {
        if i == j {
            1.0 - rate
        } else if j == (i + 1) % k {
            rate
        } else {
            0.0
        }
    })
}

fn classes(k: usize) -> Vec<String> {
    (0..k).map(|c| format!("c{c}")).collect()
}

/// Mean absolute cell error.
fn error(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    (a - b).mapv(f64::abs).mean().unwrap()
}

/// The matrix counted from the true classes of a source's rows: the oracle no
/// estimator can expect to beat.
fn oracle(world: &World, source: u32, k: usize) -> Array2<f64> {
    let mut counts = Array2::<f64>::zeros((k, k));
    for r in 0..world.labels.len() {
        if world.of_row[r] == source {
            counts[[world.truth[r], world.labels[r]]] += 1.0;
        }
    }
    normalize_rows(&mut counts);
    counts
}

/// Every row of the world, without audits.
fn sample_of<'a>(world: &'a World, rows: &'a [usize]) -> Sample<'a> {
    Sample {
        probs: world.probs.view(),
        labels: &world.labels,
        trusted: None,
        origins: None,
        rows,
        own_probabilities: false,
    }
}

fn by_source(world: &World, method: &Method) -> BySource {
    let rows: Vec<usize> = (0..world.labels.len()).collect();
    let sample = sample_of(world, &rows);
    let k = world.probs.ncols();
    let overall = estimate(method, &sample, &classes(k)).unwrap();
    let data = SourceSample {
        sample,
        of_row: &world.of_row,
        names: &world.names,
    };
    estimate_by_source(method, &data, &classes(k), &overall, Testing::Run)
        .unwrap()
        .0
}

#[test]
fn em_given_the_true_clean_posterior_recovers_a_known_matrix() {
    // Simulation with a known T (the forward model of Patrini et al. 2017, Eq. 2): with
    // q exact, the maximum-likelihood T is consistent.
    let t = array![[0.8, 0.2, 0.0], [0.0, 0.9, 0.1], [0.15, 0.0, 0.85]];
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let n = 20_000;
    let mut clean = Array2::<f32>::zeros((n, 3));
    let mut labels = Vec::with_capacity(n);
    for r in 0..n {
        let mut q: Vec<f64> = (0..3).map(|_| rng.random::<f64>()).collect();
        let total: f64 = q.iter().sum();
        q.iter_mut().for_each(|v| *v /= total);
        let truth = pick(&q, rng.random());
        labels.push(pick(&t.row(truth).to_vec(), rng.random()));
        for c in 0..3 {
            clean[[r, c]] = q[c] as f32;
        }
    }
    let rows: Vec<usize> = (0..n).collect();
    let (fitted, _) = fit_given_clean(clean.view(), &labels, None, &rows, 3, None);
    assert!(error(&fitted, &t) < 0.02, "{fitted:.3}");
}

#[test]
fn per_source_matrices_beat_one_matrix_for_all() {
    // Three sources with pair noise at 5 %, 20 % and 35 %, 5,000 rows each. The
    // probabilities here are the exact noisy posteriors, the joint fit's hardest case
    // (see noise::joint): the bound is against one matrix for every source, which is
    // what ignoring the source column gives; tests/sources.rs checks the 2×
    // oracle target on out-of-fold probabilities.
    let k = 4;
    let truths = [pair_noise(k, 0.05), pair_noise(k, 0.2), pair_noise(k, 0.35)];
    let world = draw(&truths, 15_000, 11);
    let fit = by_source(
        &world,
        &Method::Joint {
            volume_weight: None,
        },
    );
    for (s, truth) in truths.iter().enumerate() {
        let ours = error(&fit.sources[s].matrix, truth);
        // The middle source's matrix is close to the mix, so only the outer two can
        // gain much over it.
        let one_for_all = error(&fit.overall, truth);
        assert!(
            s == 1 || ours < 0.5 * one_for_all,
            "source {s}: error {ours:.4}, one matrix {one_for_all:.4}\n{:.3}",
            fit.sources[s].matrix
        );
        let oracle_error = error(&oracle(&world, s as u32, k), truth);
        assert!(ours < 5.0 * oracle_error, "{ours} vs oracle {oracle_error}");
    }
    let rates: Vec<f64> = fit.sources.iter().map(|s| s.noise_rate).collect();
    for (rate, truth) in rates.iter().zip([0.05, 0.2, 0.35]) {
        assert!((rate - truth).abs() < 0.02, "{rates:?}");
    }
    let test = fit.test.unwrap();
    // The smallest p-value 99 permutations can give.
    assert!(test.p_value <= 0.01, "{test:?}");
}

#[test]
fn equal_sources_are_rarely_called_different() {
    // The test's size under H₀: 40 seeded tables whose sources share one matrix; at
    // the 5 % level a test of the stated size rejects about 2 of 40 (binomial: more than
    // 6 has probability 0.005). More than 6 fails.
    let k = 3;
    let t = pair_noise(k, 0.2);
    let truths = [t.clone(), t.clone(), t];
    let mut rejected = 0;
    let mut p_values = Vec::new();
    for seed in 0..40 {
        let world = draw(&truths, 1_500, 100 + seed);
        let fit = by_source(&world, &Method::Counting);
        let p = fit.test.unwrap().p_value;
        p_values.push(p);
        rejected += usize::from(p < 0.05);
    }
    assert!(rejected <= 6, "{rejected} of 40 rejected: {p_values:.3?}");
}

#[test]
fn small_sources_take_the_overall_matrix_and_say_so() {
    let k = 3;
    let truths = [pair_noise(k, 0.1), pair_noise(k, 0.3)];
    let mut world = draw(&truths, 3_000, 21);
    // One row becomes a source of its own.
    world.names.push("lonely".into());
    world.of_row[7] = 2;
    let fit = by_source(
        &world,
        &Method::Joint {
            volume_weight: None,
        },
    );
    assert!(fit.sources[2].pooled && !fit.sources[0].pooled);
    assert_eq!(fit.sources[2].rows, 1);
    assert!(
        fit.warnings
            .iter()
            .any(|w| w.contains("'lonely' has 1 rows")),
        "{:?}",
        fit.warnings
    );
    // Pair noise: one flip per class, so about one free cell per row, between the two
    // sources with rows enough.
    let df = fit.test.unwrap().degrees_of_freedom;
    assert!((k..k * (k - 1)).contains(&df), "{df}");
}

#[test]
fn anchor_estimators_are_refused_per_source() {
    let world = draw(&[pair_noise(3, 0.1), pair_noise(3, 0.2)], 600, 3);
    let rows: Vec<usize> = (0..600).collect();
    let sample = sample_of(&world, &rows);
    let overall = estimate(&Method::Anchor, &sample, &classes(3)).unwrap();
    let data = SourceSample {
        sample,
        of_row: &world.of_row,
        names: &world.names,
    };
    let err = estimate_by_source(&Method::Anchor, &data, &classes(3), &overall, Testing::Run)
        .unwrap_err();
    assert!(
        err.to_string().contains("joint, counting or trusted"),
        "{err}"
    );
}

#[test]
fn edited_matrices_give_the_noise_rates_and_the_mix_again() {
    // By hand: A (100 rows, half of each class, no flips) and B (300 rows, all class 0,
    // which it types as 1 four times in ten). Row 0 of the mix weighs A's 50 rows against
    // B's 300: (50·(1, 0) + 300·(0.6, 0.4)) / 350; row 1 is A's alone.
    let source = |name: &str, rows, share: Vec<f64>| SourceMatrix {
        name: name.into(),
        rows,
        audited: 0,
        matrix: Array2::eye(2),
        pooled: false,
        clean_share: share,
        noise_rate: 0.0,
    };
    let start = BySource {
        sources: vec![
            source("a", 100, vec![0.5, 0.5]),
            source("b", 300, vec![1.0, 0.0]),
        ],
        overall: Array2::eye(2),
        test: None,
        warnings: vec!["kept".into()],
    };
    let edited = start.with_matrices(vec![Array2::eye(2), array![[0.6, 0.4], [0.0, 1.0]]]);
    assert!((edited.sources[1].noise_rate - 0.4).abs() < 1e-12);
    assert_eq!(edited.sources[0].noise_rate, 0.0);
    let expected = array![[230.0 / 350.0, 120.0 / 350.0], [0.0, 1.0]];
    assert!((&edited.overall - &expected)
        .iter()
        .all(|d| d.abs() < 1e-12));
    assert_eq!(edited.warnings, start.warnings);
    assert_eq!(edited.noisiest_first(), vec![1, 0]);
    // The same matrices give back the estimate's own figures, bit for bit.
    let again = edited.with_matrices(edited.matrices().into_iter().cloned().collect());
    assert_eq!(again, edited);
}
