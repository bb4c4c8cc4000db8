//! FITS binary-table catalogues through cfitsio (built from source by the `fitsio` crate).
//! Columns are read in chunks of `CHUNK_ROWS` rows so memory stays at the output columns.
use super::{ColumnSource, OutColumn, Precision};
use crate::{Error, Result};
use fitsio::hdu::HduInfo;
use fitsio::tables::{ColumnDataDescription, ColumnDataType, ColumnDescription};
use fitsio::FitsFile;
use std::path::{Path, PathBuf};

pub(crate) struct FitsSource {
    path: PathBuf,
    file: FitsFile,
    hdu: fitsio::hdu::FitsHdu,
    columns: Vec<String>,
    types: Vec<ColumnDataDescription>,
    n_rows: usize,
}

fn fits_err(path: &Path, what: &str, e: fitsio::errors::Error) -> Error {
    Error::input(format!("{}: {what}: {e}", path.display()))
}

impl FitsSource {
    pub fn open(path: &Path) -> Result<Self> {
        let meta =
            std::fs::metadata(path).map_err(|e| Error::io(path, "cannot open catalogue", e))?;
        if meta.len() == 0 {
            return Err(Error::input(format!("{}: file is empty", path.display())));
        }
        if meta.len() < 2880 {
            return Err(Error::input(format!(
                "{}: truncated or not a FITS file ({} bytes; a FITS file has at least one 2880-byte block)",
                path.display(),
                meta.len()
            )));
        }
        let mut file =
            FitsFile::open(path).map_err(|e| fits_err(path, "cannot open as FITS", e))?;
        let n_hdus = file
            .num_hdus()
            .map_err(|e| fits_err(path, "cannot read FITS structure", e))?;
        // The first table extension holds the catalogue.
        let mut found = None;
        for i in 1..n_hdus {
            let hdu = file
                .hdu(i)
                .map_err(|e| fits_err(path, &format!("cannot read HDU {i}"), e))?;
            if let HduInfo::TableInfo {
                column_descriptions,
                num_rows,
            } = &hdu.info
            {
                found = Some((i, column_descriptions.clone(), *num_rows));
                break;
            }
        }
        let (idx, descs, n_rows) = found.ok_or_else(|| {
            Error::input(format!(
                "{}: no table extension found ({} HDUs, none a table)",
                path.display(),
                n_hdus
            ))
        })?;
        let hdu = file
            .hdu(idx)
            .map_err(|e| fits_err(path, "cannot read table HDU", e))?;
        // A header may claim more rows than the file holds: check before allocating anything.
        let row_bytes: i64 = hdu
            .read_key(&mut file, "NAXIS1")
            .map_err(|e| fits_err(path, "table header lacks NAXIS1", e))?;
        let need = (row_bytes as u128) * (n_rows as u128);
        if need > meta.len() as u128 {
            return Err(Error::input(format!(
                "{}: truncated file: the table header claims {n_rows} rows of {row_bytes} bytes ({need} bytes) but the file has {} bytes",
                path.display(),
                meta.len()
            )));
        }
        let columns: Vec<String> = descs.iter().map(|d| d.name.trim().to_string()).collect();
        for (i, c) in columns.iter().enumerate() {
            if columns[..i].iter().any(|d| d.eq_ignore_ascii_case(c)) {
                return Err(Error::input(format!(
                    "{}: duplicated column name '{c}' in HDU {idx}",
                    path.display()
                )));
            }
        }
        let types = descs.iter().map(|d| d.data_type.clone()).collect();
        Ok(FitsSource {
            path: path.to_path_buf(),
            file,
            hdu,
            columns,
            types,
            n_rows,
        })
    }
}

fn is_int(t: &ColumnDataType) -> bool {
    use ColumnDataType::*;
    matches!(
        t,
        Bit | Byte
            | SignedByte
            | Short
            | UnsignedShort
            | Int
            | Long
            | UnsignedLong
            | LongLong
            | UnsignedLongLong
    )
}

impl ColumnSource for FitsSource {
    fn columns(&self) -> &[String] {
        &self.columns
    }
    fn n_rows(&self) -> usize {
        self.n_rows
    }
    fn is_integer(&self, idx: usize) -> bool {
        is_int(&self.types[idx].typ)
    }
    fn prepare(&mut self, wanted: &[usize]) -> Result<()> {
        for &i in wanted {
            let t = &self.types[i];
            let numeric =
                is_int(&t.typ) || matches!(t.typ, ColumnDataType::Float | ColumnDataType::Double);
            if !numeric {
                return Err(Error::input(format!(
                    "{}: column '{}' has type {:?}; a numeric column is needed",
                    self.path.display(),
                    self.columns[i],
                    t.typ
                )));
            }
            if t.repeat != 1 {
                return Err(Error::input(format!(
                    "{}: column '{}' is a vector column (repeat {}); a scalar column is needed",
                    self.path.display(),
                    self.columns[i],
                    t.repeat
                )));
            }
        }
        Ok(())
    }
    fn read_f64(&mut self, idx: usize, start: usize, end: usize) -> Result<Vec<f64>> {
        let name = self.columns[idx].clone();
        self.hdu
            .read_col_range::<f64>(&mut self.file, &name, &(start..end))
            .map_err(|e| {
                Error::input(format!(
                "{}: column '{name}', rows {}-{}: cannot read (truncated or corrupt file?): {e}",
                self.path.display(),
                start + 1,
                end
            ))
            })
    }
}

pub(crate) fn write_fits(
    path: &Path,
    columns: &[OutColumn],
    header: &[(String, String)],
    precision: Precision,
) -> Result<()> {
    let err = |e: fitsio::errors::Error| {
        Error::resource(format!("{}: cannot write FITS: {e}", path.display()))
    };
    let mut f = FitsFile::create(path).open().map_err(err)?;
    let descs = columns
        .iter()
        .map(|c| {
            let t = match precision {
                Precision::Single => ColumnDataType::Float,
                Precision::Double => ColumnDataType::Double,
            };
            ColumnDescription::new(c.name).with_type(t).create()
        })
        .collect::<std::result::Result<Vec<_>, _>>()
        .map_err(err)?;
    let hdu = f.create_table("CATALOG", &descs).map_err(err)?;
    for c in columns {
        if precision == Precision::Single {
            let v: Vec<f32> = c.data.iter().map(|&x| x as f32).collect();
            hdu.write_col(&mut f, c.name, &v).map_err(err)?;
        } else {
            hdu.write_col(&mut f, c.name, c.data).map_err(err)?;
        }
    }
    for (k, v) in header {
        hdu.write_key(&mut f, k, v.as_str()).map_err(err)?;
    }
    drop(f);
    Ok(())
}
