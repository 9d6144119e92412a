//! A size-limited file system for full-disk tests: a tmpfs of a few MiB mounted on a temporary
//! directory (needs root; tests skip with a message otherwise), and a filler file to use up
//! its space and give it back.

use std::io::Write;
use std::path::{Path, PathBuf};

/// True when this process runs as root (needed to mount a tmpfs).
pub fn running_as_root() -> bool {
    std::process::Command::new("id")
        .arg("-u")
        .output()
        .map(|out| String::from_utf8_lossy(&out.stdout).trim() == "0")
        .unwrap_or(false)
}

/// A mounted tmpfs, unmounted on drop.
pub struct SmallDisk {
    mount_point: tempfile::TempDir,
}

impl SmallDisk {
    /// Mounts a tmpfs of `mib` MiB; `Err` with the reason when that is not possible.
    pub fn mount(mib: u64) -> Result<Self, String> {
        if !running_as_root() {
            return Err("not running as root, so no tmpfs can be mounted".into());
        }
        let mount_point = tempfile::tempdir().map_err(|e| e.to_string())?;
        let status = std::process::Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={mib}m"), "tmpfs"])
            .arg(mount_point.path())
            .status()
            .map_err(|e| format!("running mount: {e}"))?;
        if !status.success() {
            return Err(format!("mount -t tmpfs failed ({status})"));
        }
        Ok(Self { mount_point })
    }

    /// The mount point.
    pub fn path(&self) -> &Path {
        self.mount_point.path()
    }

    /// Bytes free on the file system.
    pub fn free_bytes(&self) -> u64 {
        fs2::available_space(self.path()).unwrap_or(0)
    }

    /// Writes a filler file until at most `leave_bytes` are free (or the disk is full); returns
    /// its path.
    pub fn fill(&self, leave_bytes: u64) -> PathBuf {
        let path = self.path().join("filler");
        let mut file = std::fs::OpenOptions::new().create(true).append(true).open(&path).expect("filler");
        let block = vec![0u8; 64 * 1024];
        loop {
            let free = self.free_bytes();
            if free <= leave_bytes {
                break;
            }
            let n = (free - leave_bytes).min(block.len() as u64) as usize;
            if file.write_all(&block[..n]).and_then(|_| file.sync_data()).is_err() {
                break;
            }
        }
        path
    }
}

impl Drop for SmallDisk {
    fn drop(&mut self) {
        let _ = std::process::Command::new("umount").arg("-l").arg(self.mount_point.path()).status();
    }
}
