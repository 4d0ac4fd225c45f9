//! Coverage of the flip matrix's 90 % intervals, measured over seeds on simulations with
//! a known generating matrix (three Gaussian classes, where softmax regression is the
//! Bayes model; labels flipped by a seeded draw from T). An honest 90 % interval covers
//! about 90 % of the non-zero cells; the bounds below fail both intervals that are too
//! narrow (the row-resampling percentile interval covered about 0.84) and intervals
//! wide enough to cover everything.

mod common;

use common::{flipped_and_probabilities, gaussian_classes};
use flipmend::noise::bootstrap::bootstrap;
use flipmend::noise::{Method, Sample};
use ndarray::Array2;

#[test]
fn ninety_percent_intervals_cover_about_ninety_percent_of_the_true_cells() {
    let t = Array2::from_shape_vec(
        (3, 3),
        vec![0.75, 0.25, 0.0, 0.0, 0.8, 0.2, 0.15, 0.0, 0.85],
    )
    .unwrap();
    let names: Vec<String> = (0..3).map(|c| format!("c{c}")).collect();
    let method = Method::Joint {
        volume_weight: None,
    };
    let (mut covered, mut cells) = (0usize, 0usize);
    for seed in 0..12u64 {
        let (x, y) = gaussian_classes(1500, 3.0, 100 + seed);
        let (observed, probs) = flipped_and_probabilities(&x, &y, &t, 200 + seed);
        let rows: Vec<usize> = (0..y.len()).collect();
        let sample = Sample {
            probs: probs.view(),
            labels: &observed,
            trusted: None,
            origins: None,
            rows: &rows,
            own_probabilities: false,
        };
        let interval = bootstrap(&method, &sample, &names, 20, seed).unwrap();
        for ((&truth, &low), &high) in t.iter().zip(&interval.low).zip(&interval.high) {
            if truth > 0.0 {
                cells += 1;
                covered += usize::from(low <= truth && truth <= high);
            }
        }
    }
    let coverage = covered as f64 / cells as f64;
    eprintln!("non-zero cells covered: {covered} of {cells} ({coverage:.3})");
    assert!(
        (0.80..=0.98).contains(&coverage),
        "coverage {coverage:.3} ({covered} of {cells})"
    );
}
