//! Ranking the suspects and diagnosing the matrix after every change, at most one of
//! each running (an edit during one reruns it once when it ends), and the filters.

use super::*;
use ndarray::ArrayView2;

use crate::noise::posterior::Flip;
use crate::noise::scores::ScoreKind;
use crate::noise::Estimator;
use crate::workflow;
use crate::workflow::ranking::{
    filter_rows, finish_ranking, rank_head, Filter, Matrices, Under, HEAD_ROWS,
};

impl AppState {
    pub(super) fn change_settings(&mut self, new: Settings) {
        let old = std::mem::replace(&mut self.session.settings, new);
        let s = &self.session.settings;
        let estimator_changed = old.estimator != s.estimator
            || (matches!(s.estimator, Estimator::Quantile | Estimator::Trusted)
                && old.quantile != s.quantile);
        let score_changed = old.score != s.score;
        let filter_changed = old.min_score != s.min_score
            || old.observed_filter != s.observed_filter
            || old.suggested_filter != s.suggested_filter;
        if estimator_changed {
            self.start_estimate();
        } else if score_changed {
            self.start_rank();
        }
        if filter_changed {
            self.refilter();
        }
    }

    /// What a job on the current matrix needs, unless one of `kind` is already running
    /// (then the job is marked to run again when it ends, and `None` is returned).
    fn matrix_job_inputs(&mut self, kind: JobKind) -> Option<MatrixJobInputs> {
        let (Some(data), Some(probs), Some(editor)) =
            (self.data.clone(), self.probs.clone(), self.editor.as_ref())
        else {
            return None;
        };
        if self.jobs.running(kind).is_some() {
            match kind {
                JobKind::Rank => self.rank_pending = true,
                _ => self.diagnose_pending = true,
            }
            return None;
        }
        Some(MatrixJobInputs {
            data,
            probs,
            matrix: editor.matrix().clone(),
            version: editor.version(),
            clean: self.estimate.as_ref().and_then(|e| e.clean.clone()),
            by_source: self.ranking_sources(),
        })
    }

    pub(super) fn start_rank(&mut self) {
        let Some(inputs) = self.matrix_job_inputs(JobKind::Rank) else {
            return;
        };
        let kind = self.session.settings.score;
        // Sorting the rest of an older ranking is wasted once a newer one is on its way.
        self.jobs.cancel(JobKind::RankRest);
        self.spawn_on_data(JobKind::Rank, move |_| {
            let (probs, under) = inputs.scored(kind);
            let r = rank_head(probs, &inputs.data.labels, under, HEAD_ROWS);
            Ok(JobOutput::Ranked(Box::new(r)))
        });
    }

    pub(super) fn start_rank_rest(&mut self, partial: Arc<Ranking>) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return;
        };
        // The rows the head was scored from: the joint fit's clean posteriors or the
        // noisy probabilities.
        let clean = partial
            .clean_inputs
            .then(|| self.estimate.as_ref().and_then(|e| e.clean.clone()))
            .flatten();
        if partial.clean_inputs && clean.is_none() {
            return;
        }
        self.spawn_on_data(JobKind::RankRest, move |control| {
            if control.is_cancelled() {
                return Err(JobFailure::Cancelled);
            }
            let rows = match &clean {
                Some(c) => c.view(),
                None => probs.values.view(),
            };
            let full = finish_ranking(&partial, rows, &data.labels);
            Ok(JobOutput::RankedRest(Box::new(full)))
        });
    }

    pub(super) fn start_diagnose(&mut self) {
        let Some(MatrixJobInputs {
            data,
            probs,
            matrix,
            version,
            clean,
            ..
        }) = self.matrix_job_inputs(JobKind::Diagnose)
        else {
            return;
        };
        self.spawn_on_data(JobKind::Diagnose, move |_| {
            let d = workflow::diagnose_matrix(&data, &probs, &matrix, clean.as_deref());
            Ok(JobOutput::Diagnosed(Box::new(d), version))
        });
    }

    /// The filter the settings describe, with class names resolved.
    pub fn filter(&self) -> Filter {
        let s = &self.session.settings;
        let class = |name: &Option<String>| {
            let classes = &self.data.as_ref()?.classes;
            classes.iter().position(|c| Some(c) == name.as_ref())
        };
        Filter {
            observed: class(&s.observed_filter),
            suggested: class(&s.suggested_filter),
            source: self.source_filter,
            min_score: s.min_score,
        }
    }

    pub(super) fn refilter(&mut self) {
        let filter = self.filter();
        self.visible = match (&self.ranking, &self.data) {
            (Some(r), Some(d)) => filter_rows(r, &d.labels, self.of_row.as_deref(), &filter),
            _ => Vec::new(),
        };
        self.sort_table();
        self.index_rows();
    }
}

/// The data, probabilities and a copy of the matrix (with its version) for a job.
struct MatrixJobInputs {
    data: Arc<Dataset>,
    probs: Arc<RowProbabilities>,
    matrix: Array2<f64>,
    version: u64,
    /// The joint fit's clean posteriors, when the matrix came from one.
    clean: Option<Arc<Array2<f32>>>,
    /// Every source's matrix and every row's source, when each row is ranked under its
    /// own source's matrix.
    by_source: Option<Matrices>,
}

impl MatrixJobInputs {
    /// What the score reads, and the matrices as they apply to it: each row's own
    /// source's matrix for the posterior score on clean posteriors (as the command line
    /// scores them), else the one matrix.
    pub(super) fn scored(&self, kind: ScoreKind) -> (ArrayView2<'_, f32>, Under) {
        let (view, flip) =
            workflow::score_inputs(kind, &self.probs, self.clean.as_deref(), Some(&self.matrix));
        let under = match (flip, &self.by_source) {
            (Some(flip), Some(matrices)) if flip.clean_inputs => Under {
                kind,
                matrices: matrices.clone(),
                clean_inputs: true,
                version: self.version,
            },
            (flip, _) => Under::one(
                flip.unwrap_or(Flip::noisy(&self.matrix)),
                kind,
                self.version,
            ),
        };
        (view, under)
    }
}
