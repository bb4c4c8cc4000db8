//! `ringscale count`: DD, DR and RR pair counts from catalogues into a counts folder.
//!
//! The folder holds, per pairing X in {dd, dr, rr}: `X.ecsv` (one row per bin, for people and
//! astropy), `X_regions.npy` (delete-one jackknife sums, shape [2, regions, bins]: both ends in
//! the region, exactly one end) and `X.state.json` (the exact fixed-point histogram and its
//! normalisation, from which shards merge bit for bit and `ringscale xi` reads). `counts.json`
//! records the provenance shared by all three.
use crate::catalog::{file_sha256, read_catalogue, Catalogue, CatalogueKind, ColumnMap, RowFilter};
use crate::cosmology::{Cosmology, DistanceTable};
use crate::estimator::{auto_norm, cross_norm, split_auto_norm, PairNorm, WeightSums};
use crate::geometry::{take_positions, Curvature};
use crate::pairs::{self, from_fixed, Binning, CountConfig, Metric, PairCounts, PointSet};
use crate::report::{ecsv, json, npy, space};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Where positions come from.
#[derive(Debug, Clone)]
pub enum GeometryChoice {
    /// RA, Dec, z converted with a fiducial cosmology (preset name or TOML file).
    Survey { cosmology: String },
    /// X, Y, Z columns in Mpc/h; a periodic box when `box_size` is given.
    Cartesian { box_size: Option<f64> },
}

/// How jackknife regions are assigned.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RegionChoice {
    None,
    /// Labels from the catalogues' region column.
    Column,
    /// K regions: k-means on the sky for surveys, equal slabs in x for Cartesian catalogues.
    Assign {
        k: usize,
        seed: u64,
    },
}

#[derive(Debug, Clone)]
pub struct CountOptions {
    pub data: PathBuf,
    pub randoms: Option<PathBuf>,
    pub geometry: GeometryChoice,
    pub columns: ColumnMap,
    pub filter: RowFilter,
    pub binning: Binning,
    pub rr_splits: usize,
    pub regions: RegionChoice,
    pub threads: usize,
    pub shard: (usize, usize),
    pub out: PathBuf,
    pub max_memory: Option<u64>,
    /// Skip the RR count (periodic boxes use analytic RR).
    pub skip_rr: bool,
}

/// Provenance shared by the three count files.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CountMeta {
    pub tool: String,
    pub version: String,
    pub geometry: String,
    pub fiducial: Option<Cosmology>,
    pub fiducial_name: Option<String>,
    pub box_size: Option<f64>,
    pub binning: Binning,
    pub n_regions: usize,
    pub region_method: String,
    pub rr_splits: usize,
    pub data: InputInfo,
    pub randoms: Option<InputInfo>,
    /// (k, N) of this partial result; None for a complete one.
    pub shard: Option<(usize, usize)>,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct InputInfo {
    pub path: String,
    pub sha256: String,
    pub rows_in_file: usize,
    pub rows_used: usize,
    pub rows_filtered: usize,
    pub weights: WeightSums,
}

/// One pairing's exact result: the file `X.state.json`.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CountState {
    pub pairing: String,
    pub meta: CountMeta,
    pub norm: PairNorm,
    pub counts: PairCounts,
}

pub struct CountOutcome {
    pub states: Vec<CountState>,
    pub memory_estimate: u64,
    pub messages: Vec<String>,
}

pub(crate) fn input_info(cat: &Catalogue, weights: WeightSums) -> Result<InputInfo> {
    Ok(InputInfo {
        path: cat.path.display().to_string(),
        sha256: file_sha256(&cat.path)?,
        rows_in_file: cat.rows_in_file,
        rows_used: cat.len(),
        rows_filtered: cat.rows_filtered,
        weights,
    })
}

/// Parse "LO:HI:N" into N linear (or logarithmic) bins.
pub fn parse_edges(spec: &str, log: bool) -> Result<Vec<f64>> {
    let parts: Vec<&str> = spec.split(':').collect();
    let bad = || Error::input(format!("edges '{spec}': expected LO:HI:N, e.g. 0:200:40"));
    if parts.len() != 3 {
        return Err(bad());
    }
    let lo: f64 = parts[0].trim().parse().map_err(|_| bad())?;
    let hi: f64 = parts[1].trim().parse().map_err(|_| bad())?;
    let n: usize = parts[2].trim().parse().map_err(|_| bad())?;
    if n == 0 || hi <= lo || !lo.is_finite() || !hi.is_finite() || lo < 0.0 {
        return Err(Error::input(format!(
            "edges '{spec}': need 0 <= LO < HI and N >= 1"
        )));
    }
    if log && lo <= 0.0 {
        return Err(Error::input(format!("log edges '{spec}': LO must be > 0")));
    }
    Ok((0..=n)
        .map(|i| {
            let t = i as f64 / n as f64;
            if i == n {
                hi
            } else if log {
                lo * (hi / lo).powf(t)
            } else {
                // (lo (n - i) + hi i) / n is exact for integer-valued edges like 0:200:40.
                (lo * (n - i) as f64 + hi * i as f64) / n as f64
            }
        })
        .collect())
}

/// Read explicit edges: numbers separated by whitespace, commas or newlines; '#' comments.
pub fn read_edges_file(path: &Path) -> Result<Vec<f64>> {
    let text =
        std::fs::read_to_string(path).map_err(|e| Error::io(path, "cannot read edges file", e))?;
    let mut out = Vec::new();
    for (ln, line) in text.lines().enumerate() {
        let line = line.split('#').next().unwrap_or("");
        for tok in line
            .split(|c: char| c.is_whitespace() || c == ',')
            .filter(|t| !t.is_empty())
        {
            out.push(tok.parse::<f64>().map_err(|_| {
                Error::input(format!(
                    "{}: line {}: '{tok}' is not a number",
                    path.display(),
                    ln + 1
                ))
            })?);
        }
    }
    Ok(out)
}

/// Parse "k/N" (0-based k).
pub fn parse_shard(spec: &str) -> Result<(usize, usize)> {
    let bad = || Error::input(format!("--shard '{spec}': expected k/N with 0 <= k < N"));
    let (a, b) = spec.split_once('/').ok_or_else(bad)?;
    let k: usize = a.trim().parse().map_err(|_| bad())?;
    let n: usize = b.trim().parse().map_err(|_| bad())?;
    if n == 0 || k >= n {
        return Err(bad());
    }
    Ok((k, n))
}

fn point_set(cat: &Catalogue, pos: crate::geometry::Positions, region: Vec<u32>) -> PointSet {
    PointSet {
        x: pos.x,
        y: pos.y,
        z: pos.z,
        w: cat.w.clone(),
        redshift: pos.redshift,
        region,
    }
}

/// Every `m`-th object starting at `start`: the deterministic split-random subsets.
pub(crate) fn subset(p: &PointSet, start: usize, m: usize) -> PointSet {
    pairs::every_mth(p, start, m)
}

/// Slab regions along x for Cartesian catalogues: equal widths over the joint x range.
fn slab_regions(xs: &[&[f64]], k: usize, box_size: Option<f64>) -> Vec<Vec<u32>> {
    let (lo, hi) = match box_size {
        Some(l) => (0.0, l),
        None => xs
            .iter()
            .flat_map(|v| v.iter())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                (a.min(x), b.max(x))
            }),
    };
    let width = (hi - lo).max(f64::MIN_POSITIVE);
    xs.iter()
        .map(|v| {
            v.iter()
                .map(|&x| {
                    (((x - lo) / width * k as f64).floor().max(0.0) as usize).min(k - 1) as u32
                })
                .collect()
        })
        .collect()
}

/// One separately countable piece of a count: checkpointed on its own by `ringscale run`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Piece {
    Dd,
    Dr,
    /// RR of the s-th split-random subset.
    Rr(usize),
}

impl Piece {
    /// Short stable name used in checkpoint keys and logs.
    pub fn name(&self) -> String {
        match self {
            Piece::Dd => "dd".into(),
            Piece::Dr => "dr".into(),
            Piece::Rr(s) => format!("rr{s}"),
        }
    }
}

/// What the count files need besides the pair sums: provenance and the normalisations. Small
/// and serialisable, so a resumed run can assemble the states without re-reading catalogues.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CountHeader {
    pub meta: CountMeta,
    pub norm_dd: PairNorm,
    pub norm_dr: Option<PairNorm>,
    pub norm_rr: Option<PairNorm>,
    pub pieces: Vec<Piece>,
}

/// Catalogues loaded and placed, ready to count piece by piece.
pub struct Prepared {
    pub header: CountHeader,
    pub cfg: CountConfig,
    pub data: PointSet,
    pub randoms: Option<PointSet>,
    pub memory_estimate: u64,
    pub messages: Vec<String>,
}

impl Prepared {
    /// Index the catalogues that `pieces` need, once, for any number of piece counts. The point
    /// sets move into their indexes; only the split-random subsets are copies (built first, so
    /// at the peak the randoms exist twice, never three times).
    pub fn index_for(self, pieces: &[Piece]) -> Result<IndexedCount> {
        let Prepared {
            header,
            cfg,
            data,
            randoms,
            ..
        } = self;
        let m = header.meta.rr_splits;
        let split = m > 1;
        let needs = |f: fn(&Piece) -> bool| pieces.iter().any(f);
        let need_data = needs(|p| matches!(p, Piece::Dd | Piece::Dr));
        let need_randoms =
            needs(|p| matches!(p, Piece::Dr)) || (!split && needs(|p| matches!(p, Piece::Rr(_))));
        let mut which: Vec<usize> = pieces
            .iter()
            .filter_map(|p| match p {
                Piece::Rr(s) if split => Some(*s),
                _ => None,
            })
            .collect();
        which.sort_unstable();
        which.dedup();
        let no_randoms = || Error::input("this count has no randoms");
        let mut subsets: Vec<Option<pairs::Indexed>> = (0..m).map(|_| None).collect();
        if !which.is_empty() {
            let r = randoms.as_ref().ok_or_else(no_randoms)?;
            let built = pairs::index_some_subsets(r, m, &which, "randoms", &cfg)?;
            for (s, ix) in which.iter().zip(built) {
                subsets[*s] = Some(ix);
            }
        }
        let data = if need_data {
            Some(pairs::Indexed::new(data, "catalogue", &cfg)?)
        } else {
            None
        };
        let randoms = match randoms {
            Some(r) if need_randoms => Some(pairs::Indexed::new(r, "catalogue B", &cfg)?),
            Some(_) => None,
            None if need_randoms => return Err(no_randoms()),
            None => None,
        };
        Ok(IndexedCount {
            header,
            cfg,
            data,
            randoms,
            subsets,
        })
    }

    /// Count every piece in order (`count_piece` on each), the split-random subsets in one
    /// parallel job.
    pub fn count_all(self, shard: (usize, usize)) -> Result<(CountHeader, Vec<PairCounts>)> {
        let pieces = self.header.pieces.clone();
        let ic = self.index_for(&pieces)?;
        let split = ic.header.meta.rr_splits > 1;
        let mut rr_split: Vec<Option<PairCounts>> =
            if split && pieces.iter().any(|q| matches!(q, Piece::Rr(_))) {
                ic.count_rr_splits(shard)?.into_iter().map(Some).collect()
            } else {
                Vec::new()
            };
        let mut counts = Vec::with_capacity(pieces.len());
        for &piece in &pieces {
            counts.push(match piece {
                Piece::Rr(s) if split => rr_split
                    .get_mut(s)
                    .and_then(Option::take)
                    .ok_or_else(|| Error::other("split RR: subset count missing"))?,
                _ => ic.count_piece(piece, shard)?,
            });
        }
        Ok((ic.header, counts))
    }
}

/// A count's catalogues indexed once (`Prepared::index_for`): `ringscale run` counts many
/// pieces and parts of pieces from one index.
pub struct IndexedCount {
    pub header: CountHeader,
    cfg: CountConfig,
    data: Option<pairs::Indexed>,
    randoms: Option<pairs::Indexed>,
    /// Split-random subset s (when indexed).
    subsets: Vec<Option<pairs::Indexed>>,
}

impl IndexedCount {
    fn cfg(&self, shard: (usize, usize)) -> CountConfig {
        CountConfig {
            shard,
            ..self.cfg.clone()
        }
    }

    fn not_indexed(what: &str) -> Error {
        Error::other(format!("count: {what} not indexed for this piece"))
    }

    /// Count one piece, restricted to part `shard` = (k, N) of its tasks.
    pub fn count_piece(&self, piece: Piece, shard: (usize, usize)) -> Result<PairCounts> {
        let cfg = self.cfg(shard);
        let data = || self.data.as_ref().ok_or_else(|| Self::not_indexed("data"));
        let randoms = || {
            self.randoms
                .as_ref()
                .ok_or_else(|| Self::not_indexed("randoms"))
        };
        match piece {
            Piece::Dd => pairs::count_auto_indexed(data()?, &cfg),
            Piece::Dr => pairs::count_cross_indexed(data()?, randoms()?, &cfg),
            Piece::Rr(_) if self.header.meta.rr_splits == 1 => {
                pairs::count_auto_indexed(randoms()?, &cfg)
            }
            Piece::Rr(s) => {
                let sub = self.subsets.get(s).and_then(Option::as_ref);
                pairs::count_auto_indexed(sub.ok_or_else(|| Self::not_indexed("subset"))?, &cfg)
            }
        }
    }

    /// Count all split-random RR pieces (`Piece::Rr(0..m)`, m = `rr_splits` > 1) in one
    /// parallel job, restricted to part `shard` of each subset's tasks: result s equals
    /// `count_piece(Piece::Rr(s), shard)` bitwise.
    pub fn count_rr_splits(&self, shard: (usize, usize)) -> Result<Vec<PairCounts>> {
        let subs: Vec<&pairs::Indexed> = self
            .subsets
            .iter()
            .map(|s| s.as_ref().ok_or_else(|| Self::not_indexed("subset")))
            .collect::<Result<_>>()?;
        pairs::count_auto_subsets(&subs, &self.cfg(shard))
    }
}

/// Build the states from a header and each piece's (complete) counts, in `header.pieces` order.
pub fn assemble(header: &CountHeader, counts: Vec<PairCounts>) -> Result<Vec<CountState>> {
    if counts.len() != header.pieces.len() {
        return Err(Error::other("assemble: one count per piece expected"));
    }
    let meta = &header.meta;
    let mut states = Vec::new();
    let mut rr: Option<PairCounts> = None;
    for (piece, c) in header.pieces.iter().zip(counts) {
        match piece {
            Piece::Dd => states.push(CountState {
                pairing: "dd".into(),
                meta: meta.clone(),
                norm: header.norm_dd.clone(),
                counts: c,
            }),
            Piece::Dr => states.push(CountState {
                pairing: "dr".into(),
                meta: meta.clone(),
                norm: header
                    .norm_dr
                    .clone()
                    .ok_or_else(|| Error::other("assemble: no DR normalisation"))?,
                counts: c,
            }),
            Piece::Rr(_) => {
                let acc = rr
                    .get_or_insert_with(|| PairCounts::zeros(meta.binning.clone(), meta.n_regions));
                acc.merge(&c)?;
            }
        }
    }
    if let Some(rr) = rr {
        states.push(CountState {
            pairing: "rr".into(),
            meta: meta.clone(),
            norm: header
                .norm_rr
                .clone()
                .ok_or_else(|| Error::other("assemble: no RR normalisation"))?,
            counts: rr,
        });
    }
    Ok(states)
}

pub fn run(opt: &CountOptions) -> Result<CountOutcome> {
    let p = prepare(opt)?;
    eprintln!(
        "memory estimate: {:.1} MiB ({} galaxies, {} randoms, {} bins, {} regions)",
        p.memory_estimate as f64 / 1048576.0,
        p.data.len(),
        p.randoms.as_ref().map_or(0, |r| r.len()),
        opt.binning.n_bins(),
        p.cfg.n_regions
    );
    ensure_writable(&opt.out)?;
    let pairings = 1 + p.header.norm_dr.is_some() as u64 + p.header.norm_rr.is_some() as u64;
    space::ensure_space(
        &opt.out,
        "the counts folder",
        folder_bytes_estimate(pairings, &opt.binning, p.cfg.n_regions),
    )?;
    let (memory_estimate, messages) = (p.memory_estimate, p.messages.clone());
    let (header, counts) = p.count_all(opt.shard)?;
    Ok(CountOutcome {
        states: assemble(&header, counts)?,
        memory_estimate,
        messages,
    })
}

/// Read the catalogues, place them, assign regions and check the memory estimate: everything a
/// count does before counting.
pub fn prepare(opt: &CountOptions) -> Result<Prepared> {
    let mut messages = Vec::new();
    if opt.rr_splits == 0 {
        return Err(Error::input("--rr-splits must be >= 1"));
    }
    // the readers parse on the current pool: give them the count's threads
    let (mut data, mut randoms) = super::on_threads(opt.threads, || {
        let data = read_catalogue(&opt.data, &opt.columns, &opt.filter)?;
        let randoms = opt
            .randoms
            .as_ref()
            .map(|p| read_catalogue(p, &opt.columns, &opt.filter))
            .transpose()?;
        Ok((data, randoms))
    })?;
    for c in std::iter::once(&data).chain(randoms.as_ref()) {
        if c.rows_filtered > 0 {
            messages.push(format!(
                "{}: {} of {} rows removed by the redshift filter",
                c.path.display(),
                c.rows_filtered,
                c.rows_in_file
            ));
        }
    }
    if let Some(r) = &randoms {
        if r.len() < data.len() {
            messages.push(format!(
                "warning: fewer randoms ({}) than galaxies ({}); the estimator's noise will be dominated by the randoms",
                r.len(),
                data.len()
            ));
        }
    }

    // Fiducial and metric.
    let (table, metric, fid, fid_name, box_size, geometry) = match &opt.geometry {
        GeometryChoice::Survey { cosmology } => {
            let src = Cosmology::from_name_or_file(cosmology)?;
            let zmax = std::iter::once(&data)
                .chain(randoms.as_ref())
                .flat_map(|c| c.redshift().iter())
                .fold(0.0f64, |a, &z| a.max(z));
            let table = DistanceTable::new(&src.params, (zmax * 1.01 + 0.01).min(1100.0))?;
            let metric = match Curvature::of(&src.params) {
                Curvature::Flat => Metric::Euclidean,
                Curvature::Closed { radius } => Metric::Closed { radius },
                Curvature::Open { radius } => Metric::Open { radius },
            };
            (
                Some(table),
                metric,
                Some(src.params),
                Some(src.name),
                None,
                "survey".to_string(),
            )
        }
        GeometryChoice::Cartesian { box_size: Some(l) } => {
            if !(*l > 0.0 && l.is_finite()) {
                return Err(Error::input(format!(
                    "--box {l}: box size must be positive"
                )));
            }
            if opt.binning.s_max() >= 0.5 * l {
                return Err(Error::input(format!(
                    "s_max = {} must be below half the box size ({}) for minimum-image counting",
                    opt.binning.s_max(),
                    0.5 * l
                )));
            }
            (
                None,
                Metric::Periodic { box_size: *l },
                None,
                None,
                Some(*l),
                "periodic box".to_string(),
            )
        }
        GeometryChoice::Cartesian { box_size: None } => (
            None,
            Metric::Euclidean,
            None,
            None,
            None,
            "cartesian".to_string(),
        ),
    };
    if let Some(l) = box_size {
        for c in std::iter::once(&data).chain(randoms.as_ref()) {
            for (k, col) in c.pos.iter().enumerate() {
                if let Some(i) = col.iter().position(|&v| !(0.0..l).contains(&v)) {
                    return Err(Error::input(format!(
                        "{}: row {}, column '{}': coordinate {} is outside the box [0, {l})",
                        c.path.display(),
                        i + 1,
                        opt.columns.position[k],
                        col[i]
                    )));
                }
            }
        }
    }

    // Jackknife regions.
    let (mut reg_d, mut reg_r, n_regions, region_method) = match opt.regions {
        RegionChoice::None => (vec![], vec![], 0, "none".to_string()),
        RegionChoice::Column => {
            let d = data
                .region
                .clone()
                .ok_or_else(|| Error::input("regions from a column need --region-column"))?;
            let r = randoms
                .as_ref()
                .map(|c| c.region.clone().unwrap_or_default())
                .unwrap_or_default();
            let k = d.iter().chain(&r).max().map_or(0, |&m| m as usize + 1);
            (d, r, k, "column".to_string())
        }
        RegionChoice::Assign { k, seed } => {
            if k < 2 {
                return Err(Error::input("--regions: need at least 2 jackknife regions"));
            }
            match &opt.geometry {
                GeometryChoice::Survey { .. } => {
                    // Centres from all objects together so galaxies and randoms share them.
                    let mut ra = data.ra().to_vec();
                    let mut dec = data.dec().to_vec();
                    if let Some(r) = &randoms {
                        ra.extend_from_slice(r.ra());
                        dec.extend_from_slice(r.dec());
                    }
                    let labels = pairs::kmeans_sky_regions(&ra, &dec, k, seed)?;
                    let r = labels[data.len()..].to_vec();
                    let mut d = labels;
                    d.truncate(data.len());
                    (d, r, k, format!("k-means on the sky, seed {seed}"))
                }
                GeometryChoice::Cartesian { box_size } => {
                    let mut xs: Vec<&[f64]> = vec![&data.pos[0]];
                    if let Some(r) = &randoms {
                        xs.push(&r.pos[0]);
                    }
                    let mut v = slab_regions(&xs, k, *box_size);
                    let r = if v.len() > 1 {
                        v.pop().unwrap()
                    } else {
                        vec![]
                    };
                    (v.pop().unwrap(), r, k, "equal slabs in x".to_string())
                }
            }
        }
    };
    if randoms.is_none() {
        reg_r.clear();
    }
    if n_regions == 0 {
        reg_d.clear();
        reg_r.clear();
    }

    if let Some(r) = randoms.as_ref().filter(|_| data.kind == CatalogueKind::Sky) {
        let (frac, n_out, cells) = uncovered_fraction(&data, r);
        if frac > COVERAGE_WARN_FRACTION {
            messages.push(format!(
                "warning: {:.2}% of the galaxies ({n_out} of {}) lie in sky cells ({cells} cells of ~{:.1} deg^2) that hold no randoms: the random footprint does not cover the galaxies ({} vs {})",
                100.0 * frac,
                data.len(),
                41252.96 / cells as f64,
                data.path.display(),
                r.path.display()
            ));
        }
    }
    // the positions take over the catalogues' position columns (no second copy); only the
    // weights, regions and row counts of the catalogues are read after this
    let wd = WeightSums::from_weights(&data.w, &reg_d, n_regions)?;
    let (pd, pr) = super::on_threads(opt.threads, || {
        let pos = take_positions(&mut data, table.as_ref())?;
        let pd = point_set(&data, pos, reg_d);
        let pr = match randoms.as_mut() {
            Some(r) => {
                let pos = take_positions(r, table.as_ref())?;
                Some(point_set(r, pos, reg_r))
            }
            None => None,
        };
        Ok((pd, pr))
    })?;
    let wr = pr
        .as_ref()
        .map(|p| WeightSums::from_weights(&p.w, &p.region, n_regions))
        .transpose()?;
    let extent = max_extent(std::iter::once(&pd).chain(pr.as_ref()));
    if box_size.is_none() && opt.binning.s_max() > extent {
        messages.push(format!(
            "warning: s_max = {} Mpc/h exceeds the largest separation the catalogues can have ({extent:.1} Mpc/h, the diagonal of their bounding box); the bins above it stay empty",
            opt.binning.s_max()
        ));
    }

    let cfg = CountConfig {
        binning: opt.binning.clone(),
        metric,
        n_regions,
        threads: opt.threads,
        shard: opt.shard,
    };
    let n_r = pr.as_ref().map_or(0, |p| p.w.len());
    let catalog_bytes = (data.bytes() + randoms.as_ref().map_or(0, |r| r.bytes())) as u64;
    let counting = pairs::memory_estimate_bytes(data.len(), n_r, &cfg);
    let estimate = 2 * catalog_bytes + counting;
    if let Some(limit) = opt.max_memory {
        if estimate > limit {
            return Err(Error::resource(format!(
                "memory estimate {:.1} MiB exceeds --max-memory {:.1} MiB",
                estimate as f64 / 1048576.0,
                limit as f64 / 1048576.0
            )));
        }
    }

    let meta = CountMeta {
        tool: "ringscale".into(),
        version: crate::VERSION.into(),
        geometry,
        fiducial: fid,
        fiducial_name: fid_name,
        box_size,
        binning: opt.binning.clone(),
        n_regions,
        region_method,
        rr_splits: opt.rr_splits,
        data: input_info(&data, wd.clone())?,
        randoms: match (&randoms, &wr) {
            (Some(r), Some(w)) => Some(input_info(r, w.clone())?),
            _ => None,
        },
        shard: if opt.shard.1 > 1 {
            Some(opt.shard)
        } else {
            None
        },
    };

    let mut pieces = vec![Piece::Dd];
    let (mut norm_dr, mut norm_rr) = (None, None);
    if let (Some(pr), Some(wr)) = (&pr, &wr) {
        pieces.push(Piece::Dr);
        norm_dr = Some(cross_norm(&wd, wr)?);
        if !opt.skip_rr {
            let m = opt.rr_splits;
            let mut sums = Vec::with_capacity(m);
            for s in 0..m {
                let w = if m == 1 {
                    WeightSums::from_weights(&pr.w, &pr.region, n_regions)?
                } else {
                    let sub = subset(pr, s, m);
                    WeightSums::from_weights(&sub.w, &sub.region, n_regions)?
                };
                sums.push(w);
                pieces.push(Piece::Rr(s));
            }
            norm_rr = Some(split_auto_norm(&sums)?);
        }
    }
    Ok(Prepared {
        header: CountHeader {
            meta,
            norm_dd: auto_norm(&wd)?,
            norm_dr,
            norm_rr,
            pieces,
        },
        cfg,
        data: pd,
        randoms: pr,
        memory_estimate: estimate,
        messages,
    })
}

/// Galaxies in coverage cells without randoms above this fraction trigger a warning; below it
/// the edge cells of a well-matched footprint (a few galaxies by Poisson chance) stay quiet.
pub const COVERAGE_WARN_FRACTION: f64 = 1e-3;

/// Fraction of galaxies lying in equal-area sky cells (bands in sin Dec, equal RA steps) that
/// hold no random and have no random in the neighbouring cells either, with the number of such galaxies and of cells on the sphere. The grid is the
/// finest (down to ~1.3 deg^2) at which the randoms average at least 20 per occupied cell, so
/// Poisson holes in a sparse random catalogue are not mistaken for a footprint mismatch.
pub fn uncovered_fraction(galaxies: &Catalogue, randoms: &Catalogue) -> (f64, usize, usize) {
    let cell = |ra: f64, dec: f64, n_dec: usize| {
        let n_ra = 2 * n_dec;
        let t = ((dec.to_radians().sin() + 1.0) * 0.5 * n_dec as f64).floor() as usize;
        let p = (ra / 360.0 * n_ra as f64).floor() as usize;
        t.min(n_dec - 1) * n_ra + p.min(n_ra - 1)
    };
    let mut n_dec = 128usize;
    loop {
        let mut occ = vec![0u32; 2 * n_dec * n_dec];
        for (&a, &d) in randoms.ra().iter().zip(randoms.dec()) {
            let c = cell(a, d, n_dec);
            occ[c] = occ[c].saturating_add(1);
        }
        let occupied = occ.iter().filter(|&&c| c > 0).count().max(1);
        if randoms.len() >= 20 * occupied || n_dec <= 2 {
            // A galaxy counts as uncovered only when its cell and the 8 around it hold no
            // random: partly covered cells at the footprint edge stay quiet.
            let n_ra = 2 * n_dec;
            let empty_around = |c: usize| {
                let (t, p) = ((c / n_ra) as isize, (c % n_ra) as isize);
                (-1..=1).all(|dt| {
                    let tt = t + dt;
                    tt < 0
                        || tt >= n_dec as isize
                        || (-1..=1).all(|dp| {
                            let pp = (p + dp).rem_euclid(n_ra as isize) as usize;
                            occ[tt as usize * n_ra + pp] == 0
                        })
                })
            };
            let n_out = galaxies
                .ra()
                .iter()
                .zip(galaxies.dec())
                .filter(|(&a, &d)| empty_around(cell(a, d, n_dec)))
                .count();
            return (
                n_out as f64 / galaxies.len().max(1) as f64,
                n_out,
                occ.len(),
            );
        }
        n_dec /= 2;
    }
}

/// Diagonal of the joint bounding box of the point sets: no pair can be further apart.
fn max_extent<'a>(sets: impl Iterator<Item = &'a PointSet>) -> f64 {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for p in sets {
        for (k, col) in [&p.x, &p.y, &p.z].into_iter().enumerate() {
            for &v in col {
                lo[k] = lo[k].min(v);
                hi[k] = hi[k].max(v);
            }
        }
    }
    (0..3)
        .map(|k| (hi[k] - lo[k]).max(0.0).powi(2))
        .sum::<f64>()
        .sqrt()
}

/// Create the output folder and prove it is writable before any long computation.
pub fn ensure_writable(dir: &Path) -> Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, "cannot create output folder", e))?;
    let probe = dir.join(format!(".ringscale-write-probe-{}", std::process::id()));
    std::fs::write(&probe, b"probe")
        .map_err(|e| Error::io(dir, "output folder is not writable", e))?;
    let _ = std::fs::remove_file(&probe);
    Ok(())
}

/// Upper bound on the bytes of one pairing's exact state (`X.state.json`, and a unit
/// checkpoint of `ringscale run`, which holds the same pair sums) for the free-space check:
/// 4 + 2 * regions fixed-point integers per bin (<= 40 digits) plus pretty-printing (<= 8
/// characters each), the edges three times over (binning and provenance), 4 KiB of metadata.
pub fn state_bytes_estimate(binning: &Binning, n_regions: usize) -> u64 {
    let nb = binning.n_bins() as u64;
    let edges = (binning.s_edges.len() + binning.n_mu + 1) as u64;
    (nb * (4 + 2 * n_regions as u64) + 3 * edges) * 48 + 4096
}

/// Upper bound on one pairing's count files: the state file, the ECSV table (per bin at most
/// 9 numbers of <= 26 characters, 12 KiB of header and provenance) and the region array
/// (exactly 8 bytes per value plus its 128-byte header).
pub fn pairing_bytes_estimate(binning: &Binning, n_regions: usize) -> u64 {
    let nb = binning.n_bins() as u64;
    let regions = n_regions as u64;
    let ecsv = nb * 9 * 26 + 12288;
    let npy = if regions > 0 {
        128 + 16 * regions * nb
    } else {
        0
    };
    state_bytes_estimate(binning, n_regions) + ecsv + npy
}

/// Upper bound on a whole counts folder: `pairings` (1 to 3) pairings plus `counts.json`.
pub fn folder_bytes_estimate(pairings: u64, binning: &Binning, n_regions: usize) -> u64 {
    pairings * pairing_bytes_estimate(binning, n_regions) + 8192 + binning.s_edges.len() as u64 * 48
}

/// Write a counts folder (creating it); every file atomically. When a write fails (a full
/// disk), the files this call already wrote are removed again, so the folder never holds an
/// incomplete set that a later `xi` could mistake for a result.
pub fn write_folder(dir: &Path, states: &[CountState]) -> Result<()> {
    if let Some(first) = states.first() {
        let c = &first.counts;
        let needed = folder_bytes_estimate(states.len() as u64, &c.binning, c.n_regions);
        space::ensure_space(dir, "the counts folder", needed)?;
    }
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, "cannot create output folder", e))?;
    let mut written = Vec::new();
    let result = (|| -> Result<()> {
        for st in states {
            write_state(dir, st, &mut written)?;
        }
        if let Some(first) = states.first() {
            let p = dir.join("counts.json");
            json::write_json(&p, &first.meta)?;
            written.push(p);
        }
        Ok(())
    })();
    if result.is_err() {
        for p in &written {
            let _ = std::fs::remove_file(p);
        }
    }
    result
}

fn write_state(dir: &Path, st: &CountState, written: &mut Vec<PathBuf>) -> Result<()> {
    let c = &st.counts;
    let (n_mu, nb) = (c.binning.n_mu, c.binning.n_bins());
    let (s_lo, s_hi, mu_lo, mu_hi) = c.binning.bin_edge_columns();
    let mut cols = vec![
        ecsv::Column::f64("s_lo", s_lo),
        ecsv::Column::f64("s_hi", s_hi),
    ];
    if n_mu > 1 {
        cols.push(ecsv::Column::f64("mu_lo", mu_lo));
        cols.push(ecsv::Column::f64("mu_hi", mu_hi));
    }
    cols.push(ecsv::Column {
        name: "npairs".into(),
        data: ecsv::ColumnData::U64(c.npairs.clone()),
    });
    cols.push(ecsv::Column::f64("wpairs", c.wpairs_f64()));
    cols.push(ecsv::Column::f64(
        "wpairs_normalised",
        c.wpairs_f64().iter().map(|w| w / st.norm.total).collect(),
    ));
    cols.push(ecsv::Column::f64("s_mean", c.s_mean()));
    cols.push(ecsv::Column::f64("z_mean", c.z_mean()));
    let meta = serde_json::json!({
        "pairing": st.pairing,
        "normalisation": st.norm.total,
        "provenance": st.meta,
    });
    let p = dir.join(format!("{}.ecsv", st.pairing));
    ecsv::write_ecsv(
        &p,
        &ecsv::Table {
            columns: cols,
            meta,
        },
    )?;
    written.push(p);
    if c.n_regions > 0 {
        let mut arr = Vec::with_capacity(2 * c.n_regions * nb);
        arr.extend(c.region_both.iter().map(|&v| from_fixed(v)));
        arr.extend(c.region_one.iter().map(|&v| from_fixed(v)));
        let p = dir.join(format!("{}_regions.npy", st.pairing));
        npy::write_npy_f64(&p, &arr, &[2, c.n_regions, nb])?;
        written.push(p);
    }
    let p = dir.join(format!("{}.state.json", st.pairing));
    json::write_json(&p, st)?;
    written.push(p);
    Ok(())
}

/// Read the exact states from a counts folder (dd, and dr/rr when present).
pub fn read_folder(dir: &Path) -> Result<Vec<CountState>> {
    let mut out = Vec::new();
    for p in ["dd", "dr", "rr"] {
        let path = dir.join(format!("{p}.state.json"));
        if !path.exists() {
            continue;
        }
        let text =
            std::fs::read_to_string(&path).map_err(|e| Error::io(&path, "cannot read", e))?;
        let st: CountState = serde_json::from_str(&text).map_err(|e| {
            Error::input(format!(
                "{}: not a ringscale count state: {e}",
                path.display()
            ))
        })?;
        out.push(st);
    }
    if out.is_empty() {
        return Err(Error::input(format!(
            "{}: no count files (dd.state.json) found",
            dir.display()
        )));
    }
    Ok(out)
}

/// Merge shard folders into one complete result, bit for bit equal to an unsharded count.
pub fn merge_folders(dirs: &[PathBuf]) -> Result<Vec<CountState>> {
    if dirs.is_empty() {
        return Err(Error::input("merge: no shard folders given"));
    }
    let sets: Vec<Vec<CountState>> = dirs.iter().map(|d| read_folder(d)).collect::<Result<_>>()?;
    let n_total = sets[0][0].meta.shard.map_or(1, |s| s.1);
    let mut seen = vec![false; n_total];
    for (d, set) in dirs.iter().zip(&sets) {
        let m = &set[0].meta;
        let mut m0 = sets[0][0].meta.clone();
        m0.shard = m.shard;
        if *m != m0 {
            return Err(Error::input(format!(
                "merge: {} comes from a different run (inputs, fiducial, binning, regions or tool version differ)",
                d.display()
            )));
        }
        let (k, n) = m.shard.unwrap_or((0, 1));
        if n != n_total {
            return Err(Error::input(format!(
                "merge: {} is shard {k}/{n} but others are of {n_total}",
                d.display()
            )));
        }
        if std::mem::replace(&mut seen[k], true) {
            return Err(Error::input(format!(
                "merge: shard {k}/{n} given twice ({})",
                d.display()
            )));
        }
        if set.len() != sets[0].len() {
            return Err(Error::input(format!(
                "merge: {} holds different pairings",
                d.display()
            )));
        }
    }
    if let Some(k) = seen.iter().position(|s| !s) {
        return Err(Error::input(format!(
            "merge: shard {k}/{n_total} is missing"
        )));
    }
    let mut out = sets[0].clone();
    for set in &sets[1..] {
        for (a, b) in out.iter_mut().zip(set) {
            a.counts.merge(&b.counts)?;
        }
    }
    for st in &mut out {
        st.meta.shard = None;
    }
    Ok(out)
}

/// Run a count, print the memory estimate first, write the folder.
pub fn run_and_report(opt: &CountOptions) -> Result<CountOutcome> {
    let outcome = run(opt)?;
    write_folder(&opt.out, &outcome.states)?;
    Ok(outcome)
}
