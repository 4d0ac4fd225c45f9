//! Where the queries run: DataFusion in this process, an in-process Ballista cluster
//! (a scheduler and an executor over localhost gRPC), or a Ballista cluster's scheduler;
//! and this binary's own `scheduler` and `executor`, which know flipmend's functions and
//! scan (the stock binaries do not).

use std::net::SocketAddr;
use std::sync::Arc;

use ballista::prelude::SessionContextExt;
use ballista_core::extension::SessionConfigExt;
use ballista_core::registry::BallistaFunctionRegistry;
use ballista_core::utils::default_session_builder;
use ballista_executor::executor_process::{start_executor_process, ExecutorProcessConfig};
use ballista_scheduler::cluster::BallistaCluster;
use ballista_scheduler::config::SchedulerConfig;
use ballista_scheduler::scheduler_process::start_server;
use datafusion::common::{DataFusionError, Result};
use datafusion::execution::SessionState;
use datafusion::logical_expr::registry::FunctionRegistry;
use datafusion::prelude::{SessionConfig, SessionContext};

use crate::codec::{LogicalCodec, PhysicalCodec};
use crate::functions::{aggregate_functions, scalar_functions};

/// Where a job's queries run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Engine {
    /// DataFusion in this process, on `partitions` partitions.
    InProcess {
        /// Partitions of the scan (the threads that read at once).
        partitions: usize,
    },
    /// A Ballista scheduler and executor started in this process.
    Standalone {
        /// Partitions of the scan.
        partitions: usize,
    },
    /// The Ballista cluster whose scheduler is at this `df://host:port`.
    Remote {
        /// The scheduler.
        url: String,
        /// Partitions of the scan (tasks per stage).
        partitions: usize,
    },
}

/// Adds flipmend's functions to a session's state.
fn with_functions(mut state: SessionState) -> Result<SessionState> {
    for f in scalar_functions() {
        state.register_udf(f)?;
    }
    for f in aggregate_functions() {
        state.register_udaf(f)?;
    }
    Ok(state)
}

/// Ballista's session settings with flipmend's codecs.
fn ballista_config(partitions: usize) -> SessionConfig {
    SessionConfig::new_with_ballista()
        .with_target_partitions(partitions)
        .with_ballista_logical_extension_codec(Arc::new(LogicalCodec::default()))
        .with_ballista_physical_extension_codec(Arc::new(PhysicalCodec::default()))
}

/// Registers flipmend's functions on a context (Ballista resets a context's function
/// list to its own when it makes one from a state).
fn register(ctx: &SessionContext) {
    for f in scalar_functions() {
        ctx.register_udf(f.as_ref().clone());
    }
    for f in aggregate_functions() {
        ctx.register_udaf(f.as_ref().clone());
    }
}

/// A session on `engine`.
pub async fn context(engine: &Engine) -> Result<SessionContext> {
    let ctx = match engine {
        Engine::InProcess { partitions } => {
            let config = SessionConfig::new().with_target_partitions(*partitions);
            SessionContext::new_with_config(config)
        }
        Engine::Standalone { partitions } => {
            let state = with_functions(default_session_builder(ballista_config(*partitions))?)?;
            SessionContext::standalone_with_state(state).await?
        }
        Engine::Remote { url, partitions } => {
            let state = with_functions(default_session_builder(ballista_config(*partitions))?)?;
            SessionContext::remote_with_state(url, state).await?
        }
    };
    register(&ctx);
    Ok(ctx)
}

/// Runs a scheduler on `bind` until stopped.
pub async fn scheduler(bind: SocketAddr) -> Result<()> {
    let mut config = SchedulerConfig::default();
    config.bind_host = bind.ip().to_string();
    config.bind_port = bind.port();
    config.override_logical_codec = Some(Arc::new(LogicalCodec::default()));
    config.override_physical_codec = Some(Arc::new(PhysicalCodec::default()));
    config.override_session_builder = Some(Arc::new(|config: SessionConfig| {
        with_functions(default_session_builder(config)?)
    }));
    let cluster = BallistaCluster::new_from_config(&config)
        .await
        .map_err(|e| DataFusionError::Execution(e.to_string()))?;
    start_server(cluster, bind, Arc::new(config))
        .await
        .map_err(|e| DataFusionError::Execution(e.to_string()))
}

/// Where an executor listens and which scheduler it serves.
#[derive(Debug, Clone)]
pub struct ExecutorPlace {
    /// The scheduler's host.
    pub scheduler_host: String,
    /// The scheduler's port.
    pub scheduler_port: u16,
    /// The address to listen on.
    pub bind_host: String,
    /// The Arrow Flight port (results and shuffles).
    pub port: u16,
    /// The gRPC port.
    pub grpc_port: u16,
    /// Tasks at once.
    pub slots: usize,
    /// Where shuffle files go.
    pub work_dir: Option<String>,
}

/// Runs an executor until stopped.
pub async fn executor(place: ExecutorPlace) -> Result<()> {
    let state = with_functions(default_session_builder(SessionConfig::new_with_ballista())?)?;
    let config = ExecutorProcessConfig {
        scheduler_host: place.scheduler_host,
        scheduler_port: place.scheduler_port,
        bind_host: place.bind_host,
        port: place.port,
        grpc_port: place.grpc_port,
        vcores: place.slots,
        work_dir: place.work_dir,
        override_function_registry: Some(Arc::new(BallistaFunctionRegistry::from(&state))),
        override_logical_codec: Some(Arc::new(LogicalCodec::default())),
        override_physical_codec: Some(Arc::new(PhysicalCodec::default())),
        ..Default::default()
    };
    start_executor_process(Arc::new(config))
        .await
        .map_err(|e| DataFusionError::Execution(e.to_string()))
}
