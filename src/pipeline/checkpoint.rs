//! Content-addressed checkpoints: each stage output is stored under a key that hashes
//! everything it depends on (input checksums, the plan fields it reads, the tool version), so a
//! rerun reuses exactly the work whose inputs did not change and recomputes the rest.
use crate::report::{atomic, json};
use crate::{Error, Result};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};

/// SHA-256 (hex) of a value's JSON encoding. Struct fields serialise in declaration order and
/// maps are sorted (BTreeMap), so the encoding and the key are stable.
pub fn hash_json<T: Serialize + ?Sized>(v: &T) -> String {
    let bytes = serde_json::to_vec(v).unwrap_or_default();
    hex(&Sha256::digest(&bytes))
}

/// SHA-256 (hex) of a file's bytes.
pub fn hash_file(path: &Path) -> Result<String> {
    crate::catalog::file_sha256(path)
}

fn hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

static WRITTEN: AtomicUsize = AtomicUsize::new(0);

/// Test hook: with RINGSCALE_TEST_ABORT_AFTER=N the process stops dead right after its N-th
/// checkpoint write (exit status 137, as after `kill -9`; no destructors, no cleanup), which
/// lets tests interrupt a run at exact points.
fn after_write() {
    let n = WRITTEN.fetch_add(1, Ordering::SeqCst) + 1;
    if let Some(limit) = std::env::var("RINGSCALE_TEST_ABORT_AFTER")
        .ok()
        .and_then(|v| v.trim().parse::<usize>().ok())
    {
        if n >= limit {
            std::process::exit(137);
        }
    }
}

/// Write a checkpoint atomically (and count it for the abort hook).
pub fn write<T: Serialize>(path: &Path, value: &T) -> Result<()> {
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, "cannot create folder", e))?;
    }
    json::write_json(path, value)?;
    after_write();
    Ok(())
}

/// Read a checkpoint; `None` when the file does not exist.
pub fn read<T: DeserializeOwned>(path: &Path) -> Result<Option<T>> {
    let text = match std::fs::read_to_string(path) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(Error::io(path, "cannot read checkpoint", e)),
    };
    serde_json::from_str(&text).map(Some).map_err(|e| {
        Error::input(format!(
            "{}: damaged checkpoint ({e}); delete it to recompute",
            path.display()
        ))
    })
}

/// Marker of a finished stage: its key and the checksums of the files it wrote.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct StageDone {
    pub stage: String,
    pub key: String,
    pub version: String,
    /// (path relative to the output folder, sha256).
    pub files: Vec<(String, String)>,
}

impl StageDone {
    /// Record the files of a stage (all regular files directly in `dir`, sorted).
    pub fn record(stage: &str, key: &str, root: &Path, dir: &Path) -> Result<Self> {
        let mut files = Vec::new();
        {
            let d = dir;
            let mut names: Vec<PathBuf> = std::fs::read_dir(d)
                .map_err(|e| Error::io(d, "cannot list", e))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.is_file() && !is_temp(p))
                .collect();
            names.sort();
            for p in names {
                let rel = p.strip_prefix(root).unwrap_or(&p).display().to_string();
                files.push((rel, hash_file(&p)?));
            }
        }
        Ok(StageDone {
            stage: stage.into(),
            key: key.into(),
            version: crate::VERSION.into(),
            files,
        })
    }

    /// True when this marker matches `key` and every recorded file is still there, unchanged.
    pub fn still_valid(&self, key: &str, root: &Path) -> bool {
        self.key == key
            && self.version == crate::VERSION
            && self
                .files
                .iter()
                .all(|(rel, sha)| hash_file(&root.join(rel)).is_ok_and(|h| &h == sha))
    }
}

/// Names of half-written files: atomic-write temporaries and write probes.
pub fn is_temp(p: &Path) -> bool {
    let n = p
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    n.starts_with('.') && (n.contains(".tmp-") || n.starts_with(".ringscale-write-probe-"))
}

/// Remove temporaries left by a killed run under `dir` (recursively). Only safe when no other
/// process is writing there (not while job-array shards run), so only the merge step calls it.
pub fn sweep_temps(dir: &Path) -> Result<usize> {
    let mut removed = 0;
    let Ok(rd) = std::fs::read_dir(dir) else {
        return Ok(0);
    };
    for e in rd.flatten() {
        let p = e.path();
        let ft = match e.file_type() {
            Ok(t) => t,
            Err(_) => continue,
        };
        if ft.is_dir() {
            removed += sweep_temps(&p)?;
        } else if is_temp(&p) {
            std::fs::remove_file(&p)
                .map_err(|e| Error::io(&p, "cannot remove stale temporary", e))?;
            removed += 1;
        }
    }
    Ok(removed)
}

/// Atomic write of text (re-exported for the pipeline's own small files).
pub fn write_text(path: &Path, text: &str) -> Result<()> {
    atomic::write_atomic_str(path, text)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hash_changes_with_content_and_is_stable() {
        let a = hash_json(&("x", 1));
        assert_eq!(a, hash_json(&("x", 1)));
        assert_ne!(a, hash_json(&("x", 2)));
        // SHA-256 of "[]" computed independently with `printf '[]' | sha256sum`.
        assert_eq!(
            hash_json::<[u8]>(&[]),
            "4f53cda18c2baa0c0354bb5f9a3ecbe5ed12ab4d8e11ba873c2f11161202b945"
        );
    }

    #[test]
    fn sweep_removes_only_temporaries() {
        let d = tempfile::tempdir().unwrap();
        std::fs::create_dir(d.path().join("sub")).unwrap();
        std::fs::write(d.path().join("sub/.x.json.tmp-1-2"), "p").unwrap();
        std::fs::write(d.path().join("keep.json"), "k").unwrap();
        assert_eq!(sweep_temps(d.path()).unwrap(), 1);
        assert!(d.path().join("keep.json").exists());
        assert!(!d.path().join("sub/.x.json.tmp-1-2").exists());
    }
}
