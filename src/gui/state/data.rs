//! Loading the table and its probabilities (read from a file or computed out-of-fold).

use super::*;
use crate::data::roles::ColumnPlan;
use crate::data::{ProbOptions, TableOptions};
use crate::io::session::Roles;
use crate::learn::{OofParams, SoftmaxParams};
use crate::workflow;
use crate::workflow::consensus::{consensus, relabelled, Consensual, ConsensusPrior};

/// The table relabelled by its annotators' consensus, and the consensus.
#[derive(Debug)]
pub struct Relabelled {
    data: Dataset,
    found: Consensual,
}

impl AppState {
    pub(super) fn load_data(&mut self, path: PathBuf, roles: Roles) {
        let options = match table_options(&roles) {
            Ok(o) => o,
            Err(e) => return self.say(Level::Error, e),
        };
        self.spawn_on_data(JobKind::Load, move |_| {
            if let Some(reason) = crate::data::footprint::too_large(&path) {
                return Err(crate::gui::jobs::JobFailure::Error(reason));
            }
            let data = Dataset::load(&path, &options).map_err(fail)?;
            Ok(JobOutput::Loaded(Box::new(data), roles))
        });
    }

    pub(super) fn data_loaded(&mut self, data: Dataset, roles: Roles) {
        for w in &data.warnings {
            self.say(Level::Warning, w.clone());
        }
        self.say(
            Level::Info,
            format!(
                "loaded {}: {} rows, {} features, {} classes",
                data.path.display(),
                data.rows(),
                data.feature_names.len(),
                data.classes.len()
            ),
        );
        let other_file = self.session.data.as_ref().is_some_and(|p| p != &data.path);
        self.session.data = Some(data.path.clone());
        self.session.roles = roles;
        if other_file {
            self.session.probs = None;
        }
        self.class_counts = (data.class_counts(), data.trusted_counts());
        self.of_row = data
            .sources
            .as_ref()
            .map(|s| Arc::from(s.of_row.as_slice()));
        self.source_filter = None;
        self.reset_review(&data);
        self.data = Some(Arc::new(data));
        self.data_generation += 1;
        self.rank_pending = false;
        self.diagnose_pending = false;
        for kind in [
            JobKind::Probabilities,
            JobKind::Estimate,
            JobKind::Bootstrap,
            JobKind::Rank,
            JobKind::RankRest,
            JobKind::Diagnose,
            JobKind::Retrain,
            JobKind::Review,
        ] {
            self.jobs.cancel(kind);
        }
        self.probs = None;
        self.consensus = None;
        self.editor = None;
        self.estimate = None;
        self.intervals = None;
        self.start_sources(None);
        self.diagnostics = None;
        self.ranking = None;
        self.visible.clear();
        self.retrained = None;
        self.review = None;
        let probs = self.session.probs.clone();
        self.load_probabilities(probs);
    }

    pub(super) fn load_probabilities(&mut self, path: Option<PathBuf>) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        let options = ProbOptions {
            renormalize: false,
            delimiter: None,
        };
        let oof = self.oof_params();
        self.session.probs = path.clone();
        self.spawn_on_data(JobKind::Probabilities, move |control| {
            let probs =
                workflow::probabilities(&data, path.as_deref(), &options, &oof, &mut |f, n| {
                    control.set_progress(f, n);
                    !control.is_cancelled()
                })
                .map_err(fail)?;
            // As the command line does: the classifier's probabilities as each row's prior,
            // the annotators' intervals by Wilson's formula (no resampling).
            let prior = ConsensusPrior::Classifier;
            let relabel = consensus(&data, &probs, prior, 0, oof.seed)
                .map_err(fail)?
                .map(|found| {
                    let data = relabelled((*data).clone(), &found);
                    Box::new(Relabelled { data, found })
                });
            Ok(JobOutput::Probabilities(Box::new(probs), relabel))
        });
    }

    /// New probabilities, and the table their consensus relabelled (annotators' columns).
    pub(super) fn probabilities_in(
        &mut self,
        probs: RowProbabilities,
        relabel: Option<Box<Relabelled>>,
    ) {
        for warning in &probs.warnings {
            self.say(Level::Warning, warning.clone());
        }
        if let Some(relabel) = relabel {
            let Relabelled { data, found } = *relabel;
            self.say(
                Level::Info,
                format!(
                    "consensus of {} annotators (Dawid & Skene, the classifier's probabilities \
                     as the prior): {} rows differ from the plain majority",
                    found.columns.len(),
                    found.changed_from_majority
                ),
            );
            self.class_counts = (data.class_counts(), data.trusted_counts());
            self.data = Some(Arc::new(data));
            self.consensus = Some(Arc::new(found));
        }
        self.probs = Some(Arc::new(probs));
        self.start_estimate();
    }

    /// Folds, seed and model of every fit.
    pub fn oof_params(&self) -> OofParams {
        let s = &self.session.settings;
        OofParams {
            folds: s.folds,
            seed: s.seed,
            model: SoftmaxParams::default().l2(s.l2).max_iter(s.max_iter),
        }
    }

    /// Checks roles against the loaded header without reading the file again; the
    /// message is shown beside the role pickers as the user changes them.
    pub fn check_roles(&self, roles: &Roles) -> Result<(), String> {
        let Some(data) = &self.data else {
            return Ok(());
        };
        let options = table_options(roles)?;
        ColumnPlan::resolve(&data.path, &data.header, &options)
            .map(|_| ())
            .map_err(|e| e.to_string())
    }
}

/// Roles as loader options.
pub fn table_options(roles: &Roles) -> Result<TableOptions, String> {
    let delimiter = match roles.delimiter.as_deref().map(str::trim) {
        None | Some("") => None,
        Some(text) => Some(crate::data::roles::parse_delimiter(text)?),
    };
    Ok(TableOptions {
        delimiter,
        label: roles.label.clone(),
        id: roles.id.clone(),
        trusted: roles.trusted.clone(),
        features: roles.features.clone(),
        source: roles.source.clone(),
        annotators: roles.annotators.clone(),
        exclude: Vec::new(),
        unlabeled: false,
    })
}
