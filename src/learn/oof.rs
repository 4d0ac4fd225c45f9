//! Out-of-fold class probabilities: each row's probabilities come from a model that did
//! not see that row. In-sample probabilities would make every flip matrix look like the
//! identity.

use ndarray::{Array2, ArrayView2};

use super::folds::stratified_folds;
use super::loss::CrossEntropy;
use super::softmax::{fit_from, FitReport, SoftmaxModel, SoftmaxParams};
use crate::error::{Error, Result};

/// Settings for out-of-fold probabilities.
#[derive(Debug, Clone, PartialEq)]
pub struct OofParams {
    /// Number of folds (at least 2). Default 5.
    pub folds: usize,
    /// Seed of the fold assignment. Default 0.
    pub seed: u64,
    /// The model fitted on each fold's training part.
    pub model: SoftmaxParams,
}

impl Default for OofParams {
    fn default() -> Self {
        OofParams {
            folds: 5,
            seed: 0,
            model: SoftmaxParams::default(),
        }
    }
}

/// Out-of-fold probabilities and the folds' fits.
#[derive(Debug, Clone)]
pub struct OutOfFold {
    /// `rows × classes`.
    pub probs: Array2<f32>,
    /// One fit report per fold.
    pub reports: Vec<FitReport>,
    /// The last fold's model. It saw all rows but one fold, so a fit on every row
    /// started from it needs fewer iterations (the optimum does not depend on the start).
    pub last_model: SoftmaxModel,
}

/// Probabilities (`rows × classes`, f32) from `params.folds` folds.
pub fn out_of_fold(
    x: ArrayView2<f64>,
    labels: &[usize],
    classes: usize,
    params: &OofParams,
    progress: &mut dyn FnMut(usize, usize) -> bool,
) -> Result<OutOfFold> {
    params.model.check()?;
    if params.folds < 2 || params.folds > labels.len() {
        return Err(Error::Setting {
            setting: "folds",
            problem: format!(
                "must be between 2 and the number of rows ({}), not {}",
                labels.len(),
                params.folds
            ),
        });
    }
    let fold_of = stratified_folds(labels, classes, params.folds, params.seed);
    let mut probs = Array2::<f32>::zeros((labels.len(), classes));
    let mut reports = Vec::with_capacity(params.folds);
    // Each fold starts from the previous fold's model: the training sets share most rows,
    // so the optimum is near and fewer iterations reach it.
    let mut previous: Option<SoftmaxModel> = None;
    for fold in 0..params.folds {
        if !progress(fold, params.folds) {
            return Err(Error::Cancelled);
        }
        let (train, test): (Vec<usize>, Vec<usize>) =
            (0..labels.len()).partition(|&r| fold_of[r] != fold);
        let start = previous.as_ref();
        let (model, report) = fit_from(
            x,
            Some(&train),
            labels,
            classes,
            &CrossEntropy,
            &params.model,
            start,
            &mut |_| true,
        )?;
        let p = model.predict_proba(x, Some(&test));
        for (i, &row) in test.iter().enumerate() {
            for c in 0..classes {
                probs[[row, c]] = p[[i, c]] as f32;
            }
        }
        reports.push(report);
        previous = Some(model);
    }
    progress(params.folds, params.folds);
    let last_model = previous.ok_or_else(|| Error::Internal("no fold was fitted".into()))?;
    Ok(OutOfFold {
        probs,
        reports,
        last_model,
    })
}
