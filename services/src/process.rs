//! A `brakeledger` process from its start: the memory allocator, and the async runtime that
//! runs the command line ([`main`], shared by the binaries).
//!
//! The allocator is jemalloc. glibc's allocator gives each thread that meets contention an
//! arena of its own, up to eight per core, and keeps memory freed in an arena for that arena.
//! The server's threads (the async workers, the blocking pool, rayon's pool for forecasts) all
//! allocate, so freed memory piled up in many arenas: in the fleet-scale benchmark a server
//! that had taken in 9 million trips of 100,000 vehicles held 5 GB resident, nearly all of it
//! in 64 MiB arena heaps (BENCHMARKS.md, "Fleet scale"). jemalloc hands freed pages back to
//! the system, so the resident set follows what is in use. Two settings are compiled in: the
//! `background_threads` feature (services/Cargo.toml) starts jemalloc's purging threads, so
//! pages go back while the server is idle too, not only when a thread next allocates; and
//! `.cargo/config.toml` sets `dirty_decay_ms:1000,muzzy_decay_ms:0`, so they go back within
//! about a second instead of ten. Without them the resident set read just after a forecast
//! refresh held that refresh's freed pages (743 MB instead of 645 MB at 100,000 vehicles; at
//! 10,000, 481 MB against 316-411 MB, which is within the spread between runs; BENCHMARKS.md,
//! "Fleet scale"). `_RJEM_MALLOC_CONF` overrides them at start.

/// The process allocator of every binary that links this crate (the server and command line,
/// and the tests' copy of it). The `system-allocator` feature leaves it out, for heap profilers
/// that interpose malloc (heaptrack).
#[cfg(not(feature = "system-allocator"))]
#[global_allocator]
static ALLOCATOR: tikv_jemallocator::Jemalloc = tikv_jemallocator::Jemalloc;

/// The whole of a `brakeledger` binary's `main`: starts the async runtime and runs the command
/// line from the process's arguments.
pub fn main() -> std::process::ExitCode {
    use clap::Parser;
    let runtime = match tokio::runtime::Builder::new_multi_thread().enable_all().build() {
        Ok(runtime) => runtime,
        Err(error) => {
            eprintln!("brakeledger: cannot start the async runtime: {error}");
            return std::process::ExitCode::FAILURE;
        }
    };
    runtime.block_on(async { crate::cli::exit_code(crate::cli::run(crate::cli::Cli::parse()).await) })
}
