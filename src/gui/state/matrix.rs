//! The flip matrix: estimating it, editing it (with undo), importing, exporting and
//! bootstrapping it.

use super::*;
use crate::io::matrix_csv::{load_matrix_csv, write_matrix_csv};
use crate::io::session::MatrixOrigin;
use crate::noise::EstimatorSettings;
use crate::workflow;

impl AppState {
    /// The estimator the settings pick.
    pub fn method(&self) -> Method {
        let s = &self.session.settings;
        s.estimator.with(&EstimatorSettings {
            quantile: s.quantile,
            fallback: s.fallback,
            volume_weight: None,
        })
    }

    /// Bumped whenever the estimate is replaced (or a matrix imported): the Overview
    /// starts the bootstrap once per estimate number, not again after a cancel.
    pub fn estimate_number(&self) -> u64 {
        self.estimates
    }

    pub(super) fn start_estimate(&mut self) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return;
        };
        let method = self.method();
        let trusted = self.trusted_overlay();
        self.estimate_pending = false;
        self.spawn_on_data(JobKind::Estimate, move |_| {
            let e = workflow::estimate_with_trusted(&data, &probs, &method, trusted.as_deref())
                .map_err(fail)?;
            let classes = data.classes.len();
            let info = EstimateInfo {
                source: workflow::MatrixSource::Estimate(method.clone()).describe(),
                volume: e.volume.map(|v| v.describe(classes)),
                method: Some(e.pinned(&method)),
                warnings: e.warnings,
                clean: e.clean.map(Arc::new),
                by_source: e.by_source.map(Arc::new),
            };
            Ok(JobOutput::Estimated(e.matrix, info))
        });
    }

    pub(super) fn estimated(&mut self, matrix: Array2<f64>, info: EstimateInfo) {
        for warning in &info.warnings {
            self.say(Level::Warning, warning.clone());
        }
        let classes = self
            .data
            .as_ref()
            .map(|d| d.classes.clone())
            .unwrap_or_default();
        let restored = self
            .pending_matrix
            .take()
            .filter(|m| m.classes == classes)
            .map(|m| {
                let k = m.classes.len();
                let flat: Vec<f64> = m.values.into_iter().flatten().collect();
                (Array2::from_shape_vec((k, k), flat), m.origin)
            });
        match (restored, &mut self.editor) {
            (Some((Ok(saved), origin)), _) => {
                let mut editor = MatrixEditor::new(matrix, MatrixOrigin::Estimated);
                if origin == MatrixOrigin::Imported {
                    editor.replace(saved, MatrixOrigin::Imported);
                } else {
                    // Restored edits are measured against the fresh estimate.
                    editor.replace_current(saved, origin);
                }
                self.editor = Some(editor);
            }
            (_, Some(editor)) => editor.replace(matrix, MatrixOrigin::Estimated),
            (_, None) => self.editor = Some(MatrixEditor::new(matrix, MatrixOrigin::Estimated)),
        }
        self.start_sources(info.by_source.clone());
        self.restore_source_matrices();
        self.estimate = Some(info);
        self.drop_intervals();
        self.matrix_changed();
    }

    /// The matrix changed: re-rank first (the table is what the user watches while
    /// editing), and diagnose once the ranking is done, so the two do not share the
    /// cores.
    pub(super) fn matrix_changed(&mut self) {
        self.start_rank();
        self.diagnose_pending = true;
        if self.jobs.running(JobKind::Rank).is_none() {
            self.start_diagnose();
        }
    }

    pub(super) fn import_matrix(&mut self, path: &Path) {
        let Some(data) = &self.data else {
            return self.say(Level::Error, "load a data table first");
        };
        match load_matrix_csv(path, &data.classes, false) {
            Ok((matrix, warnings)) => {
                for n in warnings {
                    self.say(Level::Warning, n);
                }
                if let Some(name) = self.shown_source_name() {
                    // Into the source shown: one undo step, the other sources kept.
                    self.edit(|e| {
                        e.replace(matrix, MatrixOrigin::Imported);
                        true
                    });
                    let text = format!("imported {} as the matrix of {name}", path.display());
                    return self.say(Level::Info, text);
                }
                let k = matrix.nrows();
                let editor = self.editor.get_or_insert_with(|| {
                    MatrixEditor::new(Array2::eye(k), MatrixOrigin::Imported)
                });
                editor.replace(matrix, MatrixOrigin::Imported);
                self.estimate = Some(EstimateInfo {
                    source: format!("file {}", path.display()),
                    warnings: Vec::new(),
                    method: None,
                    volume: None,
                    clean: None,
                    by_source: None,
                });
                self.drop_intervals();
                self.start_sources(None);
                self.say(Level::Info, format!("imported {}", path.display()));
                self.matrix_changed();
            }
            Err(e) => self.say(Level::Error, e.to_string()),
        }
    }

    /// Writes the matrix shown (the overall one or a source's).
    pub(super) fn export_matrix(&mut self, path: PathBuf) {
        let (Some(data), Some(editor)) = (&self.data, self.shown_editor()) else {
            return self.say(Level::Error, "there is no matrix to export yet");
        };
        let matrix = editor.matrix().clone();
        let classes = data.classes.clone();
        let inputs = self.input_paths();
        self.save_job(path, inputs, move |w| {
            write_matrix_csv(w, &matrix, &classes)
        });
    }

    /// The intervals belong to the estimate they resampled: a new estimate (or an
    /// imported matrix) drops them, a bootstrap still running for the old one is
    /// cancelled, and one that finished meanwhile is dropped by its estimate number.
    fn drop_intervals(&mut self) {
        self.estimates += 1;
        self.jobs.cancel(JobKind::Bootstrap);
        self.intervals = None;
        self.source_intervals = None;
    }

    pub(super) fn start_bootstrap(&mut self) {
        let (Some(data), Some(probs)) = (self.data.clone(), self.probs.clone()) else {
            return self.say(Level::Error, "the bootstrap needs data and probabilities");
        };
        let Some(method) = self.estimate.as_ref().and_then(|e| e.method.clone()) else {
            return self.say(
                Level::Error,
                "an imported matrix has no estimator to resample",
            );
        };
        let s = &self.session.settings;
        let (resamples, seed) = (s.resamples.max(2), s.seed);
        let by_source = self.sources.is_some();
        let estimate = self.estimates;
        let trusted = self.trusted_overlay();
        self.spawn_on_data(JobKind::Bootstrap, move |_| match &data.sources {
            // One matrix per source: every source's intervals and their mix's.
            Some(sources) if by_source => {
                let t = trusted.as_deref();
                workflow::source_intervals(&data, sources, &probs, &method, resamples, seed, t)
                    .map(|i| JobOutput::SourceIntervals(Box::new(i), estimate))
                    .map_err(fail)
            }
            _ => workflow::matrix_intervals(
                &data,
                &probs,
                &method,
                resamples,
                seed,
                trusted.as_deref(),
            )
            .map(|i| JobOutput::Intervals(i, estimate))
            .map_err(fail),
        });
    }

    /// How the status bar and model files name the current matrix.
    pub fn matrix_description(&self) -> String {
        let edited = self
            .sources
            .as_ref()
            .map(|s| s.edited_names())
            .unwrap_or_default();
        let sources = match edited.as_slice() {
            [] => String::new(),
            [one] => format!("{one}'s matrix"),
            many => format!("the matrices of {}", many.join(", ")),
        };
        match (&self.editor, &self.estimate) {
            (Some(e), Some(info)) if e.origin() == MatrixOrigin::Edited => {
                format!("{} (edited by hand)", info.source)
            }
            (Some(_), Some(info)) if !edited.is_empty() => {
                format!("{} ({sources} changed by hand)", info.source)
            }
            (Some(_), Some(info)) => info.source.clone(),
            _ => "none yet".into(),
        }
    }
}
