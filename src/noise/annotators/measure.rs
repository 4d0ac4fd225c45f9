//! The measurements behind DEFAULT_SMOOTHING, BOOTSTRAP_WIDENING and
//! WILSON_DESIGN_EFFECT: `cargo test --lib measure_ -- --ignored --nocapture`.

use super::*;

/// One annotator's interval from a simulation, with its known truth.
struct IntervalRow {
    truth: f64,
    point: f64,
    /// Bootstrap half-width at widening factor 1.
    half: f64,
    items: f64,
}

fn interval_rows(seeds: u64, items: usize, per_item: (usize, usize)) -> Vec<IntervalRow> {
    let mut rows = Vec::new();
    for seed in 0..seeds {
        let classes = 3 + (seed % 3) as usize;
        let sim = simulate(100 + seed, items, classes, &SPREAD, per_item);
        let params = ConsensusParams {
            resamples: 100,
            seed,
            ..Default::default()
        };
        let fit = run(&sim, None, &params);
        for (report, truth) in fit.annotators.iter().zip(sim.true_accuracy()) {
            let (point, items) = (report.accuracy, report.items as f64);
            let half = (point - report.accuracy_low) / BOOTSTRAP_WIDENING;
            rows.push(IntervalRow {
                truth,
                point,
                half,
                items,
            });
        }
    }
    rows
}

#[test]
#[ignore = "measurement; run with --ignored --nocapture"]
fn measure_coverage() {
    for (items, per_item) in [
        (500, (2, 4)),
        (1_000, (2, 4)),
        (2_000, (2, 4)),
        (1_000, (3, 5)),
    ] {
        let rows = interval_rows(20, items, per_item);
        let share = |inside: &dyn Fn(&IntervalRow) -> bool| {
            rows.iter().filter(|r| inside(r)).count() as f64 / rows.len() as f64
        };
        print!("items {items} per item {per_item:?}:");
        for factor in [0.9, 1.0, 1.1, 1.2] {
            let c = share(&|r| (r.truth - r.point).abs() <= factor * r.half);
            print!(" boot×{factor} {c:.3}");
        }
        for effect in [1.0, 1.5, WILSON_DESIGN_EFFECT, 2.0] {
            let c = share(&|r| {
                let (low, high) = wilson_interval(r.point, r.items / effect);
                (low..=high).contains(&r.truth)
            });
            print!(" Wilson n/{effect} {c:.3}");
        }
        println!();
    }
}

/// Matrix error, accuracy bias and consensus accuracy at one smoothing.
fn smoothing_errors(items: usize, smoothing: f64) -> (f64, f64, f64) {
    let (mut matrix, mut bias, mut right) = (0.0, 0.0, 0.0);
    for seed in 0..20 {
        let sim = simulate(200 + seed, items, 4, &SPREAD, (2, 4));
        let fit = run(
            &sim,
            None,
            &ConsensusParams {
                smoothing,
                ..Default::default()
            },
        );
        for (a, truth) in sim.true_accuracy().into_iter().enumerate() {
            let report = &fit.annotators[a];
            matrix += mean_abs_error(&report.matrix, &sim.confusion[a]) / 100.0;
            bias += (report.accuracy - truth) / 100.0;
        }
        right += share_right(&sim.truth, fit.consensus.iter().copied()) / 20.0;
    }
    (matrix, bias, right)
}

#[test]
#[ignore = "measurement; run with --ignored --nocapture"]
fn measure_smoothing() {
    for items in [100, 300, 1_000, 2_000] {
        for smoothing in [0.0, 0.01, 0.1, 0.5, 1.0] {
            let (matrix, bias, right) = smoothing_errors(items, smoothing);
            println!(
                "items {items} s {smoothing}: matrix MAE {matrix:.4}, accuracy bias {bias:+.4}, \
                 consensus right {right:.4}"
            );
        }
    }
}
