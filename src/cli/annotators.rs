//! The several-annotators part of `estimate` and `suspects`: the consensus replaces the
//! observed label, and `estimate` reports each annotator and can write each row's
//! consensus.

use std::fmt::Write as _;
use std::io::Write;

use serde::Serialize;

use crate::data::Dataset;
use crate::error::Result;
use crate::workflow::consensus::{consensus, consensus_probability, relabelled};
use crate::workflow::consensus::{Consensual, ConsensusPrior};
use crate::workflow::RowProbabilities;

/// `data` with the consensus as its observed labels, when it has annotators' columns.
pub(super) fn relabel(
    data: Dataset,
    probs: &RowProbabilities,
    prior: ConsensusPrior,
    resamples: usize,
    seed: u64,
) -> Result<(Dataset, Option<Consensual>)> {
    // The annotators' intervals need 0 (Wilson) or at least 10 resamples.
    let resamples = if resamples >= 10 { resamples } else { 0 };
    match consensus(&data, probs, prior, resamples, seed)? {
        Some(found) => Ok((relabelled(data, &found), Some(found))),
        None => Ok((data, None)),
    }
}

/// One annotator in the JSON report (keys are stable: scripts read them).
#[derive(Debug, Serialize)]
pub(super) struct AnnotatorJson {
    column: String,
    items: usize,
    accuracy: f64,
    accuracy_low: f64,
    accuracy_high: f64,
    matrix: Vec<Vec<f64>>,
}

/// The annotators for the JSON report.
pub(super) fn report(found: &Consensual) -> Vec<AnnotatorJson> {
    found
        .consensus
        .annotators
        .iter()
        .zip(&found.columns)
        .map(|(a, column)| AnnotatorJson {
            column: column.clone(),
            items: a.items,
            accuracy: a.accuracy,
            accuracy_low: a.accuracy_low,
            accuracy_high: a.accuracy_high,
            matrix: a.matrix.rows().into_iter().map(|r| r.to_vec()).collect(),
        })
        .collect()
}

/// The printed table of annotators, most accurate first.
pub(super) fn render(t: &mut String, found: &Consensual, prior: ConsensusPrior) {
    let prior = match prior {
        ConsensusPrior::Classifier => "each row's classifier probabilities",
        ConsensusPrior::Shared => "one shared class prior",
    };
    let _ = writeln!(
        t,
        "annotators ({} columns): each one's confusion matrix and each row's consensus by \
         Dawid & Skene's EM, with {prior} as the prior; the consensus is the observed label \
         below ({} rows differ from the plain majority)",
        found.columns.len(),
        found.changed_from_majority
    );
    let width = super::name_width(found.columns.iter().map(String::as_str), 9);
    let _ = writeln!(
        t,
        "{:<width$}  {:>7}  {:>8}  {:>13}",
        "annotator", "items", "accuracy", "90% interval"
    );
    let annotators = &found.consensus.annotators;
    let mut order: Vec<usize> = (0..annotators.len()).collect();
    order.sort_by(|&a, &b| {
        annotators[b]
            .accuracy
            .total_cmp(&annotators[a].accuracy)
            .then(a.cmp(&b))
    });
    for a in order {
        let r = &annotators[a];
        let _ = writeln!(
            t,
            "{:<width$}  {:>7}  {:>7.1}%  {:>5.1}%–{:.1}%",
            found.columns[a],
            r.items,
            100.0 * r.accuracy,
            100.0 * r.accuracy_low,
            100.0 * r.accuracy_high
        );
    }
    for w in &found.consensus.warnings {
        let _ = writeln!(t, "warning: {w}");
    }
    let _ = writeln!(t);
}

/// Writes `id,consensus,consensus_prob,majority` for every row.
pub(super) fn write_rows(
    out: &mut dyn Write,
    data: &Dataset,
    found: &Consensual,
) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    w.write_record(["id", "consensus", "consensus_prob", "majority"])?;
    let probability = consensus_probability(&found.consensus.posterior, &found.consensus.consensus);
    for (r, (&c, p)) in found
        .consensus
        .consensus
        .iter()
        .zip(probability)
        .enumerate()
    {
        w.write_record([
            data.id(r).as_ref(),
            data.classes[c].as_str(),
            &format!("{p:.6}"),
            data.classes[found.majority[r]].as_str(),
        ])?;
    }
    w.flush()
}
