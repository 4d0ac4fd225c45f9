//! The ranking, its summaries and its filters on small tables worked by hand.

use super::*;
use crate::noise::posterior::SUM_CHUNK_ROWS;
use crate::noise::scores::{score_selected, score_values};
use ndarray::array;

#[test]
fn filters_keep_rank_order_and_stop_at_the_threshold() {
    // Three rows scored by self-confidence, 1 − p(observed): 0.1, 0.8, 0.6 (ranked by
    // their odds, shown and filtered as these probabilities).
    let probs = array![[0.9f32, 0.1], [0.2, 0.8], [0.6, 0.4]];
    let labels = [0, 0, 1];
    let r = rank_rows(
        probs.view(),
        &labels,
        Flip::noisy(&Array2::eye(2)),
        ScoreKind::SelfConfidence,
        3,
    );
    let order: Vec<usize> = r.ranked.iter().map(|s| s.row).collect();
    assert_eq!(order, vec![1, 2, 0]);
    assert!((r.expected_errors.unwrap() - (0.1 + 0.8 + 0.6)).abs() < 1e-6);
    let all = filter_rows(&r, &labels, None, &Filter::default());
    assert_eq!(all, vec![0, 1, 2]);
    let observed_zero = Filter {
        observed: Some(0),
        ..Default::default()
    };
    assert_eq!(filter_rows(&r, &labels, None, &observed_zero), vec![0, 2]);
    let confident = Filter {
        min_score: 0.7,
        ..Default::default()
    };
    assert_eq!(filter_rows(&r, &labels, None, &confident), vec![0]);
    let suggested_zero = Filter {
        suggested: Some(0),
        ..Default::default()
    };
    assert_eq!(filter_rows(&r, &labels, None, &suggested_zero), vec![1, 2]);
}

/// `rows` rows of spread probabilities over three classes, labels in turn, and a T.
fn three_classes(rows: usize) -> (Array2<f32>, Vec<usize>, Array2<f64>) {
    let probs = Array2::from_shape_fn((rows, 3), |(r, c)| {
        ((r * 7919 + c * 104_729) % 1000) as f32 / 1000.0 + 0.01
    });
    let sums = probs.sum_axis(ndarray::Axis(1));
    let probs = &probs / &sums.insert_axis(ndarray::Axis(1));
    let labels: Vec<usize> = (0..rows).map(|r| r % 3).collect();
    let t = array![[0.8, 0.1, 0.1], [0.2, 0.7, 0.1], [0.05, 0.15, 0.8]];
    (probs, labels, t)
}

#[test]
fn the_expected_count_is_the_command_lines_bit_for_bit() {
    let rows = 3 * SUM_CHUNK_ROWS + 17;
    let (probs, labels, t) = three_classes(rows);
    let kind = ScoreKind::Posterior;
    let r = rank_rows(probs.view(), &labels, Flip::noisy(&t), kind, 1);
    let scores = score_values(kind, probs.view(), &labels, Some(Flip::noisy(&t)));
    let (_, cli) = score_summaries(&scores, kind);
    assert_eq!(r.expected_errors.map(f64::to_bits), cli.map(f64::to_bits));
    // The chunked sum is the plain sum up to rounding.
    let plain: f64 = scores.iter().map(|&s| kind.shown(s)).sum();
    assert!((cli.unwrap() - plain).abs() < 1e-6 * plain);
}

#[test]
fn the_histogram_counts_every_row_once() {
    let probs = array![[1.0f32, 0.0], [0.5, 0.5], [0.0, 1.0], [0.25, 0.75]];
    let labels = [0, 0, 0, 1];
    let r = rank_rows(
        probs.view(),
        &labels,
        Flip::noisy(&Array2::eye(2)),
        ScoreKind::Margin,
        0,
    );
    assert_eq!(r.histogram.counts.iter().sum::<usize>(), 4);
    assert_eq!(r.histogram.low, -1.0);
    // Margins: −1, 0, 1, −0.5 → bins 0, 20, 39 (the top edge), 10.
    for bin in [0, 10, 20, HISTOGRAM_BINS - 1] {
        assert_eq!(r.histogram.counts[bin], 1, "bin {bin}");
    }
    assert_eq!(r.expected_errors, None);
}

#[test]
fn a_finished_head_ranking_is_the_full_ranking() {
    let rows = 2000;
    let (probs, labels, t) = three_classes(rows);
    for kind in [
        ScoreKind::Posterior,
        ScoreKind::SelfConfidence,
        ScoreKind::Margin,
    ] {
        let full = rank_rows(probs.view(), &labels, Flip::noisy(&t), kind, 1);
        let head = rank_rows_head(probs.view(), &labels, Flip::noisy(&t), kind, 1, 100);
        assert!(full.is_complete() && !head.is_complete());
        assert_eq!(head.ranked, full.ranked[..100], "{kind:?}");
        assert_eq!(head.histogram, full.histogram);
        assert_eq!(head.expected_errors, full.expected_errors);
        let done = finish_ranking(&head, probs.view(), &labels);
        assert_eq!(done.ranked, full.ranked);
    }
}

/// Two sources over the rows of `three_classes`: every third row is source 1, which
/// flips far more than source 0.
fn two_sources(rows: usize) -> (Vec<Array2<f64>>, Arc<[u32]>) {
    let calm = array![[0.95, 0.05, 0.0], [0.0, 0.9, 0.1], [0.05, 0.0, 0.95]];
    let loud = array![[0.5, 0.3, 0.2], [0.3, 0.5, 0.2], [0.2, 0.3, 0.5]];
    let of_row: Vec<u32> = (0..rows).map(|r| u32::from(r % 3 == 0)).collect();
    (vec![calm, loud], of_row.into())
}

#[test]
fn a_ranking_by_source_scores_each_row_under_its_sources_matrix() {
    let rows = 900;
    let (probs, labels, _) = three_classes(rows);
    let (matrices, of_row) = two_sources(rows);
    let under = Under {
        kind: ScoreKind::Posterior,
        matrices: Matrices::BySource {
            matrices: matrices.clone(),
            of_row: of_row.clone(),
        },
        clean_inputs: true,
        version: 4,
    };
    let full = rank_all(probs.view(), &labels, under.clone());
    assert_eq!(full.matrix_version, 4);
    // Every row's score is the single-matrix score under its own source's matrix.
    for s in &full.ranked {
        let own = &matrices[of_row[s.row] as usize];
        let alone = score_selected(
            ScoreKind::Posterior,
            probs.view(),
            &labels,
            Some(Flip::clean(own)),
            &[s.row],
        );
        assert_eq!(alone[0], *s, "row {}", s.row);
    }
    let head = rank_head(probs.view(), &labels, under, 50);
    assert_eq!(head.ranked, full.ranked[..50]);
    assert_eq!(head.expected_errors, full.expected_errors);
    let done = finish_ranking(&head, probs.view(), &labels);
    assert_eq!(done.ranked, full.ranked);
}

#[test]
fn a_source_filter_keeps_that_sources_rows_in_rank_order() {
    let rows = 300;
    let (probs, labels, t) = three_classes(rows);
    let (_, of_row) = two_sources(rows);
    let r = rank_rows(
        probs.view(),
        &labels,
        Flip::noisy(&t),
        ScoreKind::Posterior,
        1,
    );
    let loud = Filter {
        source: Some(1),
        ..Default::default()
    };
    let kept = filter_rows(&r, &labels, Some(&of_row), &loud);
    assert_eq!(kept.len(), 100);
    assert!(kept.windows(2).all(|w| w[0] < w[1]), "rank order");
    assert!(kept.iter().all(|&i| r.ranked[i as usize].row % 3 == 0));
    assert!(
        filter_rows(&r, &labels, None, &loud).is_empty(),
        "no sources, no rows of one"
    );
    assert_eq!(
        filter_rows(&r, &labels, None, &Filter::default()).len(),
        rows
    );
}

#[test]
fn a_tally_fed_in_pieces_equals_the_whole_bit_for_bit() {
    // Odd piece sizes straddle the 8,192-row runs of `sum_in_chunks`; the expected count
    // must be the same f64, not merely close, so a streamed run reports the in-memory one.
    let scores: Vec<f64> = (0..50_000u64)
        .map(|i| ((i.wrapping_mul(2_654_435_761) % 10_007) as f64 / 997.0) - 5.0)
        .collect();
    for kind in [ScoreKind::Posterior, ScoreKind::Margin] {
        let whole = score_summaries(&scores, kind);
        let mut tally = ScoreTally::new(kind);
        let mut rest = &scores[..];
        for size in [1, 8_191, 8_193, 3, 30_000] {
            let (piece, after) = rest.split_at(size.min(rest.len()));
            tally.add(piece);
            rest = after;
        }
        tally.add(rest);
        let pieces = tally.finish();
        assert_eq!(pieces.0, whole.0, "{kind:?} histogram");
        assert_eq!(
            pieces.1.map(f64::to_bits),
            whole.1.map(f64::to_bits),
            "{kind:?} expected count"
        );
    }
}

#[test]
fn tallies_of_shares_merged_in_any_order_equal_the_whole() {
    let scores: Vec<f64> = (0..50_000u64)
        .map(|i| (i.wrapping_mul(2_654_435_761) % 10_007) as f64 / 10_007.0)
        .collect();
    let whole = score_summaries(&scores, ScoreKind::Posterior);
    // Shares cut at uneven places, merged last first.
    let cuts = [0, 7, 9_000, 9_001, 31_337, 50_000];
    let mut shares: Vec<ScoreTally> = cuts
        .windows(2)
        .map(|w| {
            let mut t = ScoreTally::new(ScoreKind::Posterior);
            t.add(&scores[w[0]..w[1]]);
            t
        })
        .collect();
    let mut merged = shares.pop().unwrap();
    while let Some(share) = shares.pop() {
        merged.merge(share);
    }
    let (histogram, expected) = merged.finish();
    assert_eq!(histogram, whole.0);
    let (a, b) = (expected.unwrap(), whole.1.unwrap());
    assert!((a - b).abs() < 1e-9 * b, "{a} against {b}");
    // The expected count is the plain sum of the shown probabilities.
    let exact: f64 = scores.iter().map(|&s| ScoreKind::Posterior.shown(s)).sum();
    assert!((a - exact).abs() < 1e-6, "{a} against {exact}");
}
