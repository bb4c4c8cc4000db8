//! BAO measurements D_V(z_eff)/r_d: reading tables and `ringscale fit` result files.
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// One isotropic BAO measurement: D_V(z_eff)/r_d with its 1-sigma error.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BaoPoint {
    pub z_eff: f64,
    pub dv_over_rd: f64,
    pub dv_over_rd_err: f64,
}

impl BaoPoint {
    /// Reject values no likelihood can use; `what` names the source (file and line).
    pub fn validate(&self, what: &str) -> Result<()> {
        let checks = [
            ("z_eff", self.z_eff, self.z_eff > 0.0 && self.z_eff < 20.0),
            ("dv_over_rd", self.dv_over_rd, self.dv_over_rd > 0.0),
            (
                "dv_over_rd_err",
                self.dv_over_rd_err,
                self.dv_over_rd_err > 0.0,
            ),
        ];
        for (name, v, ok) in checks {
            if !v.is_finite() || !ok {
                return Err(Error::input(format!(
                    "{what}: {name} = {v} is out of range (z_eff in (0, 20), values and errors > 0)"
                )));
            }
        }
        Ok(())
    }
}

/// Parse a table with columns z_eff, dv_over_rd, dv_over_rd_err separated by commas or
/// whitespace. '#' starts a comment; one header line naming the columns is allowed.
pub fn parse_bao_table(text: &str, source: &str) -> Result<Vec<BaoPoint>> {
    let mut out = Vec::new();
    let mut seen_line = false;
    for (i, raw) in text.lines().enumerate() {
        let line = raw.split('#').next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        let toks: Vec<&str> = line
            .split(|c: char| c == ',' || c.is_whitespace())
            .filter(|t| !t.is_empty())
            .collect();
        let first_line = !seen_line;
        seen_line = true;
        if first_line && toks.first().is_some_and(|t| t.parse::<f64>().is_err()) {
            let names: Vec<String> = toks.iter().map(|t| t.to_ascii_lowercase()).collect();
            if names == ["z_eff", "dv_over_rd", "dv_over_rd_err"] {
                continue;
            }
            return Err(Error::input(format!(
                "{source}: line {}: header must be 'z_eff dv_over_rd dv_over_rd_err', found '{line}'",
                i + 1
            )));
        }
        if toks.len() != 3 {
            return Err(Error::input(format!(
                "{source}: line {}: expected 3 columns (z_eff, dv_over_rd, dv_over_rd_err), found {}",
                i + 1,
                toks.len()
            )));
        }
        let mut v = [0.0; 3];
        for (k, t) in toks.iter().enumerate() {
            v[k] = t.parse::<f64>().map_err(|_| {
                Error::input(format!(
                    "{source}: line {}: column {} ('{t}') is not a number",
                    i + 1,
                    k + 1
                ))
            })?;
        }
        let p = BaoPoint {
            z_eff: v[0],
            dv_over_rd: v[1],
            dv_over_rd_err: v[2],
        };
        p.validate(&format!("{source}: line {}", i + 1))?;
        out.push(p);
    }
    if out.is_empty() {
        return Err(Error::input(format!("{source}: no BAO measurements found")));
    }
    Ok(out)
}

/// Extract the measurement from a fit result JSON document: the keys z_eff, dv_over_rd and
/// dv_over_rd_err at the top level or in the first nested object that has all three.
pub fn parse_fit_json(text: &str, source: &str) -> Result<BaoPoint> {
    let v: serde_json::Value = serde_json::from_str(text)
        .map_err(|e| Error::input(format!("{source}: invalid JSON: {e}")))?;
    const KEYS: [&str; 3] = ["z_eff", "dv_over_rd", "dv_over_rd_err"];
    fn find(v: &serde_json::Value) -> Option<&serde_json::Map<String, serde_json::Value>> {
        let obj = v.as_object()?;
        if KEYS.iter().all(|k| obj.contains_key(*k)) {
            return Some(obj);
        }
        obj.values().find_map(find)
    }
    let obj = find(&v).ok_or_else(|| {
        let missing: Vec<&str> = KEYS
            .iter()
            .copied()
            .filter(|k| v.get(*k).is_none())
            .collect();
        Error::input(format!(
            "{source}: missing key(s) {} (need z_eff, dv_over_rd, dv_over_rd_err)",
            missing.join(", ")
        ))
    })?;
    let mut vals = [0.0; 3];
    for (i, k) in KEYS.iter().enumerate() {
        vals[i] = obj[*k]
            .as_f64()
            .ok_or_else(|| Error::input(format!("{source}: key {k} is not a number")))?;
    }
    let p = BaoPoint {
        z_eff: vals[0],
        dv_over_rd: vals[1],
        dv_over_rd_err: vals[2],
    };
    p.validate(source)?;
    Ok(p)
}

/// Read measurements from files: `.json` files are fit results (one point each), anything else
/// is a table.
pub fn read_bao_files(paths: &[&Path]) -> Result<Vec<BaoPoint>> {
    let mut out = Vec::new();
    for p in paths {
        let text =
            std::fs::read_to_string(p).map_err(|e| Error::io(p, "cannot read BAO data", e))?;
        let src = p.display().to_string();
        let is_json = p
            .extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("json"));
        if is_json {
            out.push(parse_fit_json(&text, &src)?);
        } else {
            out.extend(parse_bao_table(&text, &src)?);
        }
    }
    if out.is_empty() {
        return Err(Error::input("no BAO measurements given"));
    }
    Ok(out)
}
