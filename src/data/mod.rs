//! Tables, column roles, probabilities and their validation.

mod blocks;
mod chunk;
pub mod natural;
pub mod npy;
pub mod origin;
pub mod probs;
pub mod roles;
pub mod summary;
pub mod table;
pub mod text_column;

pub use probs::{ProbOptions, Probabilities};
pub use roles::TableOptions;
pub use table::Dataset;
