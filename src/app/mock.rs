//! `ringscale mock`: lognormal catalogues (periodic box or survey) from the EH98 spectrum of a
//! chosen true cosmology, written as FITS (or CSV) with the settings in the header.
use crate::catalog::{format_of, write_catalogue_with, Format, OutColumn, Precision};
use crate::cosmology::power::LinearPower;
use crate::cosmology::Cosmology;
use crate::mock::{self, BoxMockConfig, Footprint, MockInfo, NzSpec, SurveyMockConfig};
use crate::report::space;
use crate::{Error, Result};
use std::path::{Path, PathBuf};

/// Parse "RA,DEC,RADIUS" (degrees) into a cap.
pub fn parse_cap(spec: &str) -> Result<Footprint> {
    let v: Vec<f64> = spec
        .split(',')
        .map(|t| t.trim().parse::<f64>())
        .collect::<std::result::Result<_, _>>()
        .map_err(|_| Error::input(format!("--cap '{spec}': expected RA,DEC,RADIUS in degrees")))?;
    if v.len() != 3 {
        return Err(Error::input(format!(
            "--cap '{spec}': expected RA,DEC,RADIUS in degrees"
        )));
    }
    Ok(Footprint::Cap {
        ra_deg: v[0],
        dec_deg: v[1],
        radius_deg: v[2],
    })
}

/// Parse "RA1,DEC1;RA2,DEC2;..." (degrees) into a polygon.
pub fn parse_polygon(spec: &str) -> Result<Footprint> {
    let bad = || {
        Error::input(format!(
            "--polygon '{spec}': expected RA1,DEC1;RA2,DEC2;... in degrees"
        ))
    };
    let mut vertices = Vec::new();
    for p in spec.split(';').filter(|p| !p.trim().is_empty()) {
        let (a, b) = p.split_once(',').ok_or_else(bad)?;
        vertices.push((
            a.trim().parse().map_err(|_| bad())?,
            b.trim().parse().map_err(|_| bad())?,
        ));
    }
    if vertices.len() < 3 {
        return Err(bad());
    }
    Ok(Footprint::Polygon { vertices })
}

/// Header cards recording the true cosmology, seed and settings (FITS keys <= 8 characters,
/// values as short strings; the full record goes in RSINFOnn continuation cards).
fn header(info: &MockInfo, cosmo_name: &str) -> Vec<(String, String)> {
    let mut h = vec![
        (
            "CREATOR".to_string(),
            format!("ringscale {}", crate::VERSION),
        ),
        ("MOCKKIND".to_string(), info.kind.clone()),
        ("SEED".to_string(), info.seed.to_string()),
        ("TRUECOSM".to_string(), cosmo_name.to_string()),
    ];
    let json = info.to_json().to_string();
    for (i, chunk) in json.as_bytes().chunks(60).enumerate() {
        h.push((
            format!("RSINFO{:02}", i % 100),
            String::from_utf8_lossy(chunk).into_owned(),
        ));
        if i >= 99 {
            break;
        }
    }
    h
}

/// Check, before writing any of them, that the catalogues (`path`, rows) with `cols` columns
/// fit: files in the same folder are summed (an upper bound from `space::catalogue_bytes`).
fn ensure_catalogue_space(files: &[(&Path, usize)], cols: u64, precision: Precision) -> Result<()> {
    let width = match precision {
        Precision::Double => 8,
        Precision::Single => 4,
    };
    let mut per_dir: Vec<(&Path, u64)> = Vec::new();
    for &(path, rows) in files {
        let dir = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        let csv = matches!(format_of(path)?, Format::Csv);
        let bytes = space::catalogue_bytes(rows as u64, cols, width, csv);
        match per_dir.iter_mut().find(|(d, _)| *d == dir) {
            Some((_, b)) => *b += bytes,
            None => per_dir.push((dir, bytes)),
        }
    }
    for (dir, bytes) in per_dir {
        space::ensure_space(dir, "the mock catalogue", bytes)?;
    }
    Ok(())
}

/// A power-spectrum closure from the true cosmology's EH98 spectrum (normalised to its sigma8).
fn power_of(c: &Cosmology) -> impl Fn(f64) -> f64 + Sync {
    let p = LinearPower::eh98(c);
    move |k| p.p_lin(k)
}

pub fn run_box(
    cosmology: &str,
    cfg: &BoxMockConfig,
    out: &Path,
    precision: Precision,
) -> Result<MockInfo> {
    let src = Cosmology::from_name_or_file(cosmology)?;
    let (cat, info) = mock::lognormal_box_with_info(&power_of(&src.params), cfg)?;
    let cols = [
        OutColumn {
            name: "X",
            data: &cat.x,
        },
        OutColumn {
            name: "Y",
            data: &cat.y,
        },
        OutColumn {
            name: "Z",
            data: &cat.z,
        },
    ];
    ensure_catalogue_space(&[(out, cat.x.len())], 3, precision)?;
    write_catalogue_with(out, &cols, &header(&info, &src.name), precision)?;
    Ok(info)
}

pub fn run_survey(
    cosmology: &str,
    cfg: &SurveyMockConfig,
    galaxies: &Path,
    randoms: &Path,
    precision: Precision,
) -> Result<MockInfo> {
    let src = Cosmology::from_name_or_file(cosmology)?;
    let (g, r, info) = mock::lognormal_survey_with_info(&power_of(&src.params), &src.params, cfg)?;
    let h = header(&info, &src.name);
    ensure_catalogue_space(
        &[(galaxies, g.ra.len()), (randoms, r.ra.len())],
        4,
        precision,
    )?;
    for (cat, path) in [(&g, galaxies), (&r, randoms)] {
        let cols = [
            OutColumn {
                name: "RA",
                data: &cat.ra,
            },
            OutColumn {
                name: "DEC",
                data: &cat.dec,
            },
            OutColumn {
                name: "Z",
                data: &cat.z,
            },
            OutColumn {
                name: "WEIGHT",
                data: &cat.w,
            },
        ];
        write_catalogue_with(path, &cols, &h, precision)?;
    }
    Ok(info)
}

/// n(z) from a two-column table file (z, nbar in (h/Mpc)^3), or a constant.
pub fn nz_spec(constant: Option<f64>, table: Option<&PathBuf>) -> Result<NzSpec> {
    match (constant, table) {
        (Some(n), None) => Ok(NzSpec::Constant(n)),
        (None, Some(p)) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| Error::io(p, "cannot read n(z) table", e))?;
            let mut rows = Vec::new();
            for (i, line) in text.lines().enumerate() {
                let line = line.split('#').next().unwrap_or("").trim();
                if line.is_empty() {
                    continue;
                }
                let v: Vec<f64> = line
                    .split(|c: char| c == ',' || c.is_whitespace())
                    .filter(|t| !t.is_empty())
                    .map(|t| t.parse::<f64>())
                    .collect::<std::result::Result<_, _>>()
                    .map_err(|_| {
                        Error::input(format!(
                            "{}: line {}: expected two numbers: z nbar",
                            p.display(),
                            i + 1
                        ))
                    })?;
                if v.len() != 2 {
                    return Err(Error::input(format!(
                        "{}: line {}: expected two numbers: z nbar",
                        p.display(),
                        i + 1
                    )));
                }
                rows.push((v[0], v[1]));
            }
            Ok(NzSpec::Table(rows))
        }
        _ => Err(Error::input("give exactly one of --nbar or --nz-table")),
    }
}
