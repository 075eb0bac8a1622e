//! `posterity-scheduler`: a Ballista scheduler that plans with every posterity
//! function, the prior-binding rule and posterity's join rule.

// The shell's allocator: the engine allocates and frees large Arrow buffers all
// the time (see `posterity::shell::without_huge_pages`).
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::net::SocketAddr;
use std::process::ExitCode;
use std::sync::Arc;

use ballista_scheduler::cluster::BallistaCluster;
use ballista_scheduler::config::SchedulerConfig;
use ballista_scheduler::scheduler_process::start_server;
use clap::Parser;
use posterity_cluster::{scheduler_session, session_config, PosterityCodec, PosterityLogicalCodec};

/// A Ballista scheduler for posterity's SQL.
#[derive(Parser, Debug)]
#[command(name = "posterity-scheduler", version, about)]
struct Args {
    /// Address to listen on.
    #[arg(long, default_value = "0.0.0.0")]
    bind_host: String,
    /// The host name executors and clients reach this scheduler by.
    #[arg(long, default_value = "localhost")]
    external_host: String,
    /// Port to listen on (clients connect to df://HOST:PORT).
    #[arg(long, default_value_t = 50050)]
    port: u16,
    /// An executor silent for this long is taken as lost and its tasks run elsewhere.
    #[arg(long, default_value_t = 180, value_name = "SECONDS")]
    executor_timeout: u64,
}

fn main() -> ExitCode {
    posterity_cluster::run_process(serve())
}

async fn serve() -> ExitCode {
    let args = Args::parse();
    let addr: SocketAddr = match format!("{}:{}", args.bind_host, args.port).parse() {
        Ok(a) => a,
        Err(e) => {
            eprintln!(
                "error: --bind-host {} --port {}: {e}",
                args.bind_host, args.port
            );
            return ExitCode::from(2);
        }
    };
    let mut config = SchedulerConfig::default()
        .with_hostname(args.external_host)
        .with_port(args.port);
    config.bind_host = args.bind_host;
    config.executor_timeout_seconds = args.executor_timeout;
    config.expire_dead_executor_interval_seconds = args.executor_timeout.clamp(1, 15);
    config.no_executors_grace_period_seconds = args.executor_timeout;
    config.override_config_producer = Some(Arc::new(session_config));
    config.override_session_builder = Some(Arc::new(scheduler_session));
    config.override_physical_codec = Some(Arc::new(PosterityCodec::default()));
    config.override_logical_codec = Some(Arc::new(PosterityLogicalCodec::default()));
    let result = async {
        let cluster = BallistaCluster::new_from_config(&config).await?;
        start_server(cluster, addr, Arc::new(config)).await
    }
    .await;
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: posterity-scheduler on {addr}: {e}");
            ExitCode::from(1)
        }
    }
}
