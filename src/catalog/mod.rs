//! Catalogues: struct-of-arrays storage, FITS and CSV readers and writers, column mapping and
//! validation. Every rejected value is reported with its file, row and column; nothing is
//! silently dropped (row filters the user asks for are counted and reported).

mod csvio;
mod fitsio_io;

use crate::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// Rows read per chunk: bounds temporary memory for 1e8-row files to the output columns.
pub const CHUNK_ROWS: usize = 1 << 16;

/// Which columns hold what. Names match case-insensitively.
#[derive(Debug, Clone, Serialize)]
pub struct ColumnMap {
    /// Position columns: RA, Dec, redshift for sky catalogues; X, Y, Z (Mpc/h) for Cartesian.
    pub position: [String; 3],
    /// Weight columns, multiplied together (empty: unit weights).
    pub weights: Vec<String>,
    /// Optional integer jackknife region column.
    pub region: Option<String>,
    pub kind: CatalogueKind,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum CatalogueKind {
    /// RA, Dec in degrees and redshift.
    Sky,
    /// Comoving Cartesian positions in Mpc/h (boxes, or pre-computed positions).
    Cartesian,
}

impl ColumnMap {
    pub fn sky(ra: &str, dec: &str, z: &str, weights: Vec<String>, region: Option<String>) -> Self {
        ColumnMap {
            position: [ra.into(), dec.into(), z.into()],
            weights,
            region,
            kind: CatalogueKind::Sky,
        }
    }
    pub fn cartesian(
        x: &str,
        y: &str,
        z: &str,
        weights: Vec<String>,
        region: Option<String>,
    ) -> Self {
        ColumnMap {
            position: [x.into(), y.into(), z.into()],
            weights,
            region,
            kind: CatalogueKind::Cartesian,
        }
    }
    pub fn default_sky() -> Self {
        Self::sky("RA", "DEC", "Z", vec![], None)
    }
}

/// Optional row filters; rows they remove are counted, never silently dropped.
#[derive(Debug, Clone, Copy, Default, Serialize)]
pub struct RowFilter {
    pub z_min: Option<f64>,
    pub z_max: Option<f64>,
}

/// A catalogue in struct-of-arrays form.
#[derive(Debug, Clone, Serialize)]
pub struct Catalogue {
    pub path: PathBuf,
    pub kind: CatalogueKind,
    /// RA [deg] in [0, 360) / Dec [deg] / redshift for sky catalogues; X, Y, Z for Cartesian.
    pub pos: [Vec<f64>; 3],
    /// Product of the weight columns (1 when none).
    pub w: Vec<f64>,
    /// Region labels when a region column was given.
    pub region: Option<Vec<u32>>,
    /// Rows in the file.
    pub rows_in_file: usize,
    /// Rows removed by the user's filter.
    pub rows_filtered: usize,
    /// Number of RA values wrapped into [0, 360).
    pub ra_wrapped: usize,
    /// All column names found in the file.
    pub available_columns: Vec<String>,
}

impl Catalogue {
    pub fn len(&self) -> usize {
        self.w.len()
    }
    pub fn is_empty(&self) -> bool {
        self.w.is_empty()
    }
    pub fn ra(&self) -> &[f64] {
        &self.pos[0]
    }
    pub fn dec(&self) -> &[f64] {
        &self.pos[1]
    }
    pub fn redshift(&self) -> &[f64] {
        &self.pos[2]
    }
    /// Sum of weights and of squared weights, in row order (deterministic).
    pub fn weight_sums(&self) -> (f64, f64) {
        self.w
            .iter()
            .fold((0.0, 0.0), |(s, s2), &w| (s + w, s2 + w * w))
    }
    /// Bytes held by the columns.
    pub fn bytes(&self) -> usize {
        8 * (4 * self.len()) + self.region.as_ref().map_or(0, |r| 4 * r.len())
    }
}

/// File formats, chosen by extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Fits,
    Csv,
}

pub fn format_of(path: &Path) -> Result<Format> {
    let name = path
        .file_name()
        .map(|s| s.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    let name = name.strip_suffix(".gz").unwrap_or(&name);
    if name.ends_with(".fits") || name.ends_with(".fit") || name.ends_with(".fits.fz") {
        Ok(Format::Fits)
    } else if name.ends_with(".csv") || name.ends_with(".txt") {
        Ok(Format::Csv)
    } else {
        Err(Error::input(format!(
            "{}: unknown catalogue format (use .fits/.fit or .csv)",
            path.display()
        )))
    }
}

/// Raw column access implemented by each reader: names, row count, chunks of f64 values.
pub(crate) trait ColumnSource {
    fn columns(&self) -> &[String];
    fn n_rows(&self) -> usize;
    /// Read rows [start, end) of column `idx` (an index into `columns()`) as f64.
    fn read_f64(&mut self, idx: usize, start: usize, end: usize) -> Result<Vec<f64>>;
    /// Whether the column is integer-typed (region labels must be).
    fn is_integer(&self, idx: usize) -> bool;
    /// Called once with the columns that will be read, before any `read_f64`.
    fn prepare(&mut self, wanted: &[usize]) -> Result<()>;
    /// Whether `take_column` hands over whole parsed columns (after `prepare`).
    fn whole_columns(&self) -> bool {
        false
    }
    /// Move out the whole parsed column `idx` (readers with `whole_columns`).
    fn take_column(&mut self, _idx: usize) -> Result<Vec<f64>> {
        Err(Error::other(
            "this reader has no parsed columns to hand over",
        ))
    }
}

/// Read and validate a catalogue.
pub fn read_catalogue(path: &Path, map: &ColumnMap, filter: &RowFilter) -> Result<Catalogue> {
    match format_of(path)? {
        Format::Fits => {
            let mut src = fitsio_io::FitsSource::open(path)?;
            assemble(path, &mut src, map, filter)
        }
        Format::Csv => {
            let mut src = csvio::CsvSource::open(path)?;
            assemble(path, &mut src, map, filter)
        }
    }
}

fn find_column(path: &Path, cols: &[String], want: &str, role: &str) -> Result<usize> {
    let hits: Vec<usize> = cols
        .iter()
        .enumerate()
        .filter(|(_, c)| c.eq_ignore_ascii_case(want))
        .map(|(i, _)| i)
        .collect();
    match hits.len() {
        1 => Ok(hits[0]),
        0 => Err(Error::input(format!(
            "{}: column '{want}' ({role}) not found; available columns: {}",
            path.display(),
            cols.join(", ")
        ))),
        _ => Err(Error::input(format!(
            "{}: column name '{want}' ({role}) is ambiguous: it matches {} columns case-insensitively",
            path.display(),
            hits.len()
        ))),
    }
}

fn assemble(
    path: &Path,
    src: &mut dyn ColumnSource,
    map: &ColumnMap,
    filter: &RowFilter,
) -> Result<Catalogue> {
    let cols = src.columns().to_vec();
    let roles = match map.kind {
        CatalogueKind::Sky => ["RA", "Dec", "redshift"],
        CatalogueKind::Cartesian => ["x", "y", "z"],
    };
    let pos_idx: Vec<usize> = (0..3)
        .map(|k| find_column(path, &cols, &map.position[k], roles[k]))
        .collect::<Result<_>>()?;
    let w_idx: Vec<usize> = map
        .weights
        .iter()
        .map(|c| find_column(path, &cols, c, "weight"))
        .collect::<Result<_>>()?;
    let r_idx = map
        .region
        .as_ref()
        .map(|c| find_column(path, &cols, c, "region"))
        .transpose()?;
    if let Some(r) = r_idx {
        if !src.is_integer(r) {
            return Err(Error::input(format!(
                "{}: region column '{}' must hold integers",
                path.display(),
                cols[r]
            )));
        }
    }
    let mut wanted = pos_idx.clone();
    wanted.extend(&w_idx);
    wanted.extend(r_idx);
    src.prepare(&wanted)?;
    let n = src.n_rows();
    if n == 0 {
        return Err(Error::input(format!(
            "{}: catalogue is empty (0 rows)",
            path.display()
        )));
    }

    let check = RowCheck {
        path,
        cols: &cols,
        pos_idx: &pos_idx,
        w_idx: &w_idx,
        r_idx,
        kind: map.kind,
        filter,
    };
    let distinct = wanted
        .iter()
        .enumerate()
        .all(|(i, c)| !wanted[..i].contains(c));
    let mut out = if distinct && src.whole_columns() {
        assemble_in_place(src, &check, &wanted, n)?
    } else {
        assemble_chunked(src, &check, n)?
    };
    out.path = path.to_path_buf();
    out.available_columns = cols;
    if out.is_empty() {
        return Err(Error::input(format!(
            "{}: no rows left after the redshift filter ({} of {} rows removed)",
            path.display(),
            out.rows_filtered,
            n
        )));
    }
    if out.w.iter().all(|&w| w == 0.0) {
        return Err(Error::input(format!(
            "{}: all weights are zero",
            path.display()
        )));
    }
    Ok(out)
}

/// Validation of one row, shared by the chunked and the in-place readers so both report the
/// same first error (rows in order; within a row positions, weights, sky ranges, region).
struct RowCheck<'a> {
    path: &'a Path,
    cols: &'a [String],
    pos_idx: &'a [usize],
    w_idx: &'a [usize],
    r_idx: Option<usize>,
    kind: CatalogueKind,
    filter: &'a RowFilter,
}

/// A row as stored: positions (RA wrapped), product of the weights, region label.
type Kept = ([f64; 3], f64, Option<u32>);

impl RowCheck<'_> {
    /// Check data row `row` (1-based) with positions `p`, weight factors `wf(k)` and region
    /// value `reg`; None when the user's filter removes it. Counts RA wraps in `wrapped`.
    fn check(
        &self,
        row: usize,
        p: [f64; 3],
        wf: impl Fn(usize) -> f64,
        reg: Option<f64>,
        wrapped: &mut usize,
    ) -> Result<Option<Kept>> {
        let bad = |col: usize, what: &str, v: f64| {
            Error::input(format!(
                "{}: row {row}, column '{}': {what} (value {v})",
                self.path.display(),
                self.cols[col]
            ))
        };
        for (k, &ci) in self.pos_idx.iter().enumerate() {
            if !p[k].is_finite() {
                return Err(bad(ci, "not a finite number", p[k]));
            }
        }
        let mut w = 1.0;
        for (k, &ci) in self.w_idx.iter().enumerate() {
            let v = wf(k);
            if !v.is_finite() {
                return Err(bad(ci, "weight is not a finite number", v));
            }
            if v < 0.0 {
                return Err(bad(ci, "negative weight", v));
            }
            w *= v;
        }
        let [mut a, b, c] = p;
        if self.kind == CatalogueKind::Sky {
            if b.abs() > 90.0 {
                return Err(bad(
                    self.pos_idx[1],
                    "declination outside [-90, 90] degrees",
                    b,
                ));
            }
            if c <= 0.0 {
                return Err(bad(self.pos_idx[2], "redshift must be > 0", c));
            }
            if !(0.0..360.0).contains(&a) {
                a = a.rem_euclid(360.0);
                if a >= 360.0 {
                    a = 0.0;
                }
                *wrapped += 1;
            }
            let f = self.filter;
            if f.z_min.is_some_and(|lo| c < lo) || f.z_max.is_some_and(|hi| c >= hi) {
                return Ok(None);
            }
        }
        let label = match (reg, self.r_idx) {
            (Some(v), Some(ci)) => {
                if v < 0.0 || v > u32::MAX as f64 || v.fract() != 0.0 {
                    return Err(bad(ci, "region label must be a non-negative integer", v));
                }
                Some(v as u32)
            }
            _ => None,
        };
        Ok(Some(([a, b, c], w, label)))
    }
}

/// An empty catalogue of `kind` with `n` rows in the file, to be filled by a reader path.
fn blank(kind: CatalogueKind, n: usize) -> Catalogue {
    Catalogue {
        path: PathBuf::new(),
        kind,
        pos: [Vec::new(), Vec::new(), Vec::new()],
        w: Vec::new(),
        region: None,
        rows_in_file: n,
        rows_filtered: 0,
        ra_wrapped: 0,
        available_columns: Vec::new(),
    }
}

/// Read `CHUNK_ROWS` rows at a time into output columns sized for all `n` rows (FITS: the
/// file, not memory, holds the source columns).
fn assemble_chunked(src: &mut dyn ColumnSource, check: &RowCheck, n: usize) -> Result<Catalogue> {
    let mut out = blank(check.kind, n);
    out.pos = [
        Vec::with_capacity(n),
        Vec::with_capacity(n),
        Vec::with_capacity(n),
    ];
    out.w = Vec::with_capacity(n);
    out.region = check.r_idx.map(|_| Vec::with_capacity(n));
    let mut start = 0;
    while start < n {
        let end = (start + CHUNK_ROWS).min(n);
        let p: Vec<Vec<f64>> = check
            .pos_idx
            .iter()
            .map(|&i| src.read_f64(i, start, end))
            .collect::<Result<_>>()?;
        let ws: Vec<Vec<f64>> = check
            .w_idx
            .iter()
            .map(|&i| src.read_f64(i, start, end))
            .collect::<Result<_>>()?;
        let reg = check
            .r_idx
            .map(|i| src.read_f64(i, start, end))
            .transpose()?;
        for j in 0..end - start {
            let row = start + j + 1; // 1-based data row
            let pj = [p[0][j], p[1][j], p[2][j]];
            let kept = check.check(
                row,
                pj,
                |k| ws[k][j],
                reg.as_ref().map(|r| r[j]),
                &mut out.ra_wrapped,
            )?;
            let Some((q, w, label)) = kept else {
                out.rows_filtered += 1;
                continue;
            };
            for (dst, v) in out.pos.iter_mut().zip(q) {
                dst.push(v);
            }
            out.w.push(w);
            if let (Some(dst), Some(l)) = (out.region.as_mut(), label) {
                dst.push(l);
            }
        }
        start = end;
    }
    Ok(out)
}

/// Readers that hold whole parsed columns (CSV) hand them over: rows are validated and
/// compacted in place, so the position columns (and the first weight column) become the
/// catalogue's without a copy. Peak: the parsed columns plus the weight and region outputs.
fn assemble_in_place(
    src: &mut dyn ColumnSource,
    check: &RowCheck,
    wanted: &[usize],
    n: usize,
) -> Result<Catalogue> {
    let mut taken: Vec<Vec<f64>> = wanted
        .iter()
        .map(|&i| src.take_column(i))
        .collect::<Result<_>>()?;
    if taken.iter().any(|c| c.len() != n) {
        return Err(Error::other("reader: parsed column of the wrong length"));
    }
    let reg = check.r_idx.and_then(|_| taken.pop());
    let mut ws = taken.split_off(3);
    let [mut a, mut b, mut c]: [Vec<f64>; 3] = taken
        .try_into()
        .map_err(|_| Error::other("reader: three position columns expected"))?;
    // the product of the weights goes into the first weight column (rows only move down)
    let mut w_new = if ws.is_empty() {
        Vec::with_capacity(n)
    } else {
        Vec::new()
    };
    let mut labels = reg.as_ref().map(|_| Vec::with_capacity(n));
    let mut out = blank(check.kind, n);
    let mut kept = 0;
    for j in 0..n {
        let res = check.check(
            j + 1,
            [a[j], b[j], c[j]],
            |k| ws[k][j],
            reg.as_ref().map(|r| r[j]),
            &mut out.ra_wrapped,
        )?;
        let Some((q, w, label)) = res else {
            out.rows_filtered += 1;
            continue;
        };
        (a[kept], b[kept], c[kept]) = (q[0], q[1], q[2]);
        match ws.first_mut() {
            Some(w0) => w0[kept] = w,
            None => w_new.push(w),
        }
        if let (Some(dst), Some(l)) = (labels.as_mut(), label) {
            dst.push(l);
        }
        kept += 1;
    }
    drop(reg);
    let w = if ws.is_empty() {
        w_new
    } else {
        ws.truncate(1);
        ws.pop().unwrap_or_default()
    };
    let mut cols = [a, b, c, w];
    for v in cols.iter_mut() {
        v.truncate(kept);
        v.shrink_to_fit();
    }
    let [a, b, c, w] = cols;
    out.pos = [a, b, c];
    out.w = w;
    out.region = labels;
    Ok(out)
}

/// A column to write.
pub struct OutColumn<'a> {
    pub name: &'a str,
    pub data: &'a [f64],
}

/// Storage precision of written columns. Single precision halves file size (used for the
/// shipped demo catalogues: 1e-7 relative is 2e-4 Mpc/h at 2000 Mpc/h).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Precision {
    Double,
    Single,
}

/// Write columns to FITS or CSV (by extension) atomically, with header key/values
/// (FITS header cards; CSV `# key = value` comment lines).
pub fn write_catalogue(
    path: &Path,
    columns: &[OutColumn],
    header: &[(String, String)],
) -> Result<()> {
    write_catalogue_with(path, columns, header, Precision::Double)
}

/// As `write_catalogue`, choosing the stored precision.
pub fn write_catalogue_with(
    path: &Path,
    columns: &[OutColumn],
    header: &[(String, String)],
    precision: Precision,
) -> Result<()> {
    let n = columns.first().map_or(0, |c| c.data.len());
    if columns.iter().any(|c| c.data.len() != n) {
        return Err(Error::other(
            "write_catalogue: columns of different lengths",
        ));
    }
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let fname = path
        .file_name()
        .ok_or_else(|| Error::input(format!("{}: not a file path", path.display())))?;
    let tmp = dir.join(format!(
        ".{}.{}.tmp",
        fname.to_string_lossy(),
        std::process::id()
    ));
    let _ = std::fs::remove_file(&tmp);
    let res = match format_of(path)? {
        Format::Fits => fitsio_io::write_fits(&tmp, columns, header, precision),
        Format::Csv => csvio::write_csv(&tmp, columns, header, precision),
    };
    if let Err(e) = res {
        let _ = std::fs::remove_file(&tmp);
        return Err(e);
    }
    std::fs::rename(&tmp, path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::io(path, "cannot move the finished file into place", e)
    })
}

/// SHA-256 of a file, hex encoded, for provenance.
pub fn file_sha256(path: &Path) -> Result<String> {
    use sha2::{Digest, Sha256};
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let k = f
            .read(&mut buf)
            .map_err(|e| Error::io(path, "cannot read", e))?;
        if k == 0 {
            break;
        }
        h.update(&buf[..k]);
    }
    Ok(h.finalize().iter().map(|b| format!("{b:02x}")).collect())
}

/// A human/JSON summary of a catalogue for `ringscale inspect`.
#[derive(Debug, Serialize)]
pub struct Summary {
    pub path: String,
    pub sha256: String,
    pub rows_in_file: usize,
    pub rows_used: usize,
    pub rows_filtered: usize,
    pub ra_wrapped: usize,
    pub columns: Vec<String>,
    pub ranges: Vec<(String, f64, f64)>,
    pub sum_w: f64,
    pub sum_w2: f64,
    pub n_regions: Option<usize>,
    pub validation: String,
}

pub fn summarise(cat: &Catalogue, map: &ColumnMap) -> Result<Summary> {
    let range = |v: &[f64]| {
        v.iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                (a.min(x), b.max(x))
            })
    };
    let mut ranges = Vec::new();
    for k in 0..3 {
        let (lo, hi) = range(&cat.pos[k]);
        ranges.push((map.position[k].clone(), lo, hi));
    }
    let (lo, hi) = range(&cat.w);
    ranges.push(("weight".into(), lo, hi));
    let (sw, sw2) = cat.weight_sums();
    Ok(Summary {
        path: cat.path.display().to_string(),
        sha256: file_sha256(&cat.path)?,
        rows_in_file: cat.rows_in_file,
        rows_used: cat.len(),
        rows_filtered: cat.rows_filtered,
        ra_wrapped: cat.ra_wrapped,
        columns: cat.available_columns.clone(),
        ranges,
        sum_w: sw,
        sum_w2: sw2,
        n_regions: cat
            .region
            .as_ref()
            .map(|r| r.iter().max().map_or(0, |&m| m as usize + 1)),
        validation: "all rows passed: finite values, |Dec| <= 90, z > 0, weights >= 0".into(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    /// A sky CSV with `n` rows; row i's text length grows with i when `growing` (so the sampled
    /// first rows underestimate the file) and shrinks otherwise. Returns the file and the
    /// columns RA, DEC, Z, W1, W2, REG as written.
    fn sky_csv(dir: &Path, n: usize, growing: bool, bad_row: Option<usize>) -> PathBuf {
        let path = dir.join(format!("sky_{n}_{growing}.csv"));
        let mut f = std::io::BufWriter::new(std::fs::File::create(&path).unwrap());
        writeln!(f, "# comment line\nRA,DEC,Z,W1,W2,REG").unwrap();
        for i in 0..n {
            let k = if growing { i } else { n - i };
            // digits grow with k: short rows at one end of the file, long ones at the other
            let pad = "0".repeat(k * 20 / n);
            let ra = if i % 7 == 0 {
                360.5
            } else {
                (i % 360) as f64 + 0.25
            };
            let w1 = if bad_row == Some(i + 1) { -1.0 } else { 0.5 };
            writeln!(
                f,
                "{ra}{},{},{}1,{w1},{},{}",
                if ra.fract() == 0.0 { "" } else { &pad },
                (i % 170) as f64 - 85.0,
                0.3 + (i % 50) as f64 * 0.01,
                1.0 + (i % 3) as f64,
                i % 5
            )
            .unwrap();
        }
        f.flush().unwrap();
        path
    }

    /// Simple reference: split each data line on commas and parse.
    fn reference(path: &Path) -> Vec<Vec<f64>> {
        let text = std::fs::read_to_string(path).unwrap();
        let mut cols = vec![Vec::new(); 6];
        for line in text.lines().filter(|l| !l.starts_with('#')).skip(1) {
            for (c, v) in cols.iter_mut().zip(line.split(',')) {
                c.push(v.parse::<f64>().unwrap());
            }
        }
        cols
    }

    fn map() -> ColumnMap {
        ColumnMap::sky(
            "RA",
            "DEC",
            "Z",
            vec!["W1".into(), "W2".into()],
            Some("REG".into()),
        )
    }

    /// Both reader paths on the same CSV source.
    fn both_paths(path: &Path, filter: &RowFilter) -> (Result<Catalogue>, Result<Catalogue>) {
        let run = |in_place: bool| {
            let mut src = csvio::CsvSource::open(path)?;
            let wanted = [0, 1, 2, 3, 4, 5];
            src.prepare(&wanted)?;
            let cols = src.columns().to_vec();
            let check = RowCheck {
                path,
                cols: &cols,
                pos_idx: &wanted[..3],
                w_idx: &wanted[3..5],
                r_idx: Some(5),
                kind: CatalogueKind::Sky,
                filter,
            };
            let n = src.n_rows();
            if in_place {
                assemble_in_place(&mut src, &check, &wanted, n)
            } else {
                assemble_chunked(&mut src, &check, n)
            }
        };
        (run(true), run(false))
    }

    // The parsed columns are sized from the first rows (exactly, after shrinking) whether later
    // rows are longer or shorter, and hold the values of a plain line-by-line parse.
    #[test]
    fn csv_columns_sized_and_equal_to_plain_parse() {
        let dir = tempfile::tempdir().unwrap();
        for growing in [true, false] {
            for n in [5, 1024, 1025, 5000] {
                let path = sky_csv(dir.path(), n, growing, None);
                let want = reference(&path);
                let mut src = csvio::CsvSource::open(&path).unwrap();
                src.prepare(&[0, 1, 2, 3, 4, 5]).unwrap();
                assert_eq!(src.n_rows(), n);
                for (k, w) in want.iter().enumerate() {
                    let got = src.take_column(k).unwrap();
                    assert_eq!(got.capacity(), got.len(), "column {k}, n = {n}");
                    assert_eq!(
                        got.iter().map(|x| x.to_bits()).collect::<Vec<_>>(),
                        w.iter().map(|x| x.to_bits()).collect::<Vec<_>>()
                    );
                }
            }
        }
        // estimate: uniform rows of 10 bytes after a 7-byte header, 100 sampled
        let est = csvio::rows_estimate(7 + 10 * 1000, 7, 7 + 10 * 100, 100);
        assert!((900..=900 + 900 / 8 + 16).contains(&est), "{est}");
    }

    // The in-place path (CSV) against the chunked one (FITS and duplicated columns): same
    // catalogue bit for bit, with RA wraps, weight products, regions and a redshift filter, and
    // the same first error.
    #[test]
    fn in_place_assembly_matches_chunked() {
        let dir = tempfile::tempdir().unwrap();
        let path = sky_csv(dir.path(), 3000, true, None);
        for filter in [
            RowFilter::default(),
            RowFilter {
                z_min: Some(0.4),
                z_max: Some(0.7),
            },
        ] {
            let (a, b) = both_paths(&path, &filter);
            let (a, b) = (a.unwrap(), b.unwrap());
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            for k in 0..3 {
                assert_eq!(bits(&a.pos[k]), bits(&b.pos[k]));
            }
            assert_eq!(bits(&a.w), bits(&b.w));
            assert_eq!(a.region, b.region);
            assert_eq!(
                (a.rows_in_file, a.rows_filtered, a.ra_wrapped),
                (b.rows_in_file, b.rows_filtered, b.ra_wrapped)
            );
            assert!(a.ra_wrapped > 0 && a.w.iter().any(|&w| w != 0.5));
            assert!(a.pos.iter().all(|c| c.capacity() == c.len()));
            if filter.z_min.is_some() {
                assert!(a.rows_filtered > 0);
            }
        }
        let bad = sky_csv(dir.path(), 2000, false, Some(1500));
        let (a, b) = both_paths(&bad, &RowFilter::default());
        let (ea, eb) = (a.unwrap_err().to_string(), b.unwrap_err().to_string());
        assert_eq!(ea, eb);
        assert!(
            ea.contains("row 1500, column 'W1': negative weight"),
            "{ea}"
        );
        // and through the public reader
        let full = read_catalogue(&path, &map(), &RowFilter::default()).unwrap();
        assert_eq!(full.len(), 3000);
    }
}
