//! `posterity-executor`: a Ballista executor whose function registry holds every
//! posterity function and whose plan codec carries the fits' bound priors.

// The shell's allocator: the engine allocates and frees large Arrow buffers all
// the time (see `posterity::shell::without_huge_pages`).
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::process::ExitCode;
use std::sync::Arc;

use ballista_executor::executor_process::{start_executor_process, ExecutorProcessConfig};
use clap::Parser;
use posterity_cluster::{function_registry, session_config, PosterityCodec, PosterityLogicalCodec};

/// A Ballista executor for posterity's SQL.
#[derive(Parser, Debug)]
#[command(name = "posterity-executor", version, about)]
struct Args {
    /// The scheduler's host.
    #[arg(long, default_value = "localhost")]
    scheduler_host: String,
    /// The scheduler's port.
    #[arg(long, default_value_t = 50050)]
    scheduler_port: u16,
    /// Address to listen on.
    #[arg(long, default_value = "127.0.0.1")]
    bind_host: String,
    /// The host name other executors and clients fetch results from.
    #[arg(long)]
    external_host: Option<String>,
    /// Port of the data (Arrow Flight) service.
    #[arg(long, default_value_t = 50051)]
    port: u16,
    /// Port of the executor's gRPC service.
    #[arg(long, default_value_t = 50052)]
    grpc_port: u16,
    /// Directory for shuffle files (a temporary directory when absent).
    #[arg(long)]
    work_dir: Option<String>,
    /// Seconds between heartbeats to the scheduler (keep it well under the
    /// scheduler's --executor-timeout).
    #[arg(long, default_value_t = 60, value_name = "SECONDS")]
    heartbeat: u64,
    /// Tasks run at once (default: the machine's cores).
    #[arg(long)]
    concurrent_tasks: Option<usize>,
    /// Leave posterity's functions out (to check the error a cluster gives when an
    /// executor lacks them).
    #[arg(long, hide = true)]
    without_posterity: bool,
}

fn main() -> ExitCode {
    posterity_cluster::run_process(serve())
}

async fn serve() -> ExitCode {
    let args = Args::parse();
    let mut config = ExecutorProcessConfig {
        scheduler_host: args.scheduler_host,
        scheduler_port: args.scheduler_port,
        bind_host: args.bind_host,
        external_host: args.external_host,
        port: args.port,
        grpc_port: args.grpc_port,
        work_dir: args.work_dir,
        override_config_producer: Some(Arc::new(session_config)),
        executor_heartbeat_interval_seconds: args.heartbeat.max(1),
        ..Default::default()
    };
    if let Some(n) = args.concurrent_tasks {
        config.vcores = n.max(1);
    }
    if !args.without_posterity {
        config.override_function_registry = Some(Arc::new(function_registry()));
        config.override_physical_codec = Some(Arc::new(PosterityCodec::default()));
        config.override_logical_codec = Some(Arc::new(PosterityLogicalCodec::default()));
    }
    match start_executor_process(Arc::new(config)).await {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: posterity-executor: {e}");
            ExitCode::from(1)
        }
    }
}
