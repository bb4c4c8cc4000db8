//! Atomic file writes: a temporary file in the destination directory, fsync, then rename, so a
//! reader never sees a half-written output and an interrupted run leaves the old file intact.
use crate::{Error, Result};
use std::fs::{self, OpenOptions};
use std::io::Write;
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Test-only fault injection (documented in tests/hostile.rs): when the environment variable
/// `RINGSCALE_TEST_FAIL_WRITE_AFTER_BYTES=N` is set, atomic writes of this process fail with a
/// "no space left" error once N bytes in total have been written, as a full disk would. It lets
/// the integration tests check exit code 3 and the clean-up without mounting a small filesystem.
pub const FAIL_WRITE_ENV: &str = "RINGSCALE_TEST_FAIL_WRITE_AFTER_BYTES";
static WRITTEN: AtomicU64 = AtomicU64::new(0);

fn write_counted(f: &mut fs::File, bytes: &[u8]) -> std::io::Result<()> {
    let limit = std::env::var(FAIL_WRITE_ENV)
        .ok()
        .and_then(|v| v.trim().parse::<u64>().ok());
    let Some(limit) = limit else {
        return f.write_all(bytes);
    };
    let before = WRITTEN.fetch_add(bytes.len() as u64, Ordering::Relaxed);
    let room = limit.saturating_sub(before) as usize;
    if room >= bytes.len() {
        return f.write_all(bytes);
    }
    f.write_all(&bytes[..room])?;
    // ENOSPC (28 on Linux and macOS): exactly the error a full disk raises.
    Err(std::io::Error::from_raw_os_error(28))
}

/// Write `bytes` to `path` atomically. Permission or disk-space failures are
/// `Error::Resource`, other I/O failures `Error::Input` (see `Error::io`). The temporary file is
/// removed on any error.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let name = path
        .file_name()
        .ok_or_else(|| Error::input(format!("{}: not a file path", path.display())))?;
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let tmp = dir.join(format!(
        ".{}.tmp-{}-{}",
        name.to_string_lossy(),
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    let result = (|| -> Result<()> {
        let mut f = OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)
            .map_err(|e| Error::io(&tmp, "creating temporary output file", e))?;
        write_counted(&mut f, bytes)
            .map_err(|e| Error::io(&tmp, "writing temporary output file", e))?;
        f.sync_all()
            .map_err(|e| Error::io(&tmp, "syncing temporary output file", e))?;
        drop(f);
        fs::rename(&tmp, path).map_err(|e| Error::io(path, "moving output file into place", e))
    })();
    match result {
        Ok(()) => {
            // Persist the rename itself; not every platform can sync a directory, so best effort.
            if let Ok(d) = fs::File::open(dir) {
                let _ = d.sync_all();
            }
            Ok(())
        }
        Err(e) => {
            let _ = fs::remove_file(&tmp);
            Err(e)
        }
    }
}

/// `write_atomic` for text.
pub fn write_atomic_str(path: &Path, text: &str) -> Result<()> {
    write_atomic(path, text.as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_replaces_and_leaves_no_temp() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("out.txt");
        write_atomic_str(&p, "first").unwrap();
        write_atomic_str(&p, "second").unwrap();
        assert_eq!(fs::read_to_string(&p).unwrap(), "second");
        let names: Vec<_> = fs::read_dir(dir.path()).unwrap().collect();
        assert_eq!(names.len(), 1);
    }

    #[test]
    fn missing_directory_is_an_input_error() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("no/such/dir/out.txt");
        let e = write_atomic_str(&p, "x").unwrap_err();
        assert!(matches!(e, Error::Input(_)), "{e}");
        assert!(e.to_string().contains("no/such/dir"), "{e}");
    }

    #[test]
    fn failed_rename_removes_temp() {
        // Renaming a file onto an existing directory fails; the temporary must not remain.
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("target_dir");
        fs::create_dir(&p).unwrap();
        fs::write(p.join("keep"), "x").unwrap();
        assert!(write_atomic_str(&p, "x").is_err());
        let names: Vec<_> = fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("target_dir")]);
    }
}
