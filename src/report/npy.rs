//! NPY format version 1.0 (the NumPy array file format): little-endian f64, i64 or u64 arrays
//! in C order. Version 2.0/3.0 headers are read as well.
use super::atomic::write_atomic;
use crate::{Error, Result};
use std::path::Path;

#[derive(Debug, Clone, PartialEq)]
pub enum NpyData {
    F64(Vec<f64>),
    I64(Vec<i64>),
    U64(Vec<u64>),
}

impl NpyData {
    pub fn len(&self) -> usize {
        match self {
            NpyData::F64(v) => v.len(),
            NpyData::I64(v) => v.len(),
            NpyData::U64(v) => v.len(),
        }
    }
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    fn descr(&self) -> &'static str {
        match self {
            NpyData::F64(_) => "<f8",
            NpyData::I64(_) => "<i8",
            NpyData::U64(_) => "<u8",
        }
    }
}

/// An array with its shape (C order, last index fastest).
#[derive(Debug, Clone, PartialEq)]
pub struct NpyArray {
    pub shape: Vec<usize>,
    pub data: NpyData,
}

const MAGIC: &[u8] = b"\x93NUMPY";

/// Encode to NPY 1.0 bytes; the header is padded so the data start on a 64-byte boundary.
pub fn encode_npy(a: &NpyArray) -> Result<Vec<u8>> {
    let n: usize = a.shape.iter().product();
    if n != a.data.len() {
        return Err(Error::other(format!(
            "npy: shape {:?} holds {n} values but the data have {}",
            a.shape,
            a.data.len()
        )));
    }
    let shape = match a.shape.len() {
        1 => format!("({},)", a.shape[0]),
        _ => format!(
            "({})",
            a.shape
                .iter()
                .map(|d| d.to_string())
                .collect::<Vec<_>>()
                .join(", ")
        ),
    };
    let mut header = format!(
        "{{'descr': '{}', 'fortran_order': False, 'shape': {shape}, }}",
        a.data.descr()
    );
    let unpadded = MAGIC.len() + 2 + 2 + header.len() + 1;
    header.push_str(&" ".repeat((64 - unpadded % 64) % 64));
    header.push('\n');
    let hlen = u16::try_from(header.len())
        .map_err(|_| Error::other("npy: header longer than 65535 bytes"))?;
    let mut out = Vec::with_capacity(10 + header.len() + 8 * n);
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&[1, 0]);
    out.extend_from_slice(&hlen.to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    match &a.data {
        NpyData::F64(v) => v
            .iter()
            .for_each(|x| out.extend_from_slice(&x.to_le_bytes())),
        NpyData::I64(v) => v
            .iter()
            .for_each(|x| out.extend_from_slice(&x.to_le_bytes())),
        NpyData::U64(v) => v
            .iter()
            .for_each(|x| out.extend_from_slice(&x.to_le_bytes())),
    }
    Ok(out)
}

/// Write an array atomically.
pub fn write_npy(path: &Path, a: &NpyArray) -> Result<()> {
    let bytes = encode_npy(a).map_err(|e| Error::other(format!("{}: {e}", path.display())))?;
    write_atomic(path, &bytes)
}

/// Convenience: write f64 values with a shape.
pub fn write_npy_f64(path: &Path, data: &[f64], shape: &[usize]) -> Result<()> {
    write_npy(
        path,
        &NpyArray {
            shape: shape.to_vec(),
            data: NpyData::F64(data.to_vec()),
        },
    )
}

fn dict_value<'a>(h: &'a str, key: &str, src: &str) -> Result<&'a str> {
    let pat = format!("'{key}':");
    let i = h
        .find(&pat)
        .ok_or_else(|| Error::input(format!("{src}: npy header has no '{key}' entry: {h}")))?;
    Ok(h[i + pat.len()..].trim_start())
}

/// Decode NPY bytes; `src` names the file in error messages.
pub fn decode_npy(bytes: &[u8], src: &str) -> Result<NpyArray> {
    let bad = |m: String| Error::input(format!("{src}: {m}"));
    if bytes.len() < 10 || &bytes[..6] != MAGIC {
        return Err(bad("not an NPY file (bad magic string)".into()));
    }
    let (hlen, start) = match bytes[6] {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10),
        2 | 3 if bytes.len() >= 12 => (
            u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
            12,
        ),
        v => return Err(bad(format!("unsupported NPY version {v}.{}", bytes[7]))),
    };
    let end = start + hlen;
    if bytes.len() < end {
        return Err(bad("truncated NPY header".into()));
    }
    let h = std::str::from_utf8(&bytes[start..end])
        .map_err(|_| bad("NPY header is not text".into()))?;
    let descr_s = dict_value(h, "descr", src)?;
    let descr = descr_s
        .strip_prefix('\'')
        .and_then(|s| s.split('\'').next())
        .ok_or_else(|| bad(format!("cannot read 'descr' in header: {h}")))?;
    let fortran = dict_value(h, "fortran_order", src)?;
    if fortran.starts_with("True") {
        return Err(bad("Fortran-ordered arrays are not supported".into()));
    } else if !fortran.starts_with("False") {
        return Err(bad(format!("cannot read 'fortran_order' in header: {h}")));
    }
    let shape_s = dict_value(h, "shape", src)?;
    let inner = shape_s
        .strip_prefix('(')
        .and_then(|s| s.split(')').next())
        .ok_or_else(|| bad(format!("cannot read 'shape' in header: {h}")))?;
    let mut shape = Vec::new();
    for part in inner.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        shape.push(
            part.parse::<usize>()
                .map_err(|_| bad(format!("bad dimension '{part}' in shape")))?,
        );
    }
    let n = shape
        .iter()
        .try_fold(1usize, |a, &d| a.checked_mul(d))
        .ok_or_else(|| bad("shape too large".into()))?;
    let body = &bytes[end..];
    if body.len() != n * 8 {
        return Err(bad(format!(
            "shape {shape:?} needs {} data bytes, file has {}",
            n * 8,
            body.len()
        )));
    }
    let words = body.chunks_exact(8).map(|c| {
        let mut b = [0u8; 8];
        b.copy_from_slice(c);
        b
    });
    let data = match descr {
        "<f8" => NpyData::F64(words.map(f64::from_le_bytes).collect()),
        "<i8" => NpyData::I64(words.map(i64::from_le_bytes).collect()),
        "<u8" => NpyData::U64(words.map(u64::from_le_bytes).collect()),
        d => {
            return Err(bad(format!(
                "unsupported dtype '{d}' (expected '<f8', '<i8' or '<u8')"
            )))
        }
    };
    Ok(NpyArray { shape, data })
}

/// Read an NPY file written by `write_npy` or by NumPy.
pub fn read_npy(path: &Path) -> Result<NpyArray> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, "reading", e))?;
    decode_npy(&bytes, &path.display().to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_bits_and_layout() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.npy");
        let v = vec![-0.0, 1e-300, f64::NAN, f64::INFINITY, 0.1, -3.5];
        write_npy_f64(&p, &v, &[2, 3]).unwrap();
        let bytes = std::fs::read(&p).unwrap();
        // NPY 1.0 layout (NumPy format specification, numpy.lib.format docs): magic, version,
        // u16 header length, header ending in '\n', data aligned to 64 bytes.
        assert_eq!(&bytes[..8], b"\x93NUMPY\x01\x00");
        let hlen = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
        assert_eq!((10 + hlen) % 64, 0);
        assert_eq!(bytes[10 + hlen - 1], b'\n');
        let h = std::str::from_utf8(&bytes[10..10 + hlen]).unwrap();
        assert!(h.starts_with("{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3), }"));
        let a = read_npy(&p).unwrap();
        assert_eq!(a.shape, vec![2, 3]);
        let NpyData::F64(back) = a.data else { panic!() };
        for (x, y) in v.iter().zip(&back) {
            assert_eq!(x.to_bits(), y.to_bits());
        }
    }

    #[test]
    fn integer_and_one_d() {
        for data in [
            NpyData::I64(vec![i64::MIN, -1, 0, i64::MAX]),
            NpyData::U64(vec![0, 1, u64::MAX, 7]),
        ] {
            let a = NpyArray {
                shape: vec![4],
                data,
            };
            let bytes = encode_npy(&a).unwrap();
            assert!(std::str::from_utf8(&bytes[10..70])
                .unwrap()
                .contains("'shape': (4,)"));
            assert_eq!(decode_npy(&bytes, "mem").unwrap(), a);
        }
    }

    #[test]
    fn rejects_bad_input() {
        let a = NpyArray {
            shape: vec![3],
            data: NpyData::F64(vec![1.0, 2.0]),
        };
        assert!(encode_npy(&a).is_err());
        let good = encode_npy(&NpyArray {
            shape: vec![2],
            data: NpyData::F64(vec![1.0, 2.0]),
        })
        .unwrap();
        let e = decode_npy(&good[..good.len() - 1], "f.npy").unwrap_err();
        assert!(
            matches!(e, Error::Input(_)) && e.to_string().contains("f.npy"),
            "{e}"
        );
        assert!(decode_npy(b"garbage", "g.npy").is_err());
    }
}
