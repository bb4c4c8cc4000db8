//! `ringscale inspect`: read and validate a catalogue, summarise it.
use crate::catalog::{read_catalogue, summarise, ColumnMap, RowFilter, Summary};
use crate::Result;
use std::path::Path;

pub fn run(path: &Path, map: &ColumnMap, filter: &RowFilter) -> Result<Summary> {
    let cat = read_catalogue(path, map, filter)?;
    summarise(&cat, map)
}

pub fn render_text(s: &Summary) -> String {
    let mut out = format!("catalogue {}\n  sha256 {}\n", s.path, s.sha256);
    out += &format!(
        "  rows: {} in file, {} used, {} removed by the redshift filter\n",
        s.rows_in_file, s.rows_used, s.rows_filtered
    );
    if s.ra_wrapped > 0 {
        out += &format!("  RA wrapped into [0, 360): {} rows\n", s.ra_wrapped);
    }
    out += &format!("  columns: {}\n", s.columns.join(", "));
    for (name, lo, hi) in &s.ranges {
        out += &format!("  {name:>10}: {lo:.6} .. {hi:.6}\n");
    }
    out += &format!("  sum w = {:.6}, sum w^2 = {:.6}\n", s.sum_w, s.sum_w2);
    if let Some(k) = s.n_regions {
        out += &format!("  jackknife regions: {k}\n");
    }
    out += &format!("  validation: {}\n", s.validation);
    out
}
