//! ECSV 1.0 tables (the Enhanced Character Separated Values standard that astropy reads).
//!
//! Layout written: `# %ECSV 1.0`, `# ---`, then a YAML header behind `# ` with `datatype:`
//! (a list of `{name, datatype}` flow maps), an optional `meta:` block mapping and
//! `schema: astropy-2.0`, then a space-delimited line of column names and the rows. Meta
//! values are written in JSON flow syntax, which YAML also reads, with floats always carrying a
//! decimal point and a signed exponent (the YAML 1.1 float form). Data floats use the shortest
//! representation that reads back to the same bits (`nan`, `inf`, `-inf` for non-finite values).
//! The reader handles the files this writer produces.
use super::atomic::write_atomic_str;
use crate::{Error, Result};
use serde_json::{Map, Value};
use std::path::Path;

#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    F64(Vec<f64>),
    I64(Vec<i64>),
    U64(Vec<u64>),
    Str(Vec<String>),
}

impl ColumnData {
    pub fn len(&self) -> usize {
        match self {
            ColumnData::F64(v) => v.len(),
            ColumnData::I64(v) => v.len(),
            ColumnData::U64(v) => v.len(),
            ColumnData::Str(v) => v.len(),
        }
    }
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    fn datatype(&self) -> &'static str {
        match self {
            ColumnData::F64(_) => "float64",
            ColumnData::I64(_) => "int64",
            ColumnData::U64(_) => "uint64",
            ColumnData::Str(_) => "string",
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub data: ColumnData,
}

impl Column {
    pub fn f64(name: &str, v: Vec<f64>) -> Self {
        Column {
            name: name.into(),
            data: ColumnData::F64(v),
        }
    }
}

/// A table: equal-length named columns plus a metadata mapping (a JSON object, or Null for
/// none).
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub columns: Vec<Column>,
    pub meta: Value,
}

impl Table {
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }
    /// A float64 column by name, or an input error naming what is missing.
    pub fn f64_column(&self, name: &str) -> Result<&[f64]> {
        match self.column(name).map(|c| &c.data) {
            Some(ColumnData::F64(v)) => Ok(v),
            Some(_) => Err(Error::input(format!("column '{name}' is not float64"))),
            None => Err(Error::input(format!("table has no column '{name}'"))),
        }
    }
    pub fn n_rows(&self) -> usize {
        self.columns.first().map_or(0, |c| c.data.len())
    }
}

const YAML_WORDS: [&str; 12] = [
    "true", "false", "yes", "no", "on", "off", "null", "y", "n", "nan", "inf", "~",
];

/// Identifier-like names: safe as a field of the space-delimited name line.
fn is_identifier(s: &str) -> bool {
    let mut ch = s.chars();
    matches!(ch.next(), Some(c) if c.is_ascii_alphabetic() || c == '_')
        && ch.all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-' || c == '.')
}

/// Names YAML reads as plain strings without quotes.
fn is_plain_name(s: &str) -> bool {
    is_identifier(s) && !YAML_WORDS.contains(&s.to_ascii_lowercase().as_str())
}

fn yaml_key(s: &str) -> String {
    if is_plain_name(s) {
        s.to_string()
    } else {
        json_str(s)
    }
}

/// Data float: shortest round-trip representation.
fn fmt_f64(x: f64) -> String {
    if x.is_nan() {
        "nan".into()
    } else if x.is_infinite() {
        if x > 0.0 { "inf" } else { "-inf" }.into()
    } else {
        format!("{x:?}")
    }
}

/// YAML 1.1 needs a '.' and a signed exponent to read a number as a float; this form is JSON
/// too.
fn yaml_float(x: f64) -> String {
    let s = format!("{x:?}");
    match s.split_once('e') {
        Some((m, e)) => {
            let m = if m.contains('.') {
                m.to_string()
            } else {
                format!("{m}.0")
            };
            let e = if e.starts_with('-') {
                e.to_string()
            } else {
                format!("+{e}")
            };
            format!("{m}e{e}")
        }
        None => s,
    }
}

fn json_str(s: &str) -> String {
    serde_json::to_string(s).expect("string encodes")
}

fn flow(v: &Value, out: &mut String) {
    match v {
        Value::Null => out.push_str("null"),
        Value::Bool(b) => out.push_str(if *b { "true" } else { "false" }),
        Value::Number(n) => match (n.as_u64(), n.as_i64(), n.as_f64()) {
            (Some(u), _, _) => out.push_str(&u.to_string()),
            (_, Some(i), _) => out.push_str(&i.to_string()),
            (_, _, Some(f)) => out.push_str(&yaml_float(f)),
            _ => out.push_str("null"),
        },
        Value::String(s) => out.push_str(&json_str(s)),
        Value::Array(a) => {
            out.push('[');
            for (i, x) in a.iter().enumerate() {
                if i > 0 {
                    out.push_str(", ");
                }
                flow(x, out);
            }
            out.push(']');
        }
        Value::Object(m) => {
            out.push('{');
            for (i, (k, x)) in m.iter().enumerate() {
                if i > 0 {
                    out.push_str(", ");
                }
                out.push_str(&json_str(k));
                out.push_str(": ");
                flow(x, out);
            }
            out.push('}');
        }
    }
}

fn block_map(m: &Map<String, Value>, indent: usize, out: &mut String) {
    for (k, v) in m {
        out.push_str("# ");
        out.push_str(&" ".repeat(indent));
        out.push_str(&yaml_key(k));
        out.push(':');
        match v {
            Value::Object(inner) if !inner.is_empty() => {
                out.push('\n');
                block_map(inner, indent + 2, out);
            }
            _ => {
                out.push(' ');
                flow(v, out);
                out.push('\n');
            }
        }
    }
}

fn quote_field(s: &str) -> Result<String> {
    if s.contains(['\n', '\r']) {
        return Err(Error::other(format!(
            "ecsv: string value {s:?} contains a line break"
        )));
    }
    if s.is_empty() || s.contains([' ', '"', '\t']) || s.starts_with('#') {
        Ok(format!("\"{}\"", s.replace('"', "\"\"")))
    } else {
        Ok(s.to_string())
    }
}

/// Render a table as ECSV 1.0 text.
pub fn to_ecsv_string(t: &Table) -> Result<String> {
    let n = t.n_rows();
    let mut out = String::from("# %ECSV 1.0\n# ---\n# datatype:\n");
    for c in &t.columns {
        if !is_identifier(&c.name) {
            return Err(Error::other(format!(
                "ecsv: column name '{}' must start with a letter or '_' and contain only \
                 letters, digits, '_', '-', '.'",
                c.name
            )));
        }
        if c.data.len() != n {
            return Err(Error::other(format!(
                "ecsv: column '{}' has {} rows, the first column has {n}",
                c.name,
                c.data.len()
            )));
        }
        out.push_str(&format!(
            "# - {{name: {}, datatype: {}}}\n",
            yaml_key(&c.name),
            c.data.datatype()
        ));
    }
    match &t.meta {
        Value::Null => {}
        Value::Object(m) if m.is_empty() => {}
        Value::Object(m) => {
            out.push_str("# meta:\n");
            block_map(m, 2, &mut out);
        }
        _ => return Err(Error::other("ecsv: table meta must be a mapping")),
    }
    out.push_str("# schema: astropy-2.0\n");
    let names: Vec<&str> = t.columns.iter().map(|c| c.name.as_str()).collect();
    out.push_str(&names.join(" "));
    out.push('\n');
    for r in 0..n {
        let mut fields = Vec::with_capacity(t.columns.len());
        for c in &t.columns {
            fields.push(match &c.data {
                ColumnData::F64(v) => fmt_f64(v[r]),
                ColumnData::I64(v) => v[r].to_string(),
                ColumnData::U64(v) => v[r].to_string(),
                ColumnData::Str(v) => quote_field(&v[r])?,
            });
        }
        out.push_str(&fields.join(" "));
        out.push('\n');
    }
    Ok(out)
}

/// Write a table as ECSV, atomically.
pub fn write_ecsv(path: &Path, t: &Table) -> Result<()> {
    let s = to_ecsv_string(t).map_err(|e| Error::other(format!("{}: {e}", path.display())))?;
    write_atomic_str(path, &s)
}

/// Read an ECSV file written by `write_ecsv`.
pub fn read_ecsv(path: &Path) -> Result<Table> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, "reading", e))?;
    parse_ecsv(&text, &path.display().to_string())
}

/// Split `"key": rest` or `key: rest` at the separating colon.
fn split_key(s: &str) -> Option<(String, &str)> {
    if s.starts_with('"') {
        let mut it = serde_json::Deserializer::from_str(s).into_iter::<String>();
        let k = it.next()?.ok()?;
        let rest = s[it.byte_offset()..].strip_prefix(':')?;
        Some((k, rest))
    } else {
        let (k, rest) = s.split_once(':')?;
        Some((k.trim().to_string(), rest))
    }
}

/// Parse a block mapping from `lines` (line number, indent, text) starting at `*i`, all keys at
/// exactly `indent`.
fn parse_block(
    lines: &[(usize, usize, &str)],
    i: &mut usize,
    indent: usize,
    src: &str,
) -> Result<Map<String, Value>> {
    let mut m = Map::new();
    while *i < lines.len() {
        let (ln, ind, text) = lines[*i];
        if ind < indent {
            break;
        }
        if ind > indent {
            return Err(Error::input(format!(
                "{src}: line {ln}: unexpected indentation in the meta header"
            )));
        }
        let (k, rest) = split_key(text).ok_or_else(|| {
            Error::input(format!(
                "{src}: line {ln}: expected 'key: value' in the meta header"
            ))
        })?;
        *i += 1;
        let rest = rest.trim();
        let v = if rest.is_empty() {
            let child = lines.get(*i).map_or(0, |l| l.1);
            if child > indent {
                Value::Object(parse_block(lines, i, child, src)?)
            } else {
                Value::Null
            }
        } else {
            serde_json::from_str(rest).map_err(|e| {
                Error::input(format!(
                    "{src}: line {ln}: cannot read meta value for '{k}': {e}"
                ))
            })?
        };
        m.insert(k, v);
    }
    Ok(m)
}

/// Tokenise one data row: fields separated by spaces, double-quoted fields with "" escapes.
fn split_row(line: &str) -> std::result::Result<Vec<String>, String> {
    let mut out = Vec::new();
    let mut ch = line.chars().peekable();
    loop {
        while ch.peek() == Some(&' ') {
            ch.next();
        }
        let Some(&c) = ch.peek() else { break };
        let mut f = String::new();
        if c == '"' {
            ch.next();
            loop {
                match ch.next() {
                    Some('"') if ch.peek() == Some(&'"') => {
                        ch.next();
                        f.push('"');
                    }
                    Some('"') => break,
                    Some(x) => f.push(x),
                    None => return Err("unterminated quoted field".into()),
                }
            }
            if !matches!(ch.peek(), None | Some(' ')) {
                return Err("text directly after a closing quote".into());
            }
        } else {
            while let Some(&x) = ch.peek() {
                if x == ' ' {
                    break;
                }
                f.push(x);
                ch.next();
            }
        }
        out.push(f);
    }
    Ok(out)
}

/// Parse ECSV text; `src` names the file in error messages.
pub fn parse_ecsv(text: &str, src: &str) -> Result<Table> {
    let bad = |ln: usize, m: String| Error::input(format!("{src}: line {ln}: {m}"));
    let all: Vec<&str> = text.lines().collect();
    if all.first().map(|l| l.trim_end()) != Some("# %ECSV 1.0") {
        return Err(bad(
            1,
            "not an ECSV 1.0 file (expected '# %ECSV 1.0')".into(),
        ));
    }
    if all.get(1).map(|l| l.trim_end()) != Some("# ---") {
        return Err(bad(2, "expected '# ---'".into()));
    }
    // Header lines with "# " stripped, as (line number, indent, text).
    let mut hdr = Vec::new();
    let mut k = 2;
    while k < all.len() && all[k].starts_with('#') {
        let body = all[k][1..].strip_prefix(' ').unwrap_or(&all[k][1..]);
        let body = body.trim_end();
        if !body.trim().is_empty() {
            let ind = body.len() - body.trim_start().len();
            hdr.push((k + 1, ind, body.trim_start()));
        }
        k += 1;
    }
    let mut cols: Vec<(String, String)> = Vec::new();
    let mut meta = Value::Object(Map::new());
    let mut i = 0;
    while i < hdr.len() {
        let (ln, ind, text) = hdr[i];
        if ind != 0 {
            return Err(bad(ln, "unexpected indentation in the header".into()));
        }
        let (key, rest) = split_key(text)
            .ok_or_else(|| bad(ln, format!("expected 'key: value', found '{text}'")))?;
        let rest = rest.trim();
        i += 1;
        match key.as_str() {
            "datatype" => {
                while i < hdr.len() && hdr[i].2.starts_with("- ") {
                    let (ln, _, t) = hdr[i];
                    let inner = t[2..]
                        .trim()
                        .strip_prefix('{')
                        .and_then(|s| s.strip_suffix('}'))
                        .ok_or_else(|| {
                            bad(
                                ln,
                                format!("expected '{{name: .., datatype: ..}}', found '{t}'"),
                            )
                        })?;
                    let (mut name, mut dt) = (None, None);
                    for part in inner.split(',') {
                        let (k2, v2) = part
                            .split_once(':')
                            .ok_or_else(|| bad(ln, format!("bad column description '{t}'")))?;
                        let v2 = v2
                            .trim()
                            .trim_matches(|c| c == '"' || c == '\'')
                            .to_string();
                        match k2.trim() {
                            "name" => name = Some(v2),
                            "datatype" => dt = Some(v2),
                            _ => {}
                        }
                    }
                    let name =
                        name.ok_or_else(|| bad(ln, "column description without name".into()))?;
                    let dt =
                        dt.ok_or_else(|| bad(ln, format!("column '{name}' has no datatype")))?;
                    if !["float64", "int64", "uint64", "string"].contains(&dt.as_str()) {
                        return Err(bad(
                            ln,
                            format!("column '{name}': unsupported datatype '{dt}'"),
                        ));
                    }
                    cols.push((name, dt));
                    i += 1;
                }
            }
            "meta" => {
                if rest.is_empty() {
                    let child = hdr.get(i).map_or(0, |l| l.1);
                    if child > 0 {
                        meta = Value::Object(parse_block(&hdr, &mut i, child, src)?);
                    }
                } else {
                    meta = serde_json::from_str(rest)
                        .map_err(|e| bad(ln, format!("cannot read meta: {e}")))?;
                }
            }
            "delimiter" => {
                let d = rest.trim_matches(|c| c == '"' || c == '\'');
                if d != " " && !rest.is_empty() {
                    return Err(bad(ln, format!("unsupported delimiter {rest}")));
                }
            }
            "schema" => {}
            other => return Err(bad(ln, format!("unsupported header key '{other}'"))),
        }
    }
    if cols.is_empty() {
        return Err(bad(3, "no 'datatype' list in the header".into()));
    }
    // Column-name line, then data rows; blank lines are skipped.
    let mut rows = all
        .iter()
        .enumerate()
        .skip(k)
        .filter(|(_, l)| !l.trim().is_empty());
    let (hln, hline) = rows
        .next()
        .ok_or_else(|| bad(k + 1, "missing the line of column names".into()))?;
    let names = split_row(hline).map_err(|m| bad(hln + 1, m))?;
    let expected: Vec<&str> = cols.iter().map(|c| c.0.as_str()).collect();
    if names != expected {
        return Err(bad(
            hln + 1,
            format!("column names {names:?} do not match the header datatype list {expected:?}"),
        ));
    }
    let mut data: Vec<ColumnData> = cols
        .iter()
        .map(|(_, dt)| match dt.as_str() {
            "float64" => ColumnData::F64(Vec::new()),
            "int64" => ColumnData::I64(Vec::new()),
            "uint64" => ColumnData::U64(Vec::new()),
            _ => ColumnData::Str(Vec::new()),
        })
        .collect();
    for (idx, line) in rows {
        let ln = idx + 1;
        let f = split_row(line).map_err(|m| bad(ln, m))?;
        if f.len() != cols.len() {
            return Err(bad(
                ln,
                format!("{} fields, expected {}", f.len(), cols.len()),
            ));
        }
        for (j, (tok, col)) in f.into_iter().zip(data.iter_mut()).enumerate() {
            let err = |dt: &str| {
                bad(
                    ln,
                    format!(
                        "column {} ('{}'): cannot read '{tok}' as {dt}",
                        j + 1,
                        cols[j].0
                    ),
                )
            };
            match col {
                ColumnData::F64(v) => v.push(tok.parse().map_err(|_| err("float64"))?),
                ColumnData::I64(v) => v.push(tok.parse().map_err(|_| err("int64"))?),
                ColumnData::U64(v) => v.push(tok.parse().map_err(|_| err("uint64"))?),
                ColumnData::Str(v) => v.push(tok),
            }
        }
    }
    if !meta.is_object() {
        return Err(bad(3, "meta must be a mapping".into()));
    }
    Ok(Table {
        columns: cols
            .into_iter()
            .zip(data)
            .map(|((name, _), data)| Column { name, data })
            .collect(),
        meta,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn sample() -> Table {
        Table {
            columns: vec![
                Column::f64(
                    "s",
                    vec![
                        -0.0,
                        1e-300,
                        f64::NAN,
                        f64::INFINITY,
                        f64::NEG_INFINITY,
                        0.1,
                    ],
                ),
                Column::f64(
                    "xi_0",
                    vec![1.0 / 3.0, -2.5e17, f64::MIN_POSITIVE, 5e-324, f64::MAX, 1.0],
                ),
                Column {
                    name: "n".into(),
                    data: ColumnData::I64(vec![i64::MIN, -1, 0, 1, 2, i64::MAX]),
                },
                Column {
                    name: "npairs".into(),
                    data: ColumnData::U64(vec![0, 1, 2, 3, u64::MAX, 5]),
                },
                Column {
                    name: "label".into(),
                    data: ColumnData::Str(vec![
                        "plain".into(),
                        "with space".into(),
                        "quote\"d".into(),
                        "#hash".into(),
                        "ünï".into(),
                        "x".into(),
                    ]),
                },
            ],
            meta: json!({
                "tool": "ringscale",
                "version": "0.1.0",
                "cosmology": {"h": 0.6736, "omega_k": -0.0, "tiny": 1e-300, "big": 1e20,
                              "nested": {"list": [1, 2.5, "a"], "empty": {}}},
                "s_edges": [0.0, 5.0, 10.0],
                "true": "key that YAML would read as a bool",
                "with space": null,
                "flag": true,
                "neg": -3,
                "items": [{"a": 1}, [1, 2]],
            }),
        }
    }

    #[test]
    fn round_trip_bit_for_bit() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("t.ecsv");
        let t = sample();
        write_ecsv(&p, &t).unwrap();
        let back = read_ecsv(&p).unwrap();
        assert_eq!(back.meta, t.meta);
        assert_eq!(back.columns.len(), t.columns.len());
        for (a, b) in t.columns.iter().zip(&back.columns) {
            assert_eq!(a.name, b.name);
            match (&a.data, &b.data) {
                (ColumnData::F64(x), ColumnData::F64(y)) => {
                    assert_eq!(x.len(), y.len());
                    for (u, v) in x.iter().zip(y) {
                        // NaN payloads are not kept; every other value keeps its bits.
                        assert!(u.to_bits() == v.to_bits() || (u.is_nan() && v.is_nan()));
                    }
                }
                _ => assert_eq!(a.data, b.data),
            }
        }
    }

    #[test]
    fn header_follows_the_standard() {
        // ECSV 1.0 standard (astropy APE 6): first line '# %ECSV 1.0', then '# ---', a YAML
        // header with 'datatype' (name/datatype entries), 'meta', 'schema', then a delimited
        // line of column names. NaN is written as 'nan'.
        let s = to_ecsv_string(&sample()).unwrap();
        let lines: Vec<&str> = s.lines().collect();
        assert_eq!(lines[0], "# %ECSV 1.0");
        assert_eq!(lines[1], "# ---");
        assert_eq!(lines[2], "# datatype:");
        assert_eq!(lines[3], "# - {name: s, datatype: float64}");
        // 'n' is quoted: YAML 1.1 lists it as a boolean word.
        assert_eq!(lines[5], "# - {name: \"n\", datatype: int64}");
        assert_eq!(lines[6], "# - {name: npairs, datatype: uint64}");
        assert_eq!(lines[7], "# - {name: label, datatype: string}");
        assert_eq!(lines[8], "# meta:");
        assert!(lines.contains(&"#   \"true\": \"key that YAML would read as a bool\""));
        assert!(lines.contains(&"#     tiny: 1.0e-300"));
        assert!(lines.contains(&"#     big: 1.0e+20"));
        let schema = lines
            .iter()
            .position(|l| *l == "# schema: astropy-2.0")
            .unwrap();
        assert_eq!(lines[schema + 1], "s xi_0 n npairs label");
        assert!(lines[schema + 2].starts_with("-0.0 0.3333333333333333 "));
        assert!(lines[schema + 3].contains("\"with space\""));
        assert!(lines[schema + 4].starts_with("nan "));
        assert!(lines[schema + 5].contains("\"#hash\""));
        assert!(lines
            .iter()
            .all(|l| l.starts_with("# ") || !l.starts_with('#')));
    }

    #[test]
    fn bad_content_names_file_line_column() {
        let mut s = to_ecsv_string(&sample()).unwrap();
        s = s.replacen("\nnan ", "\nnotanumber ", 1);
        let e = parse_ecsv(&s, "bad.ecsv").unwrap_err();
        let m = e.to_string();
        assert!(matches!(e, Error::Input(_)));
        assert!(
            m.contains("bad.ecsv") && m.contains("column 1 ('s')") && m.contains("notanumber"),
            "{m}"
        );
        let line_no = s.lines().position(|l| l.starts_with("notanumber")).unwrap() + 1;
        assert!(m.contains(&format!("line {line_no}:")), "{m}");
        let e = parse_ecsv("# %ECSV 0.9\n", "old.ecsv").unwrap_err();
        assert!(e.to_string().contains("old.ecsv: line 1"));
        let short = "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: a, datatype: float64}\n# - {name: b, datatype: float64}\na b\n1.0\n";
        let e = parse_ecsv(short, "s.ecsv").unwrap_err();
        assert!(
            e.to_string().contains("line 7: 1 fields, expected 2"),
            "{e}"
        );
    }

    #[test]
    fn writer_rejects_bad_tables() {
        let mut t = sample();
        t.columns[0].name = "bad name".into();
        assert!(to_ecsv_string(&t).is_err());
        let mut t = sample();
        t.columns[0].data = ColumnData::F64(vec![1.0]);
        assert!(to_ecsv_string(&t).is_err());
        let mut t = sample();
        t.meta = json!([1, 2]);
        assert!(to_ecsv_string(&t).is_err());
    }
}
