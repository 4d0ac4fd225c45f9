//! Wall-clock time of a command's stages. With `FLIPMEND_TIMING` set, the command line
//! prints them on standard error, so a stage's cost is read where it runs (profiling,
//! the side-by-side scripts in `benches/`) instead of guessed from whole runs.

use std::time::Instant;

/// Named stages, each timed from the end of the one before.
#[derive(Debug, Clone)]
pub struct Stages {
    started: Instant,
    last: Instant,
    done: Vec<(String, f64)>,
}

impl Default for Stages {
    fn default() -> Self {
        Stages::start()
    }
}

impl Stages {
    /// Starts the clock.
    pub fn start() -> Self {
        let now = Instant::now();
        Stages {
            started: now,
            last: now,
            done: Vec::new(),
        }
    }

    /// Ends the current stage under `name` (a stage of the same name adds up).
    pub fn end(&mut self, name: impl Into<String>) {
        let now = Instant::now();
        let secs = (now - self.last).as_secs_f64();
        self.last = now;
        self.add(name.into(), secs);
    }

    fn add(&mut self, name: String, secs: f64) {
        match self.done.iter_mut().find(|(n, _)| *n == name) {
            Some((_, total)) => *total += secs,
            None => self.done.push((name, secs)),
        }
    }

    /// Takes over the stages another clock timed (a library call's own stages), as if
    /// they had been ended here; the current stage restarts after them.
    pub fn absorb(&mut self, other: &Stages) {
        for (name, secs) in &other.done {
            self.add(name.clone(), *secs);
        }
        self.last = Instant::now();
    }

    /// The stages ended so far, in order, with their seconds.
    pub fn list(&self) -> &[(String, f64)] {
        &self.done
    }

    /// `stage=seconds …  total=seconds` on one line, easy to read and to parse.
    pub fn line(&self) -> String {
        let mut line: Vec<String> = self
            .done
            .iter()
            .map(|(name, secs)| format!("{name}={secs:.3}"))
            .collect();
        line.push(format!("total={:.3}", self.started.elapsed().as_secs_f64()));
        line.join(" ")
    }
}

/// True when `FLIPMEND_TIMING` is set to anything but empty or `0`.
pub fn wanted() -> bool {
    std::env::var("FLIPMEND_TIMING").is_ok_and(|v| !v.is_empty() && v != "0")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stages_add_up_by_name_and_keep_their_order() {
        let mut stages = Stages::start();
        stages.end("load");
        stages.end("fit");
        stages.end("load");
        let names: Vec<&str> = stages.list().iter().map(|(n, _)| n.as_str()).collect();
        assert_eq!(names, ["load", "fit"]);
        assert!(stages.list().iter().all(|(_, s)| *s >= 0.0));
        let mut outer = Stages::start();
        outer.absorb(&stages);
        outer.end("write");
        let line = outer.line();
        assert!(line.starts_with("load=") && line.contains(" fit=") && line.contains(" write="));
        assert!(line.contains(" total="), "{line}");
    }
}
