//! Tables, column roles, probabilities and their validation.

mod assemble;
pub mod natural;
pub mod origin;
pub mod probs;
pub mod roles;
pub mod summary;
pub mod table;

pub use probs::{ProbOptions, Probabilities};
pub use roles::TableOptions;
pub use table::Dataset;

/// The text-column reader moved to [`crate::io::text_column`] with the other formats;
/// this path still names it for the callers that use it.
pub use crate::io::text_column;
