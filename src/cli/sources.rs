//! The per-source part of `estimate`'s report: a table of sources ranked by noise, each
//! source's largest flips, the test of equal matrices, and the same in JSON.

use std::fmt::Write as _;

use ndarray::Array2;
use serde::Serialize;

use crate::data::Dataset;
use crate::noise::bootstrap::SourceIntervals;
use crate::noise::sources::{BySource, SourceMatrix, PERMUTATIONS};

/// Flips listed per source.
const FLIPS_SHOWN: usize = 3;

/// One source in the JSON report (keys are stable: scripts read them).
#[derive(Debug, Serialize)]
pub(super) struct SourceReport {
    name: String,
    /// 1 = the noisiest source.
    noise_rank: usize,
    rows: usize,
    audited: usize,
    /// True when the source had too few rows and was given the overall matrix.
    pooled: bool,
    noise_rate: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    noise_rate_low: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    noise_rate_high: Option<f64>,
    largest_flips: Vec<FlipReport>,
    matrix: Vec<Vec<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    matrix_low: Option<Vec<Vec<f64>>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    matrix_high: Option<Vec<Vec<f64>>>,
}

/// One off-diagonal cell: the share of the source's rows that are true `true_class`
/// typed as `observed`, and T[true][observed].
#[derive(Debug, Serialize)]
pub(super) struct FlipReport {
    true_class: String,
    observed: String,
    share_of_rows: f64,
    rate: f64,
}

/// The test of equal matrices in the JSON report.
#[derive(Debug, Serialize)]
pub(super) struct TestReport {
    statistic: f64,
    degrees_of_freedom: usize,
    p_value: f64,
}

fn rows_of(t: &Array2<f64>) -> Vec<Vec<f64>> {
    t.rows().into_iter().map(|r| r.to_vec()).collect()
}

/// The largest off-diagonal cells of a source by share of its rows.
fn largest_flips(source: &SourceMatrix, classes: &[String]) -> Vec<FlipReport> {
    source
        .largest_flips()
        .into_iter()
        .take(FLIPS_SHOWN)
        .map(|(i, j, share)| FlipReport {
            true_class: classes[i].clone(),
            observed: classes[j].clone(),
            share_of_rows: share,
            rate: source.matrix[[i, j]],
        })
        .collect()
}

/// The sources for the JSON report, in name order, and the test.
pub(super) fn report(
    data: &Dataset,
    by_source: &BySource,
    intervals: Option<&SourceIntervals>,
) -> (Vec<SourceReport>, Option<TestReport>) {
    let order = by_source.noisiest_first();
    let sources = by_source
        .sources
        .iter()
        .enumerate()
        .map(|(s, source)| {
            let band = intervals.map(|i| (&i.matrices[s], i.noise_rates[s]));
            SourceReport {
                name: source.name.clone(),
                noise_rank: order.iter().position(|&o| o == s).unwrap_or(s) + 1,
                rows: source.rows,
                audited: source.audited,
                pooled: source.pooled,
                noise_rate: source.noise_rate,
                noise_rate_low: band.map(|b| b.1[0]),
                noise_rate_high: band.map(|b| b.1[1]),
                largest_flips: largest_flips(source, &data.classes),
                matrix: rows_of(&source.matrix),
                matrix_low: band.map(|b| rows_of(&b.0.low)),
                matrix_high: band.map(|b| rows_of(&b.0.high)),
            }
        })
        .collect();
    let test = by_source.test.map(|t| TestReport {
        statistic: t.statistic,
        degrees_of_freedom: t.degrees_of_freedom,
        p_value: t.p_value,
    });
    (sources, test)
}

/// The printed table: sources from the noisiest, with their largest flips.
pub(super) fn render(
    t: &mut String,
    data: &Dataset,
    by_source: &BySource,
    intervals: Option<&SourceIntervals>,
) {
    let column = data
        .sources
        .as_ref()
        .map_or("source", |s| s.column.as_str());
    let _ = writeln!(
        t,
        "\nlabel sources (column '{column}'), noisiest first; one flip matrix each, one clean \
         classifier for all:"
    );
    let width = super::name_width(by_source.sources.iter().map(|s| s.name.as_str()), 6);
    let _ = writeln!(
        t,
        "{:<width$}  {:>7}  {:>7}  {:>6}  {:>13}  largest flips (share of the source's rows)",
        "source", "rows", "audited", "noise", "90% interval"
    );
    for s in by_source.noisiest_first() {
        let source = &by_source.sources[s];
        let band = intervals.map_or(String::from("-"), |i| {
            let [low, high] = i.noise_rates[s];
            format!("{:.1}%–{:.1}%", 100.0 * low, 100.0 * high)
        });
        let flips: Vec<String> = largest_flips(source, &data.classes)
            .iter()
            .map(|f| {
                format!(
                    "{}→{} {:.1}%",
                    f.true_class,
                    f.observed,
                    100.0 * f.share_of_rows
                )
            })
            .collect();
        let pooled = if source.pooled {
            " (overall matrix)"
        } else {
            ""
        };
        let _ = writeln!(
            t,
            "{:<width$}  {:>7}  {:>7}  {:>5.1}%  {:>13}  {}{pooled}",
            source.name,
            source.rows,
            source.audited,
            100.0 * source.noise_rate,
            band,
            flips.join(", ")
        );
    }
    match by_source.test {
        Some(test) => {
            let verdict = if test.p_value <= 0.01 {
                "the sources' matrices differ"
            } else if test.p_value <= 0.05 {
                "some evidence that the sources' matrices differ"
            } else {
                "no evidence that the sources' matrices differ"
            };
            let p = if test.p_value <= 1.0 / (1 + PERMUTATIONS) as f64 {
                format!("p ≤ {:.2}", test.p_value)
            } else {
                format!("p = {:.2}", test.p_value)
            };
            let _ = writeln!(
                t,
                "test of equal matrices (likelihood ratio G = {:.1}, {PERMUTATIONS} permutations \
                 of the source column): {p}, {verdict}",
                test.statistic
            );
        }
        None => {
            let _ = writeln!(
                t,
                "test of equal matrices: needs two sources with rows enough"
            );
        }
    }
}
