//! Pair counts under several fiducial mappings in one traversal ("sweep").
//!
//! Each variant k is a catalogue's positions under one fiducial plus the metric its separations
//! are measured in (a curved fiducial with its geodesic metric, or a "naive" variant: curved
//! radial distances with the flat metric). One KD partition is built on variant 0's embedding;
//! every node then carries one 4-D bounding box per variant, built from that variant's own
//! embedding coordinates. A node pair is pruned for variant k when the conservative q-range of
//! its two k-boxes misses variant k's padded [q_lo, q_hi); a child inherits the set of variants
//! still alive (child boxes lie inside parent boxes) and the pair is dropped when none is left.
//! The partition is the same for all variants, so the search radius is automatically
//! conservative for every fiducial, and a leaf pair runs the per-pair kernel only for the
//! variants alive there.
//!
//! Per leaf pair and variant it runs the single-fiducial engine's own leaf kernel on that
//! variant's embedding coordinates (from `prepare`), with the same q-space bin edges and the
//! same per-pair fixed-point quantisation, so bin membership, pair numbers and every summed term
//! are bitwise those of `count_auto` / `count_cross`; integer sums make the totals independent
//! of the different tree, so each variant's counts equal a separate count bit for bit.
use super::kernel::{
    self, Acc, Binner, DataFlags, Geo, KernelKind, LeafFn, LeafPair, Pts, Quant, Simd, CLO, FLAT,
    OPE, PER,
};
use super::{check_config, permute, prepare, tree, Binning, CountConfig, Metric};
use super::{PairCounts, PointSet};
use rayon::prelude::*;

/// Binning and work split shared by all variants of a sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepConfig {
    pub binning: Binning,
    /// Number of jackknife regions (0 = none).
    pub n_regions: usize,
    /// Worker threads (0 = all cores). Results do not depend on it.
    pub threads: usize,
}

/// At most this many variants per sweep (the alive set is a bit mask).
pub const MAX_VARIANTS: usize = 32;

/// Unordered distinct pairs of one catalogue under every variant: `sets[k]` holds the positions
/// under variant k (same objects in the same order for all k), counted in `metrics[k]`.
/// Returns one `PairCounts` per variant.
pub fn sweep_auto(
    sets: &[PointSet],
    metrics: &[Metric],
    cfg: &SweepConfig,
) -> crate::Result<Vec<PairCounts>> {
    sweep_impl(sets, None, metrics, cfg)
}

/// All pairs (i in a, j in b) under every variant.
pub fn sweep_cross(
    a: &[PointSet],
    b: &[PointSet],
    metrics: &[Metric],
    cfg: &SweepConfig,
) -> crate::Result<Vec<PairCounts>> {
    sweep_impl(a, Some(b), metrics, cfg)
}

/// Reference for `sweep_auto`: one separate single-fiducial count per variant.
pub fn sweep_auto_reference(
    sets: &[PointSet],
    metrics: &[Metric],
    cfg: &SweepConfig,
) -> crate::Result<Vec<PairCounts>> {
    check_lists(sets, None, metrics)?;
    sets.iter()
        .zip(metrics)
        .map(|(p, m)| super::count_auto(p, &single_cfg(cfg, *m)))
        .collect()
}

/// Reference for `sweep_cross`: one separate single-fiducial count per variant.
pub fn sweep_cross_reference(
    a: &[PointSet],
    b: &[PointSet],
    metrics: &[Metric],
    cfg: &SweepConfig,
) -> crate::Result<Vec<PairCounts>> {
    check_lists(a, Some(b), metrics)?;
    a.iter()
        .zip(b)
        .zip(metrics)
        .map(|((p, q), m)| super::count_cross(p, q, &single_cfg(cfg, *m)))
        .collect()
}

fn single_cfg(cfg: &SweepConfig, metric: Metric) -> CountConfig {
    CountConfig {
        binning: cfg.binning.clone(),
        metric,
        n_regions: cfg.n_regions,
        threads: cfg.threads,
        shard: (0, 1),
    }
}

fn check_lists(a: &[PointSet], b: Option<&[PointSet]>, metrics: &[Metric]) -> crate::Result<()> {
    let k = metrics.len();
    if k == 0 || k > MAX_VARIANTS {
        return Err(crate::Error::input(format!(
            "sweep: need 1 to {MAX_VARIANTS} fiducial variants, got {k}"
        )));
    }
    for (name, sets) in std::iter::once(("catalogue A", a)).chain(b.map(|b| ("catalogue B", b))) {
        if sets.len() != k {
            return Err(crate::Error::input(format!(
                "sweep: {name} has {} position sets for {k} variants",
                sets.len()
            )));
        }
        let n = sets[0].len();
        if let Some(v) = sets.iter().position(|s| s.len() != n) {
            return Err(crate::Error::input(format!(
                "sweep: {name}: variant {v} has {} objects, variant 0 has {n}",
                sets[v].len()
            )));
        }
    }
    Ok(())
}

/// Tree node of the shared partition (boxes are stored per variant in `STree`).
#[derive(Debug, Clone, Copy)]
struct SNode {
    start: usize,
    end: usize,
    /// Child indices; `left == 0` marks a leaf.
    left: u32,
    right: u32,
}

impl SNode {
    fn is_leaf(&self) -> bool {
        self.left == 0
    }
    fn len(&self) -> usize {
        self.end - self.start
    }
}

const LEAF: usize = 32;

/// Shared partition plus per-variant boxes: `lo[node * nv + k]`.
struct STree {
    nodes: Vec<SNode>,
    nv: usize,
    lo: Vec<[f64; 4]>,
    hi: Vec<[f64; 4]>,
}

/// Build the partition over variant 0's spatial embedding (median split of the widest axis),
/// then fill every node's box for every variant. Returns the tree and the permutation (tree
/// position p holds original object perm[p]).
fn build_tree(pts: &[Pts]) -> (STree, Vec<usize>) {
    let c = &pts[0].c;
    let n = c[0].len();
    let mut perm: Vec<usize> = (0..n).collect();
    let mut nodes = Vec::with_capacity(2 * n / LEAF + 2);
    split_rec(c, &mut perm, 0, n, &mut nodes);
    let nv = pts.len();
    let mut lo = vec![[f64::INFINITY; 4]; nodes.len() * nv];
    let mut hi = vec![[f64::NEG_INFINITY; 4]; nodes.len() * nv];
    // children have larger indices than parents: fill leaves from points, parents from children
    for id in (0..nodes.len()).rev() {
        let nd = nodes[id];
        for k in 0..nv {
            let (mut l, mut h) = ([f64::INFINITY; 4], [f64::NEG_INFINITY; 4]);
            if nd.is_leaf() {
                // an empty t column (flat metrics) means t = 0
                let dims = if pts[k].c[3].is_empty() { 3 } else { 4 };
                if dims == 3 {
                    (l[3], h[3]) = (0.0, 0.0);
                }
                for &p in &perm[nd.start..nd.end] {
                    for d in 0..dims {
                        l[d] = l[d].min(pts[k].c[d][p]);
                        h[d] = h[d].max(pts[k].c[d][p]);
                    }
                }
            } else {
                for ch in [nd.left as usize, nd.right as usize] {
                    for d in 0..4 {
                        l[d] = l[d].min(lo[ch * nv + k][d]);
                        h[d] = h[d].max(hi[ch * nv + k][d]);
                    }
                }
            }
            lo[id * nv + k] = l;
            hi[id * nv + k] = h;
        }
    }
    (STree { nodes, nv, lo, hi }, perm)
}

fn split_rec(
    c: &[Vec<f64>; 4],
    perm: &mut [usize],
    start: usize,
    end: usize,
    nodes: &mut Vec<SNode>,
) -> u32 {
    let id = nodes.len();
    nodes.push(SNode {
        start,
        end,
        left: 0,
        right: 0,
    });
    if end - start > LEAF {
        let (mut lo, mut hi) = ([f64::INFINITY; 3], [f64::NEG_INFINITY; 3]);
        for &p in &perm[start..end] {
            for d in 0..3 {
                lo[d] = lo[d].min(c[d][p]);
                hi[d] = hi[d].max(c[d][p]);
            }
        }
        let dim = (0..3)
            .max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y])))
            .unwrap_or(0);
        let mid = (start + end) / 2;
        perm[start..end]
            .select_nth_unstable_by(mid - start, |&x, &y| c[dim][x].total_cmp(&c[dim][y]));
        let l = split_rec(c, perm, start, mid, nodes);
        let r = split_rec(c, perm, mid, end, nodes);
        nodes[id].left = l;
        nodes[id].right = r;
    }
    id as u32
}

/// Conservative [qmin, qmax] of q over all pairs of points from two 4-D boxes, for metric kind
/// `kind` (the single-fiducial engine's `tree::box_bounds`, chosen at run time per variant).
fn box_bounds(
    kind: u8,
    g: &Geo,
    alo: &[f64; 4],
    ahi: &[f64; 4],
    blo: &[f64; 4],
    bhi: &[f64; 4],
) -> (f64, f64) {
    let (l, hl) = (g.box_l, g.half_l);
    match kind {
        PER => tree::box_bounds::<PER>(alo, ahi, blo, bhi, l, hl),
        CLO => tree::box_bounds::<CLO>(alo, ahi, blo, bhi, l, hl),
        OPE => tree::box_bounds::<OPE>(alo, ahi, blo, bhi, l, hl),
        _ => tree::box_bounds::<FLAT>(alo, ahi, blo, bhi, l, hl),
    }
}

/// One variant's prepared data.
struct Var {
    geo: Geo,
    bn: Binner,
    pa: Pts,
    pb: Option<Pts>,
    q_lo_pad: f64,
    q_hi_pad: f64,
    quant: Quant,
    leaf: LeafFn,
}

#[derive(Clone, Copy)]
struct STask {
    a: u32,
    b: u32,
    same: bool,
    /// Variants still alive (not pruned at an ancestor).
    alive: u32,
}

/// Number of top-level node pairs (the work units of the threads).
const TASK_TARGET: usize = 4096;

struct SWalker<'a> {
    ta: &'a STree,
    tb: &'a STree,
    vars: &'a [Var],
}

impl SWalker<'_> {
    /// The subset of `alive` for which the node pair can hold a pair in range.
    fn alive(&self, t: &STask) -> u32 {
        let nv = self.ta.nv;
        let mut out = 0u32;
        let mut m = t.alive;
        while m != 0 {
            let k = m.trailing_zeros() as usize;
            m &= m - 1;
            let v = &self.vars[k];
            let (ia, ib) = (t.a as usize * nv + k, t.b as usize * nv + k);
            let (qmin, qmax) = box_bounds(
                v.geo.kind,
                &v.geo,
                &self.ta.lo[ia],
                &self.ta.hi[ia],
                &self.tb.lo[ib],
                &self.tb.hi[ib],
            );
            if !(qmin >= v.q_hi_pad || qmax < v.q_lo_pad) {
                out |= 1 << k;
            }
        }
        out
    }

    fn is_leaf_pair(&self, t: &STask) -> bool {
        self.ta.nodes[t.a as usize].is_leaf() && self.tb.nodes[t.b as usize].is_leaf()
    }

    fn split(&self, t: STask, out: &mut Vec<STask>) {
        let a = self.ta.nodes[t.a as usize];
        let b = self.tb.nodes[t.b as usize];
        let mk = |x: u32, y: u32, same: bool| STask {
            a: x,
            b: y,
            same,
            alive: t.alive,
        };
        if t.same {
            out.push(mk(a.left, a.left, true));
            out.push(mk(a.left, a.right, false));
            out.push(mk(a.right, a.right, true));
        } else if a.is_leaf() || (!b.is_leaf() && b.len() > a.len()) {
            out.push(mk(t.a, b.left, false));
            out.push(mk(t.a, b.right, false));
        } else {
            out.push(mk(a.left, t.b, false));
            out.push(mk(a.right, t.b, false));
        }
    }

    fn tasks(&self, root: STask) -> Vec<STask> {
        let mut cur = vec![root];
        loop {
            if cur.len() >= TASK_TARGET {
                break;
            }
            let mut next = Vec::with_capacity(cur.len() * 3);
            let mut grew = false;
            for &t in &cur {
                let alive = self.alive(&t);
                if alive == 0 {
                    continue;
                }
                let t = STask { alive, ..t };
                if self.is_leaf_pair(&t) {
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

    fn walk(&self, t: STask, accs: &mut [Acc], stack: &mut Vec<STask>) {
        stack.clear();
        stack.push(t);
        while let Some(t) = stack.pop() {
            let alive = self.alive(&t);
            if alive == 0 {
                continue;
            }
            let t = STask { alive, ..t };
            if self.is_leaf_pair(&t) {
                let a = self.ta.nodes[t.a as usize];
                let b = self.tb.nodes[t.b as usize];
                let nv = self.tb.nv;
                let mut m = alive;
                while m != 0 {
                    let k = m.trailing_zeros() as usize;
                    m &= m - 1;
                    let v = &self.vars[k];
                    // rows farther than the variant's cut from its b leaf box are skipped
                    let ib = t.b as usize * nv + k;
                    let lp = LeafPair {
                        b_lo: self.tb.lo[ib],
                        b_hi: self.tb.hi[ib],
                        q_cut: if t.same { f64::INFINITY } else { v.q_hi_pad },
                        ..LeafPair::plain(a.start, a.end, b.start, b.end, t.same)
                    };
                    let pb = v.pb.as_ref().unwrap_or(&v.pa);
                    (v.leaf)(&v.pa, pb, lp, &v.geo, &v.bn, &mut accs[k]);
                }
            } else {
                let n0 = stack.len();
                self.split(t, stack);
                stack[n0..].reverse();
            }
        }
    }
}

fn sweep_impl(
    a: &[PointSet],
    b: Option<&[PointSet]>,
    metrics: &[Metric],
    cfg: &SweepConfig,
) -> crate::Result<Vec<PairCounts>> {
    check_lists(a, b, metrics)?;
    let nv = metrics.len();
    let mut pa_list = Vec::with_capacity(nv);
    let mut pb_list = Vec::with_capacity(nv);
    let mut geo_bn = Vec::with_capacity(nv);
    for (k, m) in metrics.iter().enumerate() {
        let ccfg = single_cfg(cfg, *m);
        let (geo, bn) = check_config(&ccfg)?;
        let name_a = if b.is_some() {
            format!("variant {k}: catalogue A")
        } else {
            format!("variant {k}: catalogue")
        };
        pa_list.push(prepare(a[k].clone(), &name_a, &ccfg, &geo)?);
        if let Some(b) = b {
            pb_list.push(prepare(
                b[k].clone(),
                &format!("variant {k}: catalogue B"),
                &ccfg,
                &geo,
            )?);
        }
        geo_bn.push((geo, bn));
    }
    let (ta, perm_a) = build_tree(&pa_list);
    let pa_list: Vec<Pts> = pa_list.into_iter().map(|p| permute(p, &perm_a)).collect();
    let tb_perm = if b.is_some() {
        let (t, perm) = build_tree(&pb_list);
        pb_list = pb_list.into_iter().map(|p| permute(p, &perm)).collect();
        Some(t)
    } else {
        None
    };
    let tb = tb_perm.as_ref().unwrap_or(&ta);
    let mu = cfg.binning.n_mu > 1;
    let mut pb_iter = pb_list.into_iter();
    let vars: Vec<Var> = pa_list
        .into_iter()
        .zip(geo_bn)
        .map(|(pa, (geo, bn))| {
            let pb = pb_iter.next();
            // same padding rule as the single-fiducial engine
            let scale = std::iter::once(&pa)
                .chain(pb.as_ref())
                .flat_map(|p| p.c.iter())
                .flat_map(|v| v.iter())
                .fold(geo.box_l, |m, &v| m.max(v.abs()));
            let slack = 1e-12 * scale;
            let q_hi_pad = (bn.qhi().sqrt() + slack).powi(2) * (1.0 + 1e-9);
            let q_lo_pad = (bn.qlo().max(0.0).sqrt() - slack).max(0.0).powi(2) * (1.0 - 1e-9);
            let quant = Quant::for_data(&pa, pb.as_ref(), cfg.binning.s_max())?;
            let pbr = pb.as_ref().unwrap_or(&pa);
            let (flags, kind) = match DataFlags::mixed_z(&pa, pbr) {
                true => (DataFlags::default(), KernelKind::Reference),
                false => (DataFlags::of(&pa, pbr), KernelKind::Fast),
            };
            Ok(Var {
                leaf: kernel::pick_for(kind, geo.kind, mu, Simd::detect(), flags),
                quant,
                geo,
                bn,
                pa,
                pb,
                q_lo_pad,
                q_hi_pad,
            })
        })
        .collect::<crate::Result<_>>()?;
    let w = SWalker {
        ta: &ta,
        tb,
        vars: &vars,
    };
    let all: u32 = if nv == 32 { u32::MAX } else { (1u32 << nv) - 1 };
    let tasks = w.tasks(STask {
        a: 0,
        b: 0,
        same: b.is_none(),
        alive: all,
    });
    let nb = cfg.binning.n_bins();
    let nreg = cfg.n_regions;
    let zeros = || -> Vec<PairCounts> {
        (0..nv)
            .map(|_| PairCounts::zeros(cfg.binning.clone(), nreg))
            .collect()
    };
    let new_accs = || -> Vec<Acc> { vars.iter().map(|v| Acc::new(nb, nreg, v.quant)).collect() };
    let pool = super::build_pool(cfg.threads)?;
    let out = pool.install(|| {
        tasks
            .par_iter()
            .fold(
                || (new_accs(), zeros(), Vec::new()),
                |(mut accs, mut pcs, mut stack), &t| {
                    w.walk(t, &mut accs, &mut stack);
                    for (acc, pc) in accs.iter_mut().zip(pcs.iter_mut()) {
                        acc.flush(pc);
                    }
                    (accs, pcs, stack)
                },
            )
            .map(|(_, pcs, _)| pcs)
            .reduce(zeros, |mut x, y| {
                for (p, q) in x.iter_mut().zip(&y) {
                    super::add_counts(p, q);
                }
                x
            })
    });
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// c/H0 in Mpc/h (exact by SI definition of c).
    const C_OVER_H0: f64 = 2997.92458;

    /// A sky cap around +z with chi0 in [900, 1500]; variant positions rescale the radial
    /// distance by a smooth monotone map per variant (like a change of fiducial). Weights are
    /// dyadic (multiples of 1/8 in [0.5, 1.5]) so weighted pair sums are exact in f64.
    fn sets(n: usize, seed: u64, stretches: &[f64]) -> Vec<PointSet> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let cmin = 12f64.to_radians().cos();
        let mut base = Vec::new();
        for _ in 0..n {
            let ct: f64 = rng.gen_range(cmin..1.0);
            let st = (1.0 - ct * ct).sqrt();
            let ph: f64 = rng.gen_range(0.0..std::f64::consts::TAU);
            let chi: f64 = rng.gen_range(900.0..1500.0);
            let w = 0.5 + rng.gen_range(0..9) as f64 / 8.0;
            let reg = rng.gen_range(0..4u32);
            base.push((st * ph.cos(), st * ph.sin(), ct, chi, w, reg));
        }
        stretches
            .iter()
            .map(|&e| {
                let mut p = PointSet::default();
                for &(ux, uy, uz, chi, w, reg) in &base {
                    let c = chi * (1.0 + e * chi / 3000.0);
                    p.x.push(c * ux);
                    p.y.push(c * uy);
                    p.z.push(c * uz);
                    p.w.push(w);
                    p.redshift.push(chi / 3000.0);
                    p.region.push(reg);
                }
                p
            })
            .collect()
    }

    fn metrics() -> Vec<Metric> {
        vec![
            Metric::Closed {
                radius: C_OVER_H0 / 0.1f64.sqrt(),
            },
            Metric::Open {
                radius: C_OVER_H0 / 0.05f64.sqrt(),
            },
            Metric::Euclidean,
            Metric::Closed {
                radius: C_OVER_H0 / 0.05f64.sqrt(),
            },
            Metric::Euclidean,
        ]
    }

    fn assert_same(sw: &[PairCounts], rf: &[PairCounts]) {
        assert_eq!(sw.len(), rf.len());
        for (s, r) in sw.iter().zip(rf) {
            // every column bit for bit, although the sweep walks a different tree
            assert_eq!(s, r);
            assert!(s.npairs.iter().sum::<u64>() > 1000, "test must count pairs");
        }
    }

    // Reference: separate single-fiducial counts (`count_auto` / `count_cross`), which are
    // themselves tested against brute force in pairs::tests.
    #[test]
    fn sweep_auto_equals_single_counts() {
        let st = [-0.04, 0.03, 0.0, -0.02, -0.04];
        let p = sets(1500, 7, &st);
        for n_mu in [1, 3] {
            let cfg = SweepConfig {
                binning: Binning::new(vec![5.0, 20.0, 40.0, 70.0, 110.0], n_mu).unwrap(),
                n_regions: 4,
                threads: 2,
            };
            let sw = sweep_auto(&p, &metrics(), &cfg).unwrap();
            let rf = sweep_auto_reference(&p, &metrics(), &cfg).unwrap();
            assert_same(&sw, &rf);
        }
    }

    #[test]
    fn sweep_cross_equals_single_counts() {
        let st = [-0.04, 0.03, 0.0, -0.02, -0.04];
        let a = sets(900, 11, &st);
        let b = sets(1300, 12, &st);
        let cfg = SweepConfig {
            binning: Binning::new(vec![0.0, 30.0, 60.0, 90.0], 1).unwrap(),
            n_regions: 4,
            threads: 3,
        };
        let sw = sweep_cross(&a, &b, &metrics(), &cfg).unwrap();
        let rf = sweep_cross_reference(&a, &b, &metrics(), &cfg).unwrap();
        assert_same(&sw, &rf);
    }

    #[test]
    fn thread_count_does_not_change_bits() {
        let st = [0.0, 0.03, -0.03];
        let p = sets(1200, 3, &st);
        let m = vec![
            Metric::Euclidean,
            Metric::Open { radius: 9000.0 },
            Metric::Closed { radius: 9000.0 },
        ];
        let mk = |threads| SweepConfig {
            binning: Binning::new(vec![10.0, 50.0, 100.0], 2).unwrap(),
            n_regions: 4,
            threads,
        };
        let x = sweep_auto(&p, &m, &mk(1)).unwrap();
        let y = sweep_auto(&p, &m, &mk(4)).unwrap();
        assert_eq!(x, y);
    }

    #[test]
    fn bad_input_is_an_input_error() {
        let p = sets(50, 1, &[0.0, 0.01]);
        let cfg = SweepConfig {
            binning: Binning::new(vec![0.0, 10.0], 1).unwrap(),
            n_regions: 0,
            threads: 1,
        };
        let code = |r: crate::Result<Vec<PairCounts>>| r.unwrap_err().exit_code();
        assert_eq!(code(sweep_auto(&p, &[Metric::Euclidean], &cfg)), 2);
        assert_eq!(code(sweep_auto(&p[..0], &[], &cfg)), 2);
        let mut q = p.clone();
        q[1].x.pop();
        assert_eq!(
            code(sweep_auto(
                &q,
                &[Metric::Euclidean, Metric::Euclidean],
                &cfg
            )),
            2
        );
        assert_eq!(
            code(sweep_auto(
                &p,
                &[Metric::Euclidean, Metric::Closed { radius: 1.0 }],
                &cfg
            )),
            2
        );
    }
}
