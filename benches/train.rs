//! Benchmark of the training loop: one objective-and-gradient evaluation of each loss on
//! 200,000 × 32 × 10 (reported as GFLOP/s of its two matrix products, 4·n·d·k flops), a
//! full fit, each correction's fit, and `compare` end to end (from the CSV file).
//!
//! `cargo bench --bench train` (`-- objective`: the evaluations alone). Median of 21
//! runs after a warm-up for one evaluation (5 for the elementary functions, 3 for whole
//! fits). Each evaluation runs twice, through the fused kernel and through the
//! row-at-a-time path it replaced, side by side.

mod common;

use flipmend::data::{Dataset, TableOptions};
use flipmend::learn::fastmath::{exp_nonpositive, ln_positive};
use flipmend::learn::loss::{Backward, Forward, DEFAULT_BACKWARD_CAP};
use flipmend::learn::softmax::objective;
use flipmend::learn::train::{train, Correction, TrainInputs};
use flipmend::learn::{CrossEntropy, OofParams, RowLoss, SoftmaxParams};
use flipmend::noise::linalg::inverse;
use flipmend::noise::Method;
use flipmend::workflow::compare::{
    compare, CompareInputs, CompareSettings, MatrixChoice, ALL_CORRECTIONS,
};
use ndarray::Array2;

fn main() {
    elementary_functions();
    let (n, d, k) = (200_000, 32, 10);
    let (x, labels) = synthetic(n, d, k);
    let t = Array2::from_shape_fn(
        (k, k),
        |(i, j)| if i == j { 0.6 } else { 0.4 / (k - 1) as f64 },
    );
    let t_inv = inverse(&t).expect("invertible");
    let theta: Vec<f64> = (0..k * (d + 1))
        .map(|i| ((i % 7) as f64 - 3.0) * 0.01)
        .collect();
    let mut grad = vec![0.0; theta.len()];
    let losses: [(&str, Box<dyn RowLoss>); 3] = [
        ("cross-entropy", Box::new(CrossEntropy)),
        ("forward", Box::new(Forward::new(t.clone()))),
        (
            "backward (guarded)",
            Box::new(Backward::new(t_inv, Some(DEFAULT_BACKWARD_CAP))),
        ),
    ];
    let flops = 4.0 * (n * d * k) as f64;
    for (name, loss) in &losses {
        // The fused kernel and, side by side, the row-at-a-time path it replaced.
        let by_rows = ByRows(loss.as_ref());
        for (path, loss) in [
            ("fused", loss.as_ref()),
            ("by rows", &by_rows as &dyn RowLoss),
        ] {
            let secs = median(21, || {
                objective(x.view(), &labels, k, loss, 1e-3, &theta, &mut grad);
            });
            println!(
                "objective+gradient {name:<20} {path:<8} 200000x32x10  median {secs:>8.4} s  {:>6.2} GFLOP/s",
                flops / secs / 1e9
            );
        }
    }
    if std::env::args().any(|a| a == "objective") {
        return;
    }
    let rows: Vec<usize> = (0..n).collect();
    let params = SoftmaxParams::default();
    for correction in [Correction::None, Correction::Forward, Correction::Backward] {
        let mut iterations = 0;
        let secs = median(3, || {
            let trained = train(
                x.view(),
                &rows,
                &labels,
                k,
                correction,
                TrainInputs {
                    matrix: Some(&t),
                    probs: None,
                    start: None,
                    cancel: None,
                    by_source: None,
                    standardized: None,
                },
                &params,
            )
            .unwrap();
            iterations = trained.report.iterations;
        });
        println!(
            "fit {:<10} 200000x32x10  median {secs:>8.4} s  ({iterations} iterations)",
            correction.name()
        );
    }
    compare_end_to_end(&x, &labels);
}

/// A loss seen without its fused form, so the objective takes the row-at-a-time path.
struct ByRows<'a>(&'a dyn RowLoss);

impl RowLoss for ByRows<'_> {
    fn loss_and_grad(&self, logits: &mut [f64], label: usize) -> f64 {
        self.0.loss_and_grad(logits, label)
    }

    fn loss_and_grad_at(&self, logits: &mut [f64], label: usize, index: usize) -> f64 {
        self.0.loss_and_grad_at(logits, label, index)
    }
}

/// Our branch-free exp and ln against the library's, side by side, over 1,000,000
/// values in a loop the compiler may vectorise (nanoseconds per value).
fn elementary_functions() {
    let n = 1_000_000;
    let mut rng = common::Rng(0xE1E_F00D);
    let inputs: Vec<f64> = (0..n).map(|_| rng.unit()).collect();
    let exp_inputs: Vec<f64> = inputs.iter().map(|u| -30.0 * u).collect();
    let ln_inputs: Vec<f64> = inputs.iter().map(|u| 1e-4 + u).collect();
    per_value("exp, library, [-30, 0]", &exp_inputs, f64::exp);
    per_value("exp_nonpositive, [-30, 0]", &exp_inputs, exp_nonpositive);
    per_value("ln, library, [1e-4, 1]", &ln_inputs, f64::ln);
    per_value("ln_positive, [1e-4, 1]", &ln_inputs, ln_positive);
}

/// Median time of `f` over `inputs` (generic, so that `f` is inlined into the loop).
fn per_value(name: &str, inputs: &[f64], f: impl Fn(f64) -> f64) {
    let mut out = vec![0.0; inputs.len()];
    let secs = median(5, || {
        for (o, &x) in out.iter_mut().zip(inputs) {
            *o = f(x);
        }
        std::hint::black_box(&out);
    });
    println!(
        "{name:<28} {:>6.2} ns/value",
        secs * 1e9 / inputs.len() as f64
    );
}

/// `compare` end to end on a CSV written to a temporary folder: load, split, out-of-fold
/// probabilities of the training part, quantile T, the four corrections, evaluation.
fn compare_end_to_end(x: &Array2<f64>, labels: &[usize]) {
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("table.csv");
    let mut text = String::from("id");
    (0..x.ncols()).for_each(|j| text.push_str(&format!(",f{j}")));
    text.push_str(",label\n");
    for (r, row) in x.rows().into_iter().enumerate() {
        text.push_str(&r.to_string());
        row.iter().for_each(|v| text.push_str(&format!(",{v:.6}")));
        // Every third row's label moved to the next class: 33 % pair flips.
        let label = if r % 3 == 0 {
            (labels[r] + 1) % 10
        } else {
            labels[r]
        };
        text.push_str(&format!(",c{label}\n"));
    }
    std::fs::write(&path, text).expect("write the table");
    let mut stages = String::new();
    let secs = median(3, || {
        let data = Dataset::load(&path, &TableOptions::default()).unwrap();
        let inputs = CompareInputs {
            data: &data,
            probs: None,
            matrix: MatrixChoice::Estimate(&Method::Quantile { q: 0.97 }),
            test: None,
        };
        let settings = CompareSettings {
            holdout: 0.2,
            fit: OofParams::default(),
            corrections: ALL_CORRECTIONS.to_vec(),
        };
        let done = compare(inputs, &settings, None, &mut |_, _| true).unwrap();
        stages = done.stages.line();
    });
    println!("compare end to end 200000x32x10 (load included)  median {secs:>8.4} s");
    println!("  stages of the last run: {stages}");
}

fn median(runs: usize, run: impl FnMut()) -> f64 {
    common::time(runs, run).0.as_secs_f64()
}

fn synthetic(n: usize, d: usize, k: usize) -> (Array2<f64>, Vec<usize>) {
    let mut rng = common::Rng(0x5EED_7EA1);
    let mut unit = move || rng.unit();
    let means: Vec<f64> = (0..k * d).map(|_| 2.0 * unit() - 1.0).collect();
    let labels: Vec<usize> = (0..n).map(|r| r % k).collect();
    let x = Array2::from_shape_fn((n, d), |(r, j)| {
        means[labels[r] * d + j] + (unit() - 0.5) * 3.0
    });
    (x, labels)
}
