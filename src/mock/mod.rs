//! Lognormal mock catalogues (Coles & Jones 1991, MNRAS 248, 1): galaxies Poisson-sampled from
//! exp(G - sigma_G^2/2) with G a Gaussian field whose exponential has the target correlation
//! b^2 xi(r), in a periodic box or in a survey footprint with an n(z), plus matching randoms.
//!
//! The power spectrum comes in as a closure P(k) in (Mpc/h)^3 at k in h/Mpc, so this module
//! does not depend on how the linear spectrum is computed. See [`field`] for the grid method.
//!
//! Determinism: every random number comes from a ChaCha12 stream keyed by (seed, purpose) and
//! numbered by a grid plane or a chunk index; outputs are concatenated in plane/chunk order, and
//! reductions run in a fixed order, so the catalogue is bitwise identical for any thread count.
//!
//! Memory: about 32 n^3 bytes at the peak (a real grid plus two half-complex grids and the
//! FFT work buffer), i.e. ~0.55 GB for n = 256; see [`estimate_memory_bytes`].
mod fft;
mod field;
mod footprint;

pub use footprint::Footprint;

use crate::cosmology::{Cosmology, DistanceTable};
use crate::{Error, Result};
use footprint::{dot, ra_dec, Region, V3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha12Rng;
use rand_distr::{Distribution, Poisson};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Stream purpose tags (the noise tag lives in `field`).
const PURPOSE_GALAXIES: u64 = 2;
const PURPOSE_RANDOMS: u64 = 3;
/// Randoms are drawn in chunks of this size, one stream per chunk.
const RANDOM_CHUNK: usize = 1 << 14;

/// SplitMix64 step (Steele, Lea & Flood 2014), used only to expand a seed into a key.
fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Independent random stream number `index` for (seed, purpose).
pub(crate) fn stream_rng(seed: u64, purpose: u64, index: u64) -> ChaCha12Rng {
    let mut s = seed ^ purpose.wrapping_mul(0xD6E8_FEB8_6659_FD93);
    let mut key = [0u8; 32];
    for chunk in key.chunks_mut(8) {
        chunk.copy_from_slice(&splitmix64(&mut s).to_le_bytes());
    }
    let mut rng = ChaCha12Rng::from_seed(key);
    rng.set_stream(index);
    rng
}

/// Periodic-box mock settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BoxMockConfig {
    /// Grid cells per side (even).
    pub n_grid: usize,
    /// Box side in Mpc/h.
    pub box_size: f64,
    /// Mean number density in (h/Mpc)^3.
    pub nbar: f64,
    /// Linear galaxy bias b (target xi_g = b^2 xi_m).
    pub bias: f64,
    pub seed: u64,
}

/// Galaxy positions in a periodic box, in [0, box_size) Mpc/h, in grid-cell order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BoxCatalogue {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub z: Vec<f64>,
}

/// Number density against redshift.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum NzSpec {
    /// Constant nbar in (h/Mpc)^3.
    Constant(f64),
    /// (z, nbar) nodes, z strictly increasing, linearly interpolated; must cover [z_min, z_max].
    Table(Vec<(f64, f64)>),
}

impl NzSpec {
    /// nbar(z) in (h/Mpc)^3 (the end values outside the table).
    pub fn nbar_at(&self, z: f64) -> f64 {
        match self {
            NzSpec::Constant(v) => *v,
            NzSpec::Table(t) => {
                let i = t.partition_point(|&(zz, _)| zz <= z);
                if i == 0 {
                    return t[0].1;
                }
                if i == t.len() {
                    return t[t.len() - 1].1;
                }
                let ((z0, n0), (z1, n1)) = (t[i - 1], t[i]);
                n0 + (n1 - n0) * (z - z0) / (z1 - z0)
            }
        }
    }

    fn validate(&self, z_min: f64, z_max: f64) -> Result<f64> {
        match self {
            NzSpec::Constant(v) => {
                if !(v.is_finite() && *v > 0.0) {
                    return Err(Error::input(format!("mock nbar = {v} must be positive")));
                }
                Ok(*v)
            }
            NzSpec::Table(t) => {
                if t.len() < 2 {
                    return Err(Error::input("mock nbar table: at least two (z, nbar) rows"));
                }
                for (r, &(z, nb)) in t.iter().enumerate() {
                    if !(z.is_finite() && nb.is_finite() && nb >= 0.0) {
                        return Err(Error::input(format!(
                            "mock nbar table row {r}: (z, nbar) = ({z}, {nb}) must be finite, nbar >= 0"
                        )));
                    }
                    if r > 0 && z <= t[r - 1].0 {
                        return Err(Error::input(format!(
                            "mock nbar table row {r}: z = {z} is not above the previous row's z"
                        )));
                    }
                }
                if t[0].0 > z_min || t[t.len() - 1].0 < z_max {
                    return Err(Error::input(format!(
                        "mock nbar table covers z in [{}, {}] but the survey needs [{z_min}, {z_max}]",
                        t[0].0,
                        t[t.len() - 1].0
                    )));
                }
                let max = t.iter().fold(0.0f64, |m, r| m.max(r.1));
                if max <= 0.0 {
                    return Err(Error::input("mock nbar table: all nbar values are zero"));
                }
                Ok(max)
            }
        }
    }
}

/// Survey mock settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SurveyMockConfig {
    pub footprint: Footprint,
    pub z_min: f64,
    pub z_max: f64,
    pub nbar: NzSpec,
    pub bias: f64,
    /// Grid cells per side of the cube enclosing the survey (even).
    pub n_grid: usize,
    pub seed: u64,
    /// Randoms per expected galaxy.
    pub random_factor: f64,
}

/// Sky catalogue: RA, Dec in degrees, redshift, weight (1 for mocks).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SkyCatalogue {
    pub ra: Vec<f64>,
    pub dec: Vec<f64>,
    pub z: Vec<f64>,
    pub w: Vec<f64>,
}

/// Provenance for output headers: settings, true cosmology, and field diagnostics.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MockInfo {
    pub tool_version: String,
    /// "lognormal_box" or "lognormal_survey".
    pub kind: String,
    pub method: String,
    pub seed: u64,
    pub n_grid: usize,
    /// Side of the periodic grid box in Mpc/h.
    pub box_size: f64,
    /// Position of the grid corner relative to the observer (Mpc/h); zero for boxes.
    pub box_origin: [f64; 3],
    pub bias: f64,
    /// The full configuration as given.
    pub config: serde_json::Value,
    pub true_cosmology: Option<Cosmology>,
    /// Standard deviation of the Gaussian field per cell.
    pub sigma_g: f64,
    /// Negative P_G entries on the half-complex grid that were set to zero.
    pub n_negative_pg: usize,
    pub n_modes_half_grid: usize,
    /// Smallest target correlation b^2 xi on the grid.
    pub min_xi_g: f64,
    pub n_galaxies: usize,
    pub n_randoms: usize,
    /// Expected galaxy count (nbar V for a box; integral of nbar over the survey volume).
    pub expected_galaxies: f64,
}

impl MockInfo {
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::to_value(self).unwrap_or(serde_json::Value::Null)
    }
}

/// Approximate peak memory of a mock on an n^3 grid, in bytes (catalogues not included).
pub fn estimate_memory_bytes(n_grid: usize) -> u64 {
    let n = n_grid as u64;
    let half = n * n * (n / 2 + 1);
    8 * n * n * n + 2 * 16 * half + 8 * half
}

const METHOD: &str = "lognormal (Coles & Jones 1991); P_G from ln(1 + xi_g) on the FFT grid; \
                      Poisson sampling per cell, uniform within the cell";

fn check_grid(n_grid: usize, bias: f64) -> Result<()> {
    if !(8..=4096).contains(&n_grid) || !n_grid.is_multiple_of(2) {
        return Err(Error::input(format!(
            "mock n_grid = {n_grid} must be even and in [8, 4096]"
        )));
    }
    if !(bias.is_finite() && bias > 0.0) {
        return Err(Error::input(format!("mock bias = {bias} must be positive")));
    }
    Ok(())
}

/// Lognormal galaxies in a periodic box.
pub fn lognormal_box(
    power: &(dyn Fn(f64) -> f64 + Sync),
    cfg: &BoxMockConfig,
) -> Result<BoxCatalogue> {
    lognormal_box_with_info(power, cfg).map(|(c, _)| c)
}

/// [`lognormal_box`] plus its provenance record.
pub fn lognormal_box_with_info(
    power: &(dyn Fn(f64) -> f64 + Sync),
    cfg: &BoxMockConfig,
) -> Result<(BoxCatalogue, MockInfo)> {
    check_grid(cfg.n_grid, cfg.bias)?;
    if !(cfg.box_size.is_finite() && cfg.box_size > 0.0) {
        return Err(Error::input(format!(
            "mock box_size = {} must be positive",
            cfg.box_size
        )));
    }
    if !(cfg.nbar.is_finite() && cfg.nbar > 0.0) {
        return Err(Error::input(format!(
            "mock nbar = {} must be positive",
            cfg.nbar
        )));
    }
    let n = cfg.n_grid;
    let (rho, stats) = field::lognormal_density(power, cfg.bias, n, cfg.box_size, cfg.seed)?;
    let cell = cfg.box_size / n as f64;
    let mean_per_cell = cfg.nbar * cell.powi(3);
    let l = cfg.box_size;
    let planes: Vec<Result<[Vec<f64>; 3]>> = rho
        .par_chunks(n * n)
        .enumerate()
        .map(|(i, plane)| {
            let mut rng = stream_rng(cfg.seed, PURPOSE_GALAXIES, i as u64);
            let mut out: [Vec<f64>; 3] = Default::default();
            for j in 0..n {
                for k in 0..n {
                    let count = poisson(&mut rng, mean_per_cell * plane[j * n + k])?;
                    for _ in 0..count {
                        let u: [f64; 3] = [rng.gen(), rng.gen(), rng.gen()];
                        for (a, idx) in [i, j, k].into_iter().enumerate() {
                            let mut x = (idx as f64 + u[a]) * cell;
                            if x >= l {
                                x -= l;
                            }
                            out[a].push(x);
                        }
                    }
                }
            }
            Ok(out)
        })
        .collect();
    let mut cat = BoxCatalogue::default();
    for p in planes {
        let [x, y, z] = p?;
        cat.x.extend(x);
        cat.y.extend(y);
        cat.z.extend(z);
    }
    let info = MockInfo {
        tool_version: crate::VERSION.to_string(),
        kind: "lognormal_box".into(),
        method: METHOD.into(),
        seed: cfg.seed,
        n_grid: n,
        box_size: cfg.box_size,
        box_origin: [0.0; 3],
        bias: cfg.bias,
        config: serde_json::to_value(cfg).unwrap_or(serde_json::Value::Null),
        true_cosmology: None,
        sigma_g: stats.sigma_g,
        n_negative_pg: stats.n_negative_pg,
        n_modes_half_grid: stats.n_modes,
        min_xi_g: stats.min_xi_g,
        n_galaxies: cat.x.len(),
        n_randoms: 0,
        expected_galaxies: cfg.nbar * cfg.box_size.powi(3),
    };
    Ok((cat, info))
}

/// One Poisson draw (zero for a zero mean).
#[inline]
fn poisson(rng: &mut ChaCha12Rng, mean: f64) -> Result<u64> {
    if mean <= 0.0 {
        return Ok(0);
    }
    let d = Poisson::new(mean).map_err(|e| Error::other(format!("Poisson mean {mean}: {e}")))?;
    Ok(d.sample(rng) as u64)
}

/// Lognormal galaxies and randoms in a survey footprint and redshift range.
///
/// The observer sits at the origin of a cubic grid box that encloses the survey shell between
/// chi(z_min) and chi(z_max) (Mpc/h, true cosmology). A galaxy at grid position r is given
/// chi = |r|, its direction as RA/Dec, and z from chi through the true cosmology's radial
/// distance. The galaxy density is nbar(z) (1 + delta) per unit comoving volume (Poisson
/// sampling at nbar_max, then thinning by nbar(z)/nbar_max at each galaxy's own position, which
/// is exact for partial cells at the survey edges).
///
/// Curved true cosmologies: the field lives on a flat grid and is mapped to curved space by
/// keeping chi and the angles, so transverse separations in the true curved space are
/// D_M(chi)/chi times the grid ones: a stretch of D_M/chi - 1 ~ Omega_k chi^2 / (6 (c/H0)^2)
/// (0.2% at chi = 1500 Mpc/h for Omega_k = 0.05). Radial separations are exact. Analyses that
/// recover the BAO scale from curved-truth mocks must allow for (or correct) this.
///
/// Randoms are uniform on the footprint (rejection from its bounding cap) with radial density
/// proportional to chi^2 nbar(z(chi)); their number is `random_factor` times the expected
/// galaxy count.
pub fn lognormal_survey(
    power: &(dyn Fn(f64) -> f64 + Sync),
    true_cosmo: &Cosmology,
    cfg: &SurveyMockConfig,
) -> Result<(SkyCatalogue, SkyCatalogue)> {
    lognormal_survey_with_info(power, true_cosmo, cfg).map(|(g, r, _)| (g, r))
}

/// Survey geometry shared by the galaxy and random samplers.
struct Survey {
    region: Region,
    table: DistanceTable,
    h: f64,
    z_min: f64,
    z_max: f64,
    chi_min: f64,
    chi_max: f64,
}

impl Survey {
    /// Redshift of a comoving position (Mpc/h) if it lies in the survey, else None.
    #[inline]
    fn redshift_if_inside(&self, p: &V3) -> Option<f64> {
        let chi = dot(p, p).sqrt();
        if chi < self.chi_min * (1.0 - 1e-9) || chi > self.chi_max * (1.0 + 1e-9) {
            return None;
        }
        let u = [p[0] / chi, p[1] / chi, p[2] / chi];
        if !self.region.contains(&u) {
            return None;
        }
        let z = self.table.redshift_at(chi / self.h)?;
        (self.z_min..=self.z_max).contains(&z).then_some(z)
    }
}

/// [`lognormal_survey`] plus its provenance record.
pub fn lognormal_survey_with_info(
    power: &(dyn Fn(f64) -> f64 + Sync),
    true_cosmo: &Cosmology,
    cfg: &SurveyMockConfig,
) -> Result<(SkyCatalogue, SkyCatalogue, MockInfo)> {
    check_grid(cfg.n_grid, cfg.bias)?;
    if !(cfg.z_min.is_finite() && cfg.z_max.is_finite() && cfg.z_min >= 0.0)
        || cfg.z_max <= cfg.z_min
        || cfg.z_max > 20.0
    {
        return Err(Error::input(format!(
            "mock redshift range [{}, {}] must satisfy 0 <= z_min < z_max <= 20",
            cfg.z_min, cfg.z_max
        )));
    }
    if !(cfg.random_factor.is_finite() && cfg.random_factor >= 0.0) {
        return Err(Error::input(format!(
            "mock random_factor = {} must be >= 0",
            cfg.random_factor
        )));
    }
    true_cosmo.validate()?;
    let nbar_max = cfg.nbar.validate(cfg.z_min, cfg.z_max)?;
    let region = Region::new(&cfg.footprint)?;
    let h = true_cosmo.h;
    let table = DistanceTable::new(true_cosmo, cfg.z_max * 1.05 + 0.05)?;
    let chi_of = |z: f64| -> Result<f64> {
        table
            .comoving_radial(z)
            .map(|d| d * h)
            .ok_or_else(|| Error::other(format!("distance table does not reach z = {z}")))
    };
    let survey = Survey {
        chi_min: chi_of(cfg.z_min)?,
        chi_max: chi_of(cfg.z_max)?,
        region,
        table,
        h,
        z_min: cfg.z_min,
        z_max: cfg.z_max,
    };

    // Bounding box of the shell segment: per axis, extreme direction cosines over the
    // bounding cap, times the extreme radii.
    let n = cfg.n_grid;
    let (c, rb) = (survey.region.center, survey.region.bound_radius);
    let mut lo = [0.0; 3];
    let mut hi = [0.0; 3];
    for a in 0..3 {
        let theta = c[a].clamp(-1.0, 1.0).acos();
        let cmax = (theta - rb).max(0.0).cos();
        let cmin = (theta + rb).min(std::f64::consts::PI).cos();
        hi[a] = if cmax > 0.0 {
            survey.chi_max * cmax
        } else {
            survey.chi_min * cmax
        };
        lo[a] = if cmin < 0.0 {
            survey.chi_max * cmin
        } else {
            survey.chi_min * cmin
        };
    }
    let extent = (0..3).map(|a| hi[a] - lo[a]).fold(0.0, f64::max);
    // Pad by one cell's worth and 2% so no survey point sits on the periodic seam.
    let box_size = extent * (1.0 + 2.0 / n as f64) * 1.02 + 1.0;
    let origin: [f64; 3] = std::array::from_fn(|a| 0.5 * (lo[a] + hi[a]) - 0.5 * box_size);
    let cell = box_size / n as f64;

    let (rho, stats) = field::lognormal_density(power, cfg.bias, n, box_size, cfg.seed)?;
    let mean_per_cell = nbar_max * cell.powi(3);
    let half_diag = 0.5 * 3f64.sqrt() * cell;
    let cos_bound_pad = |r: f64| -> f64 {
        // Directions of points within half_diag of a cell centre at distance r deviate by at
        // most asin(half_diag / r) from the centre's direction.
        if r <= half_diag {
            -1.0
        } else {
            (rb + (half_diag / r).asin())
                .min(std::f64::consts::PI)
                .cos()
        }
    };
    let planes: Vec<Result<[Vec<f64>; 3]>> = rho
        .par_chunks(n * n)
        .enumerate()
        .map(|(i, plane)| {
            let mut rng = stream_rng(cfg.seed, PURPOSE_GALAXIES, i as u64);
            let mut out: [Vec<f64>; 3] = Default::default();
            for j in 0..n {
                for k in 0..n {
                    let idx = [i, j, k];
                    let centre: V3 =
                        std::array::from_fn(|a| origin[a] + (idx[a] as f64 + 0.5) * cell);
                    let rc = dot(&centre, &centre).sqrt();
                    if rc + half_diag < survey.chi_min || rc - half_diag > survey.chi_max {
                        continue;
                    }
                    if rc > half_diag && dot(&centre, &c) < rc * cos_bound_pad(rc) {
                        continue;
                    }
                    let count = poisson(&mut rng, mean_per_cell * plane[j * n + k])?;
                    for _ in 0..count {
                        let u: [f64; 4] = [rng.gen(), rng.gen(), rng.gen(), rng.gen()];
                        let p: V3 =
                            std::array::from_fn(|a| origin[a] + (idx[a] as f64 + u[a]) * cell);
                        if let Some(z) = survey.redshift_if_inside(&p) {
                            if u[3] * nbar_max < cfg.nbar.nbar_at(z) {
                                let (ra, dec) = ra_dec(&p);
                                out[0].push(ra);
                                out[1].push(dec);
                                out[2].push(z);
                            }
                        }
                    }
                }
            }
            Ok(out)
        })
        .collect();
    drop(rho);
    let mut gal = SkyCatalogue::default();
    for p in planes {
        let [ra, dec, z] = p?;
        gal.ra.extend(ra);
        gal.dec.extend(dec);
        gal.z.extend(z);
    }
    gal.w = vec![1.0; gal.ra.len()];

    // Radial distribution: cumulative of chi^2 nbar(z(chi)) on a fine chi grid.
    const NR: usize = 8192;
    let dchi = (survey.chi_max - survey.chi_min) / NR as f64;
    let dens: Vec<f64> = (0..=NR)
        .map(|q| {
            let chi = survey.chi_min + q as f64 * dchi;
            let z = survey
                .table
                .redshift_at(chi / h)
                .unwrap_or(cfg.z_max)
                .clamp(cfg.z_min, cfg.z_max);
            chi * chi * cfg.nbar.nbar_at(z)
        })
        .collect();
    let mut cdf = vec![0.0; NR + 1];
    for q in 1..=NR {
        cdf[q] = cdf[q - 1] + 0.5 * (dens[q - 1] + dens[q]) * dchi;
    }
    let expected = survey.region.solid_angle() * cdf[NR];
    let n_rand_f = (cfg.random_factor * expected).round();
    if n_rand_f > 4.0e9 {
        return Err(Error::resource(format!(
            "mock randoms: {n_rand_f:.3e} requested (random_factor {} x {expected:.3e} expected \
             galaxies) is beyond the supported 4e9",
            cfg.random_factor
        )));
    }
    let n_rand = n_rand_f as usize;
    if n_rand > 0 && survey.region.fill_fraction() < 1e-6 {
        return Err(Error::input(
            "mock footprint is too small to sample randoms",
        ));
    }
    let total = cdf[NR];
    let chunks: Vec<[Vec<f64>; 3]> = (0..n_rand.div_ceil(RANDOM_CHUNK))
        .into_par_iter()
        .map(|ci| {
            let mut rng = stream_rng(cfg.seed, PURPOSE_RANDOMS, ci as u64);
            let m = RANDOM_CHUNK.min(n_rand - ci * RANDOM_CHUNK);
            let mut out: [Vec<f64>; 3] = std::array::from_fn(|_| Vec::with_capacity(m));
            while out[0].len() < m {
                let p = survey.region.bounding_cap_point(rng.gen(), rng.gen());
                if !survey.region.contains(&p) {
                    continue;
                }
                let t = rng.gen::<f64>() * total;
                let q = cdf.partition_point(|&v| v <= t).clamp(1, NR);
                let seg = cdf[q] - cdf[q - 1];
                let frac = if seg > 0.0 {
                    (t - cdf[q - 1]) / seg
                } else {
                    0.5
                };
                let chi = survey.chi_min + (q as f64 - 1.0 + frac) * dchi;
                let z = survey
                    .table
                    .redshift_at(chi / h)
                    .unwrap_or(cfg.z_max)
                    .clamp(cfg.z_min, cfg.z_max);
                let (ra, dec) = ra_dec(&p);
                out[0].push(ra);
                out[1].push(dec);
                out[2].push(z);
            }
            out
        })
        .collect();
    let mut ran = SkyCatalogue::default();
    for [ra, dec, z] in chunks {
        ran.ra.extend(ra);
        ran.dec.extend(dec);
        ran.z.extend(z);
    }
    ran.w = vec![1.0; ran.ra.len()];

    let info = MockInfo {
        tool_version: crate::VERSION.to_string(),
        kind: "lognormal_survey".into(),
        method: METHOD.into(),
        seed: cfg.seed,
        n_grid: n,
        box_size,
        box_origin: origin,
        bias: cfg.bias,
        config: serde_json::to_value(cfg).unwrap_or(serde_json::Value::Null),
        true_cosmology: Some(*true_cosmo),
        sigma_g: stats.sigma_g,
        n_negative_pg: stats.n_negative_pg,
        n_modes_half_grid: stats.n_modes,
        min_xi_g: stats.min_xi_g,
        n_galaxies: gal.ra.len(),
        n_randoms: ran.ra.len(),
        expected_galaxies: expected,
    };
    Ok((gal, ran, info))
}

#[cfg(test)]
mod tests;
