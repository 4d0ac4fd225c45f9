//! Tests of the Dawid–Skene consensus; each check names its outside source.

use super::em::{em_step, normalise_rows};
use super::intervals::wilson_interval;
use super::*;
use ndarray::{array, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A simulated labelling with known truth.
struct Sim {
    classes: usize,
    truth: Vec<usize>,
    labels: Array2<Option<u32>>,
    confusion: Vec<Array2<f64>>,
    class_prior: Vec<f64>,
}

impl Sim {
    fn view(&self) -> AnnotatorLabels<'_> {
        AnnotatorLabels {
            classes: self.classes,
            labels: self.labels.view(),
        }
    }

    /// Population accuracy `Σ_k ρ_k·π_a[k][k]` of each annotator.
    fn true_accuracy(&self) -> Vec<f64> {
        let diagonal = |m: &Array2<f64>| -> f64 {
            (0..self.classes)
                .map(|k| self.class_prior[k] * m[[k, k]])
                .sum()
        };
        self.confusion.iter().map(diagonal).collect()
    }
}

fn draw(rng: &mut ChaCha8Rng, probabilities: &[f64]) -> usize {
    let u: f64 = rng.random();
    let mut cumulative = 0.0;
    for (k, p) in probabilities.iter().enumerate() {
        cumulative += p;
        if u < cumulative {
            return k;
        }
    }
    probabilities.len() - 1
}

fn random_simplex(rng: &mut ChaCha8Rng, n: usize, low: f64) -> Vec<f64> {
    let w: Vec<f64> = (0..n).map(|_| rng.random_range(low..1.0)).collect();
    let total: f64 = w.iter().sum();
    w.iter().map(|x| x / total).collect()
}

/// Confusion with diagonal `accuracy ± 0.05` and random off-diagonal shares.
fn random_confusion(rng: &mut ChaCha8Rng, classes: usize, accuracy: f64) -> Array2<f64> {
    let mut m = Array2::zeros((classes, classes));
    for k in 0..classes {
        let diagonal = (accuracy + rng.random_range(-0.05..0.05)).clamp(0.0, 1.0);
        let spread = random_simplex(rng, classes - 1, 0.2);
        let others = (0..classes).filter(|&l| l != k);
        for (l, share) in others.zip(spread) {
            m[[k, l]] = (1.0 - diagonal) * share;
        }
        m[[k, k]] = diagonal;
    }
    m
}

/// Each item is labelled by `per_item` distinct random annotators.
fn simulate(
    seed: u64,
    items: usize,
    classes: usize,
    accuracy: &[f64],
    per_item: (usize, usize),
) -> Sim {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let class_prior = random_simplex(&mut rng, classes, 0.4);
    let confusion: Vec<_> = accuracy
        .iter()
        .map(|&a| random_confusion(&mut rng, classes, a))
        .collect();
    let truth: Vec<usize> = (0..items).map(|_| draw(&mut rng, &class_prior)).collect();
    sim_labels(
        &mut rng,
        Sim {
            classes,
            truth,
            labels: Array2::default((0, 0)),
            confusion,
            class_prior,
        },
        per_item,
    )
}

fn sim_labels(rng: &mut ChaCha8Rng, mut sim: Sim, per_item: (usize, usize)) -> Sim {
    let annotators = sim.confusion.len();
    sim.labels = Array2::from_elem((sim.truth.len(), annotators), None);
    for (r, &t) in sim.truth.iter().enumerate() {
        let count = rng.random_range(per_item.0..=per_item.1);
        for a in rand::seq::index::sample(rng, annotators, count) {
            let row = sim.confusion[a].row(t).to_vec();
            sim.labels[[r, a]] = Some(draw(rng, &row) as u32);
        }
    }
    sim
}

fn run(sim: &Sim, prior: Option<ArrayView2<f32>>, params: &ConsensusParams) -> Consensus {
    estimate_consensus(&sim.view(), prior, params, &mut |_| true).expect("fit")
}

fn share_right(truth: &[usize], guess: impl Iterator<Item = usize>) -> f64 {
    guess.zip(truth).filter(|(g, t)| g == *t).count() as f64 / truth.len() as f64
}

fn mean_abs_error(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    (a - b).mapv(f64::abs).mean().unwrap_or(f64::NAN)
}

/// Confusion counted from the true classes (the "oracle"), same smoothing.
fn oracle(sim: &Sim, a: usize, smoothing: f64) -> Array2<f64> {
    let mut m = Array2::from_elem((sim.classes, sim.classes), smoothing);
    for (r, &t) in sim.truth.iter().enumerate() {
        if let Some(l) = sim.labels[[r, a]] {
            m[[t, l as usize]] += 1.0;
        }
    }
    normalise_rows(&mut m);
    m
}

const SPREAD: [f64; 5] = [0.55, 0.65, 0.75, 0.85, 0.95];

#[test]
fn one_em_step_matches_hand_arithmetic() {
    // Dawid & Skene (1979): start T_rk = share of item r's labels equal to k
    // (their proposed start), M-step eqs. 2.3–2.4, E-step eq. 2.5; smoothing 0.
    let labels = array![
        [Some(0), Some(0), Some(0)],
        [Some(0), Some(0), Some(1)],
        [Some(1), Some(1), Some(0)],
        [Some(1), None, Some(1)],
    ];
    let data = compile(&AnnotatorLabels {
        classes: 2,
        labels: labels.view(),
    })
    .expect("labels");
    let mut t = start_posterior(&data);
    // Start: r0 (1, 0); r1 (2/3, 1/3); r2 (1/3, 2/3); r3 (0, 1).
    let start = array![
        [1.0, 0.0],
        [2.0 / 3.0, 1.0 / 3.0],
        [1.0 / 3.0, 2.0 / 3.0],
        [0.0, 1.0]
    ];
    assert!((&t - &start).iter().all(|d| d.abs() < 1e-12));
    let (fit, log_likelihood) = em_step(&data, &mut t, &[1.0; 4], 0.0);
    // ρ0 = (1 + 2/3 + 1/3 + 0)/4 = 1/2, ρ1 = 1/2.
    assert!((fit.rho[0] - 0.5).abs() < 1e-12 && (fit.rho[1] - 0.5).abs() < 1e-12);
    // π_0: row 0: l0 = 1 + 2/3 = 5/3, l1 = 1/3 + 0 = 1/3 → (5/6, 1/6);
    //      row 1: l0 = 0 + 1/3, l1 = 2/3 + 1 = 5/3 → (1/6, 5/6).
    // π_1 (r3 unlabelled): row 0: 5/3, 1/3 → (5/6, 1/6); row 1: 1/3, 2/3 over 1 → (1/3, 2/3).
    // π_2: row 0: l0 = 1 + 1/3, l1 = 2/3 + 0 → (2/3, 1/3);
    //      row 1: l0 = 2/3, l1 = 1/3 + 1 → (1/3, 2/3).
    let pi = [
        array![[5.0 / 6.0, 1.0 / 6.0], [1.0 / 6.0, 5.0 / 6.0]],
        array![[5.0 / 6.0, 1.0 / 6.0], [1.0 / 3.0, 2.0 / 3.0]],
        array![[2.0 / 3.0, 1.0 / 3.0], [1.0 / 3.0, 2.0 / 3.0]],
    ];
    for (got, want) in fit.pi.iter().zip(&pi) {
        assert!(
            (got - want).iter().all(|d| d.abs() < 1e-12),
            "{got} vs {want}"
        );
    }
    // E-step: r0: ½·5/6·5/6·2/3 = 25/108 vs ½·1/6·1/3·1/3 = 1/108 → (25/26, 1/26);
    // r1: ½·5/6·5/6·1/3 = 25/216 vs ½·1/6·1/3·2/3 = 4/216 → (25/29, 4/29);
    // r2: ½·1/6·1/6·2/3 = 2/216 vs ½·5/6·2/3·1/3 = 20/216 → (1/11, 10/11);
    // r3: ½·1/6·1/3 = 1/36 vs ½·5/6·2/3 = 10/36 → (1/11, 10/11).
    let want = array![
        [25.0 / 26.0, 1.0 / 26.0],
        [25.0 / 29.0, 4.0 / 29.0],
        [1.0 / 11.0, 10.0 / 11.0],
        [1.0 / 11.0, 10.0 / 11.0]
    ];
    assert!((&t - &want).iter().all(|d| d.abs() < 1e-12), "{t}");
    // Log-likelihood: Σ_r ln Σ_k (products above).
    let ll = (26.0f64 / 108.0).ln()
        + (29.0f64 / 216.0).ln()
        + (22.0f64 / 216.0).ln()
        + (11.0f64 / 36.0).ln();
    assert!((log_likelihood - ll).abs() < 1e-12);
}

#[test]
fn recovers_simulated_matrices() {
    // Dawid & Skene (1979): the EM estimates are maximum likelihood, so
    // with 2,000 items they should be near the matrices counted from the true
    // classes. Bound: within 1.5× the oracle's own error (+0.005 slack).
    let sim = simulate(11, 2_000, 3, &SPREAD, (2, 4));
    let fit = run(&sim, None, &ConsensusParams::default());
    for (a, report) in fit.annotators.iter().enumerate() {
        let ours = mean_abs_error(&report.matrix, &sim.confusion[a]);
        let best = mean_abs_error(&oracle(&sim, a, DEFAULT_SMOOTHING), &sim.confusion[a]);
        assert!(
            ours < 1.5 * best + 0.005,
            "annotator {a}: {ours} vs oracle {best}"
        );
        assert!(ours < 0.03, "annotator {a}: {ours}");
    }
    assert!(fit.converged);
}

#[test]
fn consensus_beats_majority_vote() {
    // A fact of the trade (Dawid & Skene 1979; Raykar et al. 2010):
    // weighting annotators by estimated skill beats an unweighted vote when
    // one annotator is good and the rest are poor.
    let sim = simulate(5, 1_500, 3, &[0.95, 0.6, 0.6, 0.6, 0.6], (5, 5));
    let fit = run(&sim, None, &ConsensusParams::default());
    let ours = share_right(&sim.truth, fit.consensus.iter().copied());
    let votes = majority_vote(&sim.view());
    let theirs = share_right(&sim.truth, votes.iter().map(|v| v.unwrap_or(usize::MAX)));
    assert!(
        ours > theirs + 0.05,
        "consensus {ours} vs majority {theirs}"
    );
}

/// A calibrated classifier: p ∝ exp(3·u), then the true class drawn from p.
fn calibrated_sim(seed: u64, items: usize, classes: usize) -> (Sim, Array2<f32>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut prior = Array2::<f32>::zeros((items, classes));
    let mut truth = Vec::with_capacity(items);
    for mut row in prior.outer_iter_mut() {
        let w: Vec<f64> = (0..classes)
            .map(|_| (3.0 * rng.random::<f64>()).exp())
            .collect();
        let total: f64 = w.iter().sum();
        let p: Vec<f64> = w.iter().map(|x| x / total).collect();
        row.iter_mut()
            .zip(&p)
            .for_each(|(cell, x)| *cell = *x as f32);
        truth.push(draw(&mut rng, &p));
    }
    let confusion = SPREAD[..4]
        .iter()
        .map(|&a| random_confusion(&mut rng, classes, a))
        .collect();
    let class_prior = vec![1.0 / classes as f64; classes];
    let sim = Sim {
        classes,
        truth,
        labels: Array2::default((0, 0)),
        confusion,
        class_prior,
    };
    (sim_labels(&mut rng, sim, (1, 2)), prior)
}

#[test]
fn classifier_prior_helps() {
    // Raykar et al. (2010): a calibrated classifier's probability is a
    // better per-item prior than the shared ρ, so accuracy cannot drop.
    let (sim, prior) = calibrated_sim(3, 1_500, 3);
    let params = ConsensusParams::default();
    let without = run(&sim, None, &params);
    let with = run(&sim, Some(prior.view()), &params);
    let a = share_right(&sim.truth, without.consensus.iter().copied());
    let b = share_right(&sim.truth, with.consensus.iter().copied());
    assert!(b >= a + 0.01, "with prior {b} vs without {a}");
    let mean: f64 = with.class_prior.iter().sum();
    assert!((mean - 1.0).abs() < 1e-9);
}

#[test]
fn same_seed_same_bits_on_any_thread_count() {
    // Reproducibility requirement of flipmend: seed → bit-identical output.
    let sim = simulate(7, 400, 3, &SPREAD, (2, 3));
    let params = ConsensusParams {
        resamples: 20,
        seed: 9,
        ..Default::default()
    };
    let on = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("pool");
        pool.install(|| run(&sim, None, &params))
    };
    let (one, two) = (on(1), on(2));
    assert_eq!(one.posterior, two.posterior);
    assert_eq!(one.log_likelihood.to_bits(), two.log_likelihood.to_bits());
    for (x, y) in one.annotators.iter().zip(&two.annotators) {
        assert_eq!(x.accuracy_low.to_bits(), y.accuracy_low.to_bits());
        assert_eq!(x.accuracy_high.to_bits(), y.accuracy_high.to_bits());
        assert_eq!(x.matrix_high, y.matrix_high);
    }
    let other = run(
        &sim,
        None,
        &ConsensusParams {
            seed: 10,
            ..params.clone()
        },
    );
    assert_ne!(
        one.annotators[0].accuracy_low,
        other.annotators[0].accuracy_low
    );
}

fn usage_message(result: Result<Consensus>) -> String {
    match result {
        Err(Error::Usage(message)) => message,
        other => panic!("expected a usage error, got {other:?}"),
    }
}

fn fit_labels(labels: &Array2<Option<u32>>, classes: usize) -> Result<Consensus> {
    let view = AnnotatorLabels {
        classes,
        labels: labels.view(),
    };
    estimate_consensus(&view, None, &ConsensusParams::default(), &mut |_| true)
}

#[test]
fn disconnected_annotators_are_refused() {
    // Dawid & Skene's model is identified only up to relabelling per group of
    // annotators that share items; separate groups cannot be compared.
    let labels = array![
        [Some(0), Some(0), None, None],
        [Some(1), Some(1), None, None],
        [None, None, Some(0), Some(1)],
    ];
    let message = usage_message(fit_labels(&labels, 2));
    assert!(
        message.contains(
            "annotator 2, annotator 3 never labelled an item that annotator 0, annotator 1 labelled"
        ),
        "{message}"
    );
}

#[test]
fn silent_annotator_and_bad_labels_are_refused() {
    // flipmend's contract: user errors are `Error::Usage` naming the culprit.
    let silent = array![[Some(0), None], [Some(1), None]];
    assert!(usage_message(fit_labels(&silent, 2)).contains("annotator 1 labels no item"));
    let high = array![[Some(0), Some(2)], [Some(1), Some(1)]];
    assert!(usage_message(fit_labels(&high, 2)).contains("class 2 is out of range"));
    assert!(usage_message(fit_labels(&high, 1)).contains("at least 2 classes"));
}

#[test]
fn bad_priors_are_refused() {
    // Raykar et al. (2010) need a probability vector per item.
    let labels = array![[Some(0), Some(0)], [Some(1), Some(1)]];
    let view = AnnotatorLabels {
        classes: 2,
        labels: labels.view(),
    };
    let params = ConsensusParams::default();
    let wrong_shape = Array2::<f32>::from_elem((2, 3), 1.0 / 3.0);
    let result = estimate_consensus(&view, Some(wrong_shape.view()), &params, &mut |_| true);
    assert!(usage_message(result).contains("is 2×3"));
    let bad_sum = array![[0.5f32, 0.5], [0.7, 0.7]];
    let result = estimate_consensus(&view, Some(bad_sum.view()), &params, &mut |_| true);
    assert!(usage_message(result).contains("item 1"));
}

#[test]
fn each_bad_setting_is_refused() {
    // flipmend's contract: each out-of-range setting names itself.
    let base = ConsensusParams::default();
    let cases: [(&str, ConsensusParams); 6] = [
        (
            "max_iter",
            ConsensusParams {
                max_iter: 0,
                ..base.clone()
            },
        ),
        (
            "tolerance",
            ConsensusParams {
                tolerance: -1.0,
                ..base.clone()
            },
        ),
        (
            "tolerance",
            ConsensusParams {
                tolerance: f64::NAN,
                ..base.clone()
            },
        ),
        (
            "smoothing",
            ConsensusParams {
                smoothing: -0.1,
                ..base.clone()
            },
        ),
        (
            "smoothing",
            ConsensusParams {
                smoothing: f64::INFINITY,
                ..base.clone()
            },
        ),
        (
            "resamples",
            ConsensusParams {
                resamples: 3,
                ..base.clone()
            },
        ),
    ];
    for (name, params) in cases {
        match params.check() {
            Err(Error::Setting { setting, .. }) => assert_eq!(setting, name),
            other => panic!("{name}: {other:?}"),
        }
    }
    assert!(base.check().is_ok());
}

#[test]
fn cancel_stops_the_fit_and_the_bootstrap() {
    // flipmend's contract: `keep_going` returning false gives `Cancelled`.
    let sim = simulate(2, 200, 3, &SPREAD, (2, 3));
    let params = ConsensusParams {
        resamples: 20,
        ..Default::default()
    };
    let result = estimate_consensus(&sim.view(), None, &params, &mut |_| false);
    assert!(matches!(result, Err(Error::Cancelled)));
    let main = run(&sim, None, &params).iterations;
    let result = estimate_consensus(&sim.view(), None, &params, &mut |step| step <= main);
    assert!(matches!(result, Err(Error::Cancelled)));
}

#[test]
fn unlabelled_items_get_the_prior_and_a_warning() {
    // Bayes: with no label the posterior is the prior (DS eq. 2.5, empty product).
    let labels = array![
        [Some(0), Some(0)],
        [Some(1), Some(1)],
        [Some(0), Some(1)],
        [None, None]
    ];
    let fit = fit_labels(&labels, 2).expect("fit");
    let row = fit.posterior.row(3).to_vec();
    assert!((row[0] - fit.class_prior[0]).abs() < 1e-12, "{row:?}");
    assert!(fit
        .warnings
        .iter()
        .any(|w| w.starts_with("1 items have no label")));
}

#[test]
fn majority_vote_breaks_ties_low() {
    // flipmend's contract: ties go to the lowest class index.
    let labels = array![
        [Some(2), Some(1), None],
        [Some(1), Some(1), Some(0)],
        [None, None, None]
    ];
    let votes = majority_vote(&AnnotatorLabels {
        classes: 3,
        labels: labels.view(),
    });
    assert_eq!(votes, vec![Some(1), Some(1), None]);
}

/// Coverage of the true population accuracies by the 90 % intervals.
fn coverage(seeds: std::ops::Range<u64>, items: usize, resamples: usize) -> f64 {
    let (mut inside, mut total) = (0, 0);
    for seed in seeds {
        let classes = 3 + (seed % 3) as usize;
        let sim = simulate(100 + seed, items, classes, &SPREAD, (2, 4));
        let params = ConsensusParams {
            resamples,
            seed,
            ..Default::default()
        };
        let fit = run(&sim, None, &params);
        for (report, truth) in fit.annotators.iter().zip(sim.true_accuracy()) {
            inside += usize::from(report.accuracy_low <= truth && truth <= report.accuracy_high);
            total += 1;
        }
    }
    inside as f64 / total as f64
}

#[test]
fn bootstrap_intervals_cover_true_accuracy() {
    // Efron & Tibshirani (1993), standard bootstrap interval: a 90 % interval should hold
    // the true value about 90 % of the time. 8 seeds × 5 annotators.
    let covered = coverage(0..8, 800, 40);
    println!("bootstrap coverage {covered}");
    assert!(
        (0.75..=0.99).contains(&covered),
        "bootstrap coverage {covered}"
    );
}

#[test]
fn wilson_intervals_cover_true_accuracy() {
    // Wilson (1927): score interval; here on soft counts, n = items labelled.
    let covered = coverage(0..8, 800, 0);
    println!("Wilson coverage {covered}");
    assert!(
        (0.75..=0.99).contains(&covered),
        "Wilson coverage {covered}"
    );
}

/// The measurements behind the module's constants (ignored; run with --ignored).
#[path = "measure.rs"]
mod measure;
