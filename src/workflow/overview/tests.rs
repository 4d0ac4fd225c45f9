//! The overview on examples worked by hand, and its count interval against seeded
//! simulations whose truth is known.

use super::*;
use crate::noise::posterior::Flip;
use crate::noise::scores::ScoreKind;
use crate::workflow::ranking::{filter_rows, rank_rows, Filter};
use crate::workflow::worklist::{listed_head, split_budget};
use ndarray::{array, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn names(k: usize) -> Vec<String> {
    ["a", "b", "c", "d"][..k]
        .iter()
        .map(|s| s.to_string())
        .collect()
}

fn diagnostics(clean_prior: Vec<f64>, expected: f64) -> Diagnostics {
    Diagnostics {
        observed_prior: clean_prior.clone(),
        noise_rate: Vec::new(),
        clean_prior,
        expected_mislabeled: expected,
        expected_mislabeled_share: 0.0,
        condition_number: 1.0,
        calibration_error: 0.0,
        reliability: Vec::new(),
        warnings: Vec::new(),
    }
}

fn inputs<'a>(classes: &'a [String], matrix: &'a Array2<f64>, rows: usize) -> Inputs<'a> {
    Inputs {
        classes,
        matrix: matrix.view(),
        interval: None,
        diagnostics: None,
        sources: None,
        source_intervals: None,
        ranking: None,
        rows,
        listed: &[],
    }
}

#[test]
fn yield_curve_is_the_running_sum_from_zero() {
    // By hand: 0, 0.9, 0.9 + 0.5, 0.9 + 0.5 + 0.1.
    let curve = yield_curve([0.9, 0.5, 0.1].into_iter());
    let want = [0.0, 0.9, 1.4, 1.5];
    assert_eq!(curve.len(), 4);
    curve
        .iter()
        .zip(want)
        .for_each(|(a, b)| assert!((a - b).abs() < 1e-12, "{curve:?}"));
    // Nothing reviewed finds nothing; NaN counts 0, out-of-range values are clipped.
    assert_eq!(yield_curve(std::iter::empty()), vec![0.0]);
    assert_eq!(
        yield_curve([f64::NAN, 1.5, -0.2].into_iter()),
        vec![0.0, 0.0, 1.0, 1.0]
    );
}

#[test]
fn binomial_spread_matches_the_textbook_binomial() {
    // Binomial(n, p) has variance n·p·(1 − p): n = 4, p = ½ gives 1; n = 100, p = 0.1
    // gives 9 (any probability textbook).
    assert!((binomial_spread([0.5; 4].into_iter()) - 1.0).abs() < 1e-12);
    assert!((binomial_spread([0.1; 100].into_iter()) - 3.0).abs() < 1e-12);
    assert_eq!(binomial_spread(std::iter::empty()), 0.0);
}

#[test]
fn the_count_interval_covers_the_realised_count_about_90_percent_of_the_time() {
    // Seeded simulation with a known truth: each row is wrong with its own known
    // probability p (p = u², u uniform: many small, some large). The realised count
    // falls inside Σp ± z₀.₉₅·√Σp(1 − p) in about 90 % of 400 tables (Poisson-binomial,
    // normal approximation). Poisson's variance Σp would cover ~0.99, no spread ~0.
    let mut covered = 0;
    let trials = 400;
    for seed in 0..trials {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let p: Vec<f64> = (0..2000).map(|_| rng.random::<f64>().powi(2)).collect();
        let realised = p.iter().filter(|&&p| rng.random::<f64>() < p).count() as f64;
        let expected = *yield_curve(p.iter().copied()).last().unwrap();
        let half = Z_90 * binomial_spread(p.iter().copied());
        covered += usize::from((realised - expected).abs() <= half);
    }
    let coverage = covered as f64 / trials as f64;
    assert!((0.86..=0.94).contains(&coverage), "coverage {coverage}");
}

#[test]
fn posterior_p_wrong_is_calibrated_against_drawn_labels() {
    // The generative model of a flip matrix: true class from the clean posterior q(x),
    // observed class from row T[true]. Then P(true ≠ observed | x, observed) is Bayes'
    // rule, so the posterior score's p_wrong summed over the rows should match the
    // number of drawn wrong labels within its binomial spread (checked over 200 seeded
    // tables: the share inside the 90 % band).
    let t = array![[0.8, 0.15, 0.05], [0.1, 0.7, 0.2], [0.0, 0.25, 0.75]];
    let mut covered = 0;
    let trials = 200;
    for seed in 0..trials {
        let mut rng = ChaCha8Rng::seed_from_u64(1000 + seed);
        let n = 1500;
        let mut clean = Array2::<f32>::zeros((n, 3));
        let mut labels = vec![0usize; n];
        let mut wrong = 0usize;
        for r in 0..n {
            let w: Vec<f64> = (0..3).map(|_| rng.random::<f64>().powi(3)).collect();
            let total: f64 = w.iter().sum();
            (0..3).for_each(|c| clean[[r, c]] = (w[c] / total) as f32);
            let truth = draw(
                &mut rng,
                &(0..3).map(|c| clean[[r, c]] as f64).collect::<Vec<_>>(),
            );
            labels[r] = draw(&mut rng, &t.row(truth).to_vec());
            wrong += usize::from(labels[r] != truth);
        }
        let ranking = rank_rows(
            clean.view(),
            &labels,
            Flip::clean(&t),
            ScoreKind::Posterior,
            0,
        );
        let p: Vec<f64> = p_wrong_in_rank_order(&ranking).unwrap().collect();
        let half = Z_90 * binomial_spread(p.iter().copied());
        let expected = ranking.expected_errors.unwrap();
        covered += usize::from((wrong as f64 - expected).abs() <= half);
    }
    let coverage = covered as f64 / trials as f64;
    assert!((0.84..=0.96).contains(&coverage), "coverage {coverage}");
}

fn draw(rng: &mut ChaCha8Rng, weights: &[f64]) -> usize {
    let mut u = rng.random::<f64>() * weights.iter().sum::<f64>();
    for (i, w) in weights.iter().enumerate() {
        if u < *w {
            return i;
        }
        u -= w;
    }
    weights.len() - 1
}

#[test]
fn the_band_weights_the_noise_rate_intervals_by_the_class_shares() {
    // Worked by hand: π = (0.6, 0.4), noise rates 0.1 and 0.2 → share 0.14; their
    // intervals (0.05–0.15) and (0.1–0.3) → 0.07 and 0.21. 1,000 rows, no ranking (so no
    // binomial part): 140 rows, interval 70–210.
    let classes = names(2);
    let t = array![[0.9, 0.1], [0.2, 0.8]];
    let band = Interval {
        low: array![[0.85, 0.05], [0.1, 0.7]],
        high: array![[0.95, 0.15], [0.3, 0.9]],
    };
    let d = diagnostics(vec![0.6, 0.4], 140.0);
    let mut i = inputs(&classes, &t, 1000);
    i.diagnostics = Some(&d);
    let without = summarize(&i).mislabelled.unwrap();
    assert_eq!(without.interval, None, "no interval before the bootstrap");
    i.interval = Some(&band);
    let m = summarize(&i).mislabelled.unwrap();
    assert!((m.rows - 140.0).abs() < 1e-9 && (m.share - 0.14).abs() < 1e-12);
    let [low, high] = m.interval.unwrap();
    assert!(
        (low - 70.0).abs() < 1e-9 && (high - 210.0).abs() < 1e-9,
        "{low} {high}"
    );
    assert!(!m.spread_included);
    let [sl, sh] = m.share_interval(1000).unwrap();
    assert!((sl - 0.07).abs() < 1e-12 && (sh - 0.21).abs() < 1e-12);
    // The noisiest class first, with 1 − the diagonal's interval.
    let classes = summarize(&i).noisiest_classes;
    assert_eq!(classes[0].name, "b");
    let [a, b] = classes[0].interval.unwrap();
    assert!(
        (classes[0].rate - 0.2).abs() < 1e-12 && (a - 0.1).abs() < 1e-12 && (b - 0.3).abs() < 1e-12
    );
}

#[test]
fn with_a_ranking_the_count_is_its_p_wrong_sum_and_the_spread_adds_in_quadrature() {
    // Self-confidence on three rows: p_wrong = 0.1, 0.8, 0.6 (1 − p(observed)).
    let probs = array![[0.9f32, 0.1], [0.2, 0.8], [0.6, 0.4]];
    let labels = [0, 0, 1];
    let eye = Array2::eye(2);
    let ranking = rank_rows(
        probs.view(),
        &labels,
        Flip::noisy(&eye),
        ScoreKind::SelfConfidence,
        0,
    );
    let classes = names(2);
    let t = array![[0.9, 0.1], [0.2, 0.8]];
    let band = Interval {
        low: array![[0.85, 0.05], [0.1, 0.7]],
        high: array![[0.95, 0.15], [0.3, 0.9]],
    };
    let d = diagnostics(vec![0.5, 0.5], 99.0);
    let mut i = inputs(&classes, &t, 3);
    i.ranking = Some(&ranking);
    i.diagnostics = Some(&d);
    i.interval = Some(&band);
    let table: Vec<u32> = (0..3).collect();
    let top_two = listed_head(&ranking, &table, 2);
    i.listed = &top_two;
    let o = summarize(&i);
    let m = o.mislabelled.unwrap();
    assert!(
        (m.rows - 1.5).abs() < 1e-6,
        "the ranking's Σ p_wrong, not the diagnostics'"
    );
    assert!(m.spread_included);
    // By hand: band below = above = 3 · 0.5·(0.05 + 0.1) = 0.225 rows; binomial
    // variance 0.09 + 0.16 + 0.24 = 0.49, so 1.645 · 0.7; both in quadrature.
    let half = 0.225f64.hypot(Z_90 * 0.7);
    let [low, high] = m.interval.unwrap();
    assert!((low - (1.5 - half)).abs() < 1e-6 && (high - (1.5 + half)).abs() < 1e-6);
    // Reviewing the top two rows (p 0.8 and 0.6) should find 1.4.
    let review = o.review.unwrap();
    assert_eq!(review.rows, 2);
    assert!((review.expected - 1.4).abs() < 1e-6);
    // A budget beyond the rows reviews them all.
    let all = listed_head(&ranking, &table, 10);
    i.listed = &all;
    assert_eq!(summarize(&i).review.unwrap().rows, 3);
}

/// Eight rows of two classes scored by self-confidence, p_wrong = 1 − p(observed):
/// rows 0–4 observed as class 0 with p_wrong 0.9, 0.2, 0.7, 0.5, 0.05; rows 5–7 as
/// class 1 with 0.95, 0.8, 0.1.
fn eight_rows() -> (Ranking, Vec<usize>) {
    let p_wrong = [0.9f32, 0.2, 0.7, 0.5, 0.05, 0.95, 0.8, 0.1];
    let labels = vec![0, 0, 0, 0, 0, 1, 1, 1];
    let mut probs = Array2::<f32>::zeros((8, 2));
    for (r, (&p, &l)) in p_wrong.iter().zip(&labels).enumerate() {
        probs[[r, l]] = 1.0 - p;
        probs[[r, 1 - l]] = p;
    }
    let eye = Array2::eye(2);
    let ranking = rank_rows(
        probs.view(),
        &labels,
        Flip::noisy(&eye),
        ScoreKind::SelfConfidence,
        0,
    );
    (ranking, labels)
}

/// The worklist head of `eight_rows` with only class 0 shown, a budget of 4 and a
/// quarter of it for control rows: the filtered table and the head.
fn filtered_head(ranking: &Ranking, labels: &[usize]) -> (Vec<u32>, Vec<(RowScore, usize)>) {
    let filter = Filter {
        observed: Some(0),
        suggested: None,
        source: None,
        min_score: 0.0,
    };
    let table = filter_rows(ranking, labels, None, &filter);
    let (suspects, control) = split_budget(4, 0.25);
    assert_eq!((suspects, control), (3, 1));
    let head = listed_head(ranking, &table, suspects);
    (table, head)
}

#[test]
fn the_overview_and_the_yield_plot_get_the_same_figure_from_the_worklist_head() {
    let (ranking, labels) = eight_rows();
    let (table, head) = filtered_head(&ranking, &labels);
    // The Overview's route: the summary of inputs holding the head.
    let classes = names(2);
    let t = array![[0.9, 0.1], [0.2, 0.8]];
    let mut i = inputs(&classes, &t, 8);
    i.ranking = Some(&ranking);
    i.listed = &head;
    let overview = summarize(&i).review.unwrap();
    // The yield plot's route: the head itself, and its curve over the filtered table.
    let plot = worklist_yield(ranking.kind, &head).unwrap();
    assert_eq!(overview, plot);
    let curve = yield_curve(
        table
            .iter()
            .filter_map(|&p| ranking.kind.probability(ranking.ranked[p as usize].score)),
    );
    assert!((curve[head.len()] - plot.expected).abs() < 1e-12);
    // Not the whole budget over the whole ranking (0.95 + 0.9 + 0.8 + 0.7), as the
    // Overview once counted.
    assert!((plot.expected - 3.35).abs() > 1.0);
}

#[test]
fn the_worklist_figure_is_the_p_wrong_sum_of_its_listed_rows() {
    let (ranking, labels) = eight_rows();
    let (_, head) = filtered_head(&ranking, &labels);
    // By hand: class 0's rows by p_wrong are 0 (0.9), 2 (0.7), 3 (0.5), 1, 4; the budget
    // of 4 less 1 control row lists the first three, ranked 2nd, 4th and 5th of all.
    let rows: Vec<(usize, usize)> = head.iter().map(|(s, rank)| (s.row, *rank)).collect();
    assert_eq!(rows, [(0, 2), (2, 4), (3, 5)]);
    let y = worklist_yield(ranking.kind, &head).unwrap();
    assert_eq!(y.rows, 3);
    assert!((y.expected - 2.1).abs() < 1e-6, "{}", y.expected);
    // Binomial variance 0.09 + 0.21 + 0.25 = 0.55.
    let half = Z_90 * 0.55f64.sqrt();
    assert!((y.interval[0] - (2.1 - half)).abs() < 1e-6);
    assert!((y.interval[1] - (2.1 + half).min(3.0)).abs() < 1e-6);
    // The margin score gives no probability, so no figure, even for the same rows.
    assert_eq!(worklist_yield(ScoreKind::Margin, &head), None);
}

#[test]
fn flips_are_the_largest_off_diagonal_cells_in_words() {
    let classes = names(3);
    let t = array![[0.70, 0.14, 0.16], [0.05, 0.93, 0.02], [0.14, 0.006, 0.854]];
    let band = Interval {
        low: &t * 0.8,
        high: (&t * 1.2).mapv(|v: f64| v.min(1.0)),
    };
    let mut i = inputs(&classes, &t, 10);
    i.interval = Some(&band);
    let flips = summarize(&i).largest_flips;
    let cells: Vec<(usize, usize)> = flips.iter().map(|f| (f.true_class, f.observed)).collect();
    // 0.16, then the tie 0.14 / 0.14 in class order, 0.05, 0.02; 0.006 is sixth.
    assert_eq!(cells, vec![(0, 2), (0, 1), (2, 0), (1, 0), (1, 2)]);
    assert_eq!(flips[1].words(), "a typed as b: 14 % (11–17 %)");
    assert_eq!(flips[4].words(), "b typed as c: 2.0 % (1.6–2.4 %)");
    i.interval = None;
    assert_eq!(summarize(&i).largest_flips[1].words(), "a typed as b: 14 %");
}

#[test]
fn nothing_to_summarise_gives_empty_parts_not_a_panic() {
    // One class, no rows, nothing ranked.
    let one = names(1);
    let t = array![[1.0]];
    let o = summarize(&inputs(&one, &t, 0));
    assert!(o.largest_flips.is_empty() && o.mislabelled.is_none() && o.review.is_none());
    assert_eq!(o.noisiest_classes.len(), 1);
    // NaN cells are left out; a band of the wrong shape is ignored.
    let classes = names(2);
    let t = array![[f64::NAN, f64::NAN], [0.3, 0.7]];
    let wrong = Interval {
        low: Array2::zeros((3, 3)),
        high: Array2::zeros((3, 3)),
    };
    let d = diagnostics(vec![0.5, 0.5], f64::NAN);
    let mut i = inputs(&classes, &t, 5);
    i.interval = Some(&wrong);
    i.diagnostics = Some(&d);
    let o = summarize(&i);
    assert_eq!(o.largest_flips.len(), 1);
    assert_eq!(o.noisiest_classes.len(), 1);
    assert!(o.mislabelled.is_none(), "a NaN count is not shown");
    // The margin score has no p_wrong: no yield, the diagnostics' count instead.
    let probs = array![[0.9f32, 0.1], [0.2, 0.8]];
    let eye = Array2::eye(2);
    let r = rank_rows(
        probs.view(),
        &[0, 0],
        Flip::noisy(&eye),
        ScoreKind::Margin,
        0,
    );
    let d = diagnostics(vec![0.5, 0.5], 0.7);
    let t = array![[0.9, 0.1], [0.2, 0.8]];
    let mut i = inputs(&classes, &t, 2);
    i.ranking = Some(&r);
    i.diagnostics = Some(&d);
    let head = listed_head(&r, &[0, 1], 2);
    i.listed = &head;
    let o = summarize(&i);
    assert!(o.review.is_none() && p_wrong_in_rank_order(&r).is_none());
    assert!((o.mislabelled.unwrap().rows - 0.7).abs() < 1e-12);
}

#[test]
fn percents_read_as_people_write_them() {
    assert_eq!(percent(0.1412), "14 %");
    assert_eq!(percent(0.032), "3.2 %");
    assert_eq!(percent(f64::NAN), "–");
    assert_eq!(percent_with(0.14, Some([0.11, f64::NAN])), "14 %");
}
