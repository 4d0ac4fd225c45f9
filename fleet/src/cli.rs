//! The command line: flipmend's `estimate` and `suspects` flags plus where to run, and
//! the cluster's own `scheduler` and `executor`.

use std::io::Write;
use std::net::SocketAddr;
use std::sync::Arc;

use clap::{Args, Parser, Subcommand};
use flipmend::cli::{EstimateArgs, SuspectsArgs};
use flipmend::error::{Error, Result};
use flipmend::workflow::streamed::{OpenRows, RowSource, StreamInput};
use tokio::runtime::Runtime;

use crate::cluster::{self, Engine, ExecutorPlace};
use crate::engine::{engine as failed, EngineSource};

/// flipmend on a cluster: estimate the flip matrix and list the suspect rows of a table
/// of Parquet files with Apache DataFusion, in this process or on a Ballista cluster.
#[derive(Debug, Parser)]
#[command(name = "flipmend-fleet", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// `flipmend estimate` over a Parquet file or a folder of them (files in name order,
    /// the probabilities as columns named by class), always streamed.
    Estimate {
        /// The job.
        #[command(flatten)]
        job: Box<EstimateArgs>,
        /// Where it runs.
        #[command(flatten)]
        engine: EngineArgs,
    },
    /// `flipmend suspects` over a Parquet file or a folder of them, always streamed.
    Suspects {
        /// The job.
        #[command(flatten)]
        job: Box<SuspectsArgs>,
        /// Where it runs.
        #[command(flatten)]
        engine: EngineArgs,
    },
    /// Run a Ballista scheduler that knows flipmend's functions, until stopped.
    Scheduler {
        /// Address to listen on
        #[arg(long, value_name = "HOST:PORT", default_value = "127.0.0.1:50050")]
        bind: SocketAddr,
    },
    /// Run a Ballista executor that knows flipmend's functions, until stopped.
    Executor(ExecutorArgs),
}

/// Where a job runs.
#[derive(Debug, Clone, Args)]
pub struct EngineArgs {
    /// The Ballista scheduler to run on (df://host:port); without it the job runs in
    /// this process
    #[arg(long, value_name = "URL", conflicts_with = "standalone")]
    pub scheduler: Option<String>,
    /// Start a Ballista scheduler and executor in this process and run there (what a
    /// cluster does, on one machine: for trying a cluster's path)
    #[arg(long)]
    pub standalone: bool,
    /// Partitions of the table read at once [default: the cores here]
    #[arg(long, value_name = "N")]
    pub partitions: Option<usize>,
}

impl EngineArgs {
    fn engine(&self) -> Engine {
        let partitions = self
            .partitions
            .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()));
        match (&self.scheduler, self.standalone) {
            (Some(url), _) => Engine::Remote {
                url: url.clone(),
                partitions,
            },
            (None, true) => Engine::Standalone { partitions },
            (None, false) => Engine::InProcess { partitions },
        }
    }
}

/// Flags of `executor`.
#[derive(Debug, Clone, Args)]
pub struct ExecutorArgs {
    /// The scheduler to serve
    #[arg(long, value_name = "HOST:PORT", default_value = "127.0.0.1:50050")]
    pub scheduler: String,
    /// Address to listen on
    #[arg(long, value_name = "HOST", default_value = "127.0.0.1")]
    pub bind: String,
    /// Arrow Flight port (results and shuffles)
    #[arg(long, value_name = "PORT", default_value_t = 50051)]
    pub port: u16,
    /// gRPC port
    #[arg(long, value_name = "PORT", default_value_t = 50052)]
    pub grpc_port: u16,
    /// Tasks at once [default: the cores here]
    #[arg(long, value_name = "N")]
    pub slots: Option<usize>,
    /// Folder for shuffle files [default: a temporary folder]
    #[arg(long, value_name = "DIR")]
    pub work_dir: Option<String>,
}

fn runtime() -> Result<Arc<Runtime>> {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .map(Arc::new)
        .map_err(|e| Error::Internal(format!("starting the async runtime: {e}")))
}

/// Runs a job with its rows read by `engine`.
fn on_engine(engine: &EngineArgs, job: impl FnOnce(&OpenRows) -> Result<()>) -> Result<()> {
    let runtime = runtime()?;
    let ctx = runtime
        .block_on(cluster::context(&engine.engine()))
        .map_err(failed)?;
    let open: Box<OpenRows> = Box::new(move |input: &StreamInput| {
        let source = EngineSource::open(runtime.clone(), ctx.clone(), input)?;
        Ok(Box::new(source) as Box<dyn RowSource>)
    });
    job(open.as_ref())
}

/// Runs a parsed command line, writing its report to `out`.
pub fn run(cli: Cli, out: &mut dyn Write) -> Result<()> {
    match cli.command {
        Command::Estimate { job, engine } => {
            on_engine(&engine, |open| flipmend::cli::estimate_on(&job, open, out))
        }
        Command::Suspects { job, engine } => {
            on_engine(&engine, |open| flipmend::cli::suspects_on(&job, open, out))
        }
        Command::Scheduler { bind } => runtime()?
            .block_on(cluster::scheduler(bind))
            .map_err(failed),
        Command::Executor(args) => {
            let (host, port) = args
                .scheduler
                .rsplit_once(':')
                .and_then(|(h, p)| Some((h.to_string(), p.parse().ok()?)))
                .ok_or_else(|| {
                    Error::Usage(format!(
                        "--scheduler takes HOST:PORT, not '{}'",
                        args.scheduler
                    ))
                })?;
            let place = ExecutorPlace {
                scheduler_host: host,
                scheduler_port: port,
                bind_host: args.bind,
                port: args.port,
                grpc_port: args.grpc_port,
                slots: args
                    .slots
                    .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get())),
                work_dir: args.work_dir,
            };
            runtime()?
                .block_on(cluster::executor(place))
                .map_err(failed)
        }
    }
}
