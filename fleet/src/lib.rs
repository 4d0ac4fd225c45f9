//! flipmend's `estimate` and `suspects` jobs over Parquet files on Apache DataFusion,
//! in this process or on a Ballista cluster: the same flags, outputs and library code as
//! the `flipmend` binary's streamed runs, with every pass over the rows run by the
//! engine (see `DEVELOPERS.md`, "The distributed runner").

#![deny(missing_docs)]
#![forbid(unsafe_code)]

pub mod cli;
pub mod cluster;
pub mod codec;
pub mod engine;
pub mod files;
pub mod functions;
pub mod scan;
pub mod shares;
