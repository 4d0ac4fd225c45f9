//! The model file: a trained softmax regression with everything needed to predict and to
//! tell later how it was made. JSON, versioned; a file from a newer flipmend or with
//! inconsistent shapes is refused with a clear message.

use std::io::{Read, Write};
use std::path::Path;

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Location, Problem, Result};
use crate::learn::standardize::Standardizer;
use crate::learn::SoftmaxModel;

/// The `format` field of every model file.
pub const MODEL_FORMAT: &str = "flipmend-model";
/// The newest model-file version this build reads and the one it writes.
pub const MODEL_VERSION: u32 = 1;

/// Training settings recorded in the model file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainingSettings {
    /// L2 penalty.
    pub l2: f64,
    /// Iteration limit.
    pub max_iter: usize,
    /// Seed of the random choices (folds of the probabilities used for the matrix).
    pub seed: u64,
    /// Where the flip matrix came from (estimator or file), when one was used.
    pub matrix_source: Option<String>,
}

/// Figures from training, recorded in the model file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainingMetrics {
    /// Final objective (mean loss + penalty).
    pub objective: f64,
    /// Optimiser iterations.
    pub iterations: usize,
    /// Whether the gradient tolerance was met.
    pub converged: bool,
    /// Training rows used (after pruning).
    pub rows: usize,
    /// Rows dropped by pruning.
    pub dropped_rows: usize,
    /// Accuracy on the training rows against the observed labels.
    pub accuracy_observed: f64,
    /// Accuracy on the training rows that carry a trusted label, against it.
    pub accuracy_trusted: Option<f64>,
}

/// The file's contents.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelFile {
    /// Always [`MODEL_FORMAT`].
    pub format: String,
    /// File version.
    pub version: u32,
    /// Class names, in the order of the weight rows.
    pub classes: Vec<String>,
    /// Feature names, in the order of the weight columns.
    pub features: Vec<String>,
    /// Feature means and standard deviations applied before the weights.
    pub standardization: Standardizer,
    /// `classes × features`.
    pub weights: Vec<Vec<f64>>,
    /// One per class.
    pub bias: Vec<f64>,
    /// The correction used in training.
    pub correction: String,
    /// The flip matrix used (rows = true class), if any.
    pub matrix: Option<Vec<Vec<f64>>>,
    /// Settings.
    pub settings: TrainingSettings,
    /// Figures.
    pub metrics: TrainingMetrics,
    /// FNV-1a (64-bit) hash of the training rows' features and labels, to recognise the data.
    pub data_hash: String,
}

/// How a fit went, as the model file records it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitSummary {
    /// Final objective.
    pub objective: f64,
    /// Optimiser iterations.
    pub iterations: usize,
    /// Whether the gradient tolerance was met.
    pub converged: bool,
    /// Rows `prune` dropped from `rows`.
    pub dropped_rows: usize,
}

/// What a model file says about a model trained on the data rows `rows`.
#[derive(Debug, Clone, Copy)]
pub struct Provenance<'a> {
    /// The data.
    pub data: &'a crate::data::Dataset,
    /// Data rows trained on (before pruning).
    pub rows: &'a [usize],
    /// The correction's name.
    pub correction: &'a str,
    /// The flip matrix, when one was used.
    pub matrix: Option<&'a Array2<f64>>,
    /// How the fit went.
    pub fit: FitSummary,
}

impl ModelFile {
    /// The file for `model`; the accuracies are measured on `provenance.rows`.
    pub fn describe(
        model: &SoftmaxModel,
        provenance: Provenance,
        settings: TrainingSettings,
    ) -> ModelFile {
        let Provenance {
            data, rows, fit, ..
        } = provenance;
        let x = data.features.select(ndarray::Axis(0), rows);
        let predicted = crate::learn::train::predict_classes(&model.predict_proba(x.view(), None));
        let observed: Vec<usize> = rows.iter().map(|&r| data.labels[r]).collect();
        let accuracy = crate::learn::metrics::accuracy;
        let accuracy_trusted = data.trusted.as_ref().and_then(|t| {
            let (predicted_trusted, truth): (Vec<usize>, Vec<usize>) = rows
                .iter()
                .zip(&predicted)
                .filter_map(|(&r, &p)| t[r].map(|l| (p, l)))
                .unzip();
            accuracy(&predicted_trusted, &truth)
        });
        ModelFile {
            format: MODEL_FORMAT.into(),
            version: MODEL_VERSION,
            classes: data.classes.clone(),
            features: data.feature_names.clone(),
            standardization: model.standardizer.clone(),
            weights: model
                .weights
                .rows()
                .into_iter()
                .map(|r| r.to_vec())
                .collect(),
            bias: model.bias.clone(),
            correction: provenance.correction.into(),
            matrix: provenance
                .matrix
                .map(|t| t.rows().into_iter().map(|r| r.to_vec()).collect()),
            settings,
            metrics: TrainingMetrics {
                objective: fit.objective,
                iterations: fit.iterations,
                converged: fit.converged,
                rows: rows.len() - fit.dropped_rows,
                dropped_rows: fit.dropped_rows,
                accuracy_observed: accuracy(&predicted, &observed).unwrap_or(0.0),
                accuracy_trusted,
            },
            data_hash: data_hash(data.features.view(), rows, &data.labels),
        }
    }

    /// The model for prediction, after checking every shape.
    pub fn model(&self) -> std::result::Result<SoftmaxModel, String> {
        let (k, d) = (self.classes.len(), self.features.len());
        if k < 2 {
            return Err(format!(
                "the model has {k} class(es); at least 2 are needed"
            ));
        }
        if d == 0 {
            return Err("the model has no features".into());
        }
        if self.weights.len() != k || self.weights.iter().any(|r| r.len() != d) {
            return Err(format!("the weights must be {k} rows of {d} numbers (one row per class, one column per feature)"));
        }
        if self.bias.len() != k {
            return Err(format!("the bias must have {k} numbers, one per class"));
        }
        if self.standardization.mean.len() != d || self.standardization.std.len() != d {
            return Err(format!(
                "the standardisation must have {d} means and {d} standard deviations"
            ));
        }
        let finite = |v: &f64| v.is_finite();
        let all_finite = self.weights.iter().flatten().all(finite)
            && self.bias.iter().all(finite)
            && self.standardization.mean.iter().all(finite)
            && self
                .standardization
                .std
                .iter()
                .all(|s| s.is_finite() && *s > 0.0);
        if !all_finite {
            return Err("the model holds a non-finite number (or a standard deviation that is not positive)".into());
        }
        let flat: Vec<f64> = self.weights.iter().flatten().copied().collect();
        let weights = Array2::from_shape_vec((k, d), flat).map_err(|e| e.to_string())?;
        Ok(SoftmaxModel {
            standardizer: self.standardization.clone(),
            weights,
            bias: self.bias.clone(),
        })
    }
}

/// Reads and checks a model file.
pub fn read_model<R: Read>(reader: R, path: &Path) -> Result<(ModelFile, SoftmaxModel)> {
    let bad = |detail: String| Error::input(Location::file(path), Problem::Model { detail });
    let value: serde_json::Value = serde_json::from_reader(reader).map_err(|e| {
        Error::input(
            Location::line(path, e.line() as u64),
            Problem::Model {
                detail: format!("not valid JSON: {e}"),
            },
        )
    })?;
    match value.get("format").and_then(|f| f.as_str()) {
        Some(MODEL_FORMAT) => {}
        _ => {
            return Err(bad(format!(
                "not a flipmend model file (no \"format\": \"{MODEL_FORMAT}\")"
            )))
        }
    }
    let version = value
        .get("version")
        .and_then(|v| v.as_u64())
        .ok_or_else(|| bad("the model file has no version".into()))?;
    if version > MODEL_VERSION as u64 {
        return Err(bad(format!(
            "the model file is version {version}, made by a newer flipmend; this one reads up to version {MODEL_VERSION}"
        )));
    }
    let file: ModelFile = serde_json::from_value(value)
        .map_err(|e| bad(format!("the model file is malformed: {e}")))?;
    let model = file.model().map_err(bad)?;
    Ok((file, model))
}

/// Writes a model file (pretty JSON).
pub fn write_model(out: &mut dyn Write, file: &ModelFile) -> std::io::Result<()> {
    serde_json::to_writer_pretty(&mut *out, file).map_err(std::io::Error::other)?;
    out.write_all(b"\n")
}

/// FNV-1a (64-bit) over the rows' feature bits and labels, as hex.
pub fn data_hash(x: ndarray::ArrayView2<f64>, rows: &[usize], labels: &[usize]) -> String {
    const OFFSET: u64 = 0xcbf2_9ce4_8422_2325;
    const PRIME: u64 = 0x0000_0100_0000_01b3;
    let mut h = OFFSET;
    let mut feed = |bytes: &[u8]| {
        for &b in bytes {
            h ^= u64::from(b);
            h = h.wrapping_mul(PRIME);
        }
    };
    for &r in rows {
        for v in x.row(r) {
            feed(&v.to_bits().to_le_bytes());
        }
        feed(&(labels[r] as u64).to_le_bytes());
    }
    format!("fnv1a64:{h:016x}")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> ModelFile {
        ModelFile {
            format: MODEL_FORMAT.into(),
            version: MODEL_VERSION,
            classes: vec!["a".into(), "b".into()],
            features: vec!["x".into()],
            standardization: Standardizer {
                mean: vec![0.5],
                std: vec![2.0],
            },
            weights: vec![vec![1.0], vec![-1.0]],
            bias: vec![0.1, -0.1],
            correction: "forward".into(),
            matrix: Some(vec![vec![0.9, 0.1], vec![0.2, 0.8]]),
            settings: TrainingSettings {
                l2: 1e-3,
                max_iter: 500,
                seed: 0,
                matrix_source: Some("quantile".into()),
            },
            metrics: TrainingMetrics {
                objective: 0.5,
                iterations: 10,
                converged: true,
                rows: 10,
                dropped_rows: 0,
                accuracy_observed: 0.9,
                accuracy_trusted: None,
            },
            data_hash: "fnv1a64:0".into(),
        }
    }

    fn round(file: &ModelFile) -> Result<(ModelFile, SoftmaxModel)> {
        let mut bytes = Vec::new();
        write_model(&mut bytes, file).unwrap();
        read_model(&bytes[..], Path::new("m.json"))
    }

    #[test]
    fn round_trip_is_exact() {
        let (back, model) = round(&sample()).unwrap();
        assert_eq!(back, sample());
        assert_eq!(model.weights[[1, 0]], -1.0);
    }

    #[test]
    fn newer_broken_and_foreign_files_are_refused() {
        let mut newer = sample();
        newer.version = MODEL_VERSION + 1;
        assert!(round(&newer)
            .unwrap_err()
            .to_string()
            .contains("made by a newer flipmend"));
        let mut broken = sample();
        broken.weights.pop();
        assert!(round(&broken)
            .unwrap_err()
            .to_string()
            .contains("the weights must be 2 rows of 1"));
        let mut zero_std = sample();
        zero_std.standardization.std[0] = 0.0;
        assert!(round(&zero_std).is_err());
        let e = read_model(&b"{\"format\": \"other\"}"[..], Path::new("m.json"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("not a flipmend model file"));
        let e = read_model(&b"{\"format\": "[..], Path::new("m.json"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("not valid JSON"), "{e}");
    }
}
