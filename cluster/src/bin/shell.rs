//! `posterity-cluster`: the posterity shell with a cluster client; `posterity
//! --cluster URL` runs it.

#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> std::process::ExitCode {
    posterity::shell::cli::main(Some(|url| {
        Box::pin(async move {
            posterity_cluster::connect(&url)
                .await
                .map_err(|e| e.to_string())
        })
    }))
}
