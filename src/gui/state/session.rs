//! Sessions (saving and opening) and saving files: every save its own job, never over
//! an input.

use super::*;
use crate::io::session::{read_session, write_session, SESSION_VERSION, SESSION_VERSION_SOURCES};
use crate::io::{check_not_input, write_atomic};

impl AppState {
    /// The session as it would be saved now.
    pub fn snapshot_session(&self) -> Session {
        let mut s = self.session.clone();
        s.matrix = match (&self.data, &self.editor) {
            (Some(d), Some(e)) => Some(SessionMatrix {
                classes: d.classes.clone(),
                values: e.matrix().rows().into_iter().map(|r| r.to_vec()).collect(),
                origin: e.origin(),
            }),
            _ => None,
        };
        s.source_matrices = self.changed_source_matrices();
        if !s.source_matrices.is_empty() {
            s.version = SESSION_VERSION_SOURCES;
        }
        let review = self.review_for_session();
        (s.verdicts, s.round, s.round_score) = (review.verdicts, review.round, review.round_score);
        s.round_closed = review.round_closed;
        if !s.verdicts.is_empty() || !s.round.is_empty() {
            s.version = SESSION_VERSION;
        }
        s
    }

    /// The label sources' matrices changed by hand, as a session keeps them.
    fn changed_source_matrices(&self) -> Vec<SessionSourceMatrix> {
        let (Some(data), Some(sources)) = (&self.data, &self.sources) else {
            return Vec::new();
        };
        (0..sources.len())
            .filter(|&s| sources.is_edited(s))
            .filter_map(|s| {
                let editor = sources.editor(s)?;
                Some(SessionSourceMatrix {
                    source: sources.current().sources[s].name.clone(),
                    matrix: SessionMatrix {
                        classes: data.classes.clone(),
                        values: editor
                            .matrix()
                            .rows()
                            .into_iter()
                            .map(|r| r.to_vec())
                            .collect(),
                        origin: editor.origin(),
                    },
                })
            })
            .collect()
    }

    /// A session's changed source matrices, once the estimate's sources are in: each
    /// replaces its source's matrix (one undo step), compared with the fresh estimate.
    pub(super) fn restore_source_matrices(&mut self) {
        let pending = std::mem::take(&mut self.pending_sources);
        let Some(sources) = &mut self.sources else {
            return;
        };
        let classes = self
            .data
            .as_ref()
            .map(|d| d.classes.clone())
            .unwrap_or_default();
        let restored = !pending.is_empty();
        let mut skipped = Vec::new();
        for saved in pending {
            let at = sources
                .current()
                .sources
                .iter()
                .position(|s| s.name == saved.source);
            let k = saved.matrix.classes.len();
            let flat: Vec<f64> = saved.matrix.values.into_iter().flatten().collect();
            match (at, Array2::from_shape_vec((k, k), flat)) {
                (Some(s), Ok(matrix)) if saved.matrix.classes == classes => {
                    let origin = saved.matrix.origin;
                    sources.change(s, |e| {
                        e.replace_current(matrix, origin);
                        true
                    });
                }
                _ => skipped.push(saved.source),
            }
        }
        if restored {
            self.follow_sources();
        }
        if !skipped.is_empty() {
            self.say(
                Level::Warning,
                format!(
                    "the session's matrices of {} do not fit this table's label sources or \
                     classes and were not restored",
                    skipped.join(", ")
                ),
            );
        }
    }

    pub(super) fn save_session(&mut self, path: Option<PathBuf>) {
        let Some(path) = path.or_else(|| self.session_path.clone()) else {
            return self.say(Level::Error, "choose a file to save the session to");
        };
        let session = self.snapshot_session();
        let inputs = self.input_paths();
        let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
        // Sessions are small: written here, so a failure is reported before the next frame.
        let outcome = check_not_input(&path, &refs)
            .and_then(|()| write_atomic(&path, |w| write_session(w, &session)));
        match outcome {
            Ok(()) => {
                self.say(Level::Info, format!("session saved to {}", path.display()));
                self.session_path = Some(path);
            }
            Err(e) => self.say(Level::Error, format!("the session was not saved: {e}")),
        }
    }

    pub(super) fn open_session(&mut self, path: &Path) {
        let read = std::fs::File::open(path)
            .map_err(|source| Error::Read {
                path: path.to_path_buf(),
                source,
            })
            .and_then(|f| read_session(f, path));
        let session = match read {
            Ok(s) => s,
            Err(e) => return self.say(Level::Error, e.to_string()),
        };
        self.session_path = Some(path.to_path_buf());
        self.pending_matrix = session.matrix.clone();
        self.pending_sources = session.source_matrices.clone();
        let round = verdicts::PendingRound {
            rows: session.round.clone(),
            kind: session.round_score,
            closed: session.round_closed,
        };
        self.pending_review = Some((session.verdicts.clone(), round));
        let data = session.data.clone();
        let roles = session.roles.clone();
        self.session = session;
        self.session.matrix = None;
        self.session.source_matrices.clear();
        self.session.verdicts.clear();
        self.session.round.clear();
        self.session.round_score = None;
        self.session.round_closed = false;
        match data {
            Some(data) => self.load_data(data, roles),
            None => self.say(Level::Info, format!("opened session {}", path.display())),
        }
    }

    /// Files the app has read, which no output may replace.
    pub(super) fn input_paths(&self) -> Vec<PathBuf> {
        let mut inputs: Vec<PathBuf> = Vec::new();
        inputs.extend(self.session.data.clone());
        inputs.extend(self.session.probs.clone());
        inputs.extend(self.session.settings.test.clone());
        inputs.extend(self.session_path.clone());
        inputs
    }

    /// A new job kind for one save.
    pub(super) fn next_save(&mut self) -> JobKind {
        self.saves += 1;
        JobKind::Save(self.saves)
    }

    /// Writes a file on a worker, atomically, never over an input.
    pub(super) fn save_job<F>(&mut self, path: PathBuf, inputs: Vec<PathBuf>, write: F)
    where
        F: FnOnce(&mut (dyn std::io::Write + Send)) -> std::io::Result<()> + Send + 'static,
    {
        let kind = self.next_save();
        self.spawn_on_data(kind, move |_| {
            let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
            check_not_input(&path, &refs).map_err(fail)?;
            write_atomic(&path, write).map_err(fail)?;
            Ok(JobOutput::Saved(format!("wrote {}", path.display())))
        });
    }
}
