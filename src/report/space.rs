//! Free-space guard: before a command writes sizeable outputs (count folders, checkpoints, mock
//! catalogues) it compares an estimate of their size with the free bytes of the target folder's
//! filesystem, so a run that cannot fit stops with exit code 3 before any file is written
//! instead of failing halfway. The atomic writer still catches a disk that fills up meanwhile.
use crate::{Error, Result};
use std::path::Path;

/// Test-only hook: when `RINGSCALE_TEST_FREE_BYTES=N` is set, `free_bytes` reports N instead of
/// asking the filesystem, so tests can simulate a nearly full disk without mounting one. Read
/// only by `free_bytes`; the check itself (`check_space`) takes the free bytes as an argument.
pub const FREE_BYTES_ENV: &str = "RINGSCALE_TEST_FREE_BYTES";

/// Bytes available to this (unprivileged) user on the filesystem holding `dir`, or `None` when
/// unknown (unsupported platform, failed query). A folder that does not exist yet is measured
/// at its nearest existing ancestor, which is where it will be created.
pub fn free_bytes(dir: &Path) -> Option<u64> {
    if let Ok(v) = std::env::var(FREE_BYTES_ENV) {
        return v.trim().parse::<u64>().ok();
    }
    let dir = if dir.as_os_str().is_empty() {
        Path::new(".")
    } else {
        dir
    };
    let existing = dir.ancestors().find(|p| p.is_dir())?;
    statvfs_available(existing)
}

#[cfg(unix)]
fn statvfs_available(dir: &Path) -> Option<u64> {
    use std::os::unix::ffi::OsStrExt;
    let c = std::ffi::CString::new(dir.as_os_str().as_bytes()).ok()?;
    // SAFETY: `c` is a valid NUL-terminated path; `s` is plain data that statvfs fills in.
    let mut s: libc::statvfs = unsafe { std::mem::zeroed() };
    if unsafe { libc::statvfs(c.as_ptr(), &mut s) } != 0 {
        return None;
    }
    // Field widths differ between platforms (u32 on some, u64 on others).
    #[allow(clippy::unnecessary_cast)]
    let (blocks, size) = (s.f_bavail as u64, s.f_frsize as u64);
    Some(blocks.saturating_mul(size))
}

#[cfg(not(unix))]
fn statvfs_available(_dir: &Path) -> Option<u64> {
    None
}

/// The check itself: `Error::resource` (exit 3) naming `dir`, what is to be written, the bytes
/// needed and the bytes available when `needed > available`. Unknown free space passes.
pub fn check_space(dir: &Path, what: &str, needed: u64, available: Option<u64>) -> Result<()> {
    match available {
        Some(avail) if needed > avail => Err(Error::resource(format!(
            "{}: not enough free disk space for {what}: needs about {needed} bytes, {avail} available",
            dir.display()
        ))),
        _ => Ok(()),
    }
}

/// `check_space` with the free bytes of `dir`'s filesystem (see `free_bytes`).
pub fn ensure_space(dir: &Path, what: &str, needed: u64) -> Result<()> {
    check_space(dir, what, needed, free_bytes(dir))
}

/// Upper bound on the size of a FITS binary table (or CSV) catalogue of `rows` rows and `cols`
/// numeric columns, for the space check. FITS: the data (`value_bytes` per value) rounded up to
/// 2880-byte blocks, plus generous room for the primary and table headers (8 blocks: keywords,
/// column cards and provenance cards). CSV: at most 25 characters per value with its separator
/// (shortest round-trip f64 such as `-1.2345678901234567e-100,`), plus 16 KiB of header lines.
pub fn catalogue_bytes(rows: u64, cols: u64, value_bytes: u64, csv: bool) -> u64 {
    const BLOCK: u64 = 2880;
    if csv {
        return rows.saturating_mul(cols).saturating_mul(25) + 16384;
    }
    let data = rows.saturating_mul(cols).saturating_mul(value_bytes);
    data.div_ceil(BLOCK).saturating_mul(BLOCK) + 8 * BLOCK
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn check_fails_only_when_output_does_not_fit() {
        let d = Path::new("/some/out/folder");
        let e = check_space(d, "counts", 1000, Some(999)).unwrap_err();
        assert_eq!(e.exit_code(), 3);
        let m = e.to_string();
        for frag in ["/some/out/folder", "1000 bytes", "999 available", "counts"] {
            assert!(m.contains(frag), "message lacks '{frag}': {m}");
        }
        assert!(check_space(d, "counts", 1000, Some(1000)).is_ok());
        assert!(check_space(d, "counts", 0, Some(0)).is_ok());
        // Unknown free space (unsupported platform) never blocks a run.
        assert!(check_space(d, "counts", u64::MAX, None).is_ok());
    }

    #[test]
    fn free_bytes_of_a_missing_folder_uses_its_existing_ancestor() {
        if std::env::var_os(FREE_BYTES_ENV).is_some() {
            return; // the hook overrides the query; nothing to compare
        }
        let dir = tempfile::tempdir().unwrap();
        let here = free_bytes(dir.path());
        let below = free_bytes(&dir.path().join("not/yet/created"));
        if cfg!(unix) {
            // Same filesystem, queried moments apart: both known and positive.
            assert!(here.is_some_and(|b| b > 0), "{here:?}");
            assert!(below.is_some_and(|b| b > 0), "{below:?}");
        } else {
            assert_eq!((here, below), (None, None));
        }
    }

    #[test]
    fn catalogue_estimate_bounds_block_layout() {
        // FITS data are stored in whole 2880-byte blocks (FITS Standard 4.0, sec. 3.1).
        let b = catalogue_bytes(1000, 4, 8, false);
        assert_eq!(b % 2880, 0);
        assert!(b >= 1000 * 4 * 8 + 2 * 2880, "{b}");
        assert_eq!(catalogue_bytes(0, 4, 8, false), 8 * 2880);
        // CSV: never less than one character plus separator per value.
        assert!(catalogue_bytes(1000, 4, 8, true) >= 8000);
    }

    #[test]
    fn catalogue_estimate_covers_written_files() {
        use crate::catalog::{write_catalogue_with, OutColumn, Precision};
        // Values with long decimal forms and a header as large as a mock writes (100 cards).
        let v: Vec<f64> = (0..3000)
            .map(|i| -1.0 / (i as f64 + 3.0) * 1e-100)
            .collect();
        let cols: Vec<OutColumn> = ["RA", "DEC", "Z", "WEIGHT"]
            .iter()
            .map(|&name| OutColumn { name, data: &v })
            .collect();
        let header: Vec<(String, String)> = (0..100)
            .map(|i| (format!("RSINFO{i:02}"), "x".repeat(60)))
            .collect();
        let dir = tempfile::tempdir().unwrap();
        for (name, prec, width, csv) in [
            ("a.fits", Precision::Double, 8, false),
            ("b.fits", Precision::Single, 4, false),
            ("c.csv", Precision::Double, 8, true),
        ] {
            let p = dir.path().join(name);
            write_catalogue_with(&p, &cols, &header, prec).unwrap();
            let size = std::fs::metadata(&p).unwrap().len();
            let est = catalogue_bytes(3000, 4, width, csv);
            assert!(size <= est, "{name}: {size} bytes written, estimate {est}");
            assert!(size * 4 >= est, "{name}: estimate {est} far above {size}");
        }
    }
}
