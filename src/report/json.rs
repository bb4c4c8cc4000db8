//! Pretty JSON summaries, written atomically. Non-finite floats become `null` (JSON has no NaN).
use super::atomic::write_atomic_str;
use crate::{Error, Result};
use serde::Serialize;
use std::path::Path;

pub fn write_json<T: Serialize + ?Sized>(path: &Path, value: &T) -> Result<()> {
    let mut s = serde_json::to_string_pretty(value)
        .map_err(|e| Error::other(format!("{}: cannot encode JSON: {e}", path.display())))?;
    s.push('\n');
    write_atomic_str(path, &s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("s.json");
        let v = serde_json::json!({"alpha": 1.0123456789012345, "n": [1, 2, 3], "name": "x"});
        write_json(&p, &v).unwrap();
        let back: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
        assert_eq!(back, v);
    }
}
