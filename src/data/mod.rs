//! Tables, column roles, probabilities and their validation.

pub mod annotations;
mod assemble;
pub mod footprint;
pub mod natural;
pub mod origin;
pub mod probs;
pub mod roles;
pub mod sources;
pub mod summary;
pub mod table;
pub mod typical;

pub use probs::{ProbOptions, Probabilities};
pub use roles::TableOptions;
pub use table::Dataset;
