//! The TOML run plan: every field has a default except `inputs.data`; unknown keys are errors
//! (with the line and column toml reports), so a misspelt option never silently does nothing.
//!
//! Relative paths in a plan are relative to the plan file's folder, so a plan and its
//! catalogues can move together.
use crate::app::count::{parse_edges, CountOptions, GeometryChoice, RegionChoice};
use crate::catalog::{ColumnMap, RowFilter};
use crate::pairs::Binning;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// A whole run.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Plan {
    /// Output folder (default "ringscale-out").
    pub output: PathBuf,
    pub inputs: Inputs,
    pub geometry: GeometryPlan,
    pub binning: BinningPlan,
    pub estimator: EstimatorPlan,
    pub covariance: CovariancePlan,
    pub fit: FitPlan,
    pub curvature: CurvaturePlan,
    pub sweep: SweepPlan,
    pub run: RunPlan,
}

impl Default for Plan {
    fn default() -> Self {
        Plan {
            output: PathBuf::from("ringscale-out"),
            inputs: Inputs::default(),
            geometry: GeometryPlan::default(),
            binning: BinningPlan::default(),
            estimator: EstimatorPlan::default(),
            covariance: CovariancePlan::default(),
            fit: FitPlan::default(),
            curvature: CurvaturePlan::default(),
            sweep: SweepPlan::default(),
            run: RunPlan::default(),
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Inputs {
    /// Galaxy catalogue (FITS or CSV). Required.
    pub data: PathBuf,
    /// Random catalogue; needed for surveys (Landy-Szalay), optional for periodic boxes.
    pub randoms: Option<PathBuf>,
    /// Mock galaxy catalogues sharing `randoms`; each is counted and estimated like the data.
    pub mocks: Vec<PathBuf>,
    pub columns: Columns,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Columns {
    pub ra: String,
    pub dec: String,
    pub z: String,
    /// Cartesian position columns (geometry.kind = "cartesian").
    pub x: String,
    pub y: String,
    pub zpos: String,
    /// Weight columns multiplied together (default: unit weights).
    pub weights: Vec<String>,
    /// Integer jackknife-region column (default: none).
    pub region: Option<String>,
    /// Redshift cuts (rows removed are counted and reported).
    pub z_min: Option<f64>,
    pub z_max: Option<f64>,
}

impl Default for Columns {
    fn default() -> Self {
        Columns {
            ra: "RA".into(),
            dec: "DEC".into(),
            z: "Z".into(),
            x: "X".into(),
            y: "Y".into(),
            zpos: "Z".into(),
            weights: vec![],
            region: None,
            z_min: None,
            z_max: None,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct GeometryPlan {
    /// "survey" (RA, Dec, z with a fiducial cosmology) or "cartesian" (X, Y, Z in Mpc/h).
    pub kind: String,
    /// Fiducial cosmology: preset name or cosmology TOML file (default "planck18").
    pub cosmology: String,
    /// Periodic box side in Mpc/h for cartesian input (default: not periodic).
    pub box_size: Option<f64>,
}

impl Default for GeometryPlan {
    fn default() -> Self {
        GeometryPlan {
            kind: "survey".into(),
            cosmology: "planck18".into(),
            box_size: None,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct BinningPlan {
    /// Separation bins "LO:HI:N" in Mpc/h (default "0:200:40").
    pub edges: String,
    /// Logarithmic spacing of `edges`.
    pub log: bool,
    /// Explicit edges in Mpc/h; when non-empty they replace `edges`.
    pub edges_list: Vec<f64>,
    /// mu bins on [0, 1] (default 1).
    pub mu_bins: usize,
}

impl Default for BinningPlan {
    fn default() -> Self {
        BinningPlan {
            edges: "0:200:40".into(),
            log: false,
            edges_list: vec![],
            mu_bins: 1,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct EstimatorPlan {
    /// Split the randoms into M disjoint subsets for RR (default 1).
    pub rr_splits: usize,
    /// K jackknife regions by k-means on the sky (slabs for cartesian); 0 = none, unless
    /// `inputs.columns.region` names a region column.
    pub regions: usize,
    pub region_seed: u64,
    /// Merge groups of this many adjacent s bins before estimating (default 1).
    pub rebin: usize,
}

impl Default for EstimatorPlan {
    fn default() -> Self {
        EstimatorPlan {
            rr_splits: 1,
            regions: 0,
            region_seed: 1,
            rebin: 1,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct CovariancePlan {
    /// "auto" (mocks when listed, else jackknife when regions exist, else none), "jackknife",
    /// "mocks" or "none".
    pub source: String,
}

impl Default for CovariancePlan {
    fn default() -> Self {
        CovariancePlan {
            source: "auto".into(),
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct FitPlan {
    /// Run the fit stage (needs a covariance).
    pub enabled: bool,
    /// Fit range [LO, HI] in Mpc/h (default [50, 150]).
    pub range: [f64; 2],
    /// alpha grid [LO, HI, STEP] (default [0.8, 1.2, 0.001]).
    pub alpha_grid: [f64; 3],
    /// BAO damping Sigma_nl in Mpc/h (default 8).
    pub sigma_nl: f64,
    /// Template cosmology (default: the counting fiducial).
    pub cosmology: Option<String>,
    /// Linear power table (k [h/Mpc], P [(Mpc/h)^3]) instead of EH98.
    pub power_table: Option<PathBuf>,
    /// Also report D_V in Mpc for this r_d [Mpc].
    pub rd: Option<f64>,
    /// Write PNG/SVG plots (default true).
    pub plots: bool,
}

impl FitPlan {
    /// Fit range and alpha grid as the fit module takes them.
    pub fn isotropic_options(&self) -> crate::fit::IsotropicOptions {
        crate::fit::IsotropicOptions {
            s_min: self.range[0],
            s_max: self.range[1],
            alpha_min: self.alpha_grid[0],
            alpha_max: self.alpha_grid[1],
            alpha_step: self.alpha_grid[2],
        }
    }
    /// Template settings: Sigma_nl from the plan, the rest at their defaults.
    pub fn template_options(&self) -> crate::fit::TemplateOptions {
        crate::fit::TemplateOptions {
            sigma_nl: self.sigma_nl,
            ..Default::default()
        }
    }
}

impl Default for FitPlan {
    fn default() -> Self {
        FitPlan {
            enabled: true,
            range: [50.0, 150.0],
            alpha_grid: [0.8, 1.2, 0.001],
            sigma_nl: 8.0,
            cosmology: None,
            power_table: None,
            rd: None,
            plots: true,
        }
    }
}

/// Curvature inference after the fit: what the run's D_V/r_d (plus any extra measurements)
/// says about Omega_k; the same computation as `ringscale curvature`.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct CurvaturePlan {
    /// Run the curvature stage (default false; needs the fit).
    pub enabled: bool,
    /// Priors TOML (default: the Planck 2018 r_d prior with flat Omega_k, Omega_m, h).
    pub priors: Option<PathBuf>,
    /// More BAO measurements: fit.json files or tables (default none).
    pub extra_bao: Vec<PathBuf>,
    /// Sampler seed (default 1, as `ringscale curvature`).
    pub seed: u64,
}

impl Default for CurvaturePlan {
    fn default() -> Self {
        CurvaturePlan {
            enabled: false,
            priors: None,
            extra_bao: vec![],
            seed: crate::inference::SamplerSettings::default().seed,
        }
    }
}

/// Fiducial sweep: the measurement repeated under fiducials that differ from
/// `geometry.cosmology` only in Omega_k, to show that D_V/r_d does not depend on the fiducial;
/// the same computation as `ringscale sweep --omega-k-list`. Slow (one count per fiducial).
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct SweepPlan {
    /// Run the sweep stage (default false; needs survey geometry and randoms).
    pub enabled: bool,
    /// Omega_k of the fiducials (default [-0.1, -0.05, 0.0, 0.05, 0.1]).
    pub omega_k: Vec<f64>,
    /// Also measure each curved fiducial with the radial-only mapping (default false).
    pub naive: bool,
}

impl Default for SweepPlan {
    fn default() -> Self {
        SweepPlan {
            enabled: false,
            omega_k: vec![-0.1, -0.05, 0.0, 0.05, 0.1],
            naive: false,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct RunPlan {
    /// Checkpoint units per pairing (default 8): each pairing's work is split into this many
    /// deterministic parts, each checkpointed on its own, so a killed run loses at most one
    /// part. Job-array shards take whole units, so it also caps useful array sizes.
    pub units: usize,
    /// Threads (the --threads flag and SLURM_CPUS_PER_TASK take precedence in that order).
    pub threads: Option<usize>,
    /// Refuse to count when the memory estimate exceeds this many MiB.
    pub max_memory_mib: Option<f64>,
}

impl Default for RunPlan {
    fn default() -> Self {
        RunPlan {
            units: 8,
            threads: None,
            max_memory_mib: None,
        }
    }
}

/// Parse a plan from TOML text. `source` names the file in errors.
pub fn parse_plan(text: &str, source: &str) -> Result<Plan> {
    let plan: Plan =
        toml::from_str(text).map_err(|e| Error::input(format!("plan {source}: {e}")))?;
    if plan.inputs.data.as_os_str().is_empty() {
        return Err(Error::input(format!(
            "plan {source}: [inputs] data = \"...\" (the galaxy catalogue) is required"
        )));
    }
    Ok(plan)
}

/// Read a plan file and make its relative paths relative to the plan's folder.
pub fn load_plan(path: &Path) -> Result<Plan> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, "cannot read plan", e))?;
    let mut plan = parse_plan(&text, &path.display().to_string())?;
    // The plan's folder, canonical, so every process of a job array resolves the same paths
    // whatever its working directory, and their checkpoint keys agree.
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let base = std::fs::canonicalize(dir)
        .map_err(|e| Error::io(dir, "cannot resolve the plan's folder", e))?;
    plan.resolve_paths(&base);
    plan.validate()?;
    Ok(plan)
}

impl Plan {
    fn resolve_paths(&mut self, base: &Path) {
        let fix = |p: &mut PathBuf| {
            if p.is_relative() {
                *p = base.join(&*p);
            }
        };
        fix(&mut self.output);
        fix(&mut self.inputs.data);
        if let Some(r) = &mut self.inputs.randoms {
            fix(r);
        }
        self.inputs.mocks.iter_mut().for_each(fix);
        if let Some(p) = &mut self.fit.power_table {
            fix(p);
        }
        if let Some(p) = &mut self.curvature.priors {
            fix(p);
        }
        self.curvature.extra_bao.iter_mut().for_each(fix);
        // A cosmology is a preset name unless a file of that name sits beside the plan.
        for c in std::iter::once(&mut self.geometry.cosmology).chain(self.fit.cosmology.as_mut()) {
            let cand = base.join(&*c);
            if Path::new(c).is_relative() && cand.is_file() {
                *c = cand.display().to_string();
            }
        }
    }

    /// Checks that need no files: option values and combinations.
    pub fn validate(&self) -> Result<()> {
        let bad = |m: String| Err(Error::input(format!("plan: {m}")));
        if !matches!(self.geometry.kind.as_str(), "survey" | "cartesian") {
            return bad(format!(
                "[geometry] kind = \"{}\": expected \"survey\" or \"cartesian\"",
                self.geometry.kind
            ));
        }
        if self.geometry.box_size.is_some() && self.geometry.kind != "cartesian" {
            return bad("[geometry] box_size needs kind = \"cartesian\"".into());
        }
        if !matches!(
            self.covariance.source.as_str(),
            "auto" | "jackknife" | "mocks" | "none"
        ) {
            return bad(format!(
                "[covariance] source = \"{}\": expected auto, jackknife, mocks or none",
                self.covariance.source
            ));
        }
        if self.covariance.source == "mocks" && self.inputs.mocks.len() < 2 {
            return bad("[covariance] source = \"mocks\" needs at least 2 [inputs] mocks".into());
        }
        if self.estimator.regions > 0 && self.inputs.columns.region.is_some() {
            return bad(
                "use either [estimator] regions = K or [inputs.columns] region, not both".into(),
            );
        }
        if self.estimator.rr_splits == 0 {
            return bad("[estimator] rr_splits must be >= 1".into());
        }
        if self.estimator.rebin == 0 {
            return bad("[estimator] rebin must be >= 1".into());
        }
        if self.run.units == 0 || self.run.units > 4096 {
            return bad("[run] units must be in 1..=4096".into());
        }
        if !self.inputs.mocks.is_empty() && self.inputs.randoms.is_none() {
            return bad("[inputs] mocks need [inputs] randoms".into());
        }
        let [lo, hi] = self.fit.range;
        if lo.is_nan() || hi.is_nan() || lo >= hi {
            return bad(format!("[fit] range [{lo}, {hi}]: need LO < HI"));
        }
        let [a, b, st] = self.fit.alpha_grid;
        if a.is_nan() || b.is_nan() || st.is_nan() || a >= b || st <= 0.0 {
            return bad(format!(
                "[fit] alpha_grid [{a}, {b}, {st}]: need LO < HI and STEP > 0"
            ));
        }
        if self.curvature.enabled && !self.fit.enabled {
            return bad("[curvature] enabled = true needs [fit] enabled = true".into());
        }
        if self.sweep.enabled {
            if self.geometry.kind != "survey" {
                return bad(
                    "[sweep] enabled = true needs [geometry] kind = \"survey\" (RA, Dec, z)".into(),
                );
            }
            if self.inputs.randoms.is_none() {
                return bad("[sweep] enabled = true needs [inputs] randoms".into());
            }
            if self.sweep.omega_k.is_empty() {
                return bad("[sweep] omega_k: give at least one value".into());
            }
            if let Some(v) = self.sweep.omega_k.iter().find(|v| !v.is_finite()) {
                return bad(format!("[sweep] omega_k: value {v} is not finite"));
            }
        }
        self.binning()?;
        Ok(())
    }

    pub fn binning(&self) -> Result<Binning> {
        let edges = if self.binning.edges_list.is_empty() {
            parse_edges(&self.binning.edges, self.binning.log)?
        } else {
            self.binning.edges_list.clone()
        };
        Binning::new(edges, self.binning.mu_bins)
    }

    pub fn column_map(&self) -> ColumnMap {
        let c = &self.inputs.columns;
        if self.geometry.kind == "cartesian" {
            ColumnMap::cartesian(&c.x, &c.y, &c.zpos, c.weights.clone(), c.region.clone())
        } else {
            ColumnMap::sky(&c.ra, &c.dec, &c.z, c.weights.clone(), c.region.clone())
        }
    }

    /// The count options for one galaxy catalogue (the data or a mock).
    pub fn count_options(&self, data: &Path, threads: usize) -> Result<CountOptions> {
        let geometry = if self.geometry.kind == "cartesian" {
            GeometryChoice::Cartesian {
                box_size: self.geometry.box_size,
            }
        } else {
            GeometryChoice::Survey {
                cosmology: self.geometry.cosmology.clone(),
            }
        };
        let regions = match (self.estimator.regions, &self.inputs.columns.region) {
            (0, None) => RegionChoice::None,
            (0, Some(_)) => RegionChoice::Column,
            (k, _) => RegionChoice::Assign {
                k,
                seed: self.estimator.region_seed,
            },
        };
        Ok(CountOptions {
            data: data.to_path_buf(),
            randoms: self.inputs.randoms.clone(),
            geometry,
            columns: self.column_map(),
            filter: RowFilter {
                z_min: self.inputs.columns.z_min,
                z_max: self.inputs.columns.z_max,
            },
            binning: self.binning()?,
            rr_splits: self.estimator.rr_splits,
            regions,
            threads,
            shard: (0, 1),
            out: self.output.join("counts"),
            max_memory: self.run.max_memory_mib.map(|m| (m * 1048576.0) as u64),
            skip_rr: false,
        })
    }

    /// The covariance source after resolving "auto".
    pub fn covariance_source(&self) -> &str {
        match self.covariance.source.as_str() {
            "auto" if self.inputs.mocks.len() >= 2 => "mocks",
            "auto" => "jackknife",
            s => s,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_fill_everything_but_data() {
        let p = parse_plan("[inputs]\ndata = \"g.csv\"\n", "t").unwrap();
        assert_eq!(p.binning.edges, "0:200:40");
        assert_eq!(p.run.units, 8);
        assert_eq!(p.fit.range, [50.0, 150.0]);
        assert!(!p.curvature.enabled);
        assert_eq!(p.curvature.seed, 1);
        assert!(!p.sweep.enabled && !p.sweep.naive);
        assert_eq!(p.sweep.omega_k, [-0.1, -0.05, 0.0, 0.05, 0.1]);
        assert!(parse_plan("", "t").is_err());
    }

    #[test]
    fn unknown_key_names_key_and_line() {
        let e = parse_plan(
            "[inputs]\ndata = \"g.csv\"\n\n[binning]\nmu_binz = 3\n",
            "t",
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("mu_binz"), "{e}");
        assert!(e.contains("line 5"), "{e}");
    }

    #[test]
    fn bad_values_are_rejected() {
        for t in [
            "[geometry]\nkind = \"sphere\"",
            "[covariance]\nsource = \"bootstrap\"",
            "[run]\nunits = 0",
            "[fit]\nrange = [150.0, 50.0]",
            "[fit]\nenabled = false\n[curvature]\nenabled = true",
            "[geometry]\nkind = \"cartesian\"\n[sweep]\nenabled = true",
            "[sweep]\nenabled = true\nomega_k = []",
            "[binning]\nedges = \"0:200\"",
        ] {
            let p = parse_plan(&format!("[inputs]\ndata = \"g.csv\"\n{t}\n"), "t").unwrap();
            assert!(p.validate().is_err(), "{t}");
        }
    }
}
