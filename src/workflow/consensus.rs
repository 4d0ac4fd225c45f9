//! The consensus job: with several annotators per row (`--labels`), each annotator's
//! confusion matrix and each row's consensus class by Dawid & Skene's EM, the classifier's
//! out-of-sample probabilities as each row's prior on the true class (Raykar et al. 2010)
//! unless told otherwise. The consensus then stands as the observed label for the rest of
//! the pipeline.

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::RowProbabilities;
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::noise::annotators::{estimate_consensus, AnnotatorLabels, Consensus, ConsensusParams};

/// What each row's prior on its true class is.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ConsensusPrior {
    /// The classifier's out-of-sample probabilities of the row (Raykar et al. 2010).
    #[default]
    Classifier,
    /// One class prior shared by every row, estimated with the matrices (Dawid & Skene).
    Shared,
}

/// The consensus of the annotators of every row.
#[derive(Debug, Clone)]
pub struct Consensual {
    /// Each row's plain majority (the table's observed label before the consensus).
    pub majority: Vec<usize>,
    /// Per annotator and per row.
    pub consensus: Consensus,
    /// The annotators' column names, in the order of `consensus.annotators`.
    pub columns: Vec<String>,
    /// Rows whose consensus differs from the plain majority.
    pub changed_from_majority: usize,
}

/// Runs the consensus when `data` has annotators' columns; `None` otherwise.
pub fn consensus(
    data: &Dataset,
    probs: &RowProbabilities,
    prior: ConsensusPrior,
    resamples: usize,
    seed: u64,
) -> Result<Option<Consensual>> {
    let Some(annotations) = &data.annotations else {
        return Ok(None);
    };
    let labels = AnnotatorLabels {
        classes: data.classes.len(),
        labels: annotations.labels.view(),
    };
    let params = ConsensusParams {
        resamples,
        seed,
        ..ConsensusParams::default()
    };
    let prior_values = (prior == ConsensusPrior::Classifier).then(|| probs.values.view());
    let consensus = estimate_consensus(&labels, prior_values, &params, &mut |_| true)
        .map_err(|e| name_annotators(e, &annotations.columns))?;
    // From the annotations, not the table's labels: a table already relabelled by an
    // earlier consensus (the app, after new probabilities) still has its majority here.
    let majority: Vec<usize> = annotations
        .majority(data.classes.len())
        .into_iter()
        .zip(&data.labels)
        .map(|(m, &label)| m.unwrap_or(label))
        .collect();
    let changed_from_majority = consensus
        .consensus
        .iter()
        .zip(&majority)
        .filter(|(a, b)| a != b)
        .count();
    Ok(Some(Consensual {
        majority,
        columns: annotations.columns.clone(),
        consensus,
        changed_from_majority,
    }))
}

/// The consensus fit names annotators by position; the user knows their columns.
fn name_annotators(error: Error, columns: &[String]) -> Error {
    match error {
        Error::Usage(message) => {
            // From the highest index down, so "annotator 1" does not match "annotator 12".
            let named = columns.iter().enumerate().rev().fold(message, |m, (i, c)| {
                m.replace(&format!("annotator {i}"), &format!("annotator '{c}'"))
            });
            Error::Usage(named)
        }
        other => other,
    }
}

/// `data` with the consensus as every row's observed label.
pub fn relabelled(mut data: Dataset, found: &Consensual) -> Dataset {
    data.labels = found.consensus.consensus.clone();
    data
}

/// The consensus probability of each row's consensus class.
pub fn consensus_probability(posterior: &Array2<f64>, consensus: &[usize]) -> Vec<f64> {
    consensus
        .iter()
        .enumerate()
        .map(|(r, &c)| posterior[[r, c]])
        .collect()
}
