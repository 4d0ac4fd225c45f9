//! The estimators against hand-worked examples and seeded simulations.

use super::anchors::*;
use super::*;
use ndarray::array;

fn names() -> Vec<String> {
    vec!["a".into(), "b".into(), "c".into()]
}

/// Eight rows, three classes, for the anchor-point estimators (values chosen by hand).
fn eight() -> (Array2<f32>, Vec<usize>) {
    let p = array![
        [0.90, 0.05, 0.05], // 0
        [0.70, 0.20, 0.10], // 1
        [0.60, 0.30, 0.10], // 2
        [0.10, 0.80, 0.10], // 3
        [0.20, 0.70, 0.10], // 4
        [0.05, 0.15, 0.80], // 5
        [0.10, 0.30, 0.60], // 6
        [0.30, 0.30, 0.40], // 7
    ];
    (p, vec![0, 0, 1, 1, 1, 2, 2, 2])
}

fn run(
    method: Method,
    p: &Array2<f32>,
    labels: &[usize],
    trusted: Option<&[Option<usize>]>,
) -> Result<Estimate> {
    let rows: Vec<usize> = (0..labels.len()).collect();
    let sample = Sample {
        probs: p.view(),
        labels,
        trusted,
        origins: None,
        rows: &rows,
        own_probabilities: false,
    };
    estimate(&method, &sample, &names())
}

fn close(t: &Array2<f64>, expected: &[[f64; 3]; 3]) {
    for i in 0..3 {
        for j in 0..3 {
            assert!(
                (t[[i, j]] - expected[i][j]).abs() < 1e-6,
                "T[{i}][{j}] = {} vs {}",
                t[[i, j]],
                expected[i][j]
            );
        }
    }
}

#[test]
fn anchor_takes_each_columns_argmax_row() {
    // Column maxima (Patrini et al. 2017, anchor points): a → row 0, b → row 3, c → row 5.
    let (p, y) = eight();
    let t = run(Method::Anchor, &p, &y, None).unwrap().matrix;
    close(
        &t,
        &[[0.90, 0.05, 0.05], [0.10, 0.80, 0.10], [0.05, 0.15, 0.80]],
    );
}

#[test]
fn quantile_takes_the_largest_value_below_the_higher_quantile() {
    // q = 0.8, n = 8: index ⌈0.8·7⌉ = ⌈5.6⌉ = 6 of the sorted column.
    // a sorted: .05 .10 .10 .20 .30 .60 .70 .90 → threshold .70; largest below: .60 (row 2).
    // b sorted: .05 .15 .20 .30 .30 .30 .70 .80 → threshold .70; largest below: .30 (row 2, first).
    // c sorted: .05 .10 .10 .10 .10 .40 .60 .80 → threshold .60; largest below: .40 (row 7).
    let (p, y) = eight();
    let t = run(Method::Quantile { q: 0.8 }, &p, &y, None)
        .unwrap()
        .matrix;
    close(
        &t,
        &[[0.60, 0.30, 0.10], [0.60, 0.30, 0.10], [0.30, 0.30, 0.40]],
    );
    let mut column = vec![0.05f32, 0.9, 0.1, 0.1, 0.2, 0.3, 0.6, 0.7];
    assert_eq!(quantile_higher(&mut column, 0.8), 0.7);
}

#[test]
fn trusted_averages_only_the_rows_audited_at_random() {
    // The audit of trusted_averages_the_audited_rows plus rows 1 and 4 reviewed (as a
    // and as c): reviewed rows were chosen, so the average leaves them out and says so.
    let (p, y) = eight();
    let trusted = [
        Some(0),
        Some(0),
        Some(0),
        Some(1),
        Some(2),
        None,
        Some(2),
        Some(2),
    ];
    let mut origins = [Origin::Audit; 8];
    origins[1] = Origin::Review;
    origins[4] = Origin::Control;
    let rows: Vec<usize> = (0..8).collect();
    let sample = Sample {
        probs: p.view(),
        labels: &y,
        trusted: Some(&trusted),
        origins: Some(&origins),
        rows: &rows,
        own_probabilities: false,
    };
    let method = Method::Trusted {
        fallback_quantile: None,
    };
    let e = estimate(&method, &sample, &names()).unwrap();
    close(
        &e.matrix,
        &[[0.75, 0.175, 0.075], [0.10, 0.80, 0.10], [0.20, 0.30, 0.50]],
    );
    assert!(e.warnings[0].starts_with("2 trusted label(s) from reviews left out"));
}

#[test]
fn trusted_averages_the_audited_rows() {
    // Trusted: rows 0 and 2 are a, row 3 is b, rows 6 and 7 are c.
    let (p, y) = eight();
    let trusted = [
        Some(0),
        None,
        Some(0),
        Some(1),
        None,
        None,
        Some(2),
        Some(2),
    ];
    let t = run(
        Method::Trusted {
            fallback_quantile: None,
        },
        &p,
        &y,
        Some(&trusted),
    )
    .unwrap()
    .matrix;
    close(
        &t,
        &[[0.75, 0.175, 0.075], [0.10, 0.80, 0.10], [0.20, 0.30, 0.50]],
    );
    let partial = [Some(0), None, None, None, None, None, Some(2), None];
    let err = run(
        Method::Trusted {
            fallback_quantile: None,
        },
        &p,
        &y,
        Some(&partial),
    )
    .unwrap_err();
    assert!(
        err.to_string()
            .contains("no trusted rows for the class(es) b"),
        "{err}"
    );
    let fallback = run(
        Method::Trusted {
            fallback_quantile: Some(0.8),
        },
        &p,
        &y,
        Some(&partial),
    )
    .unwrap();
    let row_b: Vec<f64> = fallback.matrix.row(1).to_vec();
    assert!(
        row_b
            .iter()
            .zip([0.6, 0.3, 0.1])
            .all(|(a, b)| (a - b).abs() < 1e-6),
        "{row_b:?}"
    );
    assert!(fallback.warnings[0].contains("'b' has no trusted rows"));
}

#[test]
fn counting_by_hand() {
    // Ten rows worked by hand from Northcutt et al. (2021), Sec. 3.1:
    let p = array![
        [0.8, 0.1, 0.1], // y=a
        [0.7, 0.2, 0.1], // y=a
        [0.2, 0.7, 0.1], // y=a
        [0.6, 0.3, 0.1], // y=a
        [0.1, 0.8, 0.1], // y=b
        [0.2, 0.6, 0.2], // y=b
        [0.1, 0.2, 0.7], // y=b
        [0.1, 0.1, 0.8], // y=c
        [0.1, 0.2, 0.7], // y=c
        [0.5, 0.1, 0.4], // y=c
    ];
    let y = [0, 0, 0, 0, 1, 1, 1, 2, 2, 2];
    // Thresholds: t_a = (.8+.7+.2+.6)/4 = .575, t_b = (.8+.6+.2)/3 = .5333, t_c = (.8+.7+.4)/3 = .6333.
    // Confident joint C[observed][true]:
    //   row 0 a≥.575 → (a,a); row 1 → (a,a); row 2 b=.7≥.533 → (a,b); row 3 a=.6≥.575 → (a,a);
    //   row 4 → (b,b); row 5 b=.6 → (b,b); row 6 c=.7≥.633 → (b,c);
    //   row 7 → (c,c); row 8 c=.7 → (c,c); row 9 a=.5 < .575, c=.4 < .633 → not counted.
    //   C = [[3,1,0],[0,2,1],[0,0,2]]; observed counts n = (4, 3, 3).
    // Calibrated: row a ×4/4 = [3,1,0]; row b ×3/3 = [0,2,1]; row c ×3/2 = [0,0,3];
    //   total 10 → Q = [[.3,.1,0],[0,.2,.1],[0,0,.3]].
    // T[j][i] = Q[i][j] / Σ_i Q[i][j]: column a = (.3,0,0) → T[a] = (1,0,0);
    //   column b = (.1,.2,0) → T[b] = (1/3, 2/3, 0); column c = (0,.1,.3) → T[c] = (0, 1/4, 3/4).
    let t = run(Method::Counting, &p, &y, None).unwrap().matrix;
    close(
        &t,
        &[
            [1.0, 0.0, 0.0],
            [1.0 / 3.0, 2.0 / 3.0, 0.0],
            [0.0, 0.25, 0.75],
        ],
    );
}

#[test]
fn results_are_row_stochastic_and_a_bad_quantile_is_refused() {
    let (p, y) = eight();
    for method in [
        Method::Anchor,
        Method::Quantile { q: 0.97 },
        Method::Counting,
    ] {
        let t = run(method, &p, &y, None).unwrap().matrix;
        assert!(validate(&t).is_ok());
    }
    assert!(run(Method::Quantile { q: 1.5 }, &p, &y, None).is_err());
    assert!(run(Method::Quantile { q: 0.0 }, &p, &y, None).is_err());
}

/// A seeded stream of uniform f32 in [0, 1) (a plain LCG; tests need no rand).
fn uniform(seed: u64) -> impl FnMut() -> f32 {
    let mut state = seed;
    move || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 40) as f32 / (1u64 << 24) as f32
    }
}

#[test]
fn column_quantiles_equal_the_quantile_of_the_copied_column() {
    // Columns with many ties, values spread over many magnitudes and tiny values, and
    // rows repeated as a bootstrap resample repeats them: the two-pass bucket search
    // must give exactly numpy's "higher" quantile of the copied column.
    let mut next = uniform(11);
    let (n, k) = (5000, 7);
    let probs = Array2::from_shape_fn((n, k), |(_, c)| {
        let u = next();
        match c % 3 {
            0 => (u * 20.0).floor() / 20.0,
            1 => u.powi(6),
            _ => u * 1e-3,
        }
    });
    let rows: Vec<usize> = (0..n).map(|i| (i * 7919) % n).chain(0..300).collect();
    for q in [0.0, 0.3, 0.97, 0.999, 1.0] {
        let fast = column_quantiles(probs.view(), &rows, q);
        for (c, value) in fast.iter().enumerate() {
            let mut column: Vec<f32> = rows.iter().map(|&r| probs[[r, c]]).collect();
            let expected = quantile_higher(&mut column, q);
            assert_eq!(value.to_bits(), expected.to_bits(), "q {q}, column {c}");
        }
    }
}
