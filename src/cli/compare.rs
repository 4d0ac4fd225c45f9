//! `flipmend compare`: does correcting for the noise pay? All corrections trained on the
//! same rows with the same flip matrix, evaluated on the same holdout.

use std::fmt::Write as _;
use std::io::Write;
use std::path::{Path, PathBuf};

use clap::Args;
use ndarray::{Array2, Axis};
use serde::Serialize;

use super::args::PipelineArgs;
use crate::data::{Dataset, TableOptions};
use crate::error::{Error, Result};
use crate::io::{check_not_input, write_json};
use crate::learn::folds::stratified_holdout;
use crate::learn::metrics::{accuracy, confusion, estimated_clean_accuracy, recall};
use crate::learn::out_of_fold;
use crate::learn::train::{predict_classes, train, Correction, TrainInputs};
use crate::noise::matrix::load_matrix_csv;
use crate::noise::{estimate, Sample};
use crate::workflow::MatrixSource;

/// Flags of `flipmend compare`.
#[derive(Debug, Clone, Args)]
pub struct CompareArgs {
    #[command(flatten)]
    /// Table, probabilities, flip matrix and model settings.
    pub pipeline: PipelineArgs,
    /// Share of rows held out for evaluation (stratified by observed label)
    #[arg(long, value_name = "FRACTION", default_value_t = 0.2)]
    pub holdout: f64,
    /// A separately labelled table whose labels are taken as correct (same feature columns)
    #[arg(long, value_name = "FILE")]
    pub test: Option<PathBuf>,
    /// Write the comparison as JSON
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

#[derive(Debug, Serialize)]
struct ModelReport {
    correction: &'static str,
    holdout_accuracy_observed: Option<f64>,
    estimated_clean_accuracy: Option<f64>,
    test_accuracy: Option<f64>,
    trusted_accuracy: Option<f64>,
    per_class_recall: Vec<Option<f64>>,
    confusion: Vec<Vec<usize>>,
    changed_vs_none: usize,
    iterations: usize,
    dropped_rows: usize,
}

#[derive(Debug, Serialize)]
struct CompareReport {
    models: Vec<ModelReport>,
    matrix: Vec<Vec<f64>>,
    classes: Vec<String>,
    /// What `per_class_recall` and `confusion` are measured against.
    reference: String,
    train_rows: usize,
    holdout_rows: usize,
    warnings: Vec<String>,
}

const CORRECTIONS: [Correction; 4] = [
    Correction::None,
    Correction::Forward,
    Correction::Backward { guarded: true },
    Correction::Prune,
];

/// Runs `compare`.
pub fn run(args: &CompareArgs, out: &mut dyn Write) -> Result<()> {
    if let Some(json) = &args.json {
        let mut inputs = args.pipeline.inputs();
        inputs.extend(args.test.as_deref());
        check_not_input(json, &inputs)?;
    }
    if !(args.holdout > 0.0 && args.holdout < 1.0) {
        return Err(Error::Usage(format!(
            "--holdout must lie strictly between 0 and 1, not {}",
            args.holdout
        )));
    }
    let data = Dataset::load(&args.pipeline.table.data, &args.pipeline.table.options())?;
    let test = args
        .test
        .as_deref()
        .map(|p| load_test(p, args, &data))
        .transpose()?;
    let k = data.classes.len();
    let (train_rows, holdout_rows) =
        stratified_holdout(&data.labels, k, args.holdout, args.pipeline.fit.seed);
    let part = Part::new(&data, &train_rows);
    let probs = training_probabilities(args, &data, &part, &train_rows)?;
    let (matrix, mut warnings) = training_matrix(args, &data, &part, &probs)?;
    let params = args.pipeline.fit.oof().model;
    let x_hold = data.features.select(Axis(0), &holdout_rows);
    let observed_hold: Vec<usize> = holdout_rows.iter().map(|&r| data.labels[r]).collect();
    let trusted_hold: Vec<(usize, usize)> = data
        .trusted
        .as_ref()
        .map(|t| {
            holdout_rows
                .iter()
                .enumerate()
                .filter_map(|(i, &r)| t[r].map(|l| (i, l)))
                .collect()
        })
        .unwrap_or_default();
    let all_rows: Vec<usize> = (0..part.labels.len()).collect();
    let mut predictions = Vec::new();
    let mut models = Vec::new();
    // The corrected fits start from the uncorrected one (same rows, nearby optimum).
    let mut baseline: Option<crate::learn::SoftmaxModel> = None;
    for correction in CORRECTIONS {
        let inputs = TrainInputs {
            matrix: Some(&matrix),
            probs: Some(probs.view()),
            start: baseline.as_ref(),
        };
        let trained = train(
            part.x.view(),
            &all_rows,
            &part.labels,
            k,
            correction,
            inputs,
            &params,
        )?;
        warnings.extend(
            trained
                .warnings
                .iter()
                .map(|w| format!("{}: {w}", correction.name())),
        );
        let hold = predict_classes(&trained.model.predict_proba(x_hold.view(), None));
        let test_pred = test
            .as_ref()
            .map(|(x, _)| predict_classes(&trained.model.predict_proba(x.view(), None)));
        predictions.push(hold.clone());
        if baseline.is_none() {
            baseline = Some(trained.model.clone());
        }
        models.push((
            correction,
            trained.report.iterations,
            trained.dropped.len(),
            hold,
            test_pred,
        ));
    }
    let (reference, reference_name) = match (&test, trusted_hold.is_empty()) {
        (Some((_, labels)), _) => (Reference::Test(labels.clone()), "test labels".to_string()),
        (None, false) => (
            Reference::Trusted(trusted_hold.clone()),
            "trusted labels of holdout rows".to_string(),
        ),
        (None, true) => (
            Reference::Observed(observed_hold.clone()),
            "observed labels of holdout rows".to_string(),
        ),
    };
    if models
        .iter()
        .any(|(_, _, _, hold, _)| estimated_clean_accuracy(hold, &observed_hold, &matrix).is_none())
    {
        warnings.push(
            "the estimated clean accuracy is missing where trace(N·T⁻¹) fell outside [0, 1]: the flip matrix does not \
             fit the holdout's labels (it claims more, or less, noise than they show); compare estimators, or use \
             trusted or test labels"
                .into(),
        );
    }
    let none_pred = predictions[0].clone();
    let reports = models
        .into_iter()
        .map(|(correction, iterations, dropped, hold, test_pred)| {
            let (pred_ref, labels_ref) = reference.pairs(&hold, test_pred.as_deref());
            let c = confusion(&pred_ref, &labels_ref, k);
            let trusted_pred: Vec<usize> = trusted_hold.iter().map(|&(i, _)| hold[i]).collect();
            let trusted_labels: Vec<usize> = trusted_hold.iter().map(|&(_, l)| l).collect();
            ModelReport {
                correction: correction.name(),
                holdout_accuracy_observed: accuracy(&hold, &observed_hold),
                estimated_clean_accuracy: estimated_clean_accuracy(&hold, &observed_hold, &matrix),
                test_accuracy: test
                    .as_ref()
                    .and_then(|(_, l)| accuracy(test_pred.as_deref().unwrap_or(&[]), l)),
                trusted_accuracy: accuracy(&trusted_pred, &trusted_labels),
                per_class_recall: recall(&c),
                confusion: c.rows().into_iter().map(|r| r.to_vec()).collect(),
                changed_vs_none: hold.iter().zip(&none_pred).filter(|(a, b)| a != b).count(),
                iterations,
                dropped_rows: dropped,
            }
        })
        .collect();
    let report = CompareReport {
        models: reports,
        matrix: matrix.rows().into_iter().map(|r| r.to_vec()).collect(),
        classes: data.classes.clone(),
        reference: reference_name,
        train_rows: train_rows.len(),
        holdout_rows: holdout_rows.len(),
        warnings,
    };
    if let Some(json) = &args.json {
        write_json(json, &report)?;
    }
    super::emit(out, &render(&report))
}

/// The training part as its own arrays.
struct Part {
    x: Array2<f64>,
    labels: Vec<usize>,
    trusted: Option<Vec<Option<usize>>>,
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
        }
    }
}

/// What per-class recall and the confusion matrix are measured against.
enum Reference {
    Test(Vec<usize>),
    Trusted(Vec<(usize, usize)>),
    Observed(Vec<usize>),
}

impl Reference {
    fn pairs(&self, hold: &[usize], test_pred: Option<&[usize]>) -> (Vec<usize>, Vec<usize>) {
        match self {
            Reference::Test(labels) => (test_pred.unwrap_or(&[]).to_vec(), labels.clone()),
            Reference::Trusted(pairs) => pairs.iter().map(|&(i, l)| (hold[i], l)).unzip(),
            Reference::Observed(labels) => (hold.to_vec(), labels.clone()),
        }
    }
}

fn load_test(path: &Path, args: &CompareArgs, data: &Dataset) -> Result<(Array2<f64>, Vec<usize>)> {
    let options = TableOptions {
        delimiter: args.pipeline.table.delimiter,
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

/// Out-of-sample probabilities of the training rows: the given file's rows, or
/// out-of-fold probabilities computed on the training part alone.
fn training_probabilities(
    args: &CompareArgs,
    data: &Dataset,
    part: &Part,
    rows: &[usize],
) -> Result<Array2<f32>> {
    match &args.pipeline.probs.probs {
        Some(path) => {
            let loaded = crate::data::Probabilities::load(
                path,
                data,
                &args.pipeline.probs.options(args.pipeline.table.delimiter),
            )?;
            Ok(loaded.values.select(Axis(0), rows))
        }
        None => {
            let (p, _) = out_of_fold(
                part.x.view(),
                &part.labels,
                data.classes.len(),
                &args.pipeline.fit.oof(),
                &mut |_, _| true,
            )?;
            Ok(p)
        }
    }
}

fn training_matrix(
    args: &CompareArgs,
    data: &Dataset,
    part: &Part,
    probs: &Array2<f32>,
) -> Result<(Array2<f64>, Vec<String>)> {
    match args.pipeline.matrix.source(args.pipeline.probs.renormalize) {
        MatrixSource::File { path, renormalize } => {
            load_matrix_csv(&path, &data.classes, renormalize)
        }
        MatrixSource::Estimate(method) => {
            let rows: Vec<usize> = (0..part.labels.len()).collect();
            let sample = Sample {
                probs: probs.view(),
                labels: &part.labels,
                trusted: part.trusted.as_deref(),
                rows: &rows,
            };
            let e = estimate(&method, &sample, &data.classes)?;
            Ok((e.matrix, e.notes))
        }
    }
}

fn render(r: &CompareReport) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "{} training rows, {} holdout rows; every model uses the same rows and flip matrix\n",
        r.train_rows, r.holdout_rows
    );
    let pct = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{:.2}%", 100.0 * v));
    let _ = writeln!(
        t,
        "{:<11} {:>10} {:>12} {:>10} {:>10} {:>9} {:>8}",
        "correction", "observed", "est. clean", "test", "trusted", "changed", "dropped"
    );
    for m in &r.models {
        let _ = writeln!(
            t,
            "{:<11} {:>10} {:>12} {:>10} {:>10} {:>9} {:>8}",
            m.correction,
            pct(m.holdout_accuracy_observed),
            pct(m.estimated_clean_accuracy),
            pct(m.test_accuracy),
            pct(m.trusted_accuracy),
            m.changed_vs_none,
            m.dropped_rows
        );
    }
    let _ = writeln!(
        t,
        "\nobserved: holdout accuracy against the (noisy) observed labels. est. clean: the accuracy against true labels \
         implied by it and the flip matrix, trace(N·T⁻¹) with N the joint shares of prediction and observed label \
         (assumes flips depend only on the true class). test/trusted: against labels taken as correct. changed: \
         holdout predictions that differ from 'none'."
    );
    let width = super::name_width(r.classes.iter().map(String::as_str), 5);
    let _ = writeln!(t, "\nrecall per class (against {}):", r.reference);
    let _ = write!(t, "{:<width$}", "class");
    for m in &r.models {
        let _ = write!(t, " {:>10}", m.correction);
    }
    let _ = writeln!(t);
    for (i, class) in r.classes.iter().enumerate() {
        let _ = write!(t, "{class:<width$}");
        for m in &r.models {
            let _ = write!(t, " {:>10}", pct(m.per_class_recall[i]));
        }
        let _ = writeln!(t);
    }
    for w in &r.warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    t
}
