//! The patched sled (`vendor/sled`, see its `PATCHED.md`) writes log messages under 128 bytes
//! as zstd frames holding one raw block, and messages under 4 KiB at a fast zstd level. Checked
//! here against libzstd, the reference implementation of the format (RFC 8878): a small value
//! of repeated text, which level 1 would compress, is found in the log uncompressed, inside a
//! frame that libzstd's own one-shot decoder reads back; a mid-sized value of repeated text is not found verbatim (it was compressed);
//! and every value reads back after the database is reopened.

use brakeledger::store::sled_engine::{sled_config, PageSettings};

/// zstd's frame magic number, as it appears in a file (little-endian).
const ZSTD_MAGIC: [u8; 4] = [0x28, 0xB5, 0x2F, 0xFD];

/// About 60 bytes that zstd at level 1 would shrink (repeated text): found verbatim only
/// because the patch stores small messages raw.
fn small_value(n: usize) -> Vec<u8> {
    format!("small-{n:03} ").repeat(6).into_bytes()
}

fn mid_value(n: usize) -> Vec<u8> {
    format!("mid-{n:03}-brakeledger ").repeat(60).into_bytes()
}

/// Every file under `dir`, concatenated.
fn all_bytes(dir: &std::path::Path) -> Vec<u8> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).expect("read dir") {
        let path = entry.expect("dir entry").path();
        if path.is_dir() {
            out.extend(all_bytes(&path));
        } else {
            out.extend(std::fs::read(&path).expect("read file"));
        }
    }
    out
}

fn find(haystack: &[u8], needle: &[u8]) -> Option<usize> {
    haystack.windows(needle.len()).position(|w| w == needle)
}

/// The raw-block frame that holds the byte at `at`, decoded by libzstd: the nearest frame
/// start before it whose descriptor says single segment with a one-byte content size.
fn decode_frame_around(bytes: &[u8], at: usize) -> Vec<u8> {
    let start = (0..at)
        .rev()
        .find(|&i| bytes[i..].starts_with(&ZSTD_MAGIC) && bytes.get(i + 4) == Some(&0x20))
        .expect("a zstd frame header before the value");
    let content = usize::from(bytes[start + 5]);
    let frame = &bytes[start..start + 4 + 1 + 1 + 3 + content];
    let mut out = Vec::with_capacity(content);
    zstd::zstd_safe::decompress(&mut out, frame).expect("libzstd reads the frame");
    out
}

#[test]
fn small_messages_are_raw_zstd_frames_and_every_value_reads_back() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("db");
    let db = sled_config(&path, PageSettings::with_cache(8 << 20)).open().expect("open");
    let tree = db.open_tree("values").expect("tree");
    for n in 0..40 {
        tree.insert(format!("s{n:03}"), small_value(n)).expect("insert");
        tree.insert(format!("m{n:03}"), mid_value(n)).expect("insert");
    }
    db.flush().expect("flush");
    drop(tree);
    drop(db);

    let bytes = all_bytes(&path);
    let last_small = small_value(39);
    let at = find(&bytes, &last_small).expect("the last small value is in the log uncompressed");
    let decoded = decode_frame_around(&bytes, at);
    assert!(find(&decoded, &last_small).is_some(), "the frame libzstd decoded holds the value");
    assert!(find(&bytes, &mid_value(39)).is_none(), "a mid-sized value of repeated text is compressed");

    let db = sled_config(&path, PageSettings::with_cache(8 << 20)).open().expect("reopen");
    let tree = db.open_tree("values").expect("tree");
    for n in 0..40 {
        assert_eq!(tree.get(format!("s{n:03}")).expect("get").as_deref(), Some(small_value(n).as_slice()));
        assert_eq!(tree.get(format!("m{n:03}")).expect("get").as_deref(), Some(mid_value(n).as_slice()));
    }
}
