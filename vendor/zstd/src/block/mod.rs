//! Compress and decompress individual blocks.
//!
//! These methods process all the input data at once.
//! It is therefore best used with relatively small blocks
//! (like small network packets).

mod compressor;
mod decompressor;

pub use self::compressor::Compressor;
pub use self::decompressor::Decompressor;

use std::io;

/// Compresses a single block of data to the given destination buffer.
///
/// Returns the number of bytes written, or an error if something happened
/// (for instance if the destination buffer was too small).
///
/// A level of `0` uses zstd's default (currently `3`).
pub fn compress_to_buffer(
    source: &[u8],
    destination: &mut [u8],
    level: i32,
) -> io::Result<usize> {
    with_compressor(|c| c.compress_to_buffer(source, destination, level))
}

/// Compresses a block of data and returns the compressed result.
///
/// A level of `0` uses zstd's default (currently `3`).
pub fn compress(data: &[u8], level: i32) -> io::Result<Vec<u8>> {
    with_compressor(|c| c.compress(data, level))
}

// brakeledger patch: compression and decompression contexts are kept in two small shared pools
// and reused, instead of a context made (and the processor's features probed with `cpuid`, a
// trap on virtual machines) per call. A call takes a free context or makes one, and gives it
// back when done; at most `POOL_MAX` wait in each pool, so the memory they keep stays bounded
// however many threads call. A reused context gives the same bytes: each call starts a new
// frame whose parameters come from `level` and the input's size alone
// (ZSTD_compress_usingDict with no dictionary).
const POOL_MAX: usize = 8;

static COMPRESSORS: std::sync::Mutex<Vec<Compressor>> = std::sync::Mutex::new(Vec::new());
static DECOMPRESSORS: std::sync::Mutex<Vec<Decompressor>> = std::sync::Mutex::new(Vec::new());

fn with_pooled<C, T>(pool: &std::sync::Mutex<Vec<C>>, make: fn() -> C, work: impl FnOnce(&mut C) -> T) -> T {
    let taken = pool.lock().ok().and_then(|mut free| free.pop());
    let mut context = taken.unwrap_or_else(make);
    let done = work(&mut context);
    if let Ok(mut free) = pool.lock() {
        if free.len() < POOL_MAX {
            free.push(context);
        }
    }
    done
}

fn with_compressor<T>(work: impl FnOnce(&mut Compressor) -> T) -> T {
    with_pooled(&COMPRESSORS, Compressor::new, work)
}

pub(crate) fn with_decompressor<T>(work: impl FnOnce(&mut Decompressor) -> T) -> T {
    with_pooled(&DECOMPRESSORS, Decompressor::new, work)
}

/// Deompress a single block of data to the given destination buffer.
///
/// Returns the number of bytes written, or an error if something happened
/// (for instance if the destination buffer was too small).
pub fn decompress_to_buffer(
    source: &[u8],
    destination: &mut [u8],
) -> io::Result<usize> {
    with_decompressor(|d| d.decompress_to_buffer(source, destination))
}

/// Decompresses a block of data and returns the decompressed result.
///
/// The decompressed data should be less than `capacity` bytes,
/// or an error will be returned.
pub fn decompress(data: &[u8], capacity: usize) -> io::Result<Vec<u8>> {
    with_decompressor(|d| d.decompress(data, capacity))
}

#[cfg(test)]
mod tests {
    use super::{compress, decompress};

    #[test]
    fn test_direct() {
        // Can we include_str!("assets/example.txt")?
        // It's excluded from the packaging step, so maybe not.
        let text = include_str!("../../assets/example.txt");
        crate::test_cycle_unwrap(
            text.as_bytes(),
            |data| compress(data, 1),
            |data| decompress(data, text.len()),
        );
    }
}
