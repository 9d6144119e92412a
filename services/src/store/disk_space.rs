//! Free space on the data directory's file system, and telling a full disk from other I/O
//! failures.
//!
//! Writes are refused while less than `[storage] min_free_bytes` is free, before the storage
//! engine itself runs out of space: sled keeps the I/O error of a failed write and fails every
//! later write with it until the database is reopened, so it is better never to let it get there.
//! When it does get there anyway, [`is_out_of_space`] tells the wrapper to reopen the database
//! once space is back.

use std::io;
use std::path::Path;

/// True when an I/O error means the file system (or the user's quota) is full.
pub fn is_out_of_space(error: &io::Error) -> bool {
    const ENOSPC: i32 = 28;
    const EDQUOT: i32 = 122;
    error.kind() == io::ErrorKind::StorageFull || error.kind() == io::ErrorKind::QuotaExceeded || matches!(error.raw_os_error(), Some(ENOSPC | EDQUOT))
}

/// Bytes available to this process on the file system holding `dir`.
pub fn available_bytes(dir: &Path) -> io::Result<u64> {
    fs2::available_space(dir)
}

/// The refusal message when free space is below the reserve.
pub fn below_reserve(dir: &Path, free_bytes: u64, reserve_bytes: u64) -> String {
    format!(
        "the disk holding {} is nearly full ({} free, {} kept in reserve): writes are refused until space is freed, reads still work",
        dir.display(),
        human_bytes(free_bytes),
        human_bytes(reserve_bytes)
    )
}

/// Bytes for people: "812 KiB", "63.9 MiB".
pub fn human_bytes(bytes: u64) -> String {
    const UNITS: [&str; 5] = ["bytes", "KiB", "MiB", "GiB", "TiB"];
    let mut value = bytes as f64;
    let mut unit = 0;
    while value >= 1024.0 && unit + 1 < UNITS.len() {
        value /= 1024.0;
        unit += 1;
    }
    if unit == 0 {
        format!("{bytes} bytes")
    } else if value >= 100.0 {
        format!("{value:.0} {}", UNITS[unit])
    } else {
        format!("{value:.1} {}", UNITS[unit])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn out_of_space_is_told_from_other_errors() {
        assert!(is_out_of_space(&io::Error::from_raw_os_error(28)));
        assert!(is_out_of_space(&io::Error::from(io::ErrorKind::StorageFull)));
        assert!(!is_out_of_space(&io::Error::from(io::ErrorKind::PermissionDenied)));
    }

    #[test]
    fn bytes_read_plainly() {
        assert_eq!(human_bytes(512), "512 bytes");
        assert_eq!(human_bytes(64 * 1024 * 1024), "64.0 MiB");
        assert_eq!(human_bytes(300 * 1024), "300 KiB");
    }
}
