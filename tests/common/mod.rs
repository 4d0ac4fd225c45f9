//! A small harness for running the built `flipmend` binary in integration tests.

#![allow(dead_code)]

#[cfg(feature = "gui")]
pub mod app;

use std::path::{Path, PathBuf};
use std::process::Command;

use flipmend::learn::{out_of_fold, OofParams};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// What one run of the binary produced.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl Run {
    /// Asserts a bad-input exit (code 2) whose message contains every one of `parts`,
    /// and that nothing panicked.
    pub fn assert_bad_input(&self, parts: &[&str]) {
        assert_eq!(
            self.code, 2,
            "expected exit 2\nstdout: {}\nstderr: {}",
            self.stdout, self.stderr
        );
        assert!(!self.stderr.contains("panicked"), "panic: {}", self.stderr);
        assert_eq!(
            self.stderr.lines().count(),
            1,
            "one line of error: {}",
            self.stderr
        );
        for part in parts {
            assert!(
                self.stderr.contains(part),
                "stderr lacks {part:?}: {}",
                self.stderr
            );
        }
    }

    /// Asserts success.
    pub fn assert_ok(&self) {
        assert_eq!(
            self.code, 0,
            "expected success\nstdout: {}\nstderr: {}",
            self.stdout, self.stderr
        );
    }
}

/// Runs `flipmend` with `args`.
pub fn flipmend(args: &[&str]) -> Run {
    let output = Command::new(env!("CARGO_BIN_EXE_flipmend"))
        .args(args)
        .output()
        .expect("the binary runs");
    Run {
        code: output.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&output.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&output.stderr).into_owned(),
    }
}

/// Path of a fixture in `tests/data`.
pub fn fixture(name: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
        .to_string_lossy()
        .into_owned()
}

/// A temporary folder that is removed when dropped.
pub struct TempDir(tempfile::TempDir);

impl TempDir {
    pub fn new() -> Self {
        TempDir(tempfile::tempdir().expect("a temp dir"))
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.0.path().join(name)
    }

    /// Names of the files in the folder, sorted.
    pub fn files(&self) -> Vec<String> {
        let mut names: Vec<String> = std::fs::read_dir(self.0.path())
            .expect("readable")
            .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        names
    }
}

/// Iris (UCI, as shipped by linfa-datasets) replicated ten times with small seeded jitter:
/// its class structure, with enough rows that estimator variance does not dominate.
pub fn iris_x10(seed: u64) -> (Array2<f64>, Vec<usize>) {
    let iris = linfa_datasets::iris();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let n = iris.records.nrows();
    let x = Array2::from_shape_fn((n * 10, 4), |(r, c)| {
        iris.records[[r % n, c]] + 0.05 * (rng.random::<f64>() - 0.5)
    });
    (x, (0..n * 10).map(|r| iris.targets[r % n]).collect())
}

/// Observed labels drawn as observed ~ Categorical(T[true]), independently per row (seeded).
pub fn flip(truth: &[usize], t: &Array2<f64>, seed: u64) -> Vec<usize> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    truth
        .iter()
        .map(|&y| {
            let u: f64 = rng.random();
            let mut acc = 0.0;
            (0..t.ncols())
                .find(|&j| {
                    acc += t[[y, j]];
                    u < acc
                })
                .unwrap_or(t.ncols() - 1)
        })
        .collect()
}

/// Labels flipped from `t` (seeded) and 5-fold out-of-fold probabilities of them, with
/// the same seed for the folds.
pub fn flipped_and_probabilities(
    records: &Array2<f64>,
    truth: &[usize],
    t: &Array2<f64>,
    seed: u64,
) -> (Vec<usize>, Array2<f32>) {
    let observed = flip(truth, t, seed);
    let params = OofParams {
        folds: 5,
        seed,
        ..Default::default()
    };
    let probs = out_of_fold(
        records.view(),
        &observed,
        t.nrows(),
        &params,
        &mut |_, _| true,
    )
    .unwrap()
    .probs;
    (observed, probs)
}

/// Three Gaussian classes (unit variance, means on a triangle of side `sep`) in two
/// dimensions: softmax regression is the exact Bayes model for such clean data, so
/// estimators that rely on the model's probabilities can be judged on their own merits.
pub fn gaussian_classes(n: usize, sep: f64, seed: u64) -> (Array2<f64>, Vec<usize>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let means = [(0.0, 0.0), (sep, 0.0), (sep / 2.0, sep * 0.866)];
    let truth: Vec<usize> = (0..n).map(|r| r % 3).collect();
    let mut x = Array2::zeros((n, 2));
    for r in 0..n {
        let (mx, my) = means[truth[r]];
        // Box–Muller: two independent standard normals from two uniforms.
        let (u, v): (f64, f64) = (rng.random::<f64>().max(1e-300), rng.random());
        let radius = (-2.0 * u.ln()).sqrt();
        x[[r, 0]] = mx + radius * (std::f64::consts::TAU * v).cos();
        x[[r, 1]] = my + radius * (std::f64::consts::TAU * v).sin();
    }
    (x, truth)
}

/// Pair noise (Han et al., NeurIPS 2018): T[i][i] = 1 − r, T[i][i+1 mod K] = r.
pub fn pair_flip(k: usize, r: f64) -> Array2<f64> {
    Array2::from_shape_fn((k, k), |(i, j)| {
        if i == j {
            1.0 - r
        } else if j == (i + 1) % k {
            r
        } else {
            0.0
        }
    })
}
