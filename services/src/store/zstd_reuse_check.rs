//! Checks of the patched zstd that sled compresses pages with (vendor/zstd/PATCHED.md): a
//! compression context reused across calls (from a small pool shared by all threads) must
//! write the bytes that libzstd's own one-shot `ZSTD_compress` writes (zstd 1.5.1, called
//! through `zstd_safe`, the reference here), and the one-call decoding of a sized frame must
//! give back the input, falling back to the stream decoder for every other input.

use proptest::prelude::*;

/// Page-like bytes: runs of a few repeated records with some noise, so that zstd finds
/// matches as it does in sled's pages.
fn page_like(seed: &[u8], len: usize) -> Vec<u8> {
    let record: Vec<u8> = seed.iter().copied().chain(b"fleet-1\0van-0042\0".iter().copied()).collect();
    (0..len).map(|i| record[i % record.len()] ^ u8::from(i % 97 == 0)).collect()
}

/// libzstd's one-shot compression (a fresh context inside the library), the reference.
fn one_shot(data: &[u8], level: i32) -> Vec<u8> {
    let mut out = Vec::with_capacity(zstd::zstd_safe::compress_bound(data.len()));
    zstd::zstd_safe::compress(&mut out, data, level).expect("one-shot compression");
    out
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Reference: libzstd's one-shot `ZSTD_compress` (zstd 1.5.1) on the same bytes and level.
    #[test]
    fn a_reused_context_writes_the_one_shot_bytes(
        seed in proptest::collection::vec(any::<u8>(), 1..40),
        lens in proptest::collection::vec(0usize..40_000, 1..6),
        level in prop_oneof![Just(1), Just(3), Just(19)],
    ) {
        // Several sizes in a row, so a reused context has held larger and smaller inputs
        // before each call.
        for len in lens {
            let data = page_like(&seed, len);
            let reused = zstd::block::compress(&data, level).expect("compress");
            prop_assert_eq!(&reused, &one_shot(&data, level));
            prop_assert_eq!(zstd::stream::decode_all(&reused[..]).expect("decode"), data.clone());
            prop_assert_eq!(zstd::block::decompress(&reused, data.len()).expect("block decode"), data);
        }
    }
}

#[test]
fn inputs_that_are_not_one_sized_frame_decode_as_the_stream_decoder_does() {
    let first = page_like(b"first", 5_000);
    let second = page_like(b"second", 7_000);
    // Two frames back to back: the stream decoder reads both.
    let mut two = zstd::block::compress(&first, 1).expect("compress");
    two.extend(zstd::block::compress(&second, 1).expect("compress"));
    assert_eq!(zstd::stream::decode_all(&two[..]).expect("two frames"), [first.clone(), second].concat());
    // A frame from the stream encoder, which does not declare its size.
    let unsized_frame = zstd::stream::encode_all(&first[..], 1).expect("stream encode");
    assert_eq!(zstd::zstd_safe::get_frame_content_size(&unsized_frame), zstd::zstd_safe::CONTENTSIZE_UNKNOWN);
    assert_eq!(zstd::stream::decode_all(&unsized_frame[..]).expect("unsized frame"), first);
    // Empty input and damaged frames are errors, as the stream decoder has them, never a panic.
    assert!(zstd::stream::decode_all(&[][..]).is_err());
    let mut damaged = zstd::block::compress(&first, 1).expect("compress");
    let middle = damaged.len() / 2;
    damaged[middle] ^= 0xff;
    damaged.truncate(damaged.len() - 3);
    assert!(zstd::stream::decode_all(&damaged[..]).is_err());
}

/// Reference: libzstd's one-shot `ZSTD_compress` (zstd 1.5.1). More threads than the pool keeps
/// contexts, each compressing and decoding its own inputs at once.
#[test]
fn contexts_shared_between_threads_write_the_one_shot_bytes() {
    let workers: Vec<_> = (0..12u8)
        .map(|worker| {
            std::thread::spawn(move || {
                for round in 0..40usize {
                    let data = page_like(&[worker, round as u8], 500 + 397 * round);
                    let packed = zstd::block::compress(&data, 1).expect("compress");
                    assert_eq!(packed, one_shot(&data, 1), "worker {worker}, round {round}");
                    assert_eq!(zstd::stream::decode_all(&packed[..]).expect("decode"), data);
                }
            })
        })
        .collect();
    for worker in workers {
        worker.join().expect("worker finished");
    }
}
