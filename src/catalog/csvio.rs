//! CSV catalogues: a header row, '#' comment lines, optional UTF-8 BOM, LF or CRLF line ends.
//! The requested columns are parsed in one streaming pass into f64 vectors: serially (the
//! reference, used with one thread and for quoted files) or by a pipelined parallel parser that
//! cuts the file into blocks at line ends and parses them on the current rayon pool.
use super::{ColumnSource, OutColumn, Precision};
use crate::{Error, Result};
use std::collections::BTreeMap;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::{Condvar, Mutex, MutexGuard, PoisonError};

pub(crate) struct CsvSource {
    path: PathBuf,
    columns: Vec<String>,
    n_rows: usize,
    parsed: Vec<Option<Vec<f64>>>,
    /// Byte offset just after the header record as the csv reader counts it (after its '\n', or
    /// after the '\r' of a CRLF end); the first parallel block must reach past it.
    header_end: u64,
}

fn builder() -> csv::ReaderBuilder {
    let mut b = csv::ReaderBuilder::new();
    b.comment(Some(b'#')).trim(csv::Trim::All).flexible(false);
    b
}

fn reader(path: &Path) -> Result<csv::Reader<std::fs::File>> {
    let f = std::fs::File::open(path).map_err(|e| Error::io(path, "cannot open catalogue", e))?;
    Ok(builder().from_reader(f))
}

fn csv_err(path: &Path, e: csv::Error) -> Error {
    match e.kind() {
        csv::ErrorKind::UnequalLengths {
            pos,
            expected_len,
            len,
        } => fields_err(
            path,
            pos.as_ref().map_or(0, |p| p.line()),
            *expected_len,
            *len,
        ),
        csv::ErrorKind::Utf8 { pos, .. } => utf8_err(path, pos.as_ref().map_or(0, |p| p.line())),
        _ => Error::input(format!("{}: unreadable CSV: {e}", path.display())),
    }
}

fn fields_err(path: &Path, line: u64, expected: u64, len: u64) -> Error {
    Error::input(format!(
        "{}: line {line}: row has {len} fields but the header has {expected}",
        path.display()
    ))
}

fn utf8_err(path: &Path, line: u64) -> Error {
    Error::input(format!(
        "{}: line {line}: text is not valid UTF-8",
        path.display()
    ))
}

fn number_err(path: &Path, row: usize, line: u64, column: &str, field: &str) -> Error {
    Error::input(format!(
        "{}: row {row} (line {line}), column '{column}': cannot read '{field}' as a number",
        path.display()
    ))
}

impl CsvSource {
    pub fn open(path: &Path) -> Result<Self> {
        let mut rdr = reader(path)?;
        let header = rdr.headers().map_err(|e| csv_err(path, e))?.clone();
        let header_end = rdr.position().byte();
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
            header_end,
        })
    }

    /// The reference parser: one csv reader over the whole file, on the calling thread.
    fn parse_serial(&self, wanted: &[usize]) -> Result<Parsed> {
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
                let v = parse_number(field)
                    .ok_or_else(|| number_err(&self.path, row, line, &self.columns[ci], field))?;
                cols[k].push(v);
            }
        }
        Ok(Parsed { cols, rows: row })
    }

    /// The parallel parser: `threads` tasks on the current rayon pool each take the next block
    /// of about `block` bytes (cut after a '\n') from the file, parse it into a small row-major
    /// buffer, and whoever finishes the block next in file order appends it (and any finished
    /// blocks after it) to the columns. At most 2 x `threads` blocks are taken but not appended,
    /// so memory stays bounded. Row and line numbers carry over from the blocks before; errors
    /// are reported for the first bad record in file order. `None` when the file needs the
    /// serial reader: a '"' anywhere (a quoted field may hold a line end) or a BOM at the start
    /// of a later block (the csv reader strips one only at the start of its input).
    fn parse_blocks(
        &self,
        wanted: &[usize],
        threads: usize,
        block: usize,
    ) -> Result<Option<Parsed>> {
        let file = std::fs::File::open(&self.path)
            .map_err(|e| Error::io(&self.path, "cannot open catalogue", e))?;
        let file_len = file.metadata().map_or(0, |m| m.len());
        let threads = threads.max(1);
        let feed = Feed {
            file,
            carry: Vec::new(),
            eof: false,
            next_seq: 0,
            end_seq: usize::MAX,
            next_append: 0,
            ready: BTreeMap::new(),
            acc: Appended {
                cols: vec![Vec::new(); wanted.len()],
                rows: 0,
                newlines: 0,
                bytes: 0,
                line_after: 1,
                reserved: false,
                outcome: None,
            },
        };
        let job = Job {
            src: self,
            wanted,
            block: block.max(1),
            window: 2 * threads,
            file_len,
            state: Mutex::new(feed),
            turn: Condvar::new(),
        };
        rayon::scope(|s| {
            for _ in 0..threads {
                s.spawn(|_| job.work());
            }
        });
        let acc = job
            .state
            .into_inner()
            .unwrap_or_else(PoisonError::into_inner)
            .acc;
        match acc.outcome {
            None => Ok(Some(Parsed {
                cols: acc.cols,
                rows: acc.rows,
            })),
            Some(Outcome::Serial) => Ok(None),
            Some(Outcome::Failed(e)) => Err(e),
        }
    }

    /// Parse one block with a fresh csv reader (the first block also holds the header). Fields
    /// are trimmed by `str::trim` after the reader's own ASCII trim would have run, which is
    /// what the serial reader's Unicode trim gives; checks run in its order: field count,
    /// UTF-8 of every field, then the wanted numbers.
    fn parse_block(&self, bytes: &[u8], first: bool, wanted: &[usize]) -> BlockOut {
        let mut out = BlockOut {
            rows: 0,
            vals: Vec::new(),
            newlines: bytes.iter().filter(|&&b| b == b'\n').count() as u64,
            len: bytes.len() as u64,
            line_after: None,
            err: None,
            serial: false,
        };
        if bytes.contains(&b'"') || (!first && bytes.starts_with(b"\xef\xbb\xbf")) {
            out.serial = true;
            return out;
        }
        let mut rdr = csv::ReaderBuilder::new()
            .comment(Some(b'#'))
            .trim(csv::Trim::None)
            .flexible(true)
            .has_headers(first)
            .from_reader(bytes);
        if first {
            // the header (checked by `open`); the next record's line is the reader's after it
            if let Err(e) = rdr.byte_headers() {
                out.err = Some(BlockErr::Csv(e));
                return out;
            }
            out.line_after = Some(rdr.position().line());
        }
        let ncols = self.columns.len();
        let mut rec = csv::ByteRecord::new();
        loop {
            match rdr.read_byte_record(&mut rec) {
                Ok(false) => break,
                Ok(true) => {}
                Err(e) => {
                    out.err = Some(BlockErr::Csv(e));
                    return out;
                }
            }
            let row = out.rows;
            let line = rec.position().map_or(0, |p| p.line());
            if rec.len() != ncols {
                out.err = Some(BlockErr::Fields {
                    row,
                    line,
                    len: rec.len(),
                });
                return out;
            }
            if !rec.as_slice().is_ascii() && rec.iter().any(|f| std::str::from_utf8(f).is_err()) {
                out.err = Some(BlockErr::Utf8 { row, line });
                return out;
            }
            for &ci in wanted {
                let field = std::str::from_utf8(rec.get(ci).unwrap_or(b""))
                    .unwrap_or("")
                    .trim();
                match parse_number(field) {
                    Some(v) => out.vals.push(v),
                    None => {
                        out.err = Some(BlockErr::Number {
                            row,
                            line,
                            col: ci,
                            field: field.to_string(),
                        });
                        return out;
                    }
                }
            }
            out.rows += 1;
            out.line_after = Some(rdr.position().line());
        }
        out
    }
}

/// Parsed columns (in `wanted` order) and the number of records.
struct Parsed {
    cols: Vec<Vec<f64>>,
    rows: usize,
}

/// Bytes per block of the parallel parser: large enough that the per-block costs (a task, a
/// csv reader, a buffer) vanish, small enough that 2 x threads blocks in flight stay small
/// against the columns themselves. (Measured on 2e5 survey rows, 2 threads: 64 KiB reads as
/// fast as 128 and 512 KiB, and the 1e5-point box count peaks 0.6-0.9 MB lower than with 128.)
const BLOCK_BYTES: usize = 64 * 1024;

/// One block parsed by a worker; lines and rows are local to the block.
struct BlockOut {
    /// Records read (the header excluded) and their wanted values, row-major.
    rows: usize,
    vals: Vec<f64>,
    /// Bytes and '\n' bytes in the block: the offsets of the blocks after it.
    len: u64,
    newlines: u64,
    /// Reader line after the last record (the position the next record gets), if any.
    line_after: Option<u64>,
    err: Option<BlockErr>,
    /// The block needs the serial reader (see `parse_blocks`).
    serial: bool,
}

/// The first problem in a block, with local positions (`row` counts from 0).
enum BlockErr {
    Fields {
        row: usize,
        line: u64,
        len: usize,
    },
    Utf8 {
        row: usize,
        line: u64,
    },
    Number {
        row: usize,
        line: u64,
        col: usize,
        field: String,
    },
    Csv(csv::Error),
    Io(std::io::Error),
    Panic,
}

enum Outcome {
    Serial,
    Failed(Error),
}

/// What has been appended so far, in file order.
struct Appended {
    cols: Vec<Vec<f64>>,
    rows: usize,
    /// '\n' bytes and bytes in the appended blocks.
    newlines: u64,
    bytes: u64,
    /// Line position the next record gets when it starts a block: the serial reader's
    /// position after the last record, which comment and blank lines after it do not move.
    line_after: u64,
    reserved: bool,
    outcome: Option<Outcome>,
}

/// The file being cut into blocks, and the blocks finished but not yet appended.
struct Feed {
    file: std::fs::File,
    /// Bytes read past the last cut (the start of the next block).
    carry: Vec<u8>,
    eof: bool,
    next_seq: usize,
    /// No block at or after this one is handed out (an error or a fallback was seen there).
    end_seq: usize,
    next_append: usize,
    ready: BTreeMap<usize, BlockOut>,
    acc: Appended,
}

impl Feed {
    /// The next block: at least `block` bytes (and, for the first, past the header) up to and
    /// including a '\n', or the rest of the file. `None` at the end of the file.
    fn next_block(&mut self, block: usize, min_cut: usize) -> std::io::Result<Option<Vec<u8>>> {
        let mut buf = std::mem::take(&mut self.carry);
        let mut target = block.max(min_cut + 1);
        let mut searched = min_cut;
        loop {
            while buf.len() < target && !self.eof {
                let old = buf.len();
                buf.resize(target, 0);
                match self.file.read(&mut buf[old..]) {
                    Ok(n) => {
                        buf.truncate(old + n);
                        self.eof = n == 0;
                    }
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => buf.truncate(old),
                    Err(e) => return Err(e),
                }
            }
            if self.eof {
                return Ok((!buf.is_empty()).then_some(buf));
            }
            let from = searched.min(buf.len());
            if let Some(i) = buf[from..].iter().rposition(|&b| b == b'\n') {
                let cut = from + i + 1;
                self.carry = buf[cut..].to_vec();
                buf.truncate(cut);
                return Ok(Some(buf));
            }
            // a line longer than the block: read on
            searched = buf.len();
            target = buf.len() + block;
        }
    }
}

struct Job<'a> {
    src: &'a CsvSource,
    wanted: &'a [usize],
    block: usize,
    window: usize,
    file_len: u64,
    state: Mutex<Feed>,
    turn: Condvar,
}

impl Job<'_> {
    fn lock(&self) -> MutexGuard<'_, Feed> {
        self.state.lock().unwrap_or_else(PoisonError::into_inner)
    }

    /// One worker: take blocks until the file ends or a problem stops the hand-out.
    fn work(&self) {
        loop {
            let (seq, bytes) = {
                let mut g = self.lock();
                loop {
                    if g.next_seq >= g.end_seq || (g.eof && g.carry.is_empty()) {
                        return;
                    }
                    if g.next_seq - g.next_append < self.window {
                        break;
                    }
                    g = self.turn.wait(g).unwrap_or_else(PoisonError::into_inner);
                }
                let seq = g.next_seq;
                let min_cut = if seq == 0 {
                    usize::try_from(self.src.header_end.saturating_sub(1)).unwrap_or(usize::MAX)
                } else {
                    0
                };
                match g.next_block(self.block, min_cut) {
                    Ok(Some(b)) => {
                        g.next_seq += 1;
                        (seq, b)
                    }
                    Ok(None) => {
                        g.end_seq = g.end_seq.min(seq);
                        drop(g);
                        self.turn.notify_all();
                        return;
                    }
                    Err(e) => {
                        g.next_seq += 1;
                        let out = BlockOut {
                            rows: 0,
                            vals: Vec::new(),
                            newlines: 0,
                            len: 0,
                            line_after: None,
                            err: Some(BlockErr::Io(e)),
                            serial: false,
                        };
                        self.finish(g, seq, out);
                        return;
                    }
                }
            };
            let out = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                self.src.parse_block(&bytes, seq == 0, self.wanted)
            }))
            .unwrap_or_else(|_| BlockOut {
                rows: 0,
                vals: Vec::new(),
                newlines: 0,
                len: bytes.len() as u64,
                line_after: None,
                err: Some(BlockErr::Panic),
                serial: false,
            });
            drop(bytes);
            self.finish(self.lock(), seq, out);
        }
    }

    /// Hand in block `seq` and append every finished block that is next in file order.
    fn finish(&self, mut g: MutexGuard<'_, Feed>, seq: usize, out: BlockOut) {
        if out.err.is_some() || out.serial {
            g.end_seq = g.end_seq.min(seq + 1);
        }
        g.ready.insert(seq, out);
        let feed = &mut *g;
        while let Some(out) = feed.ready.remove(&feed.next_append) {
            feed.next_append += 1;
            self.append(&mut feed.acc, out, feed.next_append == 1);
        }
        drop(g);
        self.turn.notify_all();
    }
}

impl Job<'_> {
    /// Append the next block in file order, or turn its problem into the serial reader's
    /// message with row and line numbers counted from the start of the file.
    fn append(&self, acc: &mut Appended, out: BlockOut, first: bool) {
        if acc.outcome.is_some() {
            return;
        }
        if out.serial {
            acc.outcome = Some(Outcome::Serial);
            return;
        }
        let path = &self.src.path;
        let (nl, carried, rows_before) = (acc.newlines, acc.line_after, acc.rows);
        // a block's first record gets the line after the previous record, wherever it was
        let line_of = |row: usize, line: u64| {
            if row == 0 && !first {
                carried
            } else {
                line + nl
            }
        };
        if let Some(e) = out.err {
            let err = match e {
                BlockErr::Fields { row, line, len } => fields_err(
                    path,
                    line_of(row, line),
                    self.src.columns.len() as u64,
                    len as u64,
                ),
                BlockErr::Utf8 { row, line } => utf8_err(path, line_of(row, line)),
                BlockErr::Number {
                    row,
                    line,
                    col,
                    field,
                } => number_err(
                    path,
                    rows_before + row + 1,
                    line_of(row, line),
                    &self.src.columns[col],
                    &field,
                ),
                BlockErr::Csv(e) => csv_err(path, e),
                BlockErr::Io(e) => csv_err(path, csv::Error::from(e)),
                BlockErr::Panic => {
                    Error::other(format!("{}: the CSV block parser failed", path.display()))
                }
            };
            acc.outcome = Some(Outcome::Failed(err));
            return;
        }
        let k = self.wanted.len();
        if k > 0 {
            for (j, c) in acc.cols.iter_mut().enumerate() {
                c.extend(out.vals.iter().skip(j).step_by(k));
            }
        }
        acc.rows += out.rows;
        acc.newlines += out.newlines;
        acc.bytes += out.len;
        if let Some(la) = out.line_after {
            acc.line_after = la + nl;
        }
        if !acc.reserved && acc.rows >= SAMPLE_ROWS {
            acc.reserved = true;
            let extra = rows_estimate(self.file_len, self.src.header_end, acc.bytes, acc.rows);
            // a failed reservation (address space) leaves the usual growth
            for c in acc.cols.iter_mut() {
                let _ = c.try_reserve_exact(extra);
            }
        }
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
    /// Parses on the current rayon pool: in parallel blocks when it has more than one thread
    /// (callers with a thread count run this inside a pool of that size), serially otherwise.
    fn prepare(&mut self, wanted: &[usize]) -> Result<()> {
        let threads = rayon::current_num_threads();
        let mut parsed = match threads {
            0 | 1 => self.parse_serial(wanted)?,
            t => match self.parse_blocks(wanted, t, BLOCK_BYTES)? {
                Some(p) => p,
                None => self.parse_serial(wanted)?,
            },
        };
        self.n_rows = parsed.rows;
        for (k, &ci) in wanted.iter().enumerate() {
            let mut c = std::mem::take(&mut parsed.cols[k]);
            c.shrink_to_fit();
            self.parsed[ci] = Some(c);
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

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Layout of a generated catalogue.
    #[derive(Clone, Copy, Debug)]
    struct Layout {
        crlf: bool,
        lone_cr: bool,
        bom: bool,
        comments: bool,
        blanks: bool,
        spaces: bool,
        final_newline: bool,
    }

    const PLAIN: Layout = Layout {
        crlf: false,
        lone_cr: false,
        bom: false,
        comments: false,
        blanks: false,
        spaces: false,
        final_newline: true,
    };

    /// A random 4-column catalogue (header "RA, Dec ,Z,W") and the values written, which
    /// read back exactly (`{:?}` and `{:e}` of an f64 are round-trip formats; common
    /// practice, no source).
    fn catalogue(n: usize, seed: u64, lay: Layout) -> (Vec<u8>, Vec<[f64; 4]>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let end: &[u8] = if lay.lone_cr {
            b"\r"
        } else if lay.crlf {
            b"\r\n"
        } else {
            b"\n"
        };
        let mut text = Vec::new();
        if lay.bom {
            text.extend_from_slice(b"\xef\xbb\xbf");
        }
        if lay.comments {
            text.extend_from_slice(b"# written by a test, before the header");
            text.extend_from_slice(end);
        }
        text.extend_from_slice(b"RA, Dec ,Z,W");
        text.extend_from_slice(end);
        let mut rows = Vec::with_capacity(n);
        for i in 0..n {
            if lay.comments && rng.gen_bool(0.1) {
                text.extend_from_slice(b"# a comment line, with, commas");
                text.extend_from_slice(end);
            }
            if lay.blanks && rng.gen_bool(0.1) {
                text.extend_from_slice(end);
            }
            let v = [
                rng.gen_range(0.0..360.0),
                rng.gen_range(-90.0..90.0),
                rng.gen_range(0.0..3.0f64),
                f64::from(rng.gen_range(-3i32..40)),
            ];
            for (k, x) in v.iter().enumerate() {
                if k > 0 {
                    text.push(b',');
                }
                let pad = if lay.spaces && rng.gen_bool(0.3) {
                    " \t"
                } else {
                    ""
                };
                let s = match rng.gen_range(0..3) {
                    0 => format!("{x:?}"),
                    1 => format!("{x:e}"),
                    _ => format!("{x}"),
                };
                text.extend_from_slice(format!("{pad}{s}{pad}").as_bytes());
            }
            if i + 1 < n || lay.final_newline {
                text.extend_from_slice(end);
            }
            rows.push(v);
        }
        (text, rows)
    }

    fn write(dir: &Path, name: &str, text: &[u8]) -> PathBuf {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p
    }

    fn pool(t: usize) -> rayon::ThreadPool {
        rayon::ThreadPoolBuilder::new()
            .num_threads(t)
            .build()
            .unwrap()
    }

    fn bits(c: &[f64]) -> Vec<u64> {
        c.iter().map(|x| x.to_bits()).collect()
    }

    /// The parallel parser at 1, 2 and 7 threads and several block sizes against the serial
    /// reference: the same rows, bit for bit, or (`None`) the same error message.
    fn check_against_serial(path: &Path, wanted: &[usize]) -> Result<Parsed> {
        let src = CsvSource::open(path).unwrap();
        let reference = src.parse_serial(wanted);
        for t in [1, 2, 7] {
            let pool = pool(t);
            for block in [1, 5, 64, 1000, BLOCK_BYTES] {
                let got = pool
                    .install(|| src.parse_blocks(wanted, t, block))
                    .map(|p| p.expect("no quotes, no fallback"));
                match (&reference, &got) {
                    (Ok(r), Ok(g)) => {
                        assert_eq!(r.rows, g.rows, "{t} threads, block {block}");
                        for (a, b) in r.cols.iter().zip(&g.cols) {
                            assert_eq!(bits(a), bits(b), "{t} threads, block {block}");
                        }
                    }
                    (Err(r), Err(g)) => {
                        assert_eq!(r.to_string(), g.to_string(), "{t} threads, block {block}");
                        assert_eq!(g.exit_code(), 2);
                    }
                    _ => panic!(
                        "{t} threads, block {block}: serial {:?} but parallel {:?}",
                        reference.as_ref().map(|p| p.rows),
                        got.as_ref().map(|p| p.rows)
                    ),
                }
            }
        }
        reference
    }

    // Every layout the serial reader accepts gives the same columns through the blocks, and the
    // serial reference itself returns the values that were written.
    #[test]
    fn parallel_equals_serial_on_every_layout() {
        let dir = tempfile::tempdir().unwrap();
        let mut layouts = vec![PLAIN];
        for i in 0..7 {
            let mut l = PLAIN;
            match i {
                0 => l.crlf = true,
                1 => l.bom = true,
                2 => l.comments = true,
                3 => l.blanks = true,
                4 => l.spaces = true,
                5 => l.final_newline = false,
                _ => l.lone_cr = true,
            }
            layouts.push(l);
        }
        layouts.push(Layout {
            crlf: true,
            lone_cr: false,
            bom: true,
            comments: true,
            blanks: true,
            spaces: true,
            final_newline: false,
        });
        let wanted = [2, 0, 3, 1, 0];
        for (i, lay) in layouts.iter().enumerate() {
            for n in [0, 1, 37, 1500] {
                let (text, rows) = catalogue(n, 11 + i as u64, *lay);
                let path = write(dir.path(), &format!("cat{i}_{n}.csv"), &text);
                let p = check_against_serial(&path, &wanted).unwrap();
                assert_eq!(p.rows, n, "{lay:?}");
                for (k, &ci) in wanted.iter().enumerate() {
                    let want: Vec<f64> = rows.iter().map(|r| r[ci]).collect();
                    assert_eq!(bits(&p.cols[k]), bits(&want), "{lay:?}, column {ci}");
                }
            }
        }
    }

    // `prepare` picks the blocks on a pool of several threads and gives the columns of the
    // serial reader (shrunk to their length).
    #[test]
    fn prepare_on_pools_equals_serial() {
        let dir = tempfile::tempdir().unwrap();
        let mut lay = PLAIN;
        lay.comments = true;
        let (text, _) = catalogue(40_000, 5, lay);
        let path = write(dir.path(), "big.csv", &text);
        assert!(text.len() > 2 * BLOCK_BYTES, "several blocks");
        let wanted = [0, 1, 2];
        let reference = CsvSource::open(&path)
            .unwrap()
            .parse_serial(&wanted)
            .unwrap();
        for t in [1, 2, 7] {
            let mut src = CsvSource::open(&path).unwrap();
            pool(t).install(|| src.prepare(&wanted)).unwrap();
            assert_eq!(src.n_rows(), reference.rows);
            for (k, &ci) in wanted.iter().enumerate() {
                let c = src.take_column(ci).unwrap();
                assert_eq!(c.len(), c.capacity());
                assert_eq!(bits(&c), bits(&reference.cols[k]), "{t} threads");
            }
        }
    }

    /// Turns a good record line (without its end) into a bad one.
    type Spoil<'a> = &'a dyn Fn(&mut Vec<u8>);

    /// A catalogue with two bad records (the first at data row `bad_row`, the second further on)
    /// written by `spoil` over a good record.
    fn spoiled(lay: Layout, n: usize, bad_row: usize, spoil: Spoil) -> Vec<u8> {
        let (text, _) = catalogue(n, 99, lay);
        let end: &[u8] = if lay.crlf { b"\r\n" } else { b"\n" };
        // split into lines (each keeps its end), find the record lines
        let mut lines: Vec<Vec<u8>> = Vec::new();
        let mut cur = Vec::new();
        for &b in &text {
            cur.push(b);
            if b == b'\n' {
                lines.push(std::mem::take(&mut cur));
            }
        }
        if !cur.is_empty() {
            lines.push(cur);
        }
        let records: Vec<usize> = (0..lines.len())
            .filter(|&i| {
                let l = &lines[i];
                i > 0 && !l.starts_with(b"#") && l != end && !l.starts_with(b"RA")
            })
            .collect();
        for r in [bad_row, bad_row + 5] {
            let l = &mut lines[records[r - 1]];
            let had_end = l.ends_with(end);
            l.truncate(l.len() - if had_end { end.len() } else { 0 });
            spoil(l);
            if had_end {
                l.extend_from_slice(end);
            }
        }
        lines.concat()
    }

    // Bad records in a later block: the message of the serial reader (row and line counted
    // across the blocks before, comments and blank lines included) for the first one.
    #[test]
    fn first_error_in_file_order_with_serial_numbers() {
        let dir = tempfile::tempdir().unwrap();
        let bad_value: Spoil = &|l| {
            let at = l.iter().position(|&b| b == b',').unwrap();
            l.splice(at + 1..at + 1, b"x".iter().copied());
        };
        let few_fields: Spoil = &|l| {
            let at = l.iter().rposition(|&b| b == b',').unwrap();
            l.truncate(at);
        };
        let bad_utf8: Spoil = &|l| l.extend_from_slice(b"\xff"); // in W, unwanted
        let cases: [(&str, Spoil); 3] = [
            ("cannot read", bad_value),
            ("fields but the header has 4", few_fields),
            ("not valid UTF-8", bad_utf8),
        ];
        for (name, spoil) in cases {
            for (j, lay) in [
                PLAIN,
                Layout {
                    comments: true,
                    blanks: true,
                    ..PLAIN
                },
                Layout {
                    crlf: true,
                    comments: true,
                    blanks: true,
                    spaces: true,
                    ..PLAIN
                },
            ]
            .into_iter()
            .enumerate()
            {
                let text = spoiled(lay, 300, 211, spoil);
                let path = write(dir.path(), &format!("bad{j}.csv"), &text);
                let e = match check_against_serial(&path, &[0, 1, 2]) {
                    Err(e) => e.to_string(),
                    Ok(_) => panic!("{name}: no error"),
                };
                assert!(e.contains(name), "{e}");
                if j == 0 {
                    // plain LF file: the header is line 1, data row r is line r + 1
                    assert!(e.contains("line 212"), "{e}");
                    if name == "cannot read" {
                        assert!(e.contains("row 211 (line 212), column 'Dec'"), "{e}");
                    }
                }
            }
        }
    }

    // Unicode white space around a field (no-break space, vertical tab) is trimmed by the serial
    // reader's string records; the blocks trim it the same way.
    #[test]
    fn unicode_spaces_trimmed_like_serial() {
        let dir = tempfile::tempdir().unwrap();
        let (mut text, _) = catalogue(30, 8, PLAIN);
        text.extend_from_slice("\u{a0}1.5\u{b},\u{2003}-2.5 ,3,4\n".as_bytes());
        let path = write(dir.path(), "nbsp.csv", &text);
        let p = check_against_serial(&path, &[0, 1]).unwrap();
        assert_eq!((p.cols[0][30], p.cols[1][30]), (1.5, -2.5));
    }

    // A '"' anywhere sends the file to the serial reader, which keeps quoted line ends inside
    // their field; `prepare` on a pool then returns the serial columns.
    #[test]
    fn quotes_fall_back_to_the_serial_reader() {
        let dir = tempfile::tempdir().unwrap();
        let (mut text, rows) = catalogue(200, 3, PLAIN);
        text.extend_from_slice(b"1.5,\"2.5\",3.5,\"4\n.0\"\n");
        let path = write(dir.path(), "quoted.csv", &text);
        let src = CsvSource::open(&path).unwrap();
        for block in [1, 64, BLOCK_BYTES] {
            assert!(pool(2)
                .install(|| src.parse_blocks(&[0, 1], 2, block))
                .unwrap()
                .is_none());
        }
        let mut src = CsvSource::open(&path).unwrap();
        pool(2).install(|| src.prepare(&[0, 1])).unwrap();
        assert_eq!(src.n_rows(), 201);
        let dec = src.take_column(1).unwrap();
        assert_eq!(
            dec[..200],
            rows.iter().map(|r| r[1]).collect::<Vec<_>>()[..]
        );
        assert_eq!(dec[200], 2.5);
    }

    // A BOM at the start of a later line is data to the serial reader (the value cannot be
    // read); the blocks must not strip it as the start of their input.
    #[test]
    fn bom_inside_the_file_is_not_stripped() {
        let dir = tempfile::tempdir().unwrap();
        let (mut text, _) = catalogue(50, 4, PLAIN);
        text.extend_from_slice(b"\xef\xbb\xbf1.0,2.0,3.0,4\n");
        let path = write(dir.path(), "bom.csv", &text);
        let src = CsvSource::open(&path).unwrap();
        let serial = src
            .parse_serial(&[0])
            .err()
            .expect("serial rejects it")
            .to_string();
        assert!(serial.contains("row 51 (line 52)"), "{serial}");
        let blocks = pool(2).install(|| src.parse_blocks(&[0], 2, 1)).unwrap();
        assert!(blocks.is_none());
        let mut src = CsvSource::open(&path).unwrap();
        let e = pool(2).install(|| src.prepare(&[0])).err().unwrap();
        assert_eq!(e.to_string(), serial);
    }
}
