//! Shared by the bench binaries: a seeded generator for their inputs and the timing loop.

#![allow(dead_code)]

use std::time::{Duration, Instant};

/// A seeded xorshift generator: the benchmark inputs are the same on every machine.
pub struct Rng(pub u64);

impl Rng {
    /// The next 64 random bits.
    pub fn next(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }

    /// A uniform number in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// One warm-up, then `runs` timed runs: (median, fastest).
pub fn time(runs: usize, mut run: impl FnMut()) -> (Duration, Duration) {
    run();
    let mut times: Vec<Duration> = (0..runs)
        .map(|_| {
            let start = Instant::now();
            run();
            start.elapsed()
        })
        .collect();
    times.sort();
    (times[runs / 2], times[0])
}
