//! Training and comparing the corrections on one holdout, and saving one of the models.

use super::*;
use crate::io::model::{write_model, ModelFile, Provenance, TrainingSettings};
use crate::workflow::compare::{compare, load_test, CompareInputs, CompareSettings, MatrixChoice};

impl AppState {
    pub(super) fn start_retrain(&mut self) {
        let (Some(data), Some(probs), Some(editor)) =
            (self.data.clone(), self.probs.clone(), self.editor.as_ref())
        else {
            return self.say(
                Level::Error,
                "retraining needs data, probabilities and a matrix",
            );
        };
        let matrix = editor.matrix().clone();
        // Ranked by source, so trained by source: the forward correction scores each row
        // under its own source's matrix, as `compare --source` does.
        let by_source = self
            .ranks_by_source()
            .then(|| self.sources.as_ref().map(|s| s.matrices()))
            .flatten();
        let version = editor.version();
        let s = &self.session.settings;
        let settings = CompareSettings {
            holdout: s.holdout,
            fit: self.oof_params(),
            corrections: s.corrections.clone(),
        };
        let test_path = s.test.clone();
        self.spawn_on_data(JobKind::Retrain, move |control| {
            let test = test_path
                .as_deref()
                .map(|p| load_test(p, None, &data))
                .transpose()
                .map_err(fail)?;
            let choice = match &by_source {
                Some(sources) => MatrixChoice::GivenBySource {
                    overall: &matrix,
                    sources,
                },
                None => MatrixChoice::Given(&matrix),
            };
            let inputs = CompareInputs {
                data: &data,
                probs: Some(&probs),
                matrix: choice,
                test: test.as_ref().map(|(x, l)| (x, l.as_slice())),
            };
            let comparison = compare(inputs, &settings, Some(control.flag()), &mut |i, n| {
                control.set_progress(i, n);
                !control.is_cancelled()
            })
            .map_err(fail)?;
            let retrained = Retrained {
                comparison: Arc::new(comparison),
                matrix_version: version,
            };
            Ok(JobOutput::Compared(retrained))
        });
    }

    pub(super) fn save_model(&mut self, index: usize, path: PathBuf) {
        let (Some(data), Some(r)) = (self.data.clone(), self.retrained.clone()) else {
            return self.say(Level::Error, "train first");
        };
        if index >= r.comparison.models.len() {
            return self.say(Level::Error, "no such model");
        }
        let s = self.session.settings.clone();
        let source = self.matrix_description();
        let inputs = self.input_paths();
        self.save_job(path, inputs, move |w| {
            let c = &r.comparison;
            let (correction, model) = &c.models[index];
            let matrix = Array2::from_shape_vec(
                (c.report.classes.len(), c.report.classes.len()),
                c.report.matrix.iter().flatten().copied().collect(),
            )
            .map_err(std::io::Error::other)?;
            let provenance = Provenance {
                data: &data,
                rows: &c.train,
                correction: correction.name(),
                matrix: correction.needs_matrix().then_some(&matrix),
                fit: c.fits[index],
            };
            let settings = TrainingSettings {
                l2: s.l2,
                max_iter: s.max_iter,
                seed: s.seed,
                matrix_source: correction.needs_matrix().then(|| source.clone()),
            };
            write_model(w, &ModelFile::describe(model, provenance, settings))
        });
    }
}
