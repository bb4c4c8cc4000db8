//! Per-pair formulas, bin lookup, per-task accumulators and the leaf-pair kernels.
//!
//! Every metric is reduced to one quadratic form on 4-D "embedding" coordinates (c0, c1, c2, t):
//! `q = dc0^2 + dc1^2 + dc2^2 + sigma dt^2` with sigma = 0 (flat, periodic), +1 (closed), -1
//! (open). `q` is a strictly increasing function of the separation s, so bins are compared in
//! q-space against transformed edges and s itself is only evaluated for counted pairs.
//!
//! Exactness and determinism: every counted pair's terms (w1 w2, w1 w2 s, w1 w2 (z1+z2)/2) are
//! rounded to fixed point ONE PAIR AT A TIME (`Quant`) and summed as integers. Integer sums do
//! not depend on the order or grouping of pairs, so any traversal (tree shape, task split,
//! threads, shards, the one-pass fiducial sweep) gives bitwise the same totals.
//!
//! Kernels side by side, all bitwise equal: `leaf_ref` (plain loops, binary-search bin, i128
//! adds), `leaf_fast` (chunks of 4 or 8 lanes: a branch-free arithmetic pass that
//! auto-vectorises, then a table bin lookup with one exact compare), compiled for AVX2 or as
//! portable code, and the AVX-512 kernel in `simd512` (counts without mu bins in flat, periodic
//! and, for s_max small against R, curved metrics: vector arithmetic, then branch-free scalar
//! adds into per-lane integer histograms, so no two lanes ever touch the same slot) with its
//! AVX2 counterpart in `simd256` for the same cases. The instruction set is chosen at run time
//! (`Simd::detect`).
use super::counts::{PairCounts, FRAC_BITS};

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

/// Largest x = chord / 2R for which `s_of_q` takes asin / asinh from their Taylor series.
pub(crate) const SERIES_X_MAX: f64 = 0.05;
/// Taylor coefficients of asin(x) and asinh(x) for x^3 ... x^11 (the x^13 term, below
/// 0.018 x^13, is < 5e-18 x for x <= 0.05: far below half an ulp).
pub(crate) const ASIN_C: [f64; 5] = [
    1.0 / 6.0,
    3.0 / 40.0,
    5.0 / 112.0,
    35.0 / 1152.0,
    63.0 / 2816.0,
];
pub(crate) const ASINH_C: [f64; 5] = [
    -1.0 / 6.0,
    3.0 / 40.0,
    -5.0 / 112.0,
    35.0 / 1152.0,
    -63.0 / 2816.0,
];

/// x + x^3 c0 + ... + x^11 c4 in a fixed operation order (the SIMD kernel repeats it).
#[inline(always)]
pub(crate) fn odd_series(x: f64, c: &[f64; 5]) -> f64 {
    let x2 = x * x;
    let p = c[0] + x2 * (c[1] + x2 * (c[2] + x2 * (c[3] + x2 * c[4])));
    x + x * (x2 * p)
}

/// Separation from q, the inverse of `Geo::q_of_s`. For curved metrics at separations small
/// against the curvature radius (every realistic BAO binning) asin / asinh come from their
/// series, which the SIMD kernel evaluates identically; libm beyond that.
#[inline(always)]
pub(crate) fn s_of_q<const K: u8>(q: f64, radius: f64) -> f64 {
    let c = q.max(0.0).sqrt();
    if K == CLO {
        let x = (c / (2.0 * radius)).min(1.0);
        let a = if x <= SERIES_X_MAX {
            odd_series(x, &ASIN_C)
        } else {
            x.asin()
        };
        2.0 * radius * a
    } else if K == OPE {
        let x = c / (2.0 * radius);
        let a = if x <= SERIES_X_MAX {
            odd_series(x, &ASINH_C)
        } else {
            x.asinh()
        };
        2.0 * radius * a
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
    /// curved embedding R S(chi/R) u), c[3] = t (curved metrics only; empty, i.e. all 0, for
    /// flat and periodic ones, which never read it).
    pub c: [Vec<f64>; 4],
    /// Flat Cartesian positions for mu in curved metrics (empty otherwise).
    pub f: [Vec<f64>; 3],
    pub w: Vec<f64>,
    /// Redshifts; empty when all are 0 (boxes).
    pub z: Vec<f64>,
    /// Region labels (empty when no regions are used).
    pub reg: Vec<u32>,
}

impl Pts {
    pub fn len(&self) -> usize {
        self.w.len()
    }
    /// Redshift of point i (0 when none are stored).
    #[inline(always)]
    pub fn z_at(&self, i: usize) -> f64 {
        if self.z.is_empty() {
            0.0
        } else {
            self.z[i]
        }
    }
    /// Embedding t of point i for metric K (0 for flat metrics, which store none).
    #[inline(always)]
    pub fn t_at<const K: u8>(&self, i: usize) -> f64 {
        if K == CLO || K == OPE {
            self.c[3][i]
        } else {
            0.0
        }
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
    /// Lookup table over [qe[0], qe[n_s]) in cells of width h <= (narrowest bin)/4. For cell c,
    /// `base[c]` is the bin holding p_c = qe[0] + (c - 1.5) h (bin 0 below qe[0]) and
    /// `edge[c] = qe[base[c] + 1]`. Any q whose computed cell is c lies in [p_c, p_c + 3.5 h)
    /// (the cell formula may slip by one cell either way through rounding); that window is
    /// narrower than every bin, so it holds at most one edge and the bin of q is exactly
    /// `base[c] + (q >= edge[c])`.
    pub base: Vec<i64>,
    pub edge: Vec<f64>,
    pub inv_h: f64,
    pub last_cell: f64,
    /// False when the table would be too large (very uneven bins); kernels then use binary search.
    pub table_ok: bool,
    /// Linear edges in a flat metric, (s0, ds, 1/ds): edge k is exactly `s0 + k ds` (as f64
    /// arithmetic) and q-edge k exactly its square, so SIMD code can rebuild any edge in
    /// registers instead of loading it (see `Binner::detect_linear`).
    pub lin: Option<(f64, f64, f64)>,
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
            base: Vec::new(),
            edge: Vec::new(),
            inv_h: 0.0,
            last_cell: 0.0,
            table_ok: false,
            lin: None,
        };
        if cells.is_finite() && cells >= 1.0 && (cells as usize) <= MAX_CELLS {
            let m = cells as usize;
            let h = range / m as f64;
            b.inv_h = m as f64 / range;
            b.last_cell = (m - 1) as f64;
            for c in 0..m {
                let p = b.qe[0] + (c as f64 - 1.5) * h;
                let k = if p < b.qe[0] { 0 } else { b.s_bin_exact(p) };
                b.base.push(k as i64);
                b.edge.push(b.qe[k + 1]);
            }
            b.table_ok = true;
        }
        b
    }

    /// Record that the separation edges are linear with q = s^2 (flat and periodic metrics)
    /// when every edge is reproduced bit for bit by `s0 + k ds` and every q-edge by its square.
    pub fn detect_linear(&mut self, s_edges: &[f64]) {
        let n = self.n_s;
        let (s0, ds) = (s_edges[0], (s_edges[n] - s_edges[0]) / n as f64);
        let exact = (0..=n).all(|k| {
            let e = s0 + (k as f64) * ds;
            e == s_edges[k] && e * e == self.qe[k]
        });
        if exact && ds > 0.0 {
            self.lin = Some((s0, ds, 1.0 / ds));
        }
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

    /// Separation bin from the table cell and one exact compare (equals `s_bin_exact`).
    /// Requires `cell` from `Binner::cell`, a valid table, and qlo <= q < qhi.
    #[inline(always)]
    pub fn s_bin_from_cell(&self, cell: f64, q: f64) -> usize {
        let t = cell as usize;
        debug_assert!(t < self.base.len());
        // SAFETY: cell is clamped to [0, table length - 1] (NaN casts to 0).
        unsafe {
            *self.base.get_unchecked(t) as usize + (q >= *self.edge.get_unchecked(t)) as usize
        }
    }

    #[inline(always)]
    pub fn mu_bin(&self, mu: f64) -> usize {
        ((mu * self.n_mu as f64) as usize).min(self.n_mu - 1)
    }
}

/// Per-pair fixed-point quantisation: a term x becomes round_ties_even(x 2^f) as i64 (the
/// default rounding of the SIMD conversion, so every kernel rounds alike). The fractional bits
/// are fixed per column, the same for every catalogue, so counts of different catalogues add
/// exactly (a catalogue's count equals the sum of the counts of its parts bit for bit):
/// w1 w2 and w1 w2 z with 2^-44 (5.7e-14) absolute resolution, w1 w2 s with 2^-40 (9.1e-13).
/// The data only set how often the SIMD lane sums must be folded into i128 (`lane_limit`),
/// and terms that could not be represented at all are refused.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Quant {
    /// Fractional bits and scales 2^f of the w, s and z columns.
    pub frac: [u32; 3],
    pub scale: [f64; 3],
    /// Pair tests a SIMD lane histogram may absorb before it must be flushed to i128.
    pub lane_limit: u64,
}

/// Fractional bits of the w1 w2, w1 w2 s and w1 w2 z pair terms.
pub(crate) const PAIR_FRAC: [u32; 3] = [44, 40, 44];

impl Quant {
    /// Quantisation for columns whose terms are bounded by `bounds` in absolute value.
    pub fn for_bounds(bounds: [f64; 3]) -> crate::Result<Self> {
        let mut scale = [0.0f64; 3];
        let mut lane_limit = u64::MAX;
        for k in 0..3 {
            scale[k] = (1u64 << PAIR_FRAC[k]) as f64;
            let b = bounds[k].max(1e-300);
            let top = b * scale[k];
            // one term must fit an i64 with room for the lane sums
            if !top.is_finite() || top >= 2f64.powi(61) {
                return Err(crate::Error::input(format!(
                    "pair counts: weights too large (largest pair term {b:e} in column {}); \
                     rescale the weights (xi does not depend on their overall scale)",
                    ["w1 w2", "w1 w2 s", "w1 w2 z"][k]
                )));
            }
            let lim = (2f64.powi(62) / top).floor();
            lane_limit = lane_limit.min(lim.min(u64::MAX as f64) as u64);
        }
        Ok(Quant {
            frac: PAIR_FRAC,
            scale,
            lane_limit,
        })
    }

    /// Quantisation for a count of `a` (and `b`) with largest separation edge `s_max`:
    /// bounds w_max^2, w_max^2 s_max and w_max^2 z_max.
    pub fn for_data(a: &Pts, b: Option<&Pts>, s_max: f64) -> crate::Result<Self> {
        let mut w_max = 0.0f64;
        let mut z_max = 0.0f64;
        for p in std::iter::once(a).chain(b) {
            w_max = p.w.iter().fold(w_max, |m, &w| m.max(w.abs()));
            z_max = p.z.iter().fold(z_max, |m, &z| m.max(z.abs()));
        }
        let w2 = w_max * w_max;
        Quant::for_bounds([w2, w2 * s_max, w2 * z_max])
    }

    #[inline(always)]
    pub fn fix_w(&self, x: f64) -> i64 {
        (x * self.scale[0]).round_ties_even() as i64
    }
    #[inline(always)]
    pub fn fix_s(&self, x: f64) -> i64 {
        (x * self.scale[1]).round_ties_even() as i64
    }
    #[inline(always)]
    pub fn fix_z(&self, x: f64) -> i64 {
        (x * self.scale[2]).round_ties_even() as i64
    }
}

/// Pairs the two-stage SIMD kernels buffer before they accumulate them (the buffer holds one
/// more vector of slack for full-width stores of compressed lanes).
pub(crate) const PAIR_BUF: usize = 2048;
/// Bytes of that pair buffer: five columns (q, w1 w2, mean z, pair indices, s).
const PAIR_BUF_BYTES: usize = 5 * 8 * (PAIR_BUF + LANES);

/// Lanes of the SIMD lane histograms (slot `bin * LANES + lane`).
pub(crate) const LANES: usize = 8;

/// Per-task integer accumulators. Scalar kernels add each pair's quantised terms straight into
/// i128 bin totals; the SIMD kernels add into per-lane i64 histograms that are folded into
/// the totals before they could overflow (`Quant::lane_limit`). Totals are in units of
/// 2^-f per column and are shifted to `FRAC_BITS` when flushed into `PairCounts`.
pub(crate) struct Acc {
    pub nb: usize,
    pub nreg: usize,
    pub q: Quant,
    n: Vec<u64>,
    w: Vec<i128>,
    s: Vec<i128>,
    z: Vec<i128>,
    rb: Vec<i128>,
    ro: Vec<i128>,
    rdirty: Vec<bool>,
    rlist: Vec<usize>,
    /// Lane histograms [count, w1w2, w1w2 s, w1w2 z] (SIMD kernel only).
    pub ln: Vec<i64>,
    pub lw: Vec<i64>,
    pub ls: Vec<i64>,
    pub lz: Vec<i64>,
    pending: u64,
    /// Lane columns w and z written since the last lane flush.
    pub lanes_w: bool,
    pub lanes_z: bool,
    /// Pair buffer of the AVX-512 and AVX2 kernels (empty until one first runs).
    #[cfg(target_arch = "x86_64")]
    pub buf: super::simd512::PairBuf,
    /// Set by the unit-weight kernels, which skip the w1w2 column: every pair then has
    /// w1w2 = 1 exactly (quantised: 2^f), so its per-bin sum is the count times 2^f.
    pub unit_w: bool,
}

impl Acc {
    pub fn new(nb: usize, nreg: usize, q: Quant) -> Self {
        Acc {
            nb,
            nreg,
            q,
            n: vec![0; nb],
            w: vec![0; nb],
            s: vec![0; nb],
            z: vec![0; nb],
            rb: vec![0; nb * nreg],
            ro: vec![0; nb * nreg],
            rdirty: vec![false; nb * nreg],
            rlist: Vec::new(),
            ln: vec![0; (nb + 1) * LANES],
            lw: vec![0; (nb + 1) * LANES],
            ls: vec![0; (nb + 1) * LANES],
            lz: vec![0; (nb + 1) * LANES],
            pending: 0,
            lanes_w: false,
            lanes_z: false,
            #[cfg(target_arch = "x86_64")]
            buf: Default::default(),
            unit_w: false,
        }
    }

    /// Bytes held by one accumulator (for the memory estimate).
    pub fn bytes(nb: usize, nreg: usize) -> u64 {
        // totals, lane histograms, region sums, and the AVX-512 kernel's pair buffer
        (nb * (8 + 3 * 16) + (nb + 1) * 4 * 8 * LANES + nb * nreg * 33 + PAIR_BUF_BYTES) as u64
    }

    #[inline(always)]
    fn touch(&mut self, slot: usize) {
        if !self.rdirty[slot] {
            self.rdirty[slot] = true;
            self.rlist.push(slot);
        }
    }

    /// Add one pair's terms (quantised here) to bin `bin`.
    #[inline(always)]
    pub fn add(&mut self, bin: usize, ww: f64, wsv: f64, wzv: f64) {
        let q = self.q;
        self.n[bin] += 1;
        self.w[bin] += q.fix_w(ww) as i128;
        self.s[bin] += q.fix_s(wsv) as i128;
        self.z[bin] += q.fix_z(wzv) as i128;
    }

    /// Add one pair's quantised weight to the region sums.
    #[inline(always)]
    pub fn add_regions_fixed(&mut self, bin: usize, tw: i64, r1: u32, r2: u32) {
        let s1 = r1 as usize * self.nb + bin;
        if r1 == r2 {
            self.touch(s1);
            self.rb[s1] += tw as i128;
        } else {
            let s2 = r2 as usize * self.nb + bin;
            self.touch(s1);
            self.touch(s2);
            self.ro[s1] += tw as i128;
            self.ro[s2] += tw as i128;
        }
    }

    /// Make room for `tests` more pair tests in the lane histograms (folding them into the
    /// totals when needed); false when even empty lanes could overflow (the caller then uses a
    /// scalar kernel).
    #[inline]
    pub fn reserve_lanes(&mut self, tests: u64) -> bool {
        if tests > self.q.lane_limit {
            return false;
        }
        if self.pending + tests > self.q.lane_limit {
            self.flush_lanes();
        }
        self.pending += tests;
        true
    }

    /// Buffered pairs one stage-2 piece may add before the lane sums are folded: each lane
    /// slot takes at most ceil(len / LANES) terms of a piece, and `lane_limit` terms fit.
    pub fn lane_piece(&self) -> usize {
        (self.q.lane_limit.min(PAIR_BUF as u64) as usize) * LANES
    }

    /// Fold the lane histograms into the i128 totals (only the columns in use: the unit-weight
    /// and zero-redshift kernels never write w and z lanes).
    pub fn flush_lanes(&mut self) {
        if self.pending == 0 {
            return;
        }
        fn fold<T: Copy + Default + std::ops::AddAssign>(
            tot: &mut [T],
            lanes: &mut [i64],
            conv: impl Fn(i64) -> T,
        ) {
            for (b, t) in tot.iter_mut().enumerate() {
                let mut sum = T::default();
                for v in &mut lanes[b * LANES..(b + 1) * LANES] {
                    sum += conv(*v);
                    *v = 0;
                }
                *t += sum;
            }
            // the spare bin (rejected lanes) is cleared, never counted
            lanes[tot.len() * LANES..].fill(0);
        }
        fold(&mut self.n, &mut self.ln, |v| v as u64);
        fold(&mut self.s, &mut self.ls, |v| v as i128);
        if self.lanes_w {
            fold(&mut self.w, &mut self.lw, |v| v as i128);
        }
        if self.lanes_z {
            fold(&mut self.z, &mut self.lz, |v| v as i128);
        }
        self.pending = 0;
    }

    /// Add the task's sums to `out` (converted to `FRAC_BITS` fractional bits) and reset.
    pub fn flush(&mut self, out: &mut PairCounts) {
        self.flush_lanes();
        let f = self.q.frac;
        let sh = [FRAC_BITS - f[0], FRAC_BITS - f[1], FRAC_BITS - f[2]];
        for b in 0..self.nb {
            if self.unit_w {
                self.w[b] = (self.n[b] as i128) << f[0];
            }
            if self.n[b] != 0 {
                out.npairs[b] += self.n[b];
                out.wpairs[b] += self.w[b] << sh[0];
                out.ws[b] += self.s[b] << sh[1];
                out.wz[b] += self.z[b] << sh[2];
            }
            self.n[b] = 0;
            self.w[b] = 0;
            self.s[b] = 0;
            self.z[b] = 0;
        }
        for &s in &self.rlist {
            out.region_both[s] += self.rb[s] << sh[0];
            out.region_one[s] += self.ro[s] << sh[0];
            self.rb[s] = 0;
            self.ro[s] = 0;
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
    let zz = 0.5 * (a.z_at(i) + b.z_at(j));
    acc.add(bin, ww, ww * s, ww * zz);
    if acc.nreg > 0 {
        let tw = acc.q.fix_w(ww);
        acc.add_regions_fixed(bin, tw, a.reg[i], b.reg[j]);
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
        a.c[0][i],
        a.c[1][i],
        a.c[2][i],
        a.t_at::<K>(i),
        b.c[0][j],
        b.c[1][j],
        b.c[2][j],
        b.t_at::<K>(j),
        g.box_l,
        g.half_l,
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
    /// Test instrument: the fast kernels of a given instruction set (the caller checks that
    /// the CPU supports it).
    #[cfg(test)]
    FastAt(Simd),
}

#[cfg(test)]
fn leaf_tally(_: &Pts, _: &Pts, lp: LeafPair, _: &Geo, _: &Binner, acc: &mut Acc) {
    let (na, nb) = (lp.a1 - lp.a0, lp.b1 - lp.b0);
    let tests = if lp.same { na * (na - 1) / 2 } else { na * nb };
    acc.add(0, tests as f64, 0.0, 0.0);
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
    /// Bounding box of the b points and a q threshold: the SIMD kernel skips a row i whose
    /// point-to-box lower bound on q is >= `q_cut` (`f64::INFINITY`: never).
    pub b_lo: [f64; 4],
    pub b_hi: [f64; 4],
    pub q_cut: f64,
}

impl LeafPair {
    /// A leaf pair without row pruning.
    pub fn plain(a0: usize, a1: usize, b0: usize, b1: usize, same: bool) -> Self {
        LeafPair {
            a0,
            a1,
            b0,
            b1,
            same,
            b_lo: [f64::NEG_INFINITY; 4],
            b_hi: [f64::INFINITY; 4],
            q_cut: f64::INFINITY,
        }
    }
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
/// expressions as `ref_pair` (no fused operations: Rust never contracts a*b+c), then the
/// accepted lanes are binned through the table (one exact compare) and their quantised terms
/// added; integer sums make the result bitwise that of `leaf_ref`.
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
    let (qlo, qhi, n_mu) = (bn.qlo(), bn.qhi(), bn.n_mu);
    let (l, hl) = (g.box_l, g.half_l);
    if UW {
        acc.unit_w = true;
    }
    for i in lp.a0..lp.a1 {
        let (ax, ay, az, at) = (a.c[0][i], a.c[1][i], a.c[2][i], a.t_at::<K>(i));
        let (aw, az_) = (a.w[i], if ZZ { 0.0 } else { a.z[i] });
        let mut j = if lp.same { i + 1 } else { lp.b0 };
        while j + L <= lp.b1 {
            let bx: &[f64; L] = b.c[0][j..j + L].try_into().unwrap();
            let by: &[f64; L] = b.c[1][j..j + L].try_into().unwrap();
            let bz: &[f64; L] = b.c[2][j..j + L].try_into().unwrap();
            let bt: [f64; L] = if K == CLO || K == OPE {
                b.c[3][j..j + L].try_into().unwrap()
            } else {
                [0.0; L]
            };
            let mut qs = [0.0f64; L];
            let mut cells = [0.0f64; L];
            let mut dzs = [0.0f64; L];
            let mut mask = 0u32;
            // pass 1: pure lane arithmetic (vectorisable: no table loads, no branches)
            for k in 0..L {
                let (q, dz) = pair_q::<K>(ax, ay, az, at, bx[k], by[k], bz[k], bt[k], l, hl);
                mask |= ((q >= qlo && q < qhi) as u32) << k;
                cells[k] = bn.cell(q);
                qs[k] = q;
                dzs[k] = dz;
            }
            // pass 2: the accepted lanes only
            while mask != 0 {
                let k = mask.trailing_zeros() as usize;
                mask &= mask - 1;
                let q = qs[k];
                let im = if MU {
                    bn.mu_bin(pair_mu::<K>(a, i, b, j + k, q, dzs[k]))
                } else {
                    0
                };
                let bin = bn.s_bin_from_cell(cells[k], q) * n_mu + im;
                let s = s_of_q::<K>(q, g.radius);
                // unit weights: ww = 1 and ww * x = x exactly; zero redshifts: the z term is 0
                let ww = if UW { 1.0 } else { aw * b.w[j + k] };
                let zz = if ZZ { 0.0 } else { 0.5 * (az_ + b.z[j + k]) };
                if UW {
                    acc.add(bin, 1.0, s, zz);
                } else {
                    acc.add(bin, ww, ww * s, ww * zz);
                }
                if acc.nreg > 0 {
                    let tw = acc.q.fix_w(ww);
                    acc.add_regions_fixed(bin, tw, a.reg[i], b.reg[j + k]);
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

/// The dispatch of the SIMD leaf kernels: the two-stage kernel of module `$m` for counts
/// without mu bins in flat and periodic metrics (linear bins rebuilt in registers, or the
/// table) and in curved ones where every counted pair takes the series branch of `s_of_q`;
/// the generic `$l`-lane kernel otherwise.
#[cfg(target_arch = "x86_64")]
macro_rules! two_stage_dispatch {
    ($m:ident, $l:literal, $a:ident, $b:ident, $lp:ident, $g:ident, $bn:ident, $acc:ident) => {{
        use super::$m::leaf;
        let lin = $bn.lin.is_some();
        let series = $bn.qhi().max(0.0).sqrt() / (2.0 * $g.radius) <= SERIES_X_MAX;
        // one row of the b leaf must fit the pair buffer (leaves hold 32 points)
        let two = !MU && $bn.table_ok && $lp.b1 - $lp.b0 <= PAIR_BUF;
        if two && K == FLAT {
            if lin {
                leaf::<FLAT, true, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
            } else {
                leaf::<FLAT, false, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
            }
        } else if two && K == PER {
            if lin {
                leaf::<PER, true, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
            } else {
                leaf::<PER, false, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
            }
        } else if two && K == CLO && series {
            leaf::<CLO, false, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
        } else if two && K == OPE && series {
            leaf::<OPE, false, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
        } else {
            leaf_fast_body::<$l, K, MU, UW, ZZ>($a, $b, $lp, $g, $bn, $acc)
        }
    }};
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx512dq,popcnt")]
unsafe fn leaf_avx512<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    two_stage_dispatch!(simd512, 8, a, b, lp, g, bn, acc)
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
    two_stage_dispatch!(simd256, 4, a, b, lp, g, bn, acc)
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
    /// The level used for counts: the best one the CPU supports, or the one named by the
    /// environment variable `RINGSCALE_SIMD` (`avx512`, `avx2`, `portable`; for benchmarks and
    /// for checking kernels on one machine). A level the CPU lacks, or an unknown name, falls
    /// back to detection with a one-line warning. Read once per process.
    pub fn detect() -> Self {
        static LEVEL: std::sync::OnceLock<Simd> = std::sync::OnceLock::new();
        *LEVEL.get_or_init(|| {
            let best = Simd::best();
            let Ok(name) = std::env::var("RINGSCALE_SIMD") else {
                return best;
            };
            match Simd::named(name.trim()) {
                Some(s) if s.supported() => s,
                _ => {
                    eprintln!(
                        "warning: RINGSCALE_SIMD={name}: not a level this CPU supports \
                         (avx512, avx2, portable); using {best:?}"
                    );
                    best
                }
            }
        })
    }

    /// The best level the CPU supports.
    fn best() -> Self {
        #[cfg(target_arch = "x86_64")]
        {
            if Simd::Avx512.supported() {
                return Simd::Avx512;
            }
            if Simd::Avx2.supported() {
                return Simd::Avx2;
            }
        }
        Simd::Portable
    }

    fn named(name: &str) -> Option<Self> {
        match name.to_ascii_lowercase().as_str() {
            "portable" => Some(Simd::Portable),
            #[cfg(target_arch = "x86_64")]
            "avx2" => Some(Simd::Avx2),
            #[cfg(target_arch = "x86_64")]
            "avx512" => Some(Simd::Avx512),
            _ => None,
        }
    }

    /// Whether the CPU can run this level's kernels.
    pub fn supported(self) -> bool {
        match self {
            Simd::Portable => true,
            #[cfg(target_arch = "x86_64")]
            Simd::Avx2 => std::arch::is_x86_feature_detected!("avx2"),
            #[cfg(target_arch = "x86_64")]
            Simd::Avx512 => {
                std::arch::is_x86_feature_detected!("avx512f")
                    && std::arch::is_x86_feature_detected!("avx512dq")
                    && std::arch::is_x86_feature_detected!("popcnt")
            }
        }
    }
}

/// A monomorphised leaf kernel.
pub(crate) type LeafFn = fn(&Pts, &Pts, LeafPair, &Geo, &Binner, &mut Acc);

fn pick_fast<const K: u8, const MU: bool, const UW: bool, const ZZ: bool>(simd: Simd) -> LeafFn {
    match simd {
        #[cfg(target_arch = "x86_64")]
        // SAFETY: only chosen after AVX-512F and AVX-512DQ were detected.
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
        #[cfg(test)]
        (KernelKind::FastAt(s), false) => pick_w::<K, false>(s, d),
        #[cfg(test)]
        (KernelKind::FastAt(s), true) => pick_w::<K, true>(s, d),
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
    /// One catalogue stored without its (all-zero) redshifts counted against one with
    /// redshifts: only the reference kernel reads them through `Pts::z_at`; the fast kernels
    /// index both columns directly. Rare (a redshift column of zeros in one catalogue only),
    /// so it has no fast variant.
    pub fn mixed_z(a: &Pts, b: &Pts) -> bool {
        a.z.is_empty() != b.z.is_empty() && !Self::of(a, b).zero_z
    }

    pub fn of(a: &Pts, b: &Pts) -> Self {
        DataFlags {
            unit_w: a.w.iter().chain(&b.w).all(|&w| w == 1.0),
            zero_z: a.z.iter().chain(&b.z).all(|&z| z == 0.0), // empty: all 0
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
    use super::{KernelKind, Simd};
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
        // the detected fast kernels and, forced, the AVX2 ones (the detected level may be
        // AVX-512); linear edges (bins rebuilt in registers) and uneven ones (lookup table);
        // curved metrics with s_max << R take the series branch of the two-stage kernels; sizes
        // not multiples of 4 or 8 leave tail lanes in both stages
        let mut kinds = vec![KernelKind::Fast];
        #[cfg(target_arch = "x86_64")]
        if Simd::Avx2.supported() {
            kinds.push(KernelKind::FastAt(Simd::Avx2));
        }
        let lin: Vec<f64> = (0..=20).map(|i| 5.0 * i as f64).collect();
        let uneven: Vec<f64> = (0..=16).map(|i| 2.0 + 0.4 * (i * i) as f64).collect();
        let metrics = [
            Metric::Euclidean,
            Metric::Periodic { box_size: 300.0 },
            Metric::Closed { radius: 1e4 },
            Metric::Open { radius: 1e4 },
        ];
        for (metric, edges) in metrics
            .into_iter()
            .flat_map(|m| [(m, lin.clone()), (m, uneven.clone())])
        {
            for (uw, zz) in [(true, true), (true, false), (false, true), (false, false)] {
                for (n_mu, n_regions) in [(1, 0), (1, 3), (3, 3)] {
                    let c = CountConfig {
                        binning: Binning::new(edges.clone(), n_mu).unwrap(),
                        metric,
                        n_regions,
                        threads: 2,
                        shard: (0, 1),
                    };
                    let a = points(1203, 1, uw, zz);
                    let b = points(701, 2, uw, zz);
                    let r = count_impl(&a, None, &c, KernelKind::Reference).unwrap();
                    let rx = count_impl(&a, Some(&b), &c, KernelKind::Reference).unwrap();
                    for &kind in &kinds {
                        let what = format!("{kind:?} {metric:?} uw={uw} zz={zz} n_mu={n_mu}");
                        let f = count_impl(&a, None, &c, kind).unwrap();
                        assert!(r.npairs.iter().sum::<u64>() > 10_000, "{what}");
                        assert_eq!(r, f, "auto {what}");
                        if uw {
                            // w1 w2 = 1: the weighted sums equal the raw counts exactly
                            for (k, &np) in f.npairs.iter().enumerate() {
                                assert_eq!(super::super::from_fixed(f.wpairs[k]), np as f64);
                            }
                        }
                        let f = count_impl(&a, Some(&b), &c, kind).unwrap();
                        assert_eq!(rx, f, "cross {what}");
                    }
                }
            }
        }
    }

    /// Reference, AVX2 and detected-level counts (auto and cross) of `a` and `b`, which must
    /// agree bitwise (the detected level is AVX-512 where the CPU has it).
    #[cfg(target_arch = "x86_64")]
    fn check_avx2(a: &PointSet, b: &PointSet, c: &CountConfig, what: &str) -> u64 {
        let r = count_impl(a, None, c, KernelKind::Reference).unwrap();
        let r2 = count_impl(a, Some(b), c, KernelKind::Reference).unwrap();
        for kind in [KernelKind::FastAt(Simd::Avx2), KernelKind::Fast] {
            let f = count_impl(a, None, c, kind).unwrap();
            assert_eq!(r, f, "auto {kind:?} {what}");
            let f2 = count_impl(a, Some(b), c, kind).unwrap();
            assert_eq!(r2, f2, "cross {kind:?} {what}");
        }
        r.npairs.iter().sum::<u64>()
    }

    #[cfg(target_arch = "x86_64")]
    fn metrics(box_size: f64) -> [Metric; 4] {
        [
            Metric::Euclidean,
            Metric::Periodic { box_size },
            Metric::Closed { radius: 1e4 },
            Metric::Open { radius: 1e4 },
        ]
    }

    /// `check_avx2` with `edges` (no mu bins) in every metric (periodic box side `box_size`),
    /// without and with 3 regions; each count must hold more than 10 000 pairs.
    #[cfg(target_arch = "x86_64")]
    fn check_avx2_metrics(a: &PointSet, b: &PointSet, edges: &[f64], box_size: f64, what: &str) {
        for metric in metrics(box_size) {
            for n_regions in [0, 3] {
                let c = CountConfig {
                    binning: Binning::new(edges.to_vec(), 1).unwrap(),
                    metric,
                    n_regions,
                    threads: 2,
                    shard: (0, 1),
                };
                let what = format!("{what} {metric:?} reg={n_regions}");
                assert!(check_avx2(a, b, &c, &what) > 10_000, "{what}");
            }
        }
    }

    #[test]
    #[cfg(target_arch = "x86_64")]
    fn avx2_kernel_bins_pairs_on_edges_like_reference() {
        // integer lattice points and integer edges: many pairs have q exactly on a q-edge
        // (s = 5 for (3, 4, 0)), where s computed from q may round across the edge
        if !Simd::Avx2.supported() {
            return;
        }
        let lattice = |n: usize, off: f64| {
            let mut p = PointSet::default();
            for i in 0..n * n * n {
                p.x.push((i % n) as f64 + off);
                p.y.push(((i / n) % n) as f64 + off);
                p.z.push((i / (n * n)) as f64 + off);
                p.w.push(1.0 + (i % 3) as f64 * 0.25);
                p.redshift.push(0.5);
                p.region.push((i % 3) as u32);
            }
            p
        };
        let a = lattice(11, 0.0);
        let b = lattice(7, 2.0);
        let lin: Vec<f64> = (0..=9).map(|i| i as f64).collect();
        let uneven = vec![1.0, 2.0, 3.0, 5.0, 8.0, 9.0];
        for edges in [lin, uneven] {
            check_avx2_metrics(&a, &b, &edges, 19.0, &format!("lattice {edges:?}"));
        }
    }

    #[test]
    #[cfg(target_arch = "x86_64")]
    fn avx2_kernel_bins_pairs_within_ulps_of_edges_like_reference() {
        // points on spheres of edge radius around a few centres, each coordinate moved by a
        // few ulps: centre-shell pairs have q within ulps of a q-edge, where s (and the bin
        // estimated from it) can fall on the wrong side of the edge and the exact compare
        // must correct it; step 0.7 (inexact 1/ds) and 3 (exact)
        if !Simd::Avx2.supported() {
            return;
        }
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        for edges in [
            (0..=12).map(|k| 1.5 + 0.7 * k as f64).collect::<Vec<f64>>(),
            (0..=10).map(|k| 3.0 * k as f64).collect(),
        ] {
            let mut a = PointSet::default();
            for _ in 0..4 {
                let c: [f64; 3] = std::array::from_fn(|_| rng.gen_range(35.0..65.0));
                let push = |p: &mut PointSet, x: [f64; 3]| {
                    p.x.push(x[0]);
                    p.y.push(x[1]);
                    p.z.push(x[2]);
                    p.w.push(1.0);
                    p.redshift.push(0.3);
                    p.region.push(p.x.len() as u32 % 3);
                };
                push(&mut a, c);
                for &e in &edges {
                    for _ in 0..40 {
                        let u: [f64; 3] = std::array::from_fn(|_| rng.gen_range(-1.0..1.0));
                        let n = (u[0] * u[0] + u[1] * u[1] + u[2] * u[2]).sqrt();
                        let x: [f64; 3] = std::array::from_fn(|d| {
                            let v = c[d] + e * u[d] / n;
                            f64::from_bits((v.to_bits() as i64 + rng.gen_range(-3..=3)) as u64)
                        });
                        push(&mut a, x);
                    }
                }
            }
            let b = points(300, 3, false, false);
            let what = format!("near edges {}", edges[1]);
            check_avx2_metrics(&a, &b, &edges, 100.0, &what);
        }
    }

    #[test]
    #[cfg(target_arch = "x86_64")]
    fn avx2_kernel_large_weights_fold_lanes_and_round_exactly() {
        // weights up to 12.2: the lane sums must be folded often (small `lane_limit`), and
        // terms of 2^51 units or more (w1 w2 s, and w1 w2 above 128) take the scalar rounding
        if !Simd::Avx2.supported() {
            return;
        }
        let mut a = points(1500, 5, false, false);
        let mut b = points(600, 6, false, false);
        for p in [&mut a, &mut b] {
            for (i, w) in p.w.iter_mut().enumerate() {
                *w = 5.0 + (i % 9) as f64 * 0.9;
            }
        }
        let edges: Vec<f64> = (0..=20).map(|k| 5.0 * k as f64).collect();
        let q = super::Quant::for_bounds([12.2f64.powi(2), 12.2f64.powi(2) * 100.0, 0.0]).unwrap();
        assert!(q.lane_limit < 4096, "{}", q.lane_limit);
        check_avx2_metrics(&a, &b, &edges, 300.0, "large w");
    }
}
