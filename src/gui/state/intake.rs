//! Taking the jobs' results in: polling, waiting (tests and scripts), and the one stamp
//! check every result passes ([`AppState::accept`]); starting a job stamped with the
//! data generation it reads.

use super::*;

impl AppState {
    /// Bumped by every successful load (0 before any): the UI compares it with the last
    /// one it saw to notice new data (the Overview opens then).
    pub fn data_generation(&self) -> u64 {
        self.data_generation
    }

    /// Takes in finished jobs; returns true when anything changed.
    pub fn poll(&mut self) -> bool {
        let finished = self.jobs.poll();
        let changed = !finished.is_empty();
        for done in finished {
            self.receive(done);
        }
        changed
    }

    /// Waits for every job (and the jobs they start) to finish; for tests and scripts.
    pub fn settle(&mut self, timeout_secs: f64) {
        let deadline = std::time::Instant::now() + std::time::Duration::from_secs_f64(timeout_secs);
        loop {
            for done in self.jobs.wait_all(timeout_secs) {
                self.receive(done);
            }
            if !self.jobs.busy() || std::time::Instant::now() > deadline {
                break;
            }
        }
    }

    fn receive(&mut self, done: Finished<Stamped>) {
        let kind = done.ticket.kind;
        match done.outcome {
            Ok(stamped) => self.accept(stamped),
            Err(JobFailure::Cancelled) => {
                self.say(Level::Info, format!("{}: cancelled", kind.label()))
            }
            Err(failure) => self.say(Level::Error, failure.to_string()),
        }
        if kind == JobKind::Estimate && std::mem::take(&mut self.estimate_pending) {
            self.start_estimate();
        }
        if kind == JobKind::Rank && std::mem::take(&mut self.rank_pending) {
            self.start_rank();
        }
        let ranking_idle = self.jobs.running(JobKind::Rank).is_none();
        if ranking_idle && std::mem::take(&mut self.diagnose_pending) {
            self.start_diagnose();
        }
    }

    /// The one place a result's stamp is checked: one computed from data that has since
    /// been replaced is dropped unseen (as is a ranking for another score, or the rest of
    /// a ranking whose head is no longer shown).
    pub(super) fn accept(&mut self, stamped: Stamped) {
        if stamped.output.reads_data() && stamped.generation != self.data_generation {
            return;
        }
        match stamped.output {
            JobOutput::Loaded(data, roles) => self.data_loaded(*data, roles),
            JobOutput::Probabilities(p, relabel) => self.probabilities_in(*p, relabel),
            JobOutput::Estimated(matrix, info) => self.estimated(matrix, info),
            // Intervals resample one estimate; those of a replaced one are dropped.
            JobOutput::Intervals(interval, n) if n == self.estimates => {
                self.intervals = Some(interval)
            }
            JobOutput::SourceIntervals(by_source, n) if n == self.estimates => {
                self.intervals = Some(by_source.overall.clone());
                self.source_intervals = Some(*by_source);
            }
            // A ranking of a slightly older matrix is still shown while the newer one is
            // computed (the view says it is updating); one of another score is not.
            JobOutput::Ranked(ranking) if ranking.kind == self.session.settings.score => {
                let ranking: Arc<Ranking> = Arc::from(ranking);
                if !ranking.is_complete() {
                    self.start_rank_rest(ranking.clone());
                }
                self.ranking = Some(ranking);
                self.refilter();
            }
            JobOutput::RankedRest(full)
                if self.ranking.as_ref().is_some_and(|r| {
                    r.matrix_version == full.matrix_version && r.kind == full.kind
                }) =>
            {
                self.ranking = Some(Arc::from(full));
                self.refilter();
            }
            JobOutput::Diagnosed(d, version) => self.diagnostics = Some((*d, version)),
            JobOutput::Compared(r) => {
                let warnings = r.comparison.report.warnings.clone();
                self.retrained = Some(r);
                for w in warnings {
                    self.say(Level::Warning, w);
                }
            }
            JobOutput::Reviewed(r) => {
                self.say(
                    Level::Info,
                    format!(
                        "{}: {} verdicts ({} confirm, {} change the label)",
                        r.path.display(),
                        r.summary.reviewed,
                        r.summary.confirmed,
                        r.summary.changed
                    ),
                );
                self.review = Some(r);
            }
            JobOutput::Saved(text) | JobOutput::Text(text) => self.say(Level::Info, text),
            JobOutput::Merged(path) => {
                self.say(Level::Info, format!("wrote {}; loading it", path.display()));
                let roles = self.session.roles.clone();
                self.load_data(path, roles);
            }
            // A ranking of another score, the rest of a ranking no longer shown, or
            // intervals of a replaced estimate.
            _ => {}
        }
    }

    /// Runs `work` as a job of `kind` (tests use it to prove a panicking worker is
    /// reported and the app goes on).
    pub fn spawn_job<F>(&mut self, kind: JobKind, work: F)
    where
        F: FnOnce(&JobControl) -> Result<JobOutput, JobFailure> + Send + 'static,
    {
        self.spawn_on_data(kind, work);
    }

    /// Runs `work` as a job of `kind`, its result stamped with the data generation it
    /// started from ([`AppState::accept`] checks the stamp).
    pub(super) fn spawn_on_data<F>(&mut self, kind: JobKind, work: F)
    where
        F: FnOnce(&JobControl) -> Result<JobOutput, JobFailure> + Send + 'static,
    {
        let generation = self.data_generation;
        self.jobs.spawn(kind, move |control| {
            work(control).map(|output| Stamped { generation, output })
        });
    }
}
