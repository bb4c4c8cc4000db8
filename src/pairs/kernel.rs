//! Per-pair formulas, bin lookup, per-task accumulators and the leaf-pair kernels.
//!
//! Every metric is reduced to one quadratic form on 4-D "embedding" coordinates (c0, c1, c2, t):
//! `q = dc0^2 + dc1^2 + dc2^2 + sigma dt^2` with sigma = 0 (flat, periodic), +1 (closed), -1
//! (open). `q` is a strictly increasing function of the separation s, so bins are compared in
//! q-space against transformed edges and s itself is only evaluated for counted pairs.
//!
//! Two leaf kernels live side by side: `leaf_ref` (plain loops, binary-search bin) and
//! `leaf_fast` (chunks of 4 or 8 lanes: a branch-free arithmetic pass that auto-vectorises, then a
//! lookup-table bin index with one exact compare each way and a scatter of the accepted lanes only into
//! interleaved sub-histograms), compiled for AVX-512 / AVX2 via `#[target_feature]` wrappers
//! chosen at run time, or as portable code. Both evaluate each pair with the same floating-point
//! expressions and add pair terms in the same order to the same sub-histogram, so they give
//! bitwise identical results on every target.
use super::counts::{to_fixed, PairCounts};

pub(crate) const FLAT: u8 = 0;
pub(crate) const PER: u8 = 1;
pub(crate) const CLO: u8 = 2;
pub(crate) const OPE: u8 = 3;

/// Metric constants needed inside the kernels.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Geo {
    pub kind: u8,
    /// Periodic box side and half side (0 otherwise).
    pub box_l: f64,
    pub half_l: f64,
    /// Curvature radius R (0 for flat metrics).
    pub radius: f64,
}

impl Geo {
    /// q as a function of the separation s: s^2 (flat), (2R sin(s/2R))^2 (closed: squared chord of
    /// the 4-D sphere of radius R), (2R sinh(s/2R))^2 (open: squared Minkowski interval between
    /// points of the hyperboloid of radius R).
    pub fn q_of_s(&self, s: f64) -> f64 {
        match self.kind {
            CLO => {
                let c = 2.0 * self.radius * (s / (2.0 * self.radius)).sin();
                c * c
            }
            OPE => {
                let c = 2.0 * self.radius * (s / (2.0 * self.radius)).sinh();
                c * c
            }
            _ => s * s,
        }
    }
}

/// Separation from q, the inverse of `Geo::q_of_s`.
#[inline(always)]
pub(crate) fn s_of_q<const K: u8>(q: f64, radius: f64) -> f64 {
    let c = q.max(0.0).sqrt();
    if K == CLO {
        2.0 * radius * (c / (2.0 * radius)).min(1.0).asin()
    } else if K == OPE {
        2.0 * radius * (c / (2.0 * radius)).asinh()
    } else {
        c
    }
}

/// Minimum-image difference for coordinates already wrapped into [0, L).
#[inline(always)]
fn wrap(d: f64, l: f64, hl: f64) -> f64 {
    if d > hl {
        d - l
    } else if d < -hl {
        d + l
    } else {
        d
    }
}

/// The quadratic form q for one pair and the (wrapped) z difference used by the periodic mu.
/// The operation order (spatial squares first, then the t term) matches `node_bounds`, which makes
/// the tree bounds monotone-consistent with the pair values.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
pub(crate) fn pair_q<const K: u8>(
    ax: f64,
    ay: f64,
    az: f64,
    at: f64,
    bx: f64,
    by: f64,
    bz: f64,
    bt: f64,
    l: f64,
    hl: f64,
) -> (f64, f64) {
    let mut dx = ax - bx;
    let mut dy = ay - by;
    let mut dz = az - bz;
    if K == PER {
        dx = wrap(dx, l, hl);
        dy = wrap(dy, l, hl);
        dz = wrap(dz, l, hl);
    }
    let mut q = dx * dx + dy * dy + dz * dz;
    if K == CLO {
        let dt = at - bt;
        q += dt * dt;
    } else if K == OPE {
        let dt = at - bt;
        q -= dt * dt;
    }
    (q, dz)
}

/// |cos| of the angle between the flat separation vector d = x1 - x2 and the pair midpoint line of
/// sight m ∝ x1 + x2 (0 when either vector vanishes).
#[allow(clippy::too_many_arguments)]
#[inline(always)]
pub(crate) fn mu_flat(ax: f64, ay: f64, az: f64, bx: f64, by: f64, bz: f64) -> f64 {
    let (dx, dy, dz) = (ax - bx, ay - by, az - bz);
    let (mx, my, mz) = (ax + bx, ay + by, az + bz);
    let dot = dx * mx + dy * my + dz * mz;
    let den = (dx * dx + dy * dy + dz * dz) * (mx * mx + my * my + mz * mz);
    if den > 0.0 {
        dot.abs() / den.sqrt()
    } else {
        0.0
    }
}

/// Points in kernel layout (struct of arrays).
#[derive(Debug, Clone, Default)]
pub(crate) struct Pts {
    /// Embedding coordinates: c[0..3] spatial (flat positions, wrapped box positions, or the
    /// curved embedding R S(chi/R) u), c[3] = t (0 for flat metrics).
    pub c: [Vec<f64>; 4],
    /// Flat Cartesian positions for mu in curved metrics (empty otherwise).
    pub f: [Vec<f64>; 3],
    pub w: Vec<f64>,
    pub z: Vec<f64>,
    /// Region labels (empty when no regions are used).
    pub reg: Vec<u32>,
}

impl Pts {
    pub fn len(&self) -> usize {
        self.w.len()
    }
}

/// mu of pair (i, j) for metric K (only called when mu is binned).
#[inline(always)]
pub(crate) fn pair_mu<const K: u8>(a: &Pts, i: usize, b: &Pts, j: usize, q: f64, dz: f64) -> f64 {
    if K == PER {
        if q > 0.0 {
            dz.abs() / q.sqrt()
        } else {
            0.0
        }
    } else if K == FLAT {
        mu_flat(
            a.c[0][i], a.c[1][i], a.c[2][i], b.c[0][j], b.c[1][j], b.c[2][j],
        )
    } else {
        mu_flat(
            a.f[0][i], a.f[1][i], a.f[2][i], b.f[0][j], b.f[1][j], b.f[2][j],
        )
    }
}

/// Bin lookup in q-space.
#[derive(Debug, Clone)]
pub(crate) struct Binner {
    /// Transformed edges q(e_k), strictly increasing.
    pub qe: Vec<f64>,
    pub n_s: usize,
    pub n_mu: usize,
    pub nb: usize,
    /// Lookup table over [qe[0], qe[n_s]): cell -> bin containing the cell centre. Cells are at
    /// most a quarter of the narrowest bin, so a cell (even widened by a rounding slip of one
    /// cell on either side) touches at most one edge and one compare each way corrects it.
    table: Vec<u32>,
    inv_h: f64,
    last_cell: f64,
    /// False when the table would be too large (very uneven bins); kernels then use binary search.
    pub table_ok: bool,
}

const MAX_CELLS: usize = 1 << 20;

impl Binner {
    pub fn new(qe: Vec<f64>, n_mu: usize) -> Self {
        let n_s = qe.len() - 1;
        let range = qe[n_s] - qe[0];
        let min_w = qe
            .windows(2)
            .map(|w| w[1] - w[0])
            .fold(f64::INFINITY, f64::min);
        let cells = (4.0 * range / min_w).ceil();
        let mut b = Binner {
            qe,
            n_s,
            n_mu,
            nb: n_s * n_mu,
            table: Vec::new(),
            inv_h: 0.0,
            last_cell: 0.0,
            table_ok: false,
        };
        if cells.is_finite() && cells >= 1.0 && (cells as usize) <= MAX_CELLS {
            let m = cells as usize;
            let h = range / m as f64;
            b.inv_h = m as f64 / range;
            b.last_cell = (m - 1) as f64;
            b.table = (0..m)
                .map(|c| {
                    let mid = b.qe[0] + (c as f64 + 0.5) * h;
                    b.s_bin_exact(mid.min(b.qe[n_s]).max(b.qe[0])).min(n_s - 1) as u32
                })
                .collect();
            b.table_ok = true;
        }
        b
    }

    pub fn qlo(&self) -> f64 {
        self.qe[0]
    }
    pub fn qhi(&self) -> f64 {
        self.qe[self.n_s]
    }

    /// Separation bin by binary search (reference); requires qlo <= q < qhi.
    #[inline(always)]
    pub fn s_bin_exact(&self, q: f64) -> usize {
        self.qe[1..self.n_s].partition_point(|&e| e <= q)
    }

    /// Table cell of q as an f64 (clamped), computed in the vectorisable lane loop.
    #[inline(always)]
    pub fn cell(&self, q: f64) -> f64 {
        ((q - self.qe[0]) * self.inv_h).max(0.0).min(self.last_cell)
    }

    /// Separation bin from the table cell plus one exact compare each way (equals
    /// `s_bin_exact`). Requires `cell` from `Binner::cell` and qlo <= q < qhi.
    #[inline(always)]
    pub fn s_bin_from_cell(&self, cell: f64, q: f64) -> usize {
        let t = cell as usize;
        debug_assert!(t < self.table.len());
        // SAFETY: cell is clamped to [0, table.len() - 1] (NaN casts to 0); table entries are
        // <= n_s - 1, so b + 1 <= n_s and, after the upward step, b <= n_s, all within qe.
        unsafe {
            let b = *self.table.get_unchecked(t) as usize;
            let b = b + (q >= *self.qe.get_unchecked(b + 1)) as usize;
            b.wrapping_sub((q < *self.qe.get_unchecked(b)) as usize)
        }
    }

    #[inline(always)]
    pub fn mu_bin(&self, mu: f64) -> usize {
        ((mu * self.n_mu as f64) as usize).min(self.n_mu - 1)
    }
}

/// Number of interleaved sub-histograms: pair (i, j) adds into sub-histogram j mod SUB. This
/// breaks the add-latency chains when consecutive pairs hit the same bin, and because the
/// assignment depends only on j (not on the lane width) both kernels sum identically.
pub(crate) const SUB: usize = 8;

/// Per-task f64 accumulators. A task (a top-level node pair) is summed in a fixed pair order and
/// then converted to fixed point once, so totals do not depend on how tasks are spread over
/// threads or shards. Each bin holds [count, w1w2, w1w2 s, w1w2 (z1+z2)/2]; counts are exact in
/// f64 (< 2^53 per task). Slot `nb` of every sub-histogram is a spare slot (no longer written by the fast kernel).
pub(crate) struct Acc {
    nb: usize,
    nreg: usize,
    h: Vec<[f64; 4]>,
    rb: Vec<f64>,
    ro: Vec<f64>,
    rdirty: Vec<bool>,
    rlist: Vec<usize>,
    /// Set by the unit-weight kernels, which skip the w1w2 column: every pair then has
    /// w1w2 = 1 exactly, so its per-bin sum equals the (exact) count and is filled in at flush.
    unit_w: bool,
}

impl Acc {
    pub fn new(nb: usize, nreg: usize) -> Self {
        Acc {
            nb,
            nreg,
            h: vec![[0.0; 4]; SUB * (nb + 1)],
            rb: vec![0.0; nb * nreg],
            ro: vec![0.0; nb * nreg],
            rdirty: vec![false; nb * nreg],
            rlist: Vec::new(),
            unit_w: false,
        }
    }

    /// Bytes held by one accumulator (for the memory estimate).
    pub fn bytes(nb: usize, nreg: usize) -> u64 {
        (SUB * (nb + 1) * 32 + nb * nreg * 25) as u64
    }

    #[inline(always)]
    fn touch(&mut self, slot: usize) {
        if !self.rdirty[slot] {
            self.rdirty[slot] = true;
            self.rlist.push(slot);
        }
    }

    /// Add one pair's terms to bin `bin` (or the trash bin `nb`) of sub-histogram `j % SUB`.
    #[inline(always)]
    fn add(&mut self, j: usize, bin: usize, ww: f64, wsv: f64, wzv: f64) {
        let h = &mut self.h[(j % SUB) * (self.nb + 1) + bin];
        h[0] += 1.0;
        h[1] += ww;
        h[2] += wsv;
        h[3] += wzv;
    }

    #[inline(always)]
    fn add_regions(&mut self, bin: usize, ww: f64, r1: u32, r2: u32) {
        let s1 = r1 as usize * self.nb + bin;
        if r1 == r2 {
            self.touch(s1);
            self.rb[s1] += ww;
        } else {
            let s2 = r2 as usize * self.nb + bin;
            self.touch(s1);
            self.touch(s2);
            self.ro[s1] += ww;
            self.ro[s2] += ww;
        }
    }

    /// Convert the task's sums to fixed point, add them to `out`, and reset.
    pub fn flush(&mut self, out: &mut PairCounts) {
        let st = self.nb + 1;
        for b in 0..self.nb {
            let mut t = [0.0f64; 4];
            for k in 0..SUB {
                let h = &mut self.h[k * st + b];
                for (x, y) in t.iter_mut().zip(h.iter()) {
                    *x += *y;
                }
                *h = [0.0; 4];
            }
            if self.unit_w {
                t[1] = t[0];
            }
            if t[0] != 0.0 {
                out.npairs[b] += t[0] as u64;
                out.wpairs[b] += to_fixed(t[1]);
                out.ws[b] += to_fixed(t[2]);
                out.wz[b] += to_fixed(t[3]);
            }
        }
        for k in 0..SUB {
            self.h[k * st + self.nb] = [0.0; 4]; // trash bin
        }
        for &s in &self.rlist {
            out.region_both[s] += to_fixed(self.rb[s]);
            out.region_one[s] += to_fixed(self.ro[s]);
            self.rb[s] = 0.0;
            self.ro[s] = 0.0;
            self.rdirty[s] = false;
        }
        self.rlist.clear();
        self.unit_w = false;
    }
}

/// Add the terms of a counted pair.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn record<const K: u8>(
    acc: &mut Acc,
    radius: f64,
    a: &Pts,
    i: usize,
    b: &Pts,
    j: usize,
    bin: usize,
    q: f64,
) {
    let s = s_of_q::<K>(q, radius);
    let ww = a.w[i] * b.w[j];
    let zz = 0.5 * (a.z[i] + b.z[j]);
    acc.add(j, bin, ww, ww * s, ww * zz);
    if acc.nreg > 0 {
        acc.add_regions(bin, ww, a.reg[i], b.reg[j]);
    }
}

/// Reference evaluation of one pair: plain compares and a binary search for the bin.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
pub(crate) fn ref_pair<const K: u8, const MU: bool>(
    a: &Pts,
    i: usize,
    b: &Pts,
    j: usize,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    let (q, dz) = pair_q::<K>(
        a.c[0][i], a.c[1][i], a.c[2][i], a.c[3][i], b.c[0][j], b.c[1][j], b.c[2][j], b.c[3][j],
        g.box_l, g.half_l,
    );
    if q >= bn.qlo() && q < bn.qhi() {
        let is = bn.s_bin_exact(q);
        let im = if MU {
            bn.mu_bin(pair_mu::<K>(a, i, b, j, q, dz))
        } else {
            0
        };
        record::<K>(acc, g.radius, a, i, b, j, is * bn.n_mu + im, q);
    }
}

/// Which leaf kernel to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum KernelKind {
    Reference,
    Fast,
    /// Test instrument: bin 0 gets one count per leaf pair and w1w2 = number of pair tests.
    #[cfg(test)]
    Tally,
}

#[cfg(test)]
fn leaf_tally(_: &Pts, _: &Pts, lp: LeafPair, _: &Geo, _: &Binner, acc: &mut Acc) {
    let (na, nb) = (lp.a1 - lp.a0, lp.b1 - lp.b0);
    let tests = if lp.same { na * (na - 1) / 2 } else { na * nb };
    acc.add(0, 0, tests as f64, 0.0, 0.0);
}

/// A leaf pair: index ranges into `a` and `b`; `same` means a == b (auto count of one leaf with
/// itself), in which case only j > i is visited.
#[derive(Clone, Copy)]
pub(crate) struct LeafPair {
    pub a0: usize,
    pub a1: usize,
    pub b0: usize,
    pub b1: usize,
    pub same: bool,
}

/// Plain reference kernel.
pub(crate) fn leaf_ref<const K: u8, const MU: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    for i in lp.a0..lp.a1 {
        let j0 = if lp.same { i + 1 } else { lp.b0 };
        for j in j0..lp.b1 {
            ref_pair::<K, MU>(a, i, b, j, g, bn, acc);
        }
    }
}

/// Fast kernel body, generic over the lane count L. Lane values are computed with the same
/// expressions as `ref_pair` (no fused operations: Rust never contracts a*b+c), the bin index is
/// branch-free (table + exact corrections, invalid lanes sent to the sentinel `nb`), and counted
/// pairs are added in ascending j order, so the result is bitwise that of `leaf_ref`.
#[inline(always)]
fn leaf_fast_body<const L: usize, const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    if !bn.table_ok {
        return leaf_ref::<K, MU>(a, b, lp, g, bn, acc);
    }
    let (qlo, qhi, n_mu, nb) = (bn.qlo(), bn.qhi(), bn.n_mu, bn.nb);
    let (l, hl) = (g.box_l, g.half_l);
    if UW {
        acc.unit_w = true;
    }
    for i in lp.a0..lp.a1 {
        let (ax, ay, az, at) = (a.c[0][i], a.c[1][i], a.c[2][i], a.c[3][i]);
        let (aw, az_) = (a.w[i], a.z[i]);
        let mut j = if lp.same { i + 1 } else { lp.b0 };
        while j + L <= lp.b1 {
            let bx: &[f64; L] = b.c[0][j..j + L].try_into().unwrap();
            let by: &[f64; L] = b.c[1][j..j + L].try_into().unwrap();
            let bz: &[f64; L] = b.c[2][j..j + L].try_into().unwrap();
            let bt: &[f64; L] = b.c[3][j..j + L].try_into().unwrap();
            let bw: &[f64; L] = b.w[j..j + L].try_into().unwrap();
            let bzz: &[f64; L] = b.z[j..j + L].try_into().unwrap();
            let mut qs = [0.0f64; L];
            let mut cells = [0.0f64; L];
            let mut ims = [0usize; L];
            let mut ss = [0.0f64; L];
            let mut wws = [0.0f64; L];
            let mut wzs = [0.0f64; L];
            let mut ok = [false; L];
            // pass 1: pure lane arithmetic (vectorisable: no table loads, no branches)
            for k in 0..L {
                let (q, dz) = pair_q::<K>(ax, ay, az, at, bx[k], by[k], bz[k], bt[k], l, hl);
                ok[k] = q >= qlo && q < qhi;
                cells[k] = bn.cell(q);
                if MU {
                    let mu = if K == PER {
                        if q > 0.0 {
                            dz.abs() / q.sqrt()
                        } else {
                            0.0
                        }
                    } else if K == FLAT {
                        mu_flat(ax, ay, az, bx[k], by[k], bz[k])
                    } else {
                        mu_flat(
                            a.f[0][i],
                            a.f[1][i],
                            a.f[2][i],
                            b.f[0][j + k],
                            b.f[1][j + k],
                            b.f[2][j + k],
                        )
                    };
                    ims[k] = bn.mu_bin(mu);
                }
                qs[k] = q;
                if K == FLAT || K == PER {
                    ss[k] = s_of_q::<K>(q, 0.0);
                }
                // unit weights: ww = 1 and ww * x = x exactly; zero redshifts: the z term is 0
                let ww = if UW { 1.0 } else { aw * bw[k] };
                wws[k] = ww;
                if !ZZ {
                    wzs[k] = if UW {
                        0.5 * (az_ + bzz[k])
                    } else {
                        ww * (0.5 * (az_ + bzz[k]))
                    };
                }
            }
            // pass 2: bin lookup (table + one exact compare each way) and scatter in j order.
            // Only accepted lanes are visited (all of them straight through when every lane is
            // accepted, else the set bits of the mask in ascending order), so the terms reach
            // each sub-histogram in the same order as in `leaf_ref`.
            let mut mask = 0u32;
            for (k, &o) in ok.iter().enumerate() {
                mask |= (o as u32) << k;
            }
            macro_rules! lane {
                ($k:expr) => {{
                    let k = $k;
                    let bin = bn
                        .s_bin_from_cell(cells[k], qs[k])
                        .wrapping_mul(n_mu)
                        .wrapping_add(ims[k]);
                    let s = if K == FLAT || K == PER {
                        ss[k]
                    } else {
                        s_of_q::<K>(qs[k], g.radius)
                    };
                    let h = &mut acc.h[((j + k) % SUB) * (nb + 1) + bin];
                    h[0] += 1.0;
                    if !UW {
                        h[1] += wws[k];
                    }
                    h[2] += if UW { s } else { wws[k] * s };
                    if !ZZ {
                        h[3] += wzs[k];
                    }
                    if acc.nreg > 0 {
                        acc.add_regions(bin, wws[k], a.reg[i], b.reg[j + k]);
                    }
                }};
            }
            if mask == (1u32 << L) - 1 {
                for k in 0..L {
                    lane!(k);
                }
            } else {
                while mask != 0 {
                    lane!(mask.trailing_zeros() as usize);
                    mask &= mask - 1;
                }
            }
            j += L;
        }
        while j < lp.b1 {
            ref_pair::<K, MU>(a, i, b, j, g, bn, acc);
            j += 1;
        }
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
unsafe fn leaf_avx512<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    leaf_fast_body::<8, K, MU, UW, ZZ>(a, b, lp, g, bn, acc)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn leaf_avx2<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    leaf_fast_body::<4, K, MU, UW, ZZ>(a, b, lp, g, bn, acc)
}

fn leaf_portable<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    leaf_fast_body::<4, K, MU, UW, ZZ>(a, b, lp, g, bn, acc)
}

/// Instruction-set level picked once per count.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Simd {
    Portable,
    #[cfg(target_arch = "x86_64")]
    Avx2,
    #[cfg(target_arch = "x86_64")]
    Avx512,
}

impl Simd {
    pub fn detect() -> Self {
        #[cfg(target_arch = "x86_64")]
        {
            if std::arch::is_x86_feature_detected!("avx512f") {
                return Simd::Avx512;
            }
            if std::arch::is_x86_feature_detected!("avx2") {
                return Simd::Avx2;
            }
        }
        Simd::Portable
    }
}

/// A monomorphised leaf kernel.
pub(crate) type LeafFn = fn(&Pts, &Pts, LeafPair, &Geo, &Binner, &mut Acc);

fn pick_fast<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(simd: Simd) -> LeafFn {
    match simd {
        #[cfg(target_arch = "x86_64")]
        // SAFETY: only chosen after `is_x86_feature_detected!("avx512f")` returned true.
        Simd::Avx512 => {
            |a, b, lp, g, bn, acc| unsafe { leaf_avx512::<K, MU, UW, ZZ>(a, b, lp, g, bn, acc) }
        }
        #[cfg(target_arch = "x86_64")]
        // SAFETY: only chosen after `is_x86_feature_detected!("avx2")` returned true.
        Simd::Avx2 => {
            |a, b, lp, g, bn, acc| unsafe { leaf_avx2::<K, MU, UW, ZZ>(a, b, lp, g, bn, acc) }
        }
        Simd::Portable => leaf_portable::<K, MU, UW, ZZ>,
    }
}

fn pick_w<const K: u8, const MU: bool>(simd: Simd, d: DataFlags) -> LeafFn {
    match (d.unit_w, d.zero_z) {
        (false, false) => pick_fast::<K, MU, false, false>(simd),
        (false, true) => pick_fast::<K, MU, false, true>(simd),
        (true, false) => pick_fast::<K, MU, true, false>(simd),
        (true, true) => pick_fast::<K, MU, true, true>(simd),
    }
}

fn pick_k<const K: u8>(kind: KernelKind, mu: bool, simd: Simd, d: DataFlags) -> LeafFn {
    match (kind, mu) {
        (KernelKind::Reference, false) => leaf_ref::<K, false>,
        (KernelKind::Reference, true) => leaf_ref::<K, true>,
        (KernelKind::Fast, false) => pick_w::<K, false>(simd, d),
        (KernelKind::Fast, true) => pick_w::<K, true>(simd, d),
        #[cfg(test)]
        (KernelKind::Tally, _) => leaf_tally,
    }
}

/// Properties of the data that let the fast kernel drop work without changing any bit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct DataFlags {
    /// Every weight in both catalogues is exactly 1.
    pub unit_w: bool,
    /// Every redshift in both catalogues is exactly 0 (boxes).
    pub zero_z: bool,
}

impl DataFlags {
    pub fn of(a: &Pts, b: &Pts) -> Self {
        DataFlags {
            unit_w: a.w.iter().chain(&b.w).all(|&w| w == 1.0),
            zero_z: a.z.iter().chain(&b.z).all(|&z| z == 0.0),
        }
    }
}

/// Choose the leaf kernel for a metric kind, mu binning and instruction set (general data).
pub(crate) fn pick(kind: KernelKind, metric: u8, mu: bool, simd: Simd) -> LeafFn {
    pick_for(kind, metric, mu, simd, DataFlags::default())
}

/// As `pick`, specialised for the data flags (see `DataFlags::of`).
pub(crate) fn pick_for(kind: KernelKind, metric: u8, mu: bool, simd: Simd, d: DataFlags) -> LeafFn {
    match metric {
        FLAT => pick_k::<FLAT>(kind, mu, simd, d),
        PER => pick_k::<PER>(kind, mu, simd, d),
        CLO => pick_k::<CLO>(kind, mu, simd, d),
        _ => pick_k::<OPE>(kind, mu, simd, d),
    }
}

#[cfg(test)]
mod flag_tests {
    //! The unit-weight / zero-redshift specialisations must give bitwise the reference kernel's
    //! result (the general tests use random weights and so never take these paths).
    use super::super::{count_impl, Binning, CountConfig, Metric, PointSet};
    use super::KernelKind;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn points(n: usize, seed: u64, unit_w: bool, zero_z: bool) -> PointSet {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut p = PointSet::default();
        for _ in 0..n {
            p.x.push(rng.gen_range(0.0..300.0));
            p.y.push(rng.gen_range(0.0..300.0));
            p.z.push(rng.gen_range(0.0..300.0));
            p.w.push(if unit_w { 1.0 } else { rng.gen_range(0.5..1.5) });
            p.redshift
                .push(if zero_z { 0.0 } else { rng.gen_range(0.4..0.7) });
            p.region.push(rng.gen_range(0..3));
        }
        p
    }

    #[test]
    fn specialised_kernels_are_bitwise_reference() {
        let edges: Vec<f64> = (0..=20).map(|i| 5.0 * i as f64).collect();
        for metric in [Metric::Euclidean, Metric::Periodic { box_size: 300.0 }] {
            for (uw, zz) in [(true, true), (true, false), (false, true)] {
                for (n_mu, n_regions) in [(1, 0), (3, 3)] {
                    let c = CountConfig {
                        binning: Binning::new(edges.clone(), n_mu).unwrap(),
                        metric,
                        n_regions,
                        threads: 2,
                        shard: (0, 1),
                    };
                    let a = points(1500, 1, uw, zz);
                    let b = points(700, 2, uw, zz);
                    let what = format!("{metric:?} uw={uw} zz={zz} n_mu={n_mu}");
                    let r = count_impl(&a, None, &c, KernelKind::Reference).unwrap();
                    let f = count_impl(&a, None, &c, KernelKind::Fast).unwrap();
                    assert!(r.npairs.iter().sum::<u64>() > 10_000, "{what}");
                    assert_eq!(r, f, "auto {what}");
                    if uw {
                        // w1 w2 = 1: the weighted sums equal the raw counts exactly
                        for (k, &np) in f.npairs.iter().enumerate() {
                            assert_eq!(super::super::from_fixed(f.wpairs[k]), np as f64);
                        }
                    }
                    let r = count_impl(&a, Some(&b), &c, KernelKind::Reference).unwrap();
                    let f = count_impl(&a, Some(&b), &c, KernelKind::Fast).unwrap();
                    assert_eq!(r, f, "cross {what}");
                }
            }
        }
    }
}
