//! A `brakeledger` process from its start: the memory allocator, and the async runtime that
//! runs the command line ([`main`], shared by the binaries).
//!
//! The allocator is jemalloc. glibc's allocator gives each thread that meets contention an
//! arena of its own, up to eight per core, and keeps memory freed in an arena for that arena.
//! The server's threads (the async workers, the blocking pool, rayon's pool for forecasts) all
//! allocate, so freed memory piled up in many arenas: in the fleet-scale benchmark a server
//! that had taken in 9 million trips of 100,000 vehicles held 5 GB resident, nearly all of it
//! in 64 MiB arena heaps (BENCHMARKS.md, "Fleet scale"). jemalloc hands freed pages back to
//! the system, so the resident set follows what is in use. Settings compiled in:
//! - the `background_threads` feature (services/Cargo.toml) starts jemalloc's purging threads,
//!   so pages go back while the server is idle too, not only when a thread next allocates;
//! - `.cargo/config.toml` sets `dirty_decay_ms:1000,muzzy_decay_ms:0`, so they go back within
//!   about a second instead of ten. Without them the resident set read just after a forecast
//!   refresh held that refresh's freed pages (743 MB instead of 645 MB at 100,000 vehicles;
//!   BENCHMARKS.md, "Fleet scale");
//! - and `narenas:1,tcache_max:1024`: one arena instead of four per core, and per-thread caches
//!   of freed blocks up to 1 KiB instead of 32 KiB. The server runs some 80 threads (the
//!   blocking pool that store calls run on grows with concurrent callers); jemalloc's own
//!   counts ([`heap_bytes`], served as metrics) showed their caches and the arenas' part-used
//!   pages holding about half the resident set (BENCHMARKS.md, "jemalloc: one arena, small
//!   thread caches").
//!
//! `_RJEM_MALLOC_CONF` overrides any of them at start.

/// The process allocator of every binary that links this crate (the server and command line,
/// and the tests' copy of it). The `system-allocator` feature leaves it out, for heap profilers
/// that interpose malloc (heaptrack).
#[cfg(not(feature = "system-allocator"))]
#[global_allocator]
static ALLOCATOR: tikv_jemallocator::Jemalloc = tikv_jemallocator::Jemalloc;

/// The allocator's own counts of the heap, bytes: what is allocated and in use, what the
/// allocator holds in pages for it (active), and what of that is resident, with the
/// allocator's metadata and what it keeps mapped but returned (retained). `None` when the
/// allocator does not count (the `system-allocator` build) or a count cannot be read.
pub fn heap_bytes() -> Option<HeapBytes> {
    #[cfg(not(feature = "system-allocator"))]
    {
        use tikv_jemalloc_ctl::{epoch, stats};
        // The counts are a snapshot taken at each advance of the epoch.
        epoch::advance().ok()?;
        Some(HeapBytes {
            allocated_bytes: stats::allocated::read().ok()? as u64,
            active_bytes: stats::active::read().ok()? as u64,
            resident_bytes: stats::resident::read().ok()? as u64,
            metadata_bytes: stats::metadata::read().ok()? as u64,
            retained_bytes: stats::retained::read().ok()? as u64,
        })
    }
    #[cfg(feature = "system-allocator")]
    None
}

/// The allocator's counts of the heap ([`heap_bytes`]), bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct HeapBytes {
    /// Bytes allocated by the process and not yet freed.
    pub allocated_bytes: u64,
    /// Bytes in the pages that hold allocations (allocated plus fragmentation in those pages).
    pub active_bytes: u64,
    /// Bytes of the allocator's mappings that are resident (active, metadata, and freed pages
    /// not yet handed back).
    pub resident_bytes: u64,
    /// Bytes of the allocator's own bookkeeping.
    pub metadata_bytes: u64,
    /// Bytes mapped but handed back to the system (not resident).
    pub retained_bytes: u64,
}

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
