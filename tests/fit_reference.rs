//! The uncorrected softmax regression against an outside implementation: linfa-logistic's
//! multinomial fit on open datasets that linfa-datasets ships.
//!
//! linfa-logistic 0.8 minimises Σᵢ −log softmax(zᵢ)[yᵢ] + (α/2)·‖W‖² with the intercepts
//! unpenalised (its `multi_logistic_loss`), so α = l2·n gives the same optimum as our mean
//! loss + (l2/2)·‖W‖². Both are fitted on the same standardised features.

use flipmend::learn::standardize::Standardizer;
use flipmend::learn::{fit, CrossEntropy, SoftmaxParams};
use linfa::prelude::*;
use linfa_logistic::MultiLogisticRegression;
use ndarray::{Array1, Array2};

fn compare(records: &Array2<f64>, targets: &Array1<usize>, classes: usize, l2: f64) -> f64 {
    let labels = targets.to_vec();
    let params = SoftmaxParams::default()
        .l2(l2)
        .grad_tol(1e-8)
        .min_rel_decrease(0.0)
        .max_iter(5000);
    let (ours, report) = fit(
        records.view(),
        None,
        &labels,
        classes,
        &CrossEntropy,
        &params,
        &mut |_| true,
    )
    .unwrap();
    assert!(report.converged, "{report:?}");
    let standardized = Standardizer::fit(records.view(), None).transform(records.view(), None);
    let n = records.nrows() as f64;
    let dataset = Dataset::new(standardized.clone(), targets.clone());
    let reference = MultiLogisticRegression::default()
        .alpha(l2 * n)
        .gradient_tolerance(1e-9)
        .max_iterations(5000)
        .fit(&dataset)
        .unwrap();
    let theirs = reference.predict_probabilities(&standardized);
    let mine = ours.predict_proba(records.view(), None);
    // linfa orders its probability columns by sorted class label, as ours are.
    let mut worst = 0.0f64;
    for (a, b) in mine.iter().zip(theirs.iter()) {
        worst = worst.max((a - b).abs());
    }
    worst
}

#[test]
fn matches_linfa_logistic_on_iris() {
    let iris = linfa_datasets::iris();
    for l2 in [1e-3, 1e-1] {
        let worst = compare(iris.records(), iris.targets(), 3, l2);
        assert!(
            worst < 1e-3,
            "l2 {l2}: largest probability difference {worst}"
        );
    }
}

#[test]
fn matches_linfa_logistic_on_winequality() {
    // Red wine quality (Cortez et al. 2009, UCI), 1599 rows, 11 features, grades 3..8.
    let wine = linfa_datasets::winequality();
    let grades = wine.targets();
    let low = *grades.iter().min().unwrap();
    let targets = grades.mapv(|g| g - low);
    let classes = targets.iter().max().unwrap() + 1;
    let worst = compare(wine.records(), &targets, classes, 1e-2);
    assert!(worst < 1e-3, "largest probability difference {worst}");
}
