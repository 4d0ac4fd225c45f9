//! Label noise: flip-matrix estimators, their diagnostics and uncertainty, and per-row
//! posteriors under a matrix.

pub mod annotators;
pub mod bootstrap;
pub mod diagnostics;
pub mod estimators;
pub mod fit_check;
pub mod joint;
pub mod linalg;
pub mod matrix;
pub mod posterior;
pub mod scores;
pub mod sources;

pub use diagnostics::{diagnose, Diagnostics};
pub use estimators::{
    estimate, Estimate, Estimator, EstimatorSettings, Method, Sample, TrustedFallback,
    DEFAULT_QUANTILE,
};
