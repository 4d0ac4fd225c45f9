//! Scores against hand-worked examples, the ranking's order and the selection rules.

use super::*;
use ndarray::array;

#[test]
fn the_key_ranking_is_the_comparison_ranking() {
    // Scores with ties, both zeros, negatives (margins) and tiny differences; the
    // radix path must give exactly the order of total_cmp on score, then row.
    let values = [
        0.5,
        -0.0,
        0.0,
        0.5,
        1.0,
        -1.0,
        0.25,
        0.5 + 1e-16,
        1e-300,
        -0.75,
    ];
    let mut state = 7u64;
    let values: Vec<f64> = (0..5000)
        .map(|_| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            if state >> 63 == 0 {
                values[(state >> 40) as usize % values.len()]
            } else {
                (state >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
            }
        })
        .collect();
    let scores = scored(&values);
    let mut radix = scores.clone();
    rank(&mut radix);
    let mut reference = scores;
    reference.sort_by(|a, b| b.score.total_cmp(&a.score).then(a.row.cmp(&b.row)));
    assert_eq!(radix, reference);
}

/// Rows 0, 1, … with these scores (the other fields do not matter for ranking).
fn scored(scores: &[f64]) -> Vec<RowScore> {
    scores
        .iter()
        .enumerate()
        .map(|(row, &score)| RowScore {
            row,
            score,
            suggested: 0,
            second_choice: 1,
            second_choice_prob: 0.0,
        })
        .collect()
}

fn t3() -> Array2<f64> {
    array![[0.8, 0.1, 0.1], [0.2, 0.7, 0.1], [0.0, 0.3, 0.7]]
}

#[test]
fn posterior_score_by_hand() {
    // T above; clean posterior p = (0.5, 0.3, 0.2) gives the noisy p̃ = Tᵀp
    // (Patrini et al. 2017, Eq. 2): p̃₀ = .8·.5 + .2·.3 + 0·.2 = .46,
    // p̃₁ = .1·.5 + .7·.3 + .3·.2 = .32, p̃₂ = .1·.5 + .1·.3 + .7·.2 = .22.
    // Observed label 1: P(true = k | x, obs = 1) ∝ T[k][1]·p(k) = (.05, .21, .06) / .32
    // = (0.15625, 0.65625, 0.1875). P(wrong) = 1 − 0.65625 = 0.34375, so the score is
    // the odds 0.34375 / 0.65625; suggested 1; second choice 2.
    let probs = array![[0.46f32, 0.32, 0.22]];
    let s = score_rows(
        ScoreKind::Posterior,
        probs.view(),
        &[1],
        Some(Flip::noisy(&t3())),
    )[0];
    assert!((s.score - 0.34375 / 0.65625).abs() < 1e-6, "{s:?}");
    let p = ScoreKind::Posterior.probability(s.score).unwrap();
    assert!((p - 0.34375).abs() < 1e-6, "{p}");
    assert_eq!((s.suggested, s.second_choice), (1, 2));
    assert!((s.second_choice_prob - 0.1875).abs() < 1e-6);
    // Observed label 2: ∝ T[k][2]·p(k) = (.05, .03, .14)/.22 → P(true = 2) = 0.636364;
    // score 0.363636, suggested 2, second choice 0 (0.227273).
    let s = score_rows(
        ScoreKind::Posterior,
        probs.view(),
        &[2],
        Some(Flip::noisy(&t3())),
    )[0];
    let p = ScoreKind::Posterior.shown(s.score);
    assert!((p - (1.0 - 0.14 / 0.22)).abs() < 1e-6);
    assert_eq!((s.suggested, s.second_choice), (2, 0));
}

#[test]
fn self_confidence_and_margin_by_hand() {
    // Northcutt et al. 2021: self-confidence p(observed | x); normalized margin
    // p_observed − max_{j≠observed} p_j (we rank by its negative). Self-confidence
    // ranks by the odds of 1 − p(observed | x) = 0.68: 0.68 / 0.32.
    let probs = array![[0.46f32, 0.32, 0.22]];
    let s = score_rows(ScoreKind::SelfConfidence, probs.view(), &[1], None)[0];
    assert!((s.score - 0.68 / 0.32).abs() < 1e-6);
    assert!((ScoreKind::SelfConfidence.shown(s.score) - 0.68).abs() < 1e-6);
    assert_eq!((s.suggested, s.second_choice), (0, 1));
    let m = score_rows(ScoreKind::Margin, probs.view(), &[1], None)[0];
    assert!((m.score - (0.46 - 0.32)).abs() < 1e-6);
    let m = score_rows(ScoreKind::Margin, probs.view(), &[0], None)[0];
    assert!((m.score - (0.32 - 0.46)).abs() < 1e-6);
}

#[test]
fn labels_almost_certainly_wrong_keep_distinct_scores() {
    // P(wrong) = 1 − ~1e-20 and 1 − ~1e-30 are both 1.0 in f64, so as probabilities
    // these rows would tie and be ordered by row; their odds (written as log-odds) do
    // not. Clean
    // posteriors (0.9… , 1e-20) under a symmetric 10 % flip, observed 1:
    // odds = T[0][1]·p₀ / (T[1][1]·p₁) = 0.1 / (0.9·1e-20). Self-confidence: 1 / 1e-20.
    let t = array![[0.9, 0.1], [0.1, 0.9]];
    let probs = array![[1.0f32, 1e-20], [1.0, 1e-30], [0.5, 0.5]];
    let ln10 = 10f64.ln();
    let cases = [
        (ScoreKind::Posterior, (0.1f64 / 0.9).ln()),
        (ScoreKind::SelfConfidence, 0.0),
    ];
    for (kind, offset) in cases {
        let mut s = score_rows(kind, probs.view(), &[1, 1, 1], Some(Flip::clean(&t)));
        assert!(
            (kind.written(s[0].score) - 20.0 * ln10 - offset).abs() < 1e-3,
            "{kind:?} {s:?}"
        );
        assert!(
            (kind.written(s[1].score) - 30.0 * ln10 - offset).abs() < 1e-3,
            "{kind:?} {s:?}"
        );
        assert_eq!(kind.shown(s[0].score), kind.shown(s[1].score));
        rank(&mut s);
        assert_eq!(s.iter().map(|s| s.row).collect::<Vec<_>>(), vec![1, 0, 2]);
    }
}

#[test]
fn thresholds_given_as_probabilities_map_to_odds_and_back() {
    for p in [0.0, 1e-9, 0.3, 0.5, 0.9, 1.0 - 1e-9, 1.0] {
        let score = ScoreKind::Posterior.from_shown(p);
        assert!((ScoreKind::Posterior.shown(score) - p).abs() < 1e-12, "{p}");
    }
    assert_eq!(ScoreKind::Margin.from_shown(-0.25), -0.25);
    assert_eq!(ScoreKind::Margin.probability(0.3), None);
}

#[test]
fn ranking_breaks_ties_by_row() {
    let mut scores = scored(&[0.5, 0.9, 0.5, 0.1]);
    rank(&mut scores);
    assert_eq!(
        scores.iter().map(|s| s.row).collect::<Vec<_>>(),
        vec![1, 0, 2, 3]
    );
}

#[test]
fn selection_by_top_threshold_cap_and_class() {
    let mut ranked = scored(&[0.9, 0.8, 0.7, 0.6, 0.2]);
    rank(&mut ranked);
    let labels = [0, 0, 1, 0, 1];
    let rows = |s: &Selection| select_rows(ranked.iter().map(|r| (r.row, r.score)), &labels, 2, s);
    assert_eq!(
        rows(&Selection {
            top: Some(2),
            ..Default::default()
        }),
        vec![0, 1]
    );
    assert_eq!(
        rows(&Selection {
            threshold: Some(0.65),
            ..Default::default()
        }),
        vec![0, 1, 2]
    );
    assert_eq!(
        rows(&Selection {
            per_class_cap: Some(1),
            ..Default::default()
        }),
        vec![0, 2]
    );
    assert_eq!(
        rows(&Selection {
            classes: Some(vec![1]),
            top: Some(1),
            ..Default::default()
        }),
        vec![2]
    );
}

#[test]
fn auroc_by_hand() {
    // Positives 0.9, 0.4; negatives 0.5, 0.1: pairs (0.9>0.5, 0.9>0.1, 0.4<0.5, 0.4>0.1) → 3/4.
    assert_eq!(
        auroc(&[0.9, 0.5, 0.4, 0.1], &[true, false, true, false]),
        Some(0.75)
    );
    // A tie between a positive and a negative counts half.
    assert_eq!(auroc(&[0.5, 0.5], &[true, false]), Some(0.5));
    assert_eq!(auroc(&[0.5, 0.7], &[true, true]), None);
}

#[test]
fn every_scoring_path_gives_the_same_scores_with_many_classes() {
    // 20 classes (blocked product) and more rows than one block: the full scores, the
    // scores alone, the scores of chosen rows and the value ranking must agree exactly.
    let (rows, k) = (1000, 20);
    let mut t = Array2::from_elem((k, k), 0.2 / (k - 1) as f64);
    t.diag_mut().fill(0.8);
    let raw = Array2::from_shape_fn((rows, k), |(r, c)| ((r * 31 + c * 17) % 23 + 1) as f32);
    let probs = &raw / &raw.sum_axis(ndarray::Axis(1)).insert_axis(ndarray::Axis(1));
    let labels: Vec<usize> = (0..rows).map(|r| (r * 3) % k).collect();
    for kind in [
        ScoreKind::Posterior,
        ScoreKind::SelfConfidence,
        ScoreKind::Margin,
    ] {
        let full = score_rows(kind, probs.view(), &labels, Some(Flip::noisy(&t)));
        let alone = score_values(kind, probs.view(), &labels, Some(Flip::noisy(&t)));
        assert!(full
            .iter()
            .zip(&alone)
            .all(|(f, a)| f.score.to_bits() == a.to_bits()));
        let chosen: Vec<usize> = (0..rows).rev().step_by(3).collect();
        let some = score_selected(kind, probs.view(), &labels, Some(Flip::noisy(&t)), &chosen);
        for (s, &r) in some.iter().zip(&chosen) {
            assert_eq!(*s, full[r]);
        }
        let mut ranked = full.clone();
        rank(&mut ranked);
        let order: Vec<usize> = ranked.iter().map(|s| s.row).collect();
        assert_eq!(rank_values(&alone, rows), order);
        assert_eq!(rank_values(&alone, 37), order[..37]);
    }
}

#[test]
fn a_cap_and_a_threshold_together() {
    let mut ranked = scored(&[0.9, 0.8, 0.7, 0.6, 0.2, 0.75]);
    rank(&mut ranked);
    let labels = [0, 0, 1, 0, 1, 1];
    let selection = Selection {
        per_class_cap: Some(2),
        threshold: Some(0.5),
        ..Default::default()
    };
    let rows = select_rows(
        ranked.iter().map(|s| (s.row, s.score)),
        &labels,
        2,
        &selection,
    );
    assert_eq!(rows, vec![0, 1, 5, 2]);
}
