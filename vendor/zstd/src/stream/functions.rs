use std::io;

use super::{Decoder, Encoder};

/// Decompress from the given source as if using a `Decoder`.
///
/// The input data must be in the zstd frame format.
pub fn decode_all<R: io::Read>(mut source: R) -> io::Result<Vec<u8>> {
    // brakeledger patch: input that is exactly one frame declaring its size (what
    // `block::compress` writes) is decoded in one call on a context reused from a small pool, instead
    // of through a stream decoder made for the call (a context with its CPU features probed,
    // and two buffers of about 128 KiB). Anything else, or any error there, takes the
    // stream decoder as before, so results and errors are the stream decoder's.
    let mut input = Vec::new();
    source.read_to_end(&mut input)?;
    if let Some(Ok(decoded)) = decode_one_sized_frame(&input) {
        return Ok(decoded);
    }
    let mut result = Vec::new();
    copy_decode(&input[..], &mut result)?;
    Ok(result)
}

/// Largest declared content size decoded in one call (beyond it, the stream decoder).
const ONE_CALL_MAX: u64 = 16 << 20;

/// `input` decoded in one call when it is exactly one zstd frame that declares its content
/// size; `None` when it is not such a frame.
fn decode_one_sized_frame(input: &[u8]) -> Option<io::Result<Vec<u8>>> {
    let frame_len = zstd_safe::find_frame_compressed_size(input).ok()?;
    if frame_len != input.len() {
        return None;
    }
    let size = zstd_safe::get_frame_content_size(input);
    // ZSTD_CONTENTSIZE_UNKNOWN and ZSTD_CONTENTSIZE_ERROR are the two largest u64 values.
    if size > ONE_CALL_MAX {
        return None;
    }
    let size = size as usize;
    Some(crate::block::with_decompressor(|d| d.decompress(input, size)).and_then(|out| {
        if out.len() == size {
            Ok(out)
        } else {
            Err(io::Error::new(io::ErrorKind::InvalidData, "decoded size differs from the frame's"))
        }
    }))
}

/// Decompress from the given source as if using a `Decoder`.
///
/// Decompressed data will be appended to `destination`.
pub fn copy_decode<R, W>(source: R, mut destination: W) -> io::Result<()>
where
    R: io::Read,
    W: io::Write,
{
    let mut decoder = Decoder::new(source)?;
    io::copy(&mut decoder, &mut destination)?;
    Ok(())
}

/// Compress all data from the given source as if using an `Encoder`.
///
/// Result will be in the zstd frame format.
///
/// A level of `0` uses zstd's default (currently `3`).
pub fn encode_all<R: io::Read>(source: R, level: i32) -> io::Result<Vec<u8>> {
    let mut result = Vec::<u8>::new();
    copy_encode(source, &mut result, level)?;
    Ok(result)
}

/// Compress all data from the given source as if using an `Encoder`.
///
/// Compressed data will be appended to `destination`.
///
/// A level of `0` uses zstd's default (currently `3`).
pub fn copy_encode<R, W>(
    mut source: R,
    destination: W,
    level: i32,
) -> io::Result<()>
where
    R: io::Read,
    W: io::Write,
{
    let mut encoder = Encoder::new(destination, level)?;
    io::copy(&mut source, &mut encoder)?;
    encoder.finish()?;
    Ok(())
}

#[cfg(tests)]
mod tests {}
