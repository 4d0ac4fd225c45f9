//! flipmend: estimate how class labels flip (the flip matrix T, with
//! T\[i\]\[j\] = P(observed j | true i)), rank the rows most likely mislabelled, and train
//! models that correct for the noise.
//!
//! The library holds everything but drawing: [`data`] loads and validates tables and
//! probabilities, [`noise`] estimates and diagnoses the flip matrix and scores rows,
//! [`learn`] fits (corrected) softmax regression, [`io`] reads and writes files safely,
//! [`workflow`] chains the steps, [`cli`] is the command line and `gui` (feature `gui`)
//! the desktop app, both built on the same calls. Errors are one enum, [`Error`], whose messages name file, line and column.
//!
//! Figures that flipmend computes are estimates meant for qualified human review; they
//! never replace the judgement of the people responsible for the data.

#![deny(missing_docs)]
#![forbid(unsafe_code)]

pub mod cli;
pub mod data;
pub mod error;
#[cfg(feature = "gui")]
pub mod gui;
pub mod io;
pub mod learn;
pub mod noise;
pub mod timing;
pub mod workflow;

pub use error::{Error, InputError, Location, Problem, Result};
