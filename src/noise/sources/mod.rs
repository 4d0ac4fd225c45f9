//! One flip matrix per label source (annotator, station, vendor, rule), with one clean
//! classifier shared by every source: p(observed | x, s) = T_sᵀ q(x).
//!
//! The joint estimator fits every T_s and q together ([`fit_grouped`]); the counting and
//! trusted estimators run on each source's rows. Either way each source's matrix is
//! shrunk toward the overall one by a Dirichlet prior worth [`PRIOR_ROWS`] rows per
//! class, so a source with few rows of a class borrows that row from the others instead
//! of reporting noise from a handful of rows; sources below [`MIN_SOURCE_ROWS`] rows
//! take the overall matrix outright. The overall matrix reported beside them is their
//! mix, each row weighted by the source's (estimated) rows of that true class.
//!
//! Whether the sources differ is a likelihood-ratio test with the clean posterior held
//! at the shared fit ([`test`]).

use ndarray::Array2;

use super::estimators::{estimate, Estimate, Method, Sample};
use super::joint::{fit_grouped, GroupedFit, Groups, JointParams, Start, DEFAULT_VOLUME_SCALE};
use super::matrix::normalize_rows;
use super::posterior::Posterior;
use crate::error::{Error, Result};

mod test;
#[cfg(test)]
mod tests;

pub use self::test::{fit_given_clean, SourceTest, PERMUTATIONS};

/// Rows per class of the prior that shrinks each source's matrix toward the overall one.
/// Measured with the joint estimator on three make_data.py tables (`--sources`): 20,000
/// rows × 5 classes in 4 sources (pair noise 0.2, seed 107), 4,000 × 5 in 8 sources
/// (500 rows each, seed 201) and 6,000 × 4 in 3 sources (symmetric 0.3, seed 202). Mean
/// per-source error (oracle 0.0035 / 0.0116 / 0.0106) at m = 0, 3, 10, 30, 100:
/// 0.0038 0.0038 0.0037 0.0037 0.0049 | 0.0135 0.0128 0.0108 0.0130 0.0206 |
/// 0.0121 0.0123 0.0126 0.0133 0.0177; m = 10 has the lowest mean over the three, at the
/// price of the worst single source going from 1.4 to 1.8 × its oracle on the third.
pub const PRIOR_ROWS: f64 = 10.0;

/// Sources with fewer rows than this take the overall matrix (and a warning says so).
pub const MIN_SOURCE_ROWS: usize = 30;

/// The rows an estimator sees, with the source of every row.
#[derive(Debug, Clone, Copy)]
pub struct SourceSample<'a, 's> {
    /// The rows and their probabilities, labels and audits.
    pub sample: Sample<'a>,
    /// The source of every row of the probabilities.
    pub of_row: &'s [u32],
    /// Source names (`of_row` indexes into them).
    pub names: &'s [String],
}

/// One source's matrix and what it says.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceMatrix {
    /// The source's name.
    pub name: String,
    /// Its rows in the sample.
    pub rows: usize,
    /// Its rows with a trusted label (any origin).
    pub audited: usize,
    /// Row-stochastic flip matrix, rows = true class.
    pub matrix: Array2<f64>,
    /// True when the source had too few rows and the overall matrix stands in.
    pub pooled: bool,
    /// Estimated share of each true class among its rows (mean clean posterior).
    pub clean_share: Vec<f64>,
    /// Estimated share of its rows whose label is wrong: Σ_i share_i·(1 − T_s[i][i]).
    pub noise_rate: f64,
}

/// Every source's matrix, their mix and the test of whether they differ.
#[derive(Debug, Clone, PartialEq)]
pub struct BySource {
    /// One entry per source, in the order of the names.
    pub sources: Vec<SourceMatrix>,
    /// The sources' mix: row i is Σ_s w_si·T_s[i], w_si the share of true class i's rows
    /// that source s holds.
    pub overall: Array2<f64>,
    /// The test of equal matrices (`None` with fewer than two sources of their own).
    pub test: Option<SourceTest>,
    /// Sources pooled, estimates that fell back, and so on.
    pub warnings: Vec<String>,
}

impl BySource {
    /// The matrix of every source, in order.
    pub fn matrices(&self) -> Vec<&Array2<f64>> {
        self.sources.iter().map(|s| &s.matrix).collect()
    }

    /// The same sources with `matrices` in their place (one per source, in order: hand
    /// edits in the app): each noise rate and the overall mix computed again as the
    /// estimate computes them, the rows, class shares, test and warnings kept.
    pub fn with_matrices(&self, matrices: Vec<Array2<f64>>) -> BySource {
        let sources: Vec<SourceMatrix> = self
            .sources
            .iter()
            .zip(matrices)
            .map(|(source, matrix)| SourceMatrix {
                noise_rate: noise_rate(&source.clean_share, &matrix),
                matrix,
                ..source.clone()
            })
            .collect();
        BySource {
            overall: mix(&sources, self.overall.nrows()),
            sources,
            test: self.test,
            warnings: self.warnings.clone(),
        }
    }

    /// Source indices from the noisiest to the cleanest (ties in name order).
    pub fn noisiest_first(&self) -> Vec<usize> {
        let rate = |s: usize| self.sources[s].noise_rate;
        let mut order: Vec<usize> = (0..self.sources.len()).collect();
        order.sort_by(|&a, &b| rate(b).total_cmp(&rate(a)).then(a.cmp(&b)));
        order
    }
}

impl SourceMatrix {
    /// The off-diagonal cells (true, observed, share of the source's rows) with a
    /// share above zero, largest first (ties in class order).
    pub fn largest_flips(&self) -> Vec<(usize, usize, f64)> {
        let k = self.clean_share.len();
        let mut cells: Vec<(usize, usize, f64)> = (0..k)
            .flat_map(|i| (0..k).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| (i, j, self.clean_share[i] * self.matrix[[i, j]]))
            .filter(|c| c.2 > 0.0)
            .collect();
        cells.sort_by(|a, b| b.2.total_cmp(&a.2).then((a.0, a.1).cmp(&(b.0, b.1))));
        cells
    }
}

/// Whether [`estimate_by_source`] runs the test of equal matrices (a bootstrap
/// resample does not need it).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Testing {
    /// Run the permutation test.
    Run,
    /// Leave `test` empty.
    Skip,
}

/// Estimates one matrix per source with `method`; `overall` is the same method's
/// estimate on all the rows (the start, the shrinkage target and the pooled sources'
/// matrix). Returns the sources and the clean posterior q(x) they share, for every row
/// of the probabilities (kept apart so the one copy can move into the estimate).
pub fn estimate_by_source(
    method: &Method,
    data: &SourceSample,
    classes: &[String],
    overall: &Estimate,
    testing: Testing,
) -> Result<(BySource, Array2<f32>)> {
    let k = classes.len();
    let rows = rows_by_source(data);
    let pooled: Vec<bool> = rows.iter().map(|r| r.len() < MIN_SOURCE_ROWS).collect();
    let mut warnings = pooled_warnings(data.names, &rows, &pooled);
    let (mut matrices, clean) = match method {
        Method::Joint { volume_weight } => {
            let fit = joint_by_source(data, &overall.matrix, *volume_weight, k)?;
            (fit.matrices, fit.clean)
        }
        Method::Counting | Method::Trusted { .. } => {
            let clean = shared_clean(data.sample, overall);
            let matrices = separately(method, data, &rows, classes, overall, &clean, &mut warnings);
            (matrices, clean)
        }
        Method::Anchor | Method::Quantile { .. } => {
            return Err(Error::Usage(format!(
                "per-source matrices need the joint, counting or trusted estimator, not {}: \
                 anchor rows describe the probability model, which every source shares",
                method.name()
            )))
        }
    };
    for (matrix, &pool) in matrices.iter_mut().zip(&pooled) {
        if pool {
            matrix.assign(&overall.matrix);
        }
    }
    let sources = summaries(data, &rows, &pooled, matrices, &clean);
    let fitted: Vec<usize> = (0..sources.len()).filter(|&s| !pooled[s]).collect();
    let test = (fitted.len() >= 2 && testing == Testing::Run)
        .then(|| test::equal_matrices(data, &rows, &fitted, &clean, k));
    let by_source = BySource {
        overall: mix(&sources, k),
        sources,
        test,
        warnings,
    };
    Ok((by_source, clean))
}

/// The sample's rows of every source, in sample order (repeats kept).
fn rows_by_source(data: &SourceSample) -> Vec<Vec<usize>> {
    let mut rows = vec![Vec::new(); data.names.len()];
    for &r in data.sample.rows {
        rows[data.of_row[r] as usize].push(r);
    }
    rows
}

fn pooled_warnings(names: &[String], rows: &[Vec<usize>], pooled: &[bool]) -> Vec<String> {
    names
        .iter()
        .zip(rows)
        .zip(pooled)
        .filter(|(_, &p)| p)
        .map(|((name, rows), _)| {
            format!(
                "source '{name}' has {} rows (fewer than {MIN_SOURCE_ROWS}): it is given the \
                 overall matrix",
                rows.len()
            )
        })
        .collect()
}

/// The grouped joint fit, every source started from and shrunk toward `overall`.
fn joint_by_source(
    data: &SourceSample,
    overall: &Array2<f64>,
    volume_weight: Option<f64>,
    k: usize,
) -> Result<GroupedFit> {
    let params = JointParams {
        volume_weight: volume_weight.unwrap_or(DEFAULT_VOLUME_SCALE / k.max(1) as f64),
        ..JointParams::default()
    };
    let groups = Groups {
        of_row: data.of_row,
        count: data.names.len(),
        prior: Some((overall, PRIOR_ROWS)),
    };
    fit_grouped(
        &data.sample,
        &groups,
        Start::Matrix(overall),
        &params,
        &mut |_| true,
    )
}

/// The clean posterior every source shares: the overall fit's when it has one, else the
/// probabilities inverted through the overall matrix.
fn shared_clean(sample: Sample, overall: &Estimate) -> Array2<f32> {
    if let Some(clean) = &overall.clean {
        return clean.clone();
    }
    let posterior = Posterior::new(&overall.matrix);
    let k = sample.probs.ncols();
    let mut clean = Array2::<f32>::zeros(sample.probs.raw_dim());
    let mut row = vec![0.0; k];
    for (noisy, mut out) in sample.probs.rows().into_iter().zip(clean.rows_mut()) {
        posterior.clean(&noisy.to_vec(), &mut row);
        out.iter_mut().zip(&row).for_each(|(o, &v)| *o = v as f32);
    }
    clean
}

/// Each source's rows through `method` on their own, each row of the result shrunk
/// toward the overall matrix by [`PRIOR_ROWS`] against the source's estimated rows of
/// that class. A source whose own estimate fails takes the overall matrix, with a warning.
fn separately(
    method: &Method,
    data: &SourceSample,
    rows: &[Vec<usize>],
    classes: &[String],
    overall: &Estimate,
    clean: &Array2<f32>,
    warnings: &mut Vec<String>,
) -> Vec<Array2<f64>> {
    let k = classes.len();
    rows.iter()
        .zip(data.names)
        .map(|(source_rows, name)| {
            if source_rows.len() < MIN_SOURCE_ROWS {
                return overall.matrix.clone();
            }
            let sample = Sample {
                probs: data.sample.probs.reborrow(),
                labels: data.sample.labels,
                trusted: data.sample.trusted,
                origins: data.sample.origins,
                rows: source_rows,
                own_probabilities: data.sample.own_probabilities,
            };
            match estimate(method, &sample, classes) {
                Ok(own) => {
                    let per_class = class_rows(clean, source_rows, k);
                    shrink(&own.matrix, &overall.matrix, &per_class)
                }
                Err(e) => {
                    warnings.push(format!(
                        "source '{name}': {e}; it is given the overall matrix"
                    ));
                    overall.matrix.clone()
                }
            }
        })
        .collect()
}

/// Estimated rows of each true class among `rows` (the clean posteriors' sums).
fn class_rows(clean: &Array2<f32>, rows: &[usize], k: usize) -> Vec<f64> {
    let mut total = vec![0.0; k];
    for &r in rows {
        for (t, &q) in total.iter_mut().zip(clean.row(r)) {
            *t += q as f64;
        }
    }
    total
}

/// Row i: (n_i·own[i] + m·centre[i]) / (n_i + m), the posterior mean under the prior.
fn shrink(own: &Array2<f64>, centre: &Array2<f64>, per_class: &[f64]) -> Array2<f64> {
    let mut out = own.clone();
    for (i, mut row) in out.rows_mut().into_iter().enumerate() {
        let n = per_class[i];
        row.iter_mut()
            .zip(centre.row(i))
            .for_each(|(o, &c)| *o = (n * *o + PRIOR_ROWS * c) / (n + PRIOR_ROWS));
    }
    normalize_rows(&mut out);
    out
}

/// Each source's counts, class shares and noise rate.
fn summaries(
    data: &SourceSample,
    rows: &[Vec<usize>],
    pooled: &[bool],
    matrices: Vec<Array2<f64>>,
    clean: &Array2<f32>,
) -> Vec<SourceMatrix> {
    let k = clean.ncols();
    matrices
        .into_iter()
        .enumerate()
        .map(|(s, matrix)| {
            let source_rows = &rows[s];
            let mut clean_share = class_rows(clean, source_rows, k);
            let total: f64 = clean_share.iter().sum();
            clean_share
                .iter_mut()
                .for_each(|v| *v /= total.max(f64::MIN_POSITIVE));
            let noise_rate = noise_rate(&clean_share, &matrix);
            let audited = data.sample.trusted.map_or(0, |t| {
                source_rows.iter().filter(|&&r| t[r].is_some()).count()
            });
            SourceMatrix {
                name: data.names[s].clone(),
                rows: source_rows.len(),
                audited,
                matrix,
                pooled: pooled[s],
                clean_share,
                noise_rate,
            }
        })
        .collect()
}

/// Σ_i share_i·(1 − T[i][i]): the share of a source's rows whose label is wrong.
fn noise_rate(clean_share: &[f64], matrix: &Array2<f64>) -> f64 {
    clean_share
        .iter()
        .enumerate()
        .map(|(i, share)| share * (1.0 - matrix[[i, i]]))
        .sum()
}

/// The sources' mix, row i weighted by each source's estimated rows of true class i.
fn mix(sources: &[SourceMatrix], k: usize) -> Array2<f64> {
    let mut overall = Array2::<f64>::zeros((k, k));
    let mut weight = vec![0.0; k];
    for source in sources {
        for i in 0..k {
            let w = source.rows as f64 * source.clean_share[i];
            weight[i] += w;
            for j in 0..k {
                overall[[i, j]] += w * source.matrix[[i, j]];
            }
        }
    }
    for i in 0..k {
        if weight[i] > 0.0 {
            overall.row_mut(i).mapv_inplace(|v| v / weight[i]);
        } else {
            overall[[i, i]] = 1.0;
        }
    }
    normalize_rows(&mut overall);
    overall
}
