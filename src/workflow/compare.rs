//! Does correcting for the noise pay? Every correction trained on the same rows with the
//! same flip matrix and evaluated on the same holdout. The command line (`compare`) and
//! the desktop app (Retrain view) both run this.

use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};

use ndarray::{Array2, Axis};
use serde::Serialize;

use super::RowProbabilities;
use crate::data::origin::Origin;
use crate::data::{Dataset, TableOptions};
use crate::error::{Error, Result};
use crate::io::model::FitSummary;
use crate::learn::folds::stratified_holdout;
use crate::learn::metrics::{
    accuracy, accuracy_interval, confusion, estimated_clean_accuracy, paired_gain, recall,
};
use crate::learn::softmax::Standardized;
use crate::learn::train::{predict_classes, train, Correction, SourceFlips, TrainInputs};
use crate::learn::{out_of_fold, OofParams, SoftmaxModel, SoftmaxParams};
use crate::noise::sources::{estimate_by_source, SourceSample, Testing};
use crate::noise::{estimate, Method, Sample};
use crate::timing::Stages;

/// The corrections `compare` trains by default, `none` first (the others are measured
/// against it).
pub const ALL_CORRECTIONS: [Correction; 4] = [
    Correction::None,
    Correction::Forward,
    Correction::Backward,
    Correction::Prune,
];

/// One trained model's figures.
#[derive(Debug, Clone, Serialize)]
pub struct ModelReport {
    /// Its correction's name.
    pub correction: &'static str,
    /// Holdout accuracy against the observed (noisy) labels.
    pub holdout_accuracy_observed: Option<f64>,
    /// trace(N·T⁻¹), see [`estimated_clean_accuracy`]; `None` outside [0, 1].
    pub estimated_clean_accuracy: Option<f64>,
    /// Accuracy on the test table, when one was given.
    pub test_accuracy: Option<f64>,
    /// Its 90 % Wilson interval.
    pub test_accuracy_interval: Option<[f64; 2]>,
    /// Accuracy on the holdout rows with a trusted label from a random audit.
    pub trusted_accuracy: Option<f64>,
    /// Its 90 % Wilson interval.
    pub trusted_accuracy_interval: Option<[f64; 2]>,
    /// Accuracy gained over `none` on the same rows (test table, else randomly audited
    /// holdout rows): [90 % low, estimate, 90 % high] from the paired differences, so the
    /// noise the two models share cancels.
    pub gain_vs_none: Option<[f64; 3]>,
    /// Recall per class against the report's reference labels.
    pub per_class_recall: Vec<Option<f64>>,
    /// Confusion (rows: reference label, columns: prediction).
    pub confusion: Vec<Vec<usize>>,
    /// Holdout predictions that differ from the first model's.
    pub changed_vs_none: usize,
    /// Optimiser iterations.
    pub iterations: usize,
    /// Rows `prune` dropped.
    pub dropped_rows: usize,
}

/// The whole comparison, as written to JSON.
#[derive(Debug, Clone, Serialize)]
pub struct CompareReport {
    /// One entry per correction, in training order.
    pub models: Vec<ModelReport>,
    /// The flip matrix every correction used.
    pub matrix: Vec<Vec<f64>>,
    /// Class names.
    pub classes: Vec<String>,
    /// What `per_class_recall` and `confusion` are measured against.
    pub reference: String,
    /// Rows trained on.
    pub train_rows: usize,
    /// Rows held out.
    pub holdout_rows: usize,
    /// Things to know.
    pub warnings: Vec<String>,
}

/// The report plus what a front end needs to go further (save a model, list changes).
#[derive(Debug, Clone)]
pub struct Comparison {
    /// The figures.
    pub report: CompareReport,
    /// The trained models, in the report's order.
    pub models: Vec<(Correction, SoftmaxModel)>,
    /// How each fit went, in the report's order.
    pub fits: Vec<FitSummary>,
    /// Data rows trained on (before pruning).
    pub train: Vec<usize>,
    /// Data rows of the holdout.
    pub holdout: Vec<usize>,
    /// Holdout predictions of each model (indexed like `holdout`).
    pub predictions: Vec<Vec<usize>>,
    /// Seconds of each stage (split, out-of-fold probabilities, matrix, each fit).
    pub stages: Stages,
}

/// Where the flip matrix comes from.
#[derive(Debug, Clone, Copy)]
pub enum MatrixChoice<'a> {
    /// This matrix (read from a file or edited by hand).
    Given(&'a Array2<f64>),
    /// These matrices, one per label source of the table (the app's, perhaps edited),
    /// with their mix for the corrections that take one matrix.
    GivenBySource {
        /// The sources' mix.
        overall: &'a Array2<f64>,
        /// One per source, in the order of the table's source names.
        sources: &'a [Array2<f64>],
    },
    /// Estimated on the training rows only, so the holdout stays unseen.
    Estimate(&'a Method),
}

/// What a comparison reads.
#[derive(Debug, Clone, Copy)]
pub struct CompareInputs<'a> {
    /// The labelled table.
    pub data: &'a Dataset,
    /// Out-of-sample probabilities of every data row (their loading warnings join the
    /// report's warnings); without them they are computed by cross-validation on the
    /// training rows alone.
    pub probs: Option<&'a RowProbabilities>,
    /// The flip matrix.
    pub matrix: MatrixChoice<'a>,
    /// A separately labelled table (features, labels) whose labels are taken as correct.
    pub test: Option<(&'a Array2<f64>, &'a [usize])>,
}

/// How to compare.
#[derive(Debug, Clone)]
pub struct CompareSettings {
    /// Share of rows held out, strictly between 0 and 1.
    pub holdout: f64,
    /// Folds, seed and model (its penalty and iteration limit apply to every fit).
    pub fit: OofParams,
    /// Corrections to train; `none` is always trained first.
    pub corrections: Vec<Correction>,
}

impl CompareSettings {
    /// Refuses a holdout share that leaves no rows on one side.
    pub fn check(&self) -> Result<()> {
        if !(self.holdout > 0.0 && self.holdout < 1.0) {
            return Err(Error::Usage(format!(
                "the holdout share must lie strictly between 0 and 1, not {}",
                self.holdout
            )));
        }
        Ok(())
    }
}

/// Runs the comparison. `progress` hears (step, steps) before each fit and may return
/// false to stop; `cancel` also stops a fit in the middle.
pub fn compare(
    inputs: CompareInputs,
    settings: &CompareSettings,
    cancel: Option<&AtomicBool>,
    progress: &mut dyn FnMut(usize, usize) -> bool,
) -> Result<Comparison> {
    settings.check()?;
    let mut stages = Stages::start();
    let data = inputs.data;
    let k = data.classes.len();
    let corrections = corrections_none_first(&settings.corrections);
    let folds_steps = if inputs.probs.is_none() {
        settings.fit.folds
    } else {
        0
    };
    let steps = corrections.len() + folds_steps;
    let (train_rows, holdout_rows) =
        stratified_holdout(&data.labels, k, settings.holdout, settings.fit.seed);
    let part = Part::new(data, &train_rows);
    stages.end("split");
    let (probs, last_fold) =
        training_probabilities(&inputs, &part, &train_rows, settings, &mut |f| {
            progress(f, steps) && !cancelled(cancel)
        })?;
    stages.end("probabilities");
    let own = inputs.probs.is_none_or(|p| p.source.is_own());
    let (matrix, by_source, matrix_warnings) =
        part.matrix(inputs.matrix, (&probs, own), &data.classes)?;
    let mut warnings = data.warnings.clone();
    warnings.extend(inputs.probs.iter().flat_map(|p| p.warnings.iter().cloned()));
    warnings.extend(matrix_warnings);
    stages.end("matrix");
    let trainer = Trainer {
        part: &part,
        probs: &probs,
        matrix: &matrix,
        by_source: by_source.as_deref(),
        x_hold: data.features.select(Axis(0), &holdout_rows),
        standardized: Standardized::new(part.x.view(), None),
        test: inputs.test.map(|(x, _)| x),
        model: &settings.fit.model,
        cancel,
    };
    let mut fits: Vec<Fit> = Vec::new();
    for (i, &correction) in corrections.iter().enumerate() {
        if !progress(folds_steps + i, steps) || cancelled(cancel) {
            return Err(Error::Cancelled);
        }
        let start = warm_start(&fits, correction).or(last_fold.as_ref());
        let (fit, fit_warnings) = trainer.fit(correction, start)?;
        stages.end(format!("fit_{}", correction.name()));
        warnings.extend(fit_warnings);
        fits.push(fit);
    }
    progress(steps, steps);
    let split = (train_rows, holdout_rows);
    Ok(evaluate(&inputs, split, &matrix, fits, warnings, stages))
}

/// The out-of-sample probabilities of the training rows: the given ones, or computed by
/// cross-validation on those rows alone (`fold_done` hears each fold and may stop), then
/// with the last fold's model.
fn training_probabilities(
    inputs: &CompareInputs,
    part: &Part,
    train_rows: &[usize],
    settings: &CompareSettings,
    fold_done: &mut dyn FnMut(usize) -> bool,
) -> Result<(Array2<f32>, Option<SoftmaxModel>)> {
    match inputs.probs {
        Some(p) => Ok((p.values.select(Axis(0), train_rows), None)),
        None => {
            let folds = out_of_fold(
                part.x.view(),
                &part.labels,
                inputs.data.classes.len(),
                &settings.fit,
                &mut |f, _| fold_done(f),
            )?;
            Ok((folds.probs, Some(folds.last_model)))
        }
    }
}

/// What every correction's fit shares.
struct Trainer<'a> {
    part: &'a Part,
    probs: &'a Array2<f32>,
    matrix: &'a Array2<f64>,
    /// Every label source's matrix (the part's rows know their source).
    by_source: Option<&'a [Array2<f64>]>,
    x_hold: Array2<f64>,
    /// The part's rows standardised once for every fit that takes all of them.
    standardized: Standardized,
    test: Option<&'a Array2<f64>>,
    model: &'a SoftmaxParams,
    cancel: Option<&'a AtomicBool>,
}

impl Trainer<'_> {
    /// Trains `correction` on every training row (from `start` when given) and predicts
    /// the holdout and the test table; the fit's warnings come named by the correction.
    fn fit(
        &self,
        correction: Correction,
        start: Option<&SoftmaxModel>,
    ) -> Result<(Fit, Vec<String>)> {
        let all_rows: Vec<usize> = (0..self.part.labels.len()).collect();
        let trained = train(
            self.part.x.view(),
            &all_rows,
            &self.part.labels,
            self.matrix.nrows(),
            correction,
            TrainInputs {
                matrix: Some(self.matrix),
                probs: Some(self.probs.view()),
                start,
                cancel: self.cancel,
                by_source: self
                    .by_source
                    .zip(self.part.sources.as_ref())
                    .map(|(matrices, (of_row, _))| SourceFlips { matrices, of_row }),
                standardized: Some(&self.standardized),
            },
            self.model,
        )?;
        let name = correction.name();
        let warnings = trained
            .warnings
            .iter()
            .map(|w| format!("{name}: {w}"))
            .collect();
        let predict =
            |x: &Array2<f64>| predict_classes(&trained.model.predict_proba(x.view(), None));
        let fit = Fit {
            correction,
            hold: predict(&self.x_hold),
            test: self.test.map(predict),
            summary: FitSummary {
                objective: trained.report.objective,
                iterations: trained.report.iterations,
                converged: trained.report.converged,
                dropped_rows: trained.dropped.len(),
            },
            model: trained.model,
        };
        Ok((fit, warnings))
    }
}

/// Every fit measured against the holdout (and the test table), and the comparison.
fn evaluate(
    inputs: &CompareInputs,
    (train_rows, holdout_rows): (Vec<usize>, Vec<usize>),
    matrix: &Array2<f64>,
    fits: Vec<Fit>,
    mut warnings: Vec<String>,
    mut stages: Stages,
) -> Comparison {
    let data = inputs.data;
    let observed_hold: Vec<usize> = holdout_rows.iter().map(|&r| data.labels[r]).collect();
    let trusted_hold = trusted_pairs(data, &holdout_rows);
    let reference = Reference::choose(inputs.test, &trusted_hold, &observed_hold);
    if fits
        .iter()
        .any(|f| estimated_clean_accuracy(&f.hold, &observed_hold, matrix).is_none())
    {
        warnings.push(
            "the estimated clean accuracy is missing where trace(N·T⁻¹) fell outside [0, 1]: the flip matrix does not \
             fit the holdout's labels (it claims more, or less, noise than they show); compare estimators, or use \
             trusted or test labels"
                .into(),
        );
    }
    let eval = Evaluation {
        observed: &observed_hold,
        trusted: &trusted_hold,
        test: inputs.test.map(|(_, l)| l),
        reference: &reference,
        matrix,
        none: &fits[0].hold,
        none_test: fits[0].test.as_deref(),
        classes: data.classes.len(),
    };
    let reports = fits.iter().map(|f| eval.report(f)).collect();
    stages.end("evaluate");
    let report = CompareReport {
        models: reports,
        matrix: matrix.rows().into_iter().map(|r| r.to_vec()).collect(),
        classes: data.classes.clone(),
        reference: reference.name().into(),
        train_rows: train_rows.len(),
        holdout_rows: holdout_rows.len(),
        warnings,
    };
    Comparison {
        report,
        predictions: fits.iter().map(|f| f.hold.clone()).collect(),
        fits: fits.iter().map(|f| f.summary).collect(),
        train: train_rows,
        models: fits.into_iter().map(|f| (f.correction, f.model)).collect(),
        holdout: holdout_rows,
        stages,
    }
}

/// Where a fit starts: the corrected fits from a model already trained on the same rows
/// (the optimum does not depend on the start, the iteration count does). Backward and
/// prune aim, like forward, at the clean classes, so they start from the forward fit
/// when there is one, else from the uncorrected fit. `None` for the first fit, which
/// starts from the last cross-validation fold's model when there is one.
fn warm_start(fits: &[Fit], correction: Correction) -> Option<&SoftmaxModel> {
    let forward = fits.iter().find(|f| f.correction == Correction::Forward);
    match correction {
        Correction::Backward | Correction::BackwardUnbounded | Correction::Prune => {
            forward.or(fits.first())
        }
        _ => fits.first(),
    }
    .map(|f| &f.model)
}

fn cancelled(cancel: Option<&AtomicBool>) -> bool {
    cancel.is_some_and(|c| c.load(Ordering::Relaxed))
}

/// `none` first (the baseline everything is compared with), then the rest in the given
/// order without repeats.
fn corrections_none_first(asked: &[Correction]) -> Vec<Correction> {
    let mut list = vec![Correction::None];
    for &c in asked {
        if !list.contains(&c) {
            list.push(c);
        }
    }
    list
}

/// (holdout index, trusted label) of the holdout rows that have one from a random audit:
/// reviewed rows were chosen because they looked wrong, so accuracy on them would not be
/// accuracy on the table.
fn trusted_pairs(data: &Dataset, holdout: &[usize]) -> Vec<(usize, usize)> {
    data.trusted
        .as_ref()
        .map(|t| {
            holdout
                .iter()
                .enumerate()
                .filter(|&(_, &r)| data.origin(r).is_random_sample())
                .filter_map(|(i, &r)| t[r].map(|l| (i, l)))
                .collect()
        })
        .unwrap_or_default()
}

/// One trained correction and its predictions.
struct Fit {
    correction: Correction,
    model: SoftmaxModel,
    summary: FitSummary,
    hold: Vec<usize>,
    test: Option<Vec<usize>>,
}

/// Everything a model's figures are computed against.
struct Evaluation<'a> {
    observed: &'a [usize],
    trusted: &'a [(usize, usize)],
    test: Option<&'a [usize]>,
    reference: &'a Reference,
    matrix: &'a Array2<f64>,
    none: &'a [usize],
    /// The `none` model's test predictions.
    none_test: Option<&'a [usize]>,
    classes: usize,
}

impl Evaluation<'_> {
    fn report(&self, f: &Fit) -> ModelReport {
        let (pred_ref, labels_ref) = self.reference.pairs(&f.hold, f.test.as_deref());
        let c = confusion(&pred_ref, &labels_ref, self.classes);
        let trusted_pred: Vec<usize> = self.trusted.iter().map(|&(i, _)| f.hold[i]).collect();
        let trusted_labels: Vec<usize> = self.trusted.iter().map(|&(_, l)| l).collect();
        let test_pred = f.test.as_deref().unwrap_or(&[]);
        let gain = match self.test {
            Some(labels) => paired_gain(test_pred, self.none_test.unwrap_or(&[]), labels),
            None => {
                let none: Vec<usize> = self.trusted.iter().map(|&(i, _)| self.none[i]).collect();
                paired_gain(&trusted_pred, &none, &trusted_labels)
            }
        };
        ModelReport {
            correction: f.correction.name(),
            holdout_accuracy_observed: accuracy(&f.hold, self.observed),
            estimated_clean_accuracy: estimated_clean_accuracy(&f.hold, self.observed, self.matrix),
            test_accuracy: self.test.and_then(|l| accuracy(test_pred, l)),
            test_accuracy_interval: self.test.and_then(|l| accuracy_interval(test_pred, l)),
            trusted_accuracy: accuracy(&trusted_pred, &trusted_labels),
            trusted_accuracy_interval: accuracy_interval(&trusted_pred, &trusted_labels),
            gain_vs_none: gain,
            per_class_recall: recall(&c),
            confusion: c.rows().into_iter().map(|r| r.to_vec()).collect(),
            changed_vs_none: f.hold.iter().zip(self.none).filter(|(a, b)| a != b).count(),
            iterations: f.summary.iterations,
            dropped_rows: f.summary.dropped_rows,
        }
    }
}

/// The training part as its own arrays.
struct Part {
    x: Array2<f64>,
    labels: Vec<usize>,
    trusted: Option<Vec<Option<usize>>>,
    origins: Option<Vec<Origin>>,
    /// Each training row's label source, and the source names.
    sources: Option<(Vec<u32>, Vec<String>)>,
}

impl Part {
    fn new(data: &Dataset, rows: &[usize]) -> Self {
        Part {
            x: data.features.select(Axis(0), rows),
            labels: rows.iter().map(|&r| data.labels[r]).collect(),
            trusted: data
                .trusted
                .as_ref()
                .map(|t| rows.iter().map(|&r| t[r]).collect()),
            origins: data
                .trusted_origins
                .as_ref()
                .map(|o| rows.iter().map(|&r| o[r]).collect()),
            sources: data.sources.as_ref().map(|s| {
                let of_row = rows.iter().map(|&r| s.of_row[r]).collect();
                (of_row, s.names.clone())
            }),
        }
    }

    /// The matrix for the corrections, estimated on the training rows (with a source
    /// column: the sources' mix, and every source's matrix beside it) from their
    /// probabilities, marked when they are flipmend's own out-of-fold ones.
    fn matrix(
        &self,
        choice: MatrixChoice,
        (probs, own_probabilities): (&Array2<f32>, bool),
        classes: &[String],
    ) -> Result<PartMatrix> {
        let method = match choice {
            MatrixChoice::Given(m) => return Ok((m.clone(), None, Vec::new())),
            MatrixChoice::GivenBySource { overall, sources } => {
                let by_source = self.sources.as_ref().map(|_| sources.to_vec());
                return Ok((overall.clone(), by_source, Vec::new()));
            }
            MatrixChoice::Estimate(method) => method,
        };
        let rows: Vec<usize> = (0..self.labels.len()).collect();
        let sample = Sample {
            probs: probs.view(),
            labels: &self.labels,
            trusted: self.trusted.as_deref(),
            origins: self.origins.as_deref(),
            rows: &rows,
            own_probabilities,
        };
        let overall = estimate(method, &sample, classes)?;
        let Some((of_row, names)) = &self.sources else {
            return Ok((overall.matrix, None, overall.warnings));
        };
        let data = SourceSample {
            sample,
            of_row,
            names,
        };
        let method = overall.pinned(method);
        let (by_source, _) = estimate_by_source(&method, &data, classes, &overall, Testing::Skip)?;
        let mut warnings = overall.warnings;
        warnings.extend(by_source.warnings.iter().cloned());
        let matrices = by_source.sources.into_iter().map(|s| s.matrix).collect();
        Ok((by_source.overall, Some(matrices), warnings))
    }
}

/// The matrix for the corrections, every source's matrix (with a source column) and
/// the estimator's warnings.
type PartMatrix = (Array2<f64>, Option<Vec<Array2<f64>>>, Vec<String>);

/// What per-class recall and the confusion matrix are measured against.
enum Reference {
    Test(Vec<usize>),
    Trusted(Vec<(usize, usize)>),
    Observed(Vec<usize>),
}

impl Reference {
    fn choose(
        test: Option<(&Array2<f64>, &[usize])>,
        trusted: &[(usize, usize)],
        observed: &[usize],
    ) -> Self {
        match test {
            Some((_, labels)) => Reference::Test(labels.to_vec()),
            None if !trusted.is_empty() => Reference::Trusted(trusted.to_vec()),
            None => Reference::Observed(observed.to_vec()),
        }
    }

    fn name(&self) -> &'static str {
        match self {
            Reference::Test(_) => "test labels",
            Reference::Trusted(_) => "trusted labels of holdout rows",
            Reference::Observed(_) => "observed labels of holdout rows",
        }
    }

    fn pairs(&self, hold: &[usize], test_pred: Option<&[usize]>) -> (Vec<usize>, Vec<usize>) {
        match self {
            Reference::Test(labels) => (test_pred.unwrap_or(&[]).to_vec(), labels.clone()),
            Reference::Trusted(pairs) => pairs.iter().map(|&(i, l)| (hold[i], l)).unzip(),
            Reference::Observed(labels) => (hold.to_vec(), labels.clone()),
        }
    }
}

/// Loads a labelled test table with the training data's feature columns and maps its
/// classes onto the training data's.
pub fn load_test(
    path: &Path,
    delimiter: Option<u8>,
    data: &Dataset,
) -> Result<(Array2<f64>, Vec<usize>)> {
    let options = TableOptions {
        delimiter,
        label: data.label_column.clone(),
        features: Some(data.feature_names.clone()),
        unlabeled: false,
        ..Default::default()
    };
    let test = Dataset::load(path, &options)?;
    let labels = test
        .labels
        .iter()
        .map(|&l| {
            let name = &test.classes[l];
            data.classes.iter().position(|c| c == name).ok_or_else(|| {
                Error::Usage(format!(
                    "{}: the test class '{name}' is not a class of the training data",
                    path.display()
                ))
            })
        })
        .collect::<Result<Vec<usize>>>()?;
    Ok((test.features, labels))
}
