//! The suspects job: every row scored, ranked, summarised (histogram and expected number
//! of mislabelled rows) and the worklist's rows chosen, for the command line and the app.
//! The app's incremental ranking after a matrix edit ([`super::ranking`]) shares the
//! scores and the one chunked sum of the expected count with it.

use ndarray::ArrayView2;

use super::ranking::{score_summaries, Histogram};
use super::worklist::{ranks_of, split_budget, valid_control_share, with_control};
use super::{diagnose_matrix_given, matrix_only, score_inputs, MatrixSource, RowProbabilities};
use crate::data::Dataset;
use crate::error::{Error, Result};
use crate::io::worklist::Item;
use crate::noise::posterior::Flip;
use crate::noise::scores::{rank_values, select_rows, RowFlips, RowScore};
use crate::noise::scores::{ScoreKind, Selection};
use crate::noise::Estimate;
use crate::timing::Stages;

/// Rows listed when neither a budget, a threshold nor every row is asked for.
pub const DEFAULT_TOP: usize = 100;

/// What the suspects job lists and how.
#[derive(Debug, Clone, PartialEq)]
pub struct SuspectsParams {
    /// The score that ranks the rows.
    pub score: ScoreKind,
    /// Where the flip matrix comes from (read only by the posterior score).
    pub matrix: MatrixSource,
    /// At most this many rows on the worklist, control rows included (`None`: no limit).
    pub budget: Option<usize>,
    /// Only rows whose score as shown ([`ScoreKind::shown`]) is at least this: a
    /// probability that the label is wrong, or a margin.
    pub threshold: Option<f64>,
    /// At most this many listed rows per observed class.
    pub per_class_cap: Option<usize>,
    /// Only rows observed as one of these classes.
    pub classes: Option<Vec<usize>>,
    /// Share of the worklist given to control rows, in [0, 0.5).
    pub control_share: f64,
    /// Seed of the control rows' draw and order.
    pub seed: u64,
}

impl SuspectsParams {
    /// Refuses a threshold outside the score's range and a control share the worklist
    /// cannot hold.
    pub fn check(&self) -> Result<()> {
        let (low, high) = self.score.shown_range();
        if let Some(t) = self.threshold.filter(|t| !(low..=high).contains(t)) {
            return Err(Error::Usage(format!(
                "the threshold must be a number from {low} to {high} for the {} score, not {t}",
                self.score.name()
            )));
        }
        if !valid_control_share(self.control_share) {
            return Err(Error::Usage(format!(
                "the control share must be from 0 to below 0.5 of the worklist, not {}",
                self.control_share
            )));
        }
        Ok(())
    }

    fn selection(&self) -> Selection {
        Selection {
            top: self.budget,
            threshold: self.threshold.map(|t| self.score.from_shown(t)),
            per_class_cap: self.per_class_cap,
            classes: self.classes.clone(),
        }
    }
}

/// The flip matrix the posterior score used.
#[derive(Debug, Clone)]
pub struct UsedMatrix {
    /// How reports name it (`joint`, `file m.csv`, …).
    pub description: String,
    /// The matrix, the clean posteriors of a joint fit and the estimator's warnings.
    pub estimate: Estimate,
}

/// What the suspects job found.
#[derive(Debug, Clone)]
pub struct Suspects {
    /// The score.
    pub kind: ScoreKind,
    /// The matrix, for the posterior score.
    pub matrix: Option<UsedMatrix>,
    /// Every row's score (higher = more suspect), by row.
    pub scores: Vec<f64>,
    /// Every row, most suspect first.
    pub order: Vec<usize>,
    /// The listed suspects in rank order, with their verdicts.
    pub listed: Vec<RowScore>,
    /// The worklist's items: the listed suspects and the control rows, shuffled together
    /// when there are control rows, else in rank order.
    pub items: Vec<Item>,
    /// The histogram of every row's score as shown.
    pub histogram: Histogram,
    /// The expected number of mislabelled rows (probability scores only).
    pub expected_errors: Option<f64>,
    /// Everything the user should know: data, probabilities, matrix and diagnosis.
    pub warnings: Vec<String>,
}

impl Suspects {
    /// Control rows on the worklist.
    pub fn control_rows(&self) -> usize {
        self.items.len() - self.listed.len()
    }
}

/// Scores every row with `params.score`, ranks them and chooses the worklist's rows.
/// `stages` times each step (the command line's `FLIPMEND_TIMING`).
pub fn suspects(
    data: &Dataset,
    probs: &RowProbabilities,
    params: &SuspectsParams,
    stages: &mut Stages,
) -> Result<Suspects> {
    params.check()?;
    let mut warnings = data.warnings.clone();
    warnings.extend(probs.warnings.iter().cloned());
    let matrix = used_matrix(data, probs, params)?;
    stages.end("matrix");
    let (t, clean) = match &matrix {
        Some(m) => (Some(&m.estimate.matrix), m.estimate.clean.as_ref()),
        None => (None, None),
    };
    let (score_probs, flip) = score_inputs(params.score, probs, clean, t);
    let by_source = matrix.as_ref().and_then(|m| m.estimate.by_source.as_ref());
    let flips = match (flip, by_source, &data.sources) {
        (Some(_), Some(by_source), Some(sources)) => RowFlips::BySource {
            flips: by_source.matrices().into_iter().map(Flip::clean).collect(),
            of_row: &sources.of_row,
        },
        _ => RowFlips::One(flip),
    };
    // Scores alone for every row; the full verdict only for the rows listed.
    let scores = flips.values(params.score, score_probs, &data.labels);
    let (histogram, expected_errors) = score_summaries(&scores, params.score);
    stages.end("scores");
    if let Some(m) = &matrix {
        // The posterior scores' sum is the expected number of mislabelled rows, so the
        // diagnosis does not compute every posterior again.
        let diagnostics = diagnose_matrix_given(data, probs, &m.estimate.matrix, expected_errors);
        warnings.extend(m.estimate.warnings.iter().cloned());
        warnings.extend(diagnostics.warnings);
    }
    stages.end("diagnose");
    let order = rank_values(&scores, scores.len());
    let lists = Lists {
        data,
        params,
        order: &order,
        score_probs,
        flips: &flips,
    };
    let (listed, items) = lists.choose(&scores);
    stages.end("rank");
    Ok(Suspects {
        kind: params.score,
        matrix,
        scores,
        order,
        listed,
        items,
        histogram,
        expected_errors,
        warnings,
    })
}

/// The matrix the posterior score reads; none for the other scores.
fn used_matrix(
    data: &Dataset,
    probs: &RowProbabilities,
    params: &SuspectsParams,
) -> Result<Option<UsedMatrix>> {
    if params.score != ScoreKind::Posterior {
        return Ok(None);
    }
    Ok(Some(UsedMatrix {
        description: params.matrix.describe(),
        estimate: matrix_only(data, probs, &params.matrix)?,
    }))
}

/// What choosing the worklist's rows reads.
struct Lists<'a> {
    data: &'a Dataset,
    params: &'a SuspectsParams,
    order: &'a [usize],
    score_probs: ArrayView2<'a, f32>,
    flips: &'a RowFlips<'a>,
}

impl Lists<'_> {
    /// The listed suspects (in rank order) and the worklist's items. A budget is split
    /// between suspects and control rows; without one the control rows come on top of
    /// the list, as the share of its length.
    fn choose(&self, scores: &[f64]) -> (Vec<RowScore>, Vec<Item>) {
        let (data, params) = (self.data, self.params);
        let mut selection = params.selection();
        let budget_control = params.budget.map(|budget| {
            let (suspects, control) = split_budget(budget, params.control_share);
            selection.top = Some(suspects);
            control
        });
        let rows = select_rows(
            self.order.iter().map(|&r| (r, scores[r])),
            &data.labels,
            data.classes.len(),
            &selection,
        );
        let control = budget_control
            .unwrap_or_else(|| (rows.len() as f64 * params.control_share).ceil() as usize);
        let listed = self.verdicts(&rows);
        let items = self.items(&listed, control);
        (listed, items)
    }

    fn verdicts(&self, rows: &[usize]) -> Vec<RowScore> {
        self.flips
            .selected(self.params.score, self.score_probs, &self.data.labels, rows)
    }

    fn ranks(&self, rows: &[usize]) -> Vec<usize> {
        ranks_of(self.order.iter().copied(), rows)
    }

    /// The listed rows with their ranks plus `control` rows drawn from the rows of the
    /// chosen classes that are not listed.
    fn items(&self, listed: &[RowScore], control: usize) -> Vec<Item> {
        let ranks = self.ranks(&listed.iter().map(|s| s.row).collect::<Vec<_>>());
        let listed: Vec<(RowScore, usize)> = listed.iter().copied().zip(ranks).collect();
        let classes = self.params.classes.as_deref();
        let labels = &self.data.labels;
        with_control(
            &listed,
            self.data.rows(),
            control,
            self.params.seed,
            |r| classes.is_none_or(|c| c.contains(&labels[r])),
            |rows| self.verdicts(rows),
            |rows| self.ranks(rows),
        )
    }
}

/// The expected number of mislabelled rows among `rows` (probability scores only).
pub fn expected_among(kind: ScoreKind, rows: &[&RowScore]) -> Option<f64> {
    // A fold from +0.0: `sum` starts from −0.0, which JSON would show for no rows.
    kind.is_probability().then(|| {
        rows.iter()
            .filter_map(|s| kind.probability(s.score))
            .fold(0.0, |a, p| a + p)
    })
}
