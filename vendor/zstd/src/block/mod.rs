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

// brakeledger patch: one compression context per thread, reused by every call, instead of a
// context created (and its CPU features probed with `cpuid`, a trap on virtual machines) per
// call. A reused context gives the same bytes: each call starts a new frame with parameters
// from `level` and the input's size alone (ZSTD_compress_usingDict with no dictionary).
thread_local! {
    static COMPRESSOR: std::cell::RefCell<Compressor> = std::cell::RefCell::new(Compressor::new());
}

fn with_compressor<T>(work: impl FnOnce(&mut Compressor) -> T) -> T {
    let mut work = Some(work);
    let reused = COMPRESSOR.try_with(|cell| {
        cell.try_borrow_mut()
            .ok()
            .map(|mut compressor| (work.take().expect("called once"))(&mut compressor))
    });
    match (reused, work) {
        (Ok(Some(done)), _) => done,
        (_, Some(work)) => work(&mut Compressor::new()),
        (_, None) => unreachable!("the work ran on the reused context"),
    }
}

pub(crate) fn with_decompressor<T>(work: impl FnOnce(&mut Decompressor) -> T) -> T {
    thread_local! {
        static DECOMPRESSOR: std::cell::RefCell<Decompressor> = std::cell::RefCell::new(Decompressor::new());
    }
    let mut work = Some(work);
    let reused = DECOMPRESSOR.try_with(|cell| {
        cell.try_borrow_mut()
            .ok()
            .map(|mut decompressor| (work.take().expect("called once"))(&mut decompressor))
    });
    match (reused, work) {
        (Ok(Some(done)), _) => done,
        (_, Some(work)) => work(&mut Decompressor::new()),
        (_, None) => unreachable!("the work ran on the reused context"),
    }
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
