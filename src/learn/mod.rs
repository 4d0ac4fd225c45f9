//! Learning: softmax regression, its losses, folds and out-of-fold probabilities.

pub mod fastmath;
pub mod folds;
pub mod kernel;
pub mod lbfgs;
pub mod loss;
pub mod metrics;
mod objective;
pub mod oof;
pub mod softmax;
pub mod standardize;
pub mod train;

pub use loss::{CrossEntropy, RowLoss};
pub use oof::{out_of_fold, OofParams, OutOfFold};
pub use softmax::{fit, FitReport, SoftmaxModel, SoftmaxParams};
