//! Pair counting: exact weighted pair counts in separation (and mu) bins for flat, periodic,
//! closed and open geometries.
//!
//! Engine: a KD-tree over leaf buckets per catalogue and a dual-tree traversal (Moore et al.
//! 2001) that prunes node pairs whose conservative separation range misses [s_min, s_max). Node
//! pairs that fall entirely into one bin are NOT counted wholesale: the w1 w2 s sum is not
//! separable over node sums, so every surviving pair goes through a leaf kernel and all sums are
//! exact per pair.
//!
//! Determinism: every pair's terms are quantised to fixed point on their own and summed as
//! integers (see `kernel`), so totals do not depend on grouping or order: any thread count, any
//! sharding (`shard = (k, N)` takes tasks k, k+N, ... of a fixed list of top-level node pairs)
//! and the one-pass fiducial sweep give bitwise the same result.
//!
//! Split-random RR (Keihanen et al. 2019, A&A 631, A73): `count_auto_split` counts the auto
//! pairs of the m subsets `every_mth(p, k, m)` in one parallel job (`count_auto_subsets`), each
//! result bitwise that of counting the subset alone.
mod counts;
mod kernel;
mod regions;
#[cfg(target_arch = "x86_64")]
mod simd256;
#[cfg(target_arch = "x86_64")]
mod simd512;
mod sweep;
mod tree;

#[cfg(test)]
mod tests;

pub use counts::{from_fixed, to_fixed, Binning, PairCounts, FRAC_BITS};
pub use regions::kmeans_sky_regions;
pub use sweep::{
    sweep_auto, sweep_auto_reference, sweep_cross, sweep_cross_reference, SweepConfig, MAX_VARIANTS,
};

use kernel::{
    Acc, Binner, DataFlags, Geo, KernelKind, LeafFn, LeafPair, Pts, Quant, Simd, CLO, FLAT, OPE,
    PER,
};
use rayon::prelude::*;
use tree::{node_bounds, Tree};

/// Points to count: comoving Cartesian positions in Mpc/h (observer at the origin for surveys),
/// weights, redshift per object (0.0 for boxes; used for the z_eff sums; an empty vector means
/// all zero), and optional region labels (empty = no regions).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PointSet {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub z: Vec<f64>,
    pub w: Vec<f64>,
    pub redshift: Vec<f64>,
    pub region: Vec<u32>,
}

impl PointSet {
    pub fn len(&self) -> usize {
        self.x.len()
    }
    pub fn is_empty(&self) -> bool {
        self.x.is_empty()
    }
}

/// Geometry in which separations are measured.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Metric {
    /// Flat survey or non-periodic Cartesian: s = |x1 - x2|; mu w.r.t. the pair midpoint line of
    /// sight (x1 + x2)/2.
    Euclidean,
    /// Periodic box of side `box_size` (minimum image); line of sight = z axis. Requires
    /// s_max < box_size/2.
    Periodic { box_size: f64 },
    /// Closed fiducial (Omega_k < 0) with curvature radius `radius` in Mpc/h.
    Closed { radius: f64 },
    /// Open fiducial (Omega_k > 0) with curvature radius `radius` in Mpc/h.
    Open { radius: f64 },
}

/// What to count and how to split the work.
#[derive(Debug, Clone, PartialEq)]
pub struct CountConfig {
    pub binning: Binning,
    pub metric: Metric,
    /// Number of jackknife regions (0 = none); labels must be < n_regions.
    pub n_regions: usize,
    /// Worker threads (0 = all cores). Results do not depend on it.
    pub threads: usize,
    /// (k, N): count only the k-th of N deterministic parts (0-based); (0, 1) = everything.
    pub shard: (usize, usize),
}

/// Unordered distinct pairs i < j of one catalogue.
pub fn count_auto(p: &PointSet, cfg: &CountConfig) -> crate::Result<PairCounts> {
    count_impl(p, None, cfg, KernelKind::Fast)
}

/// All pairs (i in a, j in b).
pub fn count_cross(a: &PointSet, b: &PointSet, cfg: &CountConfig) -> crate::Result<PairCounts> {
    count_impl(a, Some(b), cfg, KernelKind::Fast)
}

/// O(N^2) reference for `count_auto` with the same per-pair formulas and no tree.
///
/// # Panics
/// On invalid input or configuration (it is a test reference; use `count_auto` for user data).
pub fn brute_force_auto(p: &PointSet, cfg: &CountConfig) -> PairCounts {
    brute_impl(p, None, cfg).expect("brute_force_auto: invalid input")
}

/// O(N^2) reference for `count_cross`.
///
/// # Panics
/// On invalid input or configuration (it is a test reference; use `count_cross` for user data).
pub fn brute_force_cross(a: &PointSet, b: &PointSet, cfg: &CountConfig) -> PairCounts {
    brute_impl(a, Some(b), cfg).expect("brute_force_cross: invalid input")
}

/// Upper estimate of the extra bytes a count allocates at its peak (prepared copies of both
/// catalogues, trees, the bin table, and per-thread accumulators), to compare with a memory limit
/// before starting. `n_b = 0` for an auto count.
pub fn memory_estimate_bytes(n_a: usize, n_b: usize, cfg: &CountConfig) -> u64 {
    let curved = matches!(cfg.metric, Metric::Closed { .. } | Metric::Open { .. });
    // coordinates (4 + 3 flat for curved mu), w, z, region, permutation, build scratch
    let per_point: u64 =
        8 * (4 + if curved && cfg.binning.n_mu > 1 { 3 } else { 0 } + 2) + 4 + 8 + 8 * 4;
    let per_node: u64 = std::mem::size_of::<tree::Node>() as u64;
    let n = (n_a + n_b) as u64;
    let nodes = 4 * n / tree::LEAF_SIZE as u64 + 4;
    let nb = cfg.binning.n_bins();
    let nreg = cfg.n_regions;
    let counts = (nb * (8 + 16 * 3) + 2 * 16 * nb * nreg) as u64;
    let threads = if cfg.threads == 0 {
        std::thread::available_parallelism()
            .map(|v| v.get())
            .unwrap_or(1)
    } else {
        cfg.threads
    } as u64;
    // rayon fold keeps a few accumulators per worker plus the reduction partials
    let per_thread = 4 * (Acc::bytes(nb, nreg) + counts);
    let table = 4 * (1u64 << 20);
    let tasks = 64 * TASK_TARGET as u64;
    n * per_point + nodes * per_node + table + tasks + threads * per_thread + counts
}

/// Number of top-level node pairs the traversal is cut into: work units for threads and shards
/// (fixed, so shard k/N means the same pairs on every machine).
const TASK_TARGET: usize = 4096;

fn geo_of(metric: &Metric) -> Geo {
    match *metric {
        Metric::Euclidean => Geo {
            kind: FLAT,
            box_l: 0.0,
            half_l: 0.0,
            radius: 0.0,
        },
        Metric::Periodic { box_size } => Geo {
            kind: PER,
            box_l: box_size,
            half_l: 0.5 * box_size,
            radius: 0.0,
        },
        Metric::Closed { radius } => Geo {
            kind: CLO,
            box_l: 0.0,
            half_l: 0.0,
            radius,
        },
        Metric::Open { radius } => Geo {
            kind: OPE,
            box_l: 0.0,
            half_l: 0.0,
            radius,
        },
    }
}

/// Check the shard, binning and metric settings (everything but the q-space edges).
fn check_metric(cfg: &CountConfig) -> crate::Result<Geo> {
    let b = &cfg.binning;
    let (k, n) = cfg.shard;
    if n == 0 || k >= n {
        return Err(crate::Error::input(format!(
            "shard: need 0 <= k < N, got k = {k}, N = {n}"
        )));
    }
    if b.n_s() == 0 || b.n_mu == 0 || b.s_edges.iter().any(|e| !e.is_finite() || *e < 0.0) {
        return Err(crate::Error::input(
            "binning: separation edges must be finite, >= 0, at least two; n_mu >= 1",
        ));
    }
    let s_max = b.s_max();
    match cfg.metric {
        Metric::Euclidean => {}
        Metric::Periodic { box_size } => {
            if !(box_size.is_finite() && box_size > 0.0) {
                return Err(crate::Error::input(format!(
                    "periodic metric: box_size must be finite and > 0, got {box_size}"
                )));
            }
            if s_max >= 0.5 * box_size {
                return Err(crate::Error::input(format!(
                    "periodic metric: largest separation edge {s_max} must be < box_size/2 = {}",
                    0.5 * box_size
                )));
            }
        }
        Metric::Closed { radius } | Metric::Open { radius } => {
            if !(radius.is_finite() && radius > 0.0) {
                return Err(crate::Error::input(format!(
                    "curved metric: curvature radius must be finite and > 0, got {radius}"
                )));
            }
            if matches!(cfg.metric, Metric::Closed { .. }) && s_max >= std::f64::consts::PI * radius
            {
                return Err(crate::Error::input(format!(
                    "closed metric: largest separation edge {s_max} must be < pi R = {}",
                    std::f64::consts::PI * radius
                )));
            }
        }
    }
    Ok(geo_of(&cfg.metric))
}

/// Check the configuration and build the q-space binner.
fn check_config(cfg: &CountConfig) -> crate::Result<(Geo, Binner)> {
    let geo = check_metric(cfg)?;
    let b = &cfg.binning;
    let qe: Vec<f64> = b.s_edges.iter().map(|&s| geo.q_of_s(s)).collect();
    if qe
        .windows(2)
        .any(|w| w[1].partial_cmp(&w[0]) != Some(std::cmp::Ordering::Greater))
        || !qe.iter().all(|q| q.is_finite())
    {
        return Err(crate::Error::input(
            "binning: separation edges too close to be told apart in this metric",
        ));
    }
    let mut bn = Binner::new(qe, b.n_mu);
    if geo.kind == FLAT || geo.kind == PER {
        bn.detect_linear(&b.s_edges);
    }
    Ok((geo, bn))
}

/// Validate one catalogue and convert it to kernel layout (original order). Takes the columns
/// by value and moves them where the layout allows (flat: all of them), so no copy is made.
fn prepare(p: PointSet, name: &str, cfg: &CountConfig, geo: &Geo) -> crate::Result<Pts> {
    let n = p.x.len();
    if n == 0 {
        return Err(crate::Error::input(format!("{name}: catalogue is empty")));
    }
    if n > tree::MAX_POINTS {
        return Err(crate::Error::resource(format!(
            "{name}: {n} points; at most {} can be counted in one catalogue",
            tree::MAX_POINTS
        )));
    }
    for (col, len) in [("y", p.y.len()), ("z", p.z.len()), ("w", p.w.len())] {
        if len != n {
            return Err(crate::Error::input(format!(
                "{name}: column {col} has {len} rows, x has {n}"
            )));
        }
    }
    if !p.redshift.is_empty() && p.redshift.len() != n {
        return Err(crate::Error::input(format!(
            "{name}: column redshift has {} rows, x has {n}",
            p.redshift.len()
        )));
    }
    for i in 0..n {
        let z = p.redshift.get(i).copied().unwrap_or(0.0);
        for (col, v) in [
            ("x", p.x[i]),
            ("y", p.y[i]),
            ("z", p.z[i]),
            ("w", p.w[i]),
            ("redshift", z),
        ] {
            if !v.is_finite() {
                return Err(crate::Error::input(format!(
                    "{name}: row {i}, column {col}: value {v} is not finite"
                )));
            }
        }
    }
    let mut reg = Vec::new();
    if cfg.n_regions > 0 {
        if p.region.len() != n {
            return Err(crate::Error::input(format!(
                "{name}: n_regions = {} but the region column has {} rows for {n} points",
                cfg.n_regions,
                p.region.len()
            )));
        }
        if let Some((i, &r)) = p
            .region
            .iter()
            .enumerate()
            .find(|(_, &r)| r as usize >= cfg.n_regions)
        {
            return Err(crate::Error::input(format!(
                "{name}: row {i}: region label {r} is out of range (n_regions = {})",
                cfg.n_regions
            )));
        }
    }
    let PointSet {
        x,
        y,
        z: pz,
        w,
        redshift,
        region,
    } = p;
    if cfg.n_regions > 0 {
        reg = region;
    }
    // all-zero redshifts (boxes) are not stored
    let z = if redshift.iter().all(|&z| z == 0.0) {
        Vec::new()
    } else {
        redshift
    };
    let mut pts = Pts {
        w,
        z,
        reg,
        ..Default::default()
    };
    match geo.kind {
        FLAT => {
            pts.c = [x, y, pz, Vec::new()];
        }
        PER => {
            let l = geo.box_l;
            let wrap = |mut v: Vec<f64>| -> Vec<f64> {
                for x in v.iter_mut() {
                    let r = x.rem_euclid(l);
                    *x = if r >= l { 0.0 } else { r };
                }
                v
            };
            pts.c = [wrap(x), wrap(y), wrap(pz), Vec::new()];
        }
        _ => {
            // Curved: chi = |x|, u = x / chi. Closed: X = R sin(chi/R) u, t = 2R sin^2(chi/2R)
            // (the 4-D sphere point (X, R cos(chi/R)) shifted by a constant in the 4th axis);
            // open: X = R sinh(chi/R) u, t = 2R sinh^2(chi/2R) on the hyperboloid.
            let r = geo.radius;
            let closed = geo.kind == CLO;
            let mut c = [vec![0.0; n], vec![0.0; n], vec![0.0; n], vec![0.0; n]];
            #[allow(clippy::needless_range_loop)]
            for i in 0..n {
                let chi = (x[i] * x[i] + y[i] * y[i] + pz[i] * pz[i]).sqrt();
                if closed && chi >= std::f64::consts::PI * r {
                    return Err(crate::Error::input(format!(
                        "{name}: row {i}: radial distance {chi} is beyond pi R = {} of the closed metric",
                        std::f64::consts::PI * r
                    )));
                }
                let (sc, h) = if closed {
                    ((chi / r).sin(), (chi / (2.0 * r)).sin())
                } else {
                    ((chi / r).sinh(), (chi / (2.0 * r)).sinh())
                };
                let f = if chi > 0.0 { r * sc / chi } else { 1.0 };
                c[0][i] = x[i] * f;
                c[1][i] = y[i] * f;
                c[2][i] = pz[i] * f;
                c[3][i] = 2.0 * r * h * h;
            }
            pts.c = c;
            if cfg.binning.n_mu > 1 {
                pts.f = [x, y, pz];
            }
        }
    }
    Ok(pts)
}

/// Reorder points into tree order in place, one column at a time: no column is copied, the
/// only scratch is one bit per point (the peak stays at the columns, the permutation and the
/// tree).
fn permute<I: PermIndex>(mut p: Pts, perm: &[I]) -> Pts {
    let mut done = vec![0u64; perm.len().div_ceil(64)];
    let Pts { c, f, w, z, reg } = &mut p;
    for v in c.iter_mut().chain(f.iter_mut()).chain([w, z]) {
        permute_in_place(v, perm, &mut done);
    }
    permute_in_place(reg, perm, &mut done);
    p
}

/// `v[p] = old v[perm[p]]` for every p, following the cycles of `perm`; `done` (one bit per
/// position, all clear on entry) marks filled positions and is cleared again on return. An
/// empty `v` (a column the layout does not use) is left alone.
fn permute_in_place<T: Copy, I: PermIndex>(v: &mut [T], perm: &[I], done: &mut [u64]) {
    if v.is_empty() {
        return;
    }
    debug_assert_eq!(v.len(), perm.len());
    let seen = |d: &[u64], i: usize| d[i / 64] >> (i % 64) & 1 == 1;
    for start in 0..v.len() {
        if seen(done, start) {
            continue;
        }
        // walk the cycle through `start`: each position takes the value its source still holds
        let first = v[start];
        let mut p = start;
        loop {
            done[p / 64] |= 1 << (p % 64);
            let q = perm[p].index();
            if q == start {
                v[p] = first;
                break;
            }
            v[p] = v[q];
            p = q;
        }
    }
    done.fill(0);
}

/// Simple reference for `permute_in_place`: gather into a new vector.
#[cfg(test)]
fn permute_gather<T: Copy, I: PermIndex>(v: &[T], perm: &[I]) -> Vec<T> {
    perm.iter().map(|&i| v[i.index()]).collect()
}

/// Point indices of a permutation: u32 from `tree` (compact), usize from the sweep's tree.
trait PermIndex: Copy {
    fn index(self) -> usize;
}
impl PermIndex for u32 {
    fn index(self) -> usize {
        self as usize
    }
}
impl PermIndex for usize {
    fn index(self) -> usize {
        self
    }
}

/// A node pair of the traversal; `same` marks a node paired with itself in an auto count.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Task {
    a: u32,
    b: u32,
    same: bool,
}

/// Traversal context.
struct Walker<'a> {
    ta: &'a Tree,
    pa: &'a Pts,
    tb: &'a Tree,
    pb: &'a Pts,
    geo: Geo,
    bn: &'a Binner,
    leaf: LeafFn,
    /// Padded pruning thresholds in q-space.
    q_hi_pad: f64,
    q_lo_pad: f64,
}

impl Walker<'_> {
    fn bounds(&self, t: Task) -> (f64, f64) {
        let a = &self.ta.nodes[t.a as usize];
        let b = &self.tb.nodes[t.b as usize];
        let (l, hl) = (self.geo.box_l, self.geo.half_l);
        match self.geo.kind {
            FLAT => node_bounds::<FLAT>(a, b, l, hl),
            PER => node_bounds::<PER>(a, b, l, hl),
            CLO => node_bounds::<CLO>(a, b, l, hl),
            _ => node_bounds::<OPE>(a, b, l, hl),
        }
    }

    fn pruned(&self, t: Task) -> bool {
        let (qmin, qmax) = self.bounds(t);
        qmin >= self.q_hi_pad || qmax < self.q_lo_pad
    }

    fn is_leaf_pair(&self, t: Task) -> bool {
        self.ta.nodes[t.a as usize].is_leaf() && self.tb.nodes[t.b as usize].is_leaf()
    }

    /// Child node pairs in a fixed order.
    fn split(&self, t: Task, out: &mut Vec<Task>) {
        let a = &self.ta.nodes[t.a as usize];
        let b = &self.tb.nodes[t.b as usize];
        if t.same {
            out.push(Task {
                a: a.left,
                b: a.left,
                same: true,
            });
            out.push(Task {
                a: a.left,
                b: a.right,
                same: false,
            });
            out.push(Task {
                a: a.right,
                b: a.right,
                same: true,
            });
        } else if a.is_leaf() || (!b.is_leaf() && b.len() > a.len()) {
            out.push(Task {
                a: t.a,
                b: b.left,
                same: false,
            });
            out.push(Task {
                a: t.a,
                b: b.right,
                same: false,
            });
        } else {
            out.push(Task {
                a: a.left,
                b: t.b,
                same: false,
            });
            out.push(Task {
                a: a.right,
                b: t.b,
                same: false,
            });
        }
    }

    /// Cut the traversal into about TASK_TARGET node pairs, level by level.
    fn tasks(&self, root: Task) -> Vec<Task> {
        let mut cur = vec![root];
        loop {
            if cur.len() >= TASK_TARGET {
                break;
            }
            let mut next = Vec::with_capacity(cur.len() * 3);
            let mut grew = false;
            for &t in &cur {
                if self.pruned(t) {
                    continue;
                }
                if self.is_leaf_pair(t) {
                    next.push(t);
                } else {
                    self.split(t, &mut next);
                    grew = true;
                }
            }
            cur = next;
            if !grew {
                break;
            }
        }
        cur
    }

    fn walk(&self, t: Task, acc: &mut Acc, stack: &mut Vec<Task>) {
        stack.clear();
        stack.push(t);
        while let Some(t) = stack.pop() {
            if self.pruned(t) {
                continue;
            }
            if self.is_leaf_pair(t) {
                let a = &self.ta.nodes[t.a as usize];
                let b = &self.tb.nodes[t.b as usize];
                let lp = LeafPair {
                    b_lo: b.lo,
                    b_hi: b.hi,
                    q_cut: if t.same { f64::INFINITY } else { self.q_hi_pad },
                    ..LeafPair::plain(a.start, a.end, b.start, b.end, t.same)
                };
                (self.leaf)(self.pa, self.pb, lp, &self.geo, self.bn, acc);
            } else {
                // push in reverse so children are visited in `split` order
                let n0 = stack.len();
                self.split(t, stack);
                stack[n0..].reverse();
            }
        }
    }
}

/// A pool of `threads` workers (0: rayon's default); failure to start one is a resource error.
pub(crate) fn build_pool(threads: usize) -> crate::Result<rayon::ThreadPool> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| crate::Error::resource(format!("cannot start {threads} worker threads: {e}")))
}

fn add_counts(dst: &mut PairCounts, src: &PairCounts) {
    for (a, b) in dst.npairs.iter_mut().zip(&src.npairs) {
        *a += b;
    }
    for (d, s) in [
        (&mut dst.wpairs, &src.wpairs),
        (&mut dst.ws, &src.ws),
        (&mut dst.wz, &src.wz),
        (&mut dst.region_both, &src.region_both),
        (&mut dst.region_one, &src.region_one),
    ] {
        for (a, b) in d.iter_mut().zip(s) {
            *a += b;
        }
    }
}

/// A catalogue validated, converted to kernel layout and indexed by its KD-tree, ready to be
/// counted any number of times (DD and DR share the data tree; DR and RR the random tree).
/// Built from a `PointSet` taken by value, whose columns it reuses: the peak memory of a count
/// is then the positions and weights once, plus the tree, the permutation and one bit per
/// point during the in-place reordering, and the histograms.
pub struct Indexed {
    pts: Pts,
    tree: Tree,
    metric: Metric,
    n_regions: usize,
    mu_coords: bool,
}

impl Indexed {
    /// Validate and index `p` for counts with `cfg`'s metric, region count and mu binning.
    pub fn new(p: PointSet, name: &str, cfg: &CountConfig) -> crate::Result<Self> {
        let geo = check_metric(cfg)?;
        let pts = prepare(p, name, cfg, &geo)?;
        // the tree build uses the count's threads (the tree does not depend on them)
        let pool = build_pool(cfg.threads)?;
        let (tree, perm) = tree::build_in(&pts.c, Some(&pool));
        let pts = permute(pts, &perm);
        Ok(Indexed {
            pts,
            tree,
            metric: cfg.metric,
            n_regions: cfg.n_regions,
            mu_coords: cfg.binning.n_mu > 1,
        })
    }

    pub fn len(&self) -> usize {
        self.pts.len()
    }

    pub fn is_empty(&self) -> bool {
        self.pts.len() == 0
    }

    fn check(&self, cfg: &CountConfig) -> crate::Result<()> {
        if self.metric != cfg.metric
            || self.n_regions != cfg.n_regions
            || (cfg.binning.n_mu > 1 && !self.mu_coords)
        {
            return Err(crate::Error::input(
                "indexed catalogue was prepared for another metric, region count or mu binning",
            ));
        }
        Ok(())
    }
}

/// `count_auto` on an indexed catalogue.
pub fn count_auto_indexed(a: &Indexed, cfg: &CountConfig) -> crate::Result<PairCounts> {
    count_indexed_impl(a, None, cfg, KernelKind::Fast)
}

/// `count_cross` on indexed catalogues.
pub fn count_cross_indexed(
    a: &Indexed,
    b: &Indexed,
    cfg: &CountConfig,
) -> crate::Result<PairCounts> {
    count_indexed_impl(a, Some(b), cfg, KernelKind::Fast)
}

/// Shared implementation of `count_auto` / `count_cross` with a chosen leaf kernel.
pub(crate) fn count_impl(
    a: &PointSet,
    b: Option<&PointSet>,
    cfg: &CountConfig,
    kind: KernelKind,
) -> crate::Result<PairCounts> {
    let name_a = if b.is_some() {
        "catalogue A"
    } else {
        "catalogue"
    };
    let ia = Indexed::new(a.clone(), name_a, cfg)?;
    let ib = match b {
        Some(b) => Some(Indexed::new(b.clone(), "catalogue B", cfg)?),
        None => None,
    };
    count_indexed_impl(&ia, ib.as_ref(), cfg, kind)
}

/// One count made ready to run: the traversal context, the quantisation and this shard's
/// top-level tasks.
struct Job<'a> {
    w: Walker<'a>,
    quant: Quant,
    tasks: Vec<Task>,
}

fn job<'a>(
    ia: &'a Indexed,
    ib: Option<&'a Indexed>,
    cfg: &CountConfig,
    geo: Geo,
    bn: &'a Binner,
    kind: KernelKind,
) -> crate::Result<Job<'a>> {
    ia.check(cfg)?;
    if let Some(ib) = ib {
        ib.check(cfg)?;
    }
    let (ta, pa) = (&ia.tree, &ia.pts);
    let (tb, pb) = match ib {
        Some(ib) => (&ib.tree, &ib.pts),
        None => (ta, pa),
    };
    // Padding of the pruning thresholds: a relative 1e-9 plus 1e-12 of the coordinate scale
    // absorbs any rounding difference between node bounds and pair values.
    let scale = [&pa.c, &pb.c]
        .iter()
        .flat_map(|c| c.iter())
        .flat_map(|v| v.iter())
        .fold(geo.box_l, |m, &v| m.max(v.abs()));
    let slack = 1e-12 * scale;
    let q_hi_pad = (bn.qhi().sqrt() + slack).powi(2) * (1.0 + 1e-9);
    let q_lo_pad = (bn.qlo().max(0.0).sqrt() - slack).max(0.0).powi(2) * (1.0 - 1e-9);
    let kind = if DataFlags::mixed_z(pa, pb) {
        KernelKind::Reference
    } else {
        kind
    };
    let w = Walker {
        ta,
        pa,
        tb,
        pb,
        geo,
        bn,
        leaf: kernel::pick_for(
            kind,
            geo.kind,
            cfg.binning.n_mu > 1,
            Simd::detect(),
            DataFlags::of(pa, pb),
        ),
        q_hi_pad,
        q_lo_pad,
    };
    let root = Task {
        a: 0,
        b: 0,
        same: ib.is_none(),
    };
    let (k, n) = cfg.shard;
    let tasks = w.tasks(root).into_iter().skip(k).step_by(n).collect();
    let quant = Quant::for_data(pa, ib.map(|b| &b.pts), cfg.binning.s_max())?;
    Ok(Job { w, quant, tasks })
}

fn count_indexed_impl(
    ia: &Indexed,
    ib: Option<&Indexed>,
    cfg: &CountConfig,
    kind: KernelKind,
) -> crate::Result<PairCounts> {
    let (geo, bn) = check_config(cfg)?;
    let j = job(ia, ib, cfg, geo, &bn, kind)?;
    let pool = build_pool(cfg.threads)?;
    let mut out = run_jobs(&[j], cfg, &pool);
    Ok(out
        .pop()
        .unwrap_or_else(|| PairCounts::zeros(cfg.binning.clone(), cfg.n_regions)))
}

/// Run the tasks of several counts as one parallel job on `pool`: one result per job. The
/// tasks of all jobs form one list (job by job), so threads stay busy across the jobs, and each
/// worker's accumulator is flushed into its job's totals when the next task belongs to another
/// job and at the end. Totals are integer sums, so they do not depend on how the list is split.
fn run_jobs(jobs: &[Job], cfg: &CountConfig, pool: &rayon::ThreadPool) -> Vec<PairCounts> {
    let nb = cfg.binning.n_bins();
    let nreg = cfg.n_regions;
    let zeros = || vec![PairCounts::zeros(cfg.binning.clone(), nreg); jobs.len()];
    let Some(first) = jobs.first() else {
        return Vec::new();
    };
    let q0 = first.quant;
    let all: Vec<(usize, Task)> = jobs
        .iter()
        .enumerate()
        .flat_map(|(k, j)| j.tasks.iter().map(move |&t| (k, t)))
        .collect();
    // per worker: accumulator, the job it holds sums of, the per-job totals, a walk stack
    pool.install(|| {
        all.par_iter()
            .fold(
                || (Acc::new(nb, nreg, q0), 0usize, zeros(), Vec::new()),
                |(mut acc, mut cur, mut pcs, mut stack), &(k, t)| {
                    if k != cur {
                        acc.flush(&mut pcs[cur]);
                        acc.q = jobs[k].quant;
                        cur = k;
                    }
                    jobs[k].w.walk(t, &mut acc, &mut stack);
                    (acc, cur, pcs, stack)
                },
            )
            .map(|(mut acc, cur, mut pcs, _)| {
                acc.flush(&mut pcs[cur]);
                pcs
            })
            .reduce(zeros, |mut x, y| {
                for (a, b) in x.iter_mut().zip(&y) {
                    add_counts(a, b);
                }
                x
            })
    })
}

/// Split-random subset `start` of `m`: every m-th object of `p` from index `start` (object i
/// belongs to subset i mod m), so the split depends on the catalogue order alone.
pub fn every_mth(p: &PointSet, start: usize, m: usize) -> PointSet {
    fn pick<T: Copy>(v: &[T], start: usize, m: usize) -> Vec<T> {
        v.iter().skip(start).step_by(m.max(1)).copied().collect()
    }
    PointSet {
        x: pick(&p.x, start, m),
        y: pick(&p.y, start, m),
        z: pick(&p.z, start, m),
        w: pick(&p.w, start, m),
        redshift: pick(&p.redshift, start, m),
        region: pick(&p.region, start, m),
    }
}

/// Index the `m` subsets `every_mth(p, k, m)`, k = 0..m, built in parallel on `cfg.threads`.
pub fn index_subsets(
    p: &PointSet,
    m: usize,
    name: &str,
    cfg: &CountConfig,
) -> crate::Result<Vec<Indexed>> {
    let all: Vec<usize> = (0..m).collect();
    index_some_subsets(p, m, &all, name, cfg)
}

/// Index the subsets `every_mth(p, k, m)` for k in `which` (in that order), in parallel.
pub fn index_some_subsets(
    p: &PointSet,
    m: usize,
    which: &[usize],
    name: &str,
    cfg: &CountConfig,
) -> crate::Result<Vec<Indexed>> {
    if m == 0 {
        return Err(crate::Error::input(format!(
            "{name}: number of subsets must be >= 1"
        )));
    }
    if let Some(k) = which.iter().find(|&&k| k >= m) {
        return Err(crate::Error::input(format!(
            "{name}: subset {k} of {m} does not exist"
        )));
    }
    // one subset per worker task; each tree built on one thread (trees do not depend on it)
    let one = CountConfig {
        threads: 1,
        ..cfg.clone()
    };
    let pool = build_pool(cfg.threads)?;
    pool.install(|| {
        which
            .par_iter()
            .map(|&k| Indexed::new(every_mth(p, k, m), &format!("{name} subset {k}"), &one))
            .collect()
    })
}

/// Auto counts of several catalogues (typically the split-random subsets of RR) in one parallel
/// job: one pool, the top-level tasks of all catalogues in one list. Result k is bitwise
/// `count_auto_indexed(&subsets[k], cfg)`, for any thread count and shard.
pub fn count_auto_subsets<S: std::borrow::Borrow<Indexed> + Sync>(
    subsets: &[S],
    cfg: &CountConfig,
) -> crate::Result<Vec<PairCounts>> {
    let (geo, bn) = check_config(cfg)?;
    let pool = build_pool(cfg.threads)?;
    // the subsets' task lists are cut in parallel too (a serial phase per subset would leave
    // the other threads idle)
    let jobs = pool.install(|| {
        subsets
            .par_iter()
            .map(|s| job(s.borrow(), None, cfg, geo, &bn, KernelKind::Fast))
            .collect::<crate::Result<Vec<_>>>()
    })?;
    Ok(run_jobs(&jobs, cfg, &pool))
}

/// Split-random RR: the auto counts of the `m` subsets `every_mth(p, k, m)`, each subset's own
/// pairs only (about 1/m of the pairs of `count_auto(p)`).
pub fn count_auto_split(
    p: &PointSet,
    m: usize,
    cfg: &CountConfig,
) -> crate::Result<Vec<PairCounts>> {
    let subsets = index_subsets(p, m, "randoms", cfg)?;
    count_auto_subsets(&subsets, cfg)
}

fn brute_impl(a: &PointSet, b: Option<&PointSet>, cfg: &CountConfig) -> crate::Result<PairCounts> {
    let (geo, bn) = check_config(cfg)?;
    let pa = prepare(a.clone(), "catalogue A", cfg, &geo)?;
    let pb = match b {
        Some(b) => Some(prepare(b.clone(), "catalogue B", cfg, &geo)?),
        None => None,
    };
    let pbr = pb.as_ref().unwrap_or(&pa);
    let leaf = kernel::pick(
        KernelKind::Reference,
        geo.kind,
        cfg.binning.n_mu > 1,
        Simd::Portable,
    );
    let quant = Quant::for_data(&pa, pb.as_ref(), cfg.binning.s_max())?;
    let mut acc = Acc::new(bn.nb, cfg.n_regions, quant);
    let mut out = PairCounts::zeros(cfg.binning.clone(), cfg.n_regions);
    // one row of pairs per kernel call (the integer sums do not care how pairs are grouped)
    for i in 0..pa.len() {
        let lp = LeafPair::plain(
            i,
            i + 1,
            if pb.is_some() { 0 } else { i + 1 },
            pbr.len(),
            false,
        );
        leaf(&pa, pbr, lp, &geo, &bn, &mut acc);
        acc.flush(&mut out);
    }
    Ok(out)
}
