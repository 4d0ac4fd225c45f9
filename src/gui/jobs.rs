//! Background work: every long computation runs on its own thread with a progress
//! figure and a cancel flag, and reports back over a channel. The UI thread only polls.
//!
//! Each job carries a ticket (its kind and a number). Starting a job of a kind cancels
//! the running one of that kind, and a result whose ticket is no longer the latest is
//! dropped, so a slow result from stale input never overwrites a newer one. A panic in a
//! job is caught and reported as a failure; the app goes on.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc::{channel, Receiver, Sender};
use std::sync::Arc;
use std::time::Instant;

use rustc_hash::FxHashMap;

/// What a job is for; one job of each kind runs at a time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum JobKind {
    /// Reading the table.
    Load,
    /// Reading or computing the probabilities.
    Probabilities,
    /// Estimating the flip matrix.
    Estimate,
    /// Bootstrap intervals of the matrix.
    Bootstrap,
    /// Scoring the suspects and putting the first rows in order.
    Rank,
    /// Sorting the rest of a ranking.
    RankRest,
    /// The matrix's diagnostics (priors, noise rates, warnings).
    Diagnose,
    /// Training and comparing the corrections.
    Retrain,
    /// Reading a reviewed worklist.
    Review,
    /// Writing a file. Every save is its own job (numbered by the caller), so a second
    /// save neither cancels the first nor hides its error.
    Save(u64),
    /// A test's job.
    Test,
}

impl JobKind {
    /// The word the status bar shows.
    pub fn label(self) -> &'static str {
        match self {
            JobKind::Load => "loading data",
            JobKind::Probabilities => "probabilities",
            JobKind::Estimate => "estimating",
            JobKind::Bootstrap => "bootstrap",
            JobKind::Rank => "ranking",
            JobKind::RankRest => "sorting the rest",
            JobKind::Diagnose => "diagnostics",
            JobKind::Retrain => "training",
            JobKind::Review => "reading review",
            JobKind::Save(_) => "saving",
            JobKind::Test => "test",
        }
    }
}

/// Shared between a job and the UI: how far it got, and whether to stop.
#[derive(Debug, Default)]
pub struct JobControl {
    /// Completed steps, in thousandths of the whole.
    progress_milli: AtomicU64,
    cancel: AtomicBool,
}

impl JobControl {
    /// Reports progress as `done` of `total` steps.
    pub fn set_progress(&self, done: usize, total: usize) {
        let milli = (done.min(total) * 1000).checked_div(total).unwrap_or(0) as u64;
        self.progress_milli.store(milli, Ordering::Relaxed);
    }

    /// Progress in [0, 1].
    pub fn progress(&self) -> f32 {
        self.progress_milli.load(Ordering::Relaxed) as f32 / 1000.0
    }

    /// Asks the job to stop.
    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    /// True once cancelled; long loops check it.
    pub fn is_cancelled(&self) -> bool {
        self.cancel.load(Ordering::Relaxed)
    }

    /// The flag itself, for library calls that take one.
    pub fn flag(&self) -> &AtomicBool {
        &self.cancel
    }
}

/// Identifies one started job.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ticket {
    /// Its kind.
    pub kind: JobKind,
    /// Increases with every job started.
    pub number: u64,
}

/// A running job as the UI sees it.
#[derive(Debug, Clone)]
pub struct Running {
    /// Its ticket.
    pub ticket: Ticket,
    /// Its progress and cancel flag.
    pub control: Arc<JobControl>,
    /// When it started.
    pub started: Instant,
}

/// How a job ended, when it did not return a value.
#[derive(Debug, Clone, PartialEq)]
pub enum JobFailure {
    /// It returned an error (the message is shown as is).
    Error(String),
    /// The user cancelled it.
    Cancelled,
    /// It panicked: a bug, reported, not fatal.
    Panicked(String),
}

impl std::fmt::Display for JobFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            JobFailure::Error(message) => f.write_str(message),
            JobFailure::Cancelled => f.write_str("cancelled"),
            JobFailure::Panicked(message) => write!(
                f,
                "internal error (a bug; please report it): {message}; the rest of the app is unaffected"
            ),
        }
    }
}

/// A finished job's outcome, still tagged with its ticket.
#[derive(Debug)]
pub struct Finished<T> {
    /// Which job.
    pub ticket: Ticket,
    /// Its result.
    pub outcome: Result<T, JobFailure>,
    /// Wall time it took.
    pub duration_secs: f64,
}

/// Starts jobs and collects their results. `T` is the app's result type.
pub struct Jobs<T> {
    sender: Sender<Finished<T>>,
    receiver: Receiver<Finished<T>>,
    running: FxHashMap<JobKind, Running>,
    next: u64,
    wake: Arc<dyn Fn() + Send + Sync>,
}

impl<T: Send + 'static> Jobs<T> {
    /// `wake` is called from the worker when a job ends (e.g. to request a repaint).
    pub fn new(wake: Arc<dyn Fn() + Send + Sync>) -> Self {
        let (sender, receiver) = channel();
        Jobs {
            sender,
            receiver,
            running: FxHashMap::default(),
            next: 0,
            wake,
        }
    }

    /// Runs `work` on a new thread, cancelling the running job of the same kind.
    pub fn spawn<F>(&mut self, kind: JobKind, work: F) -> Ticket
    where
        F: FnOnce(&JobControl) -> Result<T, JobFailure> + Send + 'static,
    {
        self.cancel(kind);
        self.next += 1;
        let ticket = Ticket {
            kind,
            number: self.next,
        };
        let control = Arc::new(JobControl::default());
        let started = Instant::now();
        self.running.insert(
            kind,
            Running {
                ticket,
                control: control.clone(),
                started,
            },
        );
        let sender = self.sender.clone();
        let wake = self.wake.clone();
        let spawned = std::thread::Builder::new()
            .name(format!("flipmend-{}", kind.label()))
            .spawn(move || {
                let outcome = catch_unwind(AssertUnwindSafe(|| work(&control)))
                    .unwrap_or_else(|panic| Err(JobFailure::Panicked(panic_message(&panic))));
                let outcome = match outcome {
                    Err(JobFailure::Error(_)) if control.is_cancelled() => {
                        Err(JobFailure::Cancelled)
                    }
                    other => other,
                };
                let duration_secs = started.elapsed().as_secs_f64();
                // The app may be gone (window closed); nobody then wants the result.
                let _ = sender.send(Finished {
                    ticket,
                    outcome,
                    duration_secs,
                });
                wake();
            });
        if let Err(error) = spawned {
            self.running.remove(&kind);
            let _ = self.sender.send(Finished {
                ticket,
                outcome: Err(JobFailure::Error(format!(
                    "could not start a worker thread: {error}"
                ))),
                duration_secs: 0.0,
            });
        }
        ticket
    }

    /// Asks the running job of `kind` to stop; its result will be dropped.
    pub fn cancel(&mut self, kind: JobKind) {
        if let Some(running) = self.running.remove(&kind) {
            running.control.cancel();
        }
    }

    /// The running job of `kind`, if any.
    pub fn running(&self, kind: JobKind) -> Option<&Running> {
        self.running.get(&kind)
    }

    /// All running jobs, in kind order.
    pub fn all_running(&self) -> Vec<&Running> {
        let mut all: Vec<&Running> = self.running.values().collect();
        all.sort_by_key(|r| r.ticket.kind);
        all
    }

    /// True while any job runs.
    pub fn busy(&self) -> bool {
        !self.running.is_empty()
    }

    /// Finished jobs whose ticket is still the latest of its kind; stale ones are dropped.
    pub fn poll(&mut self) -> Vec<Finished<T>> {
        let mut current = Vec::new();
        while let Ok(done) = self.receiver.try_recv() {
            let latest = self
                .running
                .get(&done.ticket.kind)
                .is_some_and(|r| r.ticket == done.ticket);
            if latest {
                self.running.remove(&done.ticket.kind);
                current.push(done);
            }
        }
        current
    }

    /// Waits (up to `timeout_secs`) until no job runs, collecting results; for tests and
    /// for the headless command line.
    pub fn wait_all(&mut self, timeout_secs: f64) -> Vec<Finished<T>> {
        let deadline = Instant::now() + std::time::Duration::from_secs_f64(timeout_secs);
        let mut all = Vec::new();
        while self.busy() && Instant::now() < deadline {
            all.extend(self.poll());
            std::thread::sleep(std::time::Duration::from_millis(2));
        }
        all.extend(self.poll());
        all
    }
}

fn panic_message(panic: &Box<dyn std::any::Any + Send>) -> String {
    panic
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| panic.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "a worker stopped unexpectedly".into())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn jobs() -> Jobs<u32> {
        Jobs::new(Arc::new(|| {}))
    }

    #[test]
    fn a_result_comes_back_with_its_ticket() {
        let mut j = jobs();
        let t = j.spawn(JobKind::Test, |_| Ok(7));
        let done = j.wait_all(10.0);
        assert_eq!(done.len(), 1);
        assert_eq!(done[0].ticket, t);
        assert_eq!(done[0].outcome, Ok(7));
        assert!(!j.busy());
    }

    #[test]
    fn a_newer_job_of_the_same_kind_makes_the_older_result_stale() {
        let mut j = jobs();
        let (go_tx, go_rx) = std::sync::mpsc::channel::<()>();
        let first = j.spawn(JobKind::Test, move |_| {
            go_rx.recv().ok();
            Ok(1)
        });
        let second = j.spawn(JobKind::Test, |_| Ok(2));
        go_tx.send(()).unwrap();
        let done = j.wait_all(10.0);
        assert_ne!(first, second);
        assert_eq!(done.len(), 1, "only the latest result is kept");
        assert_eq!(done[0].outcome, Ok(2));
    }

    #[test]
    fn a_panic_is_reported_not_fatal() {
        let mut j = jobs();
        j.spawn(JobKind::Test, |_| -> Result<u32, JobFailure> {
            panic!("boom in a worker")
        });
        let done = j.wait_all(10.0);
        match &done[0].outcome {
            Err(JobFailure::Panicked(m)) => assert!(m.contains("boom in a worker")),
            other => panic!("expected a reported panic, got {other:?}"),
        }
        j.spawn(JobKind::Test, |_| Ok(3));
        assert_eq!(
            j.wait_all(10.0)[0].outcome,
            Ok(3),
            "jobs still run afterwards"
        );
    }

    #[test]
    fn cancel_reaches_the_worker_and_drops_the_result() {
        let mut j = jobs();
        let (seen_tx, seen_rx) = std::sync::mpsc::channel::<bool>();
        j.spawn(JobKind::Test, move |control| {
            while !control.is_cancelled() {
                std::thread::sleep(std::time::Duration::from_millis(1));
            }
            seen_tx.send(true).ok();
            Err(JobFailure::Cancelled)
        });
        j.cancel(JobKind::Test);
        assert!(seen_rx
            .recv_timeout(std::time::Duration::from_secs(10))
            .unwrap());
        assert!(j.wait_all(1.0).is_empty());
    }

    #[test]
    fn progress_is_a_fraction() {
        let c = JobControl::default();
        c.set_progress(3, 4);
        assert_eq!(c.progress(), 0.75);
        c.set_progress(9, 4);
        assert_eq!(c.progress(), 1.0);
        c.set_progress(1, 0);
        assert_eq!(c.progress(), 0.0);
    }
}
