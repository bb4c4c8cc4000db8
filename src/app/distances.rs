//! `ringscale distances`: background distances for a list of redshifts.
use crate::cosmology::{Cosmology, CosmologySource};
use crate::report::ecsv::{to_ecsv_string, Column, Table};
use crate::{Error, Result};
use serde::Serialize;

#[derive(Debug, Serialize)]
pub struct DistanceRow {
    pub z: f64,
    pub comoving_radial_mpc: f64,
    pub comoving_transverse_mpc: f64,
    pub angular_diameter_mpc: f64,
    pub luminosity_mpc: f64,
    pub hubble_distance_mpc: f64,
    pub dv_mpc: f64,
}

#[derive(Debug, Serialize)]
pub struct DistanceReport {
    pub cosmology: serde_json::Value,
    pub r_d_mpc: f64,
    pub particle_horizon_mpc: f64,
    pub rows: Vec<DistanceRow>,
}

/// Parse "0.1,0.5,2" into redshifts (each finite and >= 0).
pub fn parse_redshifts(list: &str) -> Result<Vec<f64>> {
    list.split(',')
        .map(|t| {
            let t = t.trim();
            let z: f64 = t
                .parse()
                .map_err(|_| Error::input(format!("--z: '{t}' is not a number")))?;
            if !z.is_finite() || z < 0.0 {
                return Err(Error::input(format!(
                    "--z: redshift {t} must be finite and >= 0"
                )));
            }
            Ok(z)
        })
        .collect()
}

pub fn cosmology_json(src: &CosmologySource) -> serde_json::Value {
    let c: &Cosmology = &src.params;
    let mut v = serde_json::to_value(c).expect("plain struct serialises");
    if let Some(m) = v.as_object_mut() {
        m.insert("name".into(), src.name.clone().into());
        m.insert("Omega_m".into(), c.omega_m().into());
        m.insert("Omega_r".into(), c.omega_r().into());
        m.insert("Omega_de".into(), c.omega_de().into());
    }
    v
}

pub fn compute(src: &CosmologySource, zs: &[f64]) -> DistanceReport {
    let c = &src.params;
    let rows = zs
        .iter()
        .map(|&z| DistanceRow {
            z,
            comoving_radial_mpc: c.comoving_radial(z),
            comoving_transverse_mpc: c.comoving_transverse(z),
            angular_diameter_mpc: c.angular_diameter(z),
            luminosity_mpc: c.luminosity(z),
            hubble_distance_mpc: c.hubble_distance(z),
            dv_mpc: c.dv(z),
        })
        .collect();
    DistanceReport {
        cosmology: cosmology_json(src),
        r_d_mpc: c.r_d(),
        particle_horizon_mpc: c.particle_horizon(),
        rows,
    }
}

/// Render as JSON (default) or as an ECSV table.
pub fn render(report: &DistanceReport, format: &str) -> Result<String> {
    match format {
        "json" => Ok(serde_json::to_string_pretty(report)
            .map_err(|e| Error::other(e.to_string()))?
            + "\n"),
        "ecsv" => {
            let col = |name: &str, f: fn(&DistanceRow) -> f64| {
                Column::f64(name, report.rows.iter().map(f).collect())
            };
            let table = Table {
                columns: vec![
                    col("z", |r| r.z),
                    col("comoving_radial_mpc", |r| r.comoving_radial_mpc),
                    col("comoving_transverse_mpc", |r| r.comoving_transverse_mpc),
                    col("angular_diameter_mpc", |r| r.angular_diameter_mpc),
                    col("luminosity_mpc", |r| r.luminosity_mpc),
                    col("hubble_distance_mpc", |r| r.hubble_distance_mpc),
                    col("dv_mpc", |r| r.dv_mpc),
                ],
                meta: serde_json::json!({
                    "r_d_mpc": report.r_d_mpc,
                    "particle_horizon_mpc": report.particle_horizon_mpc,
                    "cosmology": report.cosmology,
                    "tool": "ringscale",
                    "version": crate::VERSION,
                }),
            };
            to_ecsv_string(&table)
        }
        other => Err(Error::input(format!(
            "--format: unknown format '{other}' (use json or ecsv)"
        ))),
    }
}
