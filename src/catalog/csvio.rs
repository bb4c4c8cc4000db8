//! CSV catalogues: a header row, '#' comment lines, optional UTF-8 BOM, LF or CRLF line ends.
//! The requested columns are parsed in one streaming pass into f64 vectors.
use super::{ColumnSource, OutColumn, Precision};
use crate::{Error, Result};
use std::io::Write;
use std::path::{Path, PathBuf};

pub(crate) struct CsvSource {
    path: PathBuf,
    columns: Vec<String>,
    n_rows: usize,
    parsed: Vec<Option<Vec<f64>>>,
}

fn reader(path: &Path) -> Result<csv::Reader<std::fs::File>> {
    let f = std::fs::File::open(path).map_err(|e| Error::io(path, "cannot open catalogue", e))?;
    Ok(csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .flexible(false)
        .from_reader(f))
}

fn csv_err(path: &Path, e: csv::Error) -> Error {
    match e.kind() {
        csv::ErrorKind::UnequalLengths {
            pos,
            expected_len,
            len,
        } => Error::input(format!(
            "{}: line {}: row has {len} fields but the header has {expected_len}",
            path.display(),
            pos.as_ref().map_or(0, |p| p.line())
        )),
        csv::ErrorKind::Utf8 { pos, .. } => Error::input(format!(
            "{}: line {}: text is not valid UTF-8",
            path.display(),
            pos.as_ref().map_or(0, |p| p.line())
        )),
        _ => Error::input(format!("{}: unreadable CSV: {e}", path.display())),
    }
}

impl CsvSource {
    pub fn open(path: &Path) -> Result<Self> {
        let mut rdr = reader(path)?;
        let header = rdr.headers().map_err(|e| csv_err(path, e))?.clone();
        let columns: Vec<String> = header
            .iter()
            .map(|h| h.trim_start_matches('\u{feff}').trim().to_string())
            .collect();
        if columns.iter().all(|c| c.is_empty()) {
            return Err(Error::input(format!(
                "{}: empty file or missing header row",
                path.display()
            )));
        }
        for (i, c) in columns.iter().enumerate() {
            if columns[..i].iter().any(|d| d.eq_ignore_ascii_case(c)) {
                return Err(Error::input(format!(
                    "{}: duplicated column name '{c}' in the header",
                    path.display()
                )));
            }
        }
        let n = columns.len();
        Ok(CsvSource {
            path: path.to_path_buf(),
            columns,
            n_rows: usize::MAX,
            parsed: vec![None; n],
        })
    }
}

impl ColumnSource for CsvSource {
    fn columns(&self) -> &[String] {
        &self.columns
    }
    fn n_rows(&self) -> usize {
        self.n_rows
    }
    fn is_integer(&self, _idx: usize) -> bool {
        true // checked value by value
    }
    fn prepare(&mut self, wanted: &[usize]) -> Result<()> {
        let mut rdr = reader(&self.path)?;
        let file_len = std::fs::metadata(&self.path).map_or(0, |m| m.len());
        let mut cols: Vec<Vec<f64>> = vec![Vec::new(); wanted.len()];
        let mut rec = csv::StringRecord::new();
        let mut row = 0usize;
        let mut first_byte = 0u64;
        loop {
            match rdr.read_record(&mut rec) {
                Ok(false) => break,
                Ok(true) => {}
                Err(e) => return Err(csv_err(&self.path, e)),
            }
            row += 1;
            let at = rec.position().map_or(0, |p| p.byte());
            if row == 1 {
                first_byte = at;
            } else if row == SAMPLE_ROWS + 1 {
                let extra = rows_estimate(file_len, first_byte, at, SAMPLE_ROWS);
                // a failed reservation (address space) leaves the usual growth
                for c in cols.iter_mut() {
                    let _ = c.try_reserve_exact(extra);
                }
            }
            let line = rec.position().map_or(0, |p| p.line());
            for (k, &ci) in wanted.iter().enumerate() {
                let field = rec.get(ci).unwrap_or("");
                let v = parse_number(field).ok_or_else(|| {
                    Error::input(format!(
                        "{}: row {row} (line {line}), column '{}': cannot read '{field}' as a number",
                        self.path.display(),
                        self.columns[ci]
                    ))
                })?;
                cols[k].push(v);
            }
        }
        self.n_rows = row;
        for (k, &ci) in wanted.iter().enumerate() {
            cols[k].shrink_to_fit();
            self.parsed[ci] = Some(std::mem::take(&mut cols[k]));
        }
        Ok(())
    }
    fn whole_columns(&self) -> bool {
        true
    }
    fn take_column(&mut self, idx: usize) -> Result<Vec<f64>> {
        self.parsed[idx]
            .take()
            .ok_or_else(|| Error::other("CSV column taken before prepare or twice"))
    }
    fn read_f64(&mut self, idx: usize, start: usize, end: usize) -> Result<Vec<f64>> {
        let col = self.parsed[idx]
            .as_ref()
            .ok_or_else(|| Error::other("CSV column read before prepare"))?;
        Ok(col[start..end].to_vec())
    }
}

/// Rows sampled before the columns are sized for the whole file.
const SAMPLE_ROWS: usize = 1024;

/// Rows still to come after `sampled` rows that started at byte `first` and ended at byte `at`,
/// from the file size, with 1/8 to spare for longer rows later on. The columns are reserved for
/// that many so they do not grow by doubling (each doubling copies a column and leaves the old
/// one behind in the allocator): reserved pages that are never written cost no memory, and
/// `shrink_to_fit` returns them; a file whose later rows are much longer still grows as usual.
pub(crate) fn rows_estimate(file_len: u64, first: u64, at: u64, sampled: usize) -> usize {
    let per_row = (at.saturating_sub(first) / sampled as u64).max(1);
    let rest = file_len.saturating_sub(at) / per_row;
    usize::try_from(rest + rest / 8 + 16).unwrap_or(usize::MAX)
}

/// Numbers as written by people and programs: also "nan", "inf" (rejected later by validation).
fn parse_number(s: &str) -> Option<f64> {
    if s.is_empty() {
        return None;
    }
    s.parse::<f64>().ok()
}

pub(crate) fn write_csv(
    path: &Path,
    columns: &[OutColumn],
    header: &[(String, String)],
    precision: Precision,
) -> Result<()> {
    let f = std::fs::File::create(path).map_err(|e| Error::io(path, "cannot create", e))?;
    let mut w = std::io::BufWriter::new(f);
    let io = |e| Error::io(path, "write failed", e);
    for (k, v) in header {
        writeln!(w, "# {k} = {v}").map_err(io)?;
    }
    let names: Vec<&str> = columns.iter().map(|c| c.name).collect();
    writeln!(w, "{}", names.join(",")).map_err(io)?;
    let n = columns.first().map_or(0, |c| c.data.len());
    let mut line = String::new();
    for i in 0..n {
        line.clear();
        for (k, c) in columns.iter().enumerate() {
            if k > 0 {
                line.push(',');
            }
            // Debug formatting is the shortest text that reads back to the same bits.
            match precision {
                Precision::Double => line.push_str(&format!("{:?}", c.data[i])),
                Precision::Single => line.push_str(&format!("{:?}", c.data[i] as f32)),
            }
        }
        line.push('\n');
        w.write_all(line.as_bytes()).map_err(io)?;
    }
    let f = w
        .into_inner()
        .map_err(|e| Error::io(path, "write failed", e.into_error()))?;
    f.sync_all().map_err(io)
}
