//! AVX-512 leaf kernel for counts without mu bins in flat and periodic metrics, and in curved
//! ones wherever s_max is small against the curvature radius (the bulk of all counting).
//!
//! Two stages, so that the expensive per-pair work runs on full vectors of counted pairs only
//! (about 60% of the tested pairs of a leaf pair lie outside [s_min, s_max)):
//! 1. test: eight pairs per step, the quadratic form q and the in-range mask; the accepted
//!    lanes are compressed into a pair buffer (q, and w1 w2, the mean redshift and the pair's
//!    indices where they are needed);
//! 2. accumulate: outside curved metrics s of all buffered pairs first (`sqrt_rn`, bitwise
//!    vsqrtpd but cheaper); then eight buffered pairs per step, s, the bin (edges rebuilt in
//!    registers for linear bins, else the table with one exact compare) and the quantised
//!    terms, then a branch-free scalar pass adds the eight lanes into per-lane integer
//!    histograms (lane k writes slot `bin * 8 + k`, so lanes of one step never alias; tail
//!    lanes go to a spare slot). Gathers and scatters for this pass were no faster on the
//!    development machine.
//!
//! Each pair term is quantised exactly as `Quant::fix_*` do (multiply by 2^frac, convert with
//! the default round-to-nearest-even) from the same f64 expressions as the reference kernel, and
//! sums are integers, so the result is bitwise that of `leaf_ref`. Rows whose point is farther
//! than s_max from the whole b leaf box are skipped before any pair is tested.
#![cfg(target_arch = "x86_64")]

use super::kernel::{
    Acc, Binner, Geo, LeafPair, Pts, ASINH_C, ASIN_C, CLO, LANES, OPE, PAIR_BUF as BUF, PER,
};
use std::arch::x86_64::*;

/// The pair buffer of stage 1 (kept in the task's accumulator so it is allocated once).
#[derive(Default)]
pub(crate) struct PairBuf {
    pub(super) q: Vec<f64>,
    pub(super) w: Vec<f64>,
    pub(super) z: Vec<f64>,
    pub(super) ij: Vec<u64>,
    /// s of the buffered pairs outside curved metrics (stage 2 computes it in a pass of its own)
    pub(super) s: Vec<f64>,
}

impl PairBuf {
    pub(super) fn ensure(&mut self) {
        if self.q.len() < BUF + LANES {
            for v in [&mut self.q, &mut self.w, &mut self.z, &mut self.s] {
                v.resize(BUF + LANES, 0.0);
            }
            self.ij.resize(BUF + LANES, 0);
        }
    }
}

/// One leaf pair in metric K (flat, periodic, or curved when every counted pair takes the
/// series branch of `s_of_q`, which the caller checks); LIN bins through edges rebuilt in
/// registers (`Binner::lin`, linear edges) instead of the table; UW / ZZ drop the weight and
/// redshift terms (unit weights, zero redshifts).
///
/// # Safety
/// The CPU must support AVX-512F, AVX-512DQ and POPCNT; `bn.table_ok` must hold; `acc` must have
/// been built for `bn.nb` bins; the b leaf holds at most `BUF` points.
#[target_feature(enable = "avx512f,avx512dq,popcnt")]
pub(crate) unsafe fn leaf<const K: u8, const LIN: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    let periodic = K == PER;
    let curved = K == CLO || K == OPE;
    if UW {
        acc.unit_w = true;
    }
    acc.lanes_w |= !UW;
    acc.lanes_z |= !ZZ;
    let regions = acc.nreg > 0;
    let mut buf = std::mem::take(&mut acc.buf);
    buf.ensure();
    let (qp, wp, zp, ijp) = (
        buf.q.as_mut_ptr(),
        buf.w.as_mut_ptr(),
        buf.z.as_mut_ptr(),
        buf.ij.as_mut_ptr(),
    );
    let qlo = _mm512_set1_pd(bn.qlo());
    let qhi = _mm512_set1_pd(bn.qhi());
    let half = _mm512_set1_pd(0.5);
    let box_l = _mm512_set1_pd(g.box_l);
    let hl = _mm512_set1_pd(g.half_l);
    let neg_hl = _mm512_set1_pd(-g.half_l);
    let (bxp, byp, bzp) = (b.c[0].as_ptr(), b.c[1].as_ptr(), b.c[2].as_ptr());
    let btp = b.c[3].as_ptr();
    let (bwp, bzzp) = (b.w.as_ptr(), b.z.as_ptr());
    let iota = _mm512_set_epi64(7, 6, 5, 4, 3, 2, 1, 0);
    let mut n = 0usize;
    let prune = lp.q_cut.is_finite();
    let mut r0 = lp.a0;
    while r0 < lp.a1 {
        let rows = (lp.a1 - r0).min(LANES);
        let mut live = ((1u32 << rows) - 1) as u8;
        if prune {
            live &= live_rows::<K>(a, r0, live, &lp, g);
        }
        let r = r0;
        r0 += LANES;
        while live != 0 {
            let i = r + live.trailing_zeros() as usize;
            live &= live - 1;
            let j0 = if lp.same { i + 1 } else { lp.b0 };
            if n + (lp.b1 - j0) > BUF {
                accumulate::<K, LIN, UW, ZZ>(&mut buf, n, a, b, g, bn, acc);
                n = 0;
            }
            let ax = _mm512_set1_pd(a.c[0][i]);
            let ay = _mm512_set1_pd(a.c[1][i]);
            let az = _mm512_set1_pd(a.c[2][i]);
            let at = _mm512_set1_pd(a.t_at::<K>(i));
            let aw = _mm512_set1_pd(a.w[i]);
            let azz = _mm512_set1_pd(if ZZ { 0.0 } else { a.z[i] });
            let mut j = j0;
            while j < lp.b1 {
                let rem = lp.b1 - j;
                let lm: __mmask8 = if rem >= LANES {
                    0xff
                } else {
                    ((1u32 << rem) - 1) as u8
                };
                // masked loads never touch memory past the leaf for the tail lanes
                let mut dx = _mm512_sub_pd(ax, _mm512_maskz_loadu_pd(lm, bxp.add(j)));
                let mut dy = _mm512_sub_pd(ay, _mm512_maskz_loadu_pd(lm, byp.add(j)));
                let mut dz = _mm512_sub_pd(az, _mm512_maskz_loadu_pd(lm, bzp.add(j)));
                if periodic {
                    // same steps as `wrap`: d > L/2 -> d - L, else d < -L/2 -> d + L
                    for d in [&mut dx, &mut dy, &mut dz] {
                        let up = _mm512_cmp_pd_mask::<_CMP_GT_OQ>(*d, hl);
                        let v = _mm512_mask_sub_pd(*d, up, *d, box_l);
                        let dn = _mm512_cmp_pd_mask::<_CMP_LT_OQ>(v, neg_hl) & !up;
                        *d = _mm512_mask_add_pd(v, dn, v, box_l);
                    }
                }
                let mut q = _mm512_add_pd(
                    _mm512_add_pd(_mm512_mul_pd(dx, dx), _mm512_mul_pd(dy, dy)),
                    _mm512_mul_pd(dz, dz),
                );
                if curved {
                    // same order as `pair_q`: spatial part first, then -+ dt^2
                    let dt = _mm512_sub_pd(at, _mm512_maskz_loadu_pd(lm, btp.add(j)));
                    let t2 = _mm512_mul_pd(dt, dt);
                    q = if K == CLO {
                        _mm512_add_pd(q, t2)
                    } else {
                        _mm512_sub_pd(q, t2)
                    };
                }
                let m = lm
                    & _mm512_cmp_pd_mask::<_CMP_GE_OQ>(q, qlo)
                    & _mm512_cmp_pd_mask::<_CMP_LT_OQ>(q, qhi);
                // compressed full-width stores: the accepted lanes land at n.., the rest is slack
                _mm512_storeu_pd(qp.add(n), _mm512_maskz_compress_pd(m, q));
                if !UW {
                    let ww = _mm512_mul_pd(aw, _mm512_maskz_loadu_pd(lm, bwp.add(j)));
                    _mm512_storeu_pd(wp.add(n), _mm512_maskz_compress_pd(m, ww));
                }
                if !ZZ {
                    let zz = _mm512_mul_pd(
                        half,
                        _mm512_add_pd(azz, _mm512_maskz_loadu_pd(lm, bzzp.add(j))),
                    );
                    _mm512_storeu_pd(zp.add(n), _mm512_maskz_compress_pd(m, zz));
                }
                if regions {
                    let ij = _mm512_add_epi64(_mm512_set1_epi64(((i << 32) | j) as i64), iota);
                    _mm512_storeu_si512(ijp.add(n).cast(), _mm512_maskz_compress_epi64(m, ij));
                }
                n += m.count_ones() as usize;
                j += LANES;
            }
        }
    }
    accumulate::<K, LIN, UW, ZZ>(&mut buf, n, a, b, g, bn, acc);
    acc.buf = buf;
}

/// Rows among the eight from `r0` (those in `lanes`) whose point may lie within the leaf pair's
/// cut of the b leaf box: the point-to-box lower bound on q of `tree::box_bounds`, operation
/// for operation, eight rows at once. Skipping the others is exact (every pair of a skipped
/// row has q >= that bound >= `q_cut`).
#[target_feature(enable = "avx512f,avx512dq,popcnt")]
unsafe fn live_rows<const K: u8>(a: &Pts, r0: usize, lanes: u8, lp: &LeafPair, g: &Geo) -> u8 {
    let zero = _mm512_setzero_pd();
    let l = _mm512_set1_pd(g.box_l);
    let dims = if K == CLO || K == OPE { 4 } else { 3 };
    let mut dmin = [zero; 4];
    let mut dmax3 = zero;
    for (d, dmin_d) in dmin.iter_mut().enumerate().take(dims) {
        let p = _mm512_maskz_loadu_pd(lanes, a.c[d].as_ptr().add(r0));
        let lo = _mm512_sub_pd(_mm512_set1_pd(lp.b_lo[d]), p);
        let hi = _mm512_sub_pd(_mm512_set1_pd(lp.b_hi[d]), p);
        let neg_hi = _mm512_sub_pd(zero, hi);
        *dmin_d = if K == PER {
            // distance to the nearest multiple of L: 0 inside, else the shorter way round
            let right = _mm512_min_pd(lo, _mm512_sub_pd(l, hi));
            let left = _mm512_min_pd(neg_hi, _mm512_add_pd(lo, l));
            let pos = _mm512_cmp_pd_mask::<_CMP_GT_OQ>(lo, zero);
            let v = _mm512_max_pd(_mm512_mask_blend_pd(pos, left, right), zero);
            let inside = _mm512_cmp_pd_mask::<_CMP_LE_OQ>(lo, zero)
                & _mm512_cmp_pd_mask::<_CMP_GE_OQ>(hi, zero);
            _mm512_mask_blend_pd(inside, v, zero)
        } else {
            _mm512_max_pd(_mm512_max_pd(lo, neg_hi), zero)
        };
        if d == 3 {
            let abs = |v| _mm512_max_pd(v, _mm512_sub_pd(zero, v));
            dmax3 = _mm512_max_pd(abs(lo), abs(hi));
        }
    }
    let sq = |v| _mm512_mul_pd(v, v);
    let mut q = _mm512_add_pd(_mm512_add_pd(sq(dmin[0]), sq(dmin[1])), sq(dmin[2]));
    if K == CLO {
        q = _mm512_add_pd(q, sq(dmin[3]));
    } else if K == OPE {
        q = _mm512_sub_pd(q, sq(dmax3));
    }
    _mm512_cmp_pd_mask::<_CMP_NGE_UQ>(q, _mm512_set1_pd(lp.q_cut))
}

/// Stage 2: add the `n` buffered pairs to the lane histograms.
#[target_feature(enable = "avx512f,avx512dq,popcnt")]
unsafe fn accumulate<const K: u8, const LIN: bool, const UW: bool, const ZZ: bool>(
    buf: &mut PairBuf,
    n: usize,
    a: &Pts,
    b: &Pts,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    if n == 0 {
        return;
    }
    let curved = K == CLO || K == OPE;
    let qlo = _mm512_set1_pd(bn.qlo());
    let inv_h = _mm512_set1_pd(bn.inv_h);
    let last = _mm512_set1_pd(bn.last_cell);
    let zero = _mm512_setzero_pd();
    let scale_w = _mm512_set1_pd(acc.q.scale[0]);
    let scale_s = _mm512_set1_pd(acc.q.scale[1]);
    let scale_z = _mm512_set1_pd(acc.q.scale[2]);
    let two_r = _mm512_set1_pd(2.0 * g.radius);
    let coef = if K == CLO { ASIN_C } else { ASINH_C };
    let cv = coef.map(|c| _mm512_set1_pd(c));
    let (basep, edgep) = (bn.base.as_ptr(), bn.edge.as_ptr());
    let trash = bn.nb;
    let (s0, ds, inv_ds) = bn.lin.unwrap_or((0.0, 1.0, 1.0));
    let (s0v, dsv, inv_dsv) = (
        _mm512_set1_pd(s0),
        _mm512_set1_pd(ds),
        _mm512_set1_pd(inv_ds),
    );
    let top = _mm512_set1_pd((bn.n_s - 1) as f64);
    let onef = _mm512_set1_pd(1.0);
    let one = _mm512_set1_epi64(1);
    let trash_v = _mm512_set1_epi64(bn.nb as i64);
    let (qp, wp, zp) = (buf.q.as_ptr(), buf.w.as_ptr(), buf.z.as_ptr());
    let sp = buf.s.as_mut_ptr();
    if !curved {
        // s of all pairs first, in a loop of independent steps (in the binning loop the ~35
        // cycle latency of `sqrt_rn` would stall it); two vectors of three take `sqrt_rn` (FMA
        // ports), the third vsqrtpd (the divider, otherwise idle): faster than either alone.
        // Full-width loads stay within the buffer (BUF + LANES); slack lanes are don't-care.
        let mut e = 0;
        while e + 3 * LANES <= n {
            for k in [0, LANES] {
                let q = _mm512_loadu_pd(qp.add(e + k));
                _mm512_storeu_pd(sp.add(e + k), sqrt_rn(q, 0xff));
            }
            let q = _mm512_loadu_pd(qp.add(e + 2 * LANES));
            _mm512_storeu_pd(sp.add(e + 2 * LANES), _mm512_sqrt_pd(q));
            e += 3 * LANES;
        }
        while e < n {
            let care = if n - e >= LANES {
                0xff
            } else {
                ((1u32 << (n - e)) - 1) as u8
            };
            let q = _mm512_loadu_pd(qp.add(e));
            _mm512_storeu_pd(sp.add(e), sqrt_rn(q, care));
            e += LANES;
        }
    }
    let regions = acc.nreg > 0;
    let mut cells = [0i64; LANES];
    let mut qs = [0f64; LANES];
    let mut tss = [0i64; LANES];
    let mut tzs = [0i64; LANES];
    let mut bins = [0i64; LANES];
    let mut tws = [0i64; LANES];
    // each lane slot takes at most ceil(len / 8) terms of a piece: fold the lane sums before
    // they could overflow (only very large weights make a piece shorter than the buffer)
    let piece = acc.lane_piece();
    let mut e0 = 0;
    while e0 < n {
        let e1 = (e0 + piece).min(n);
        acc.reserve_lanes((e1 - e0).div_ceil(LANES) as u64);
        let (lnp, lwp, lsp, lzp) = (
            acc.ln.as_mut_ptr(),
            acc.lw.as_mut_ptr(),
            acc.ls.as_mut_ptr(),
            acc.lz.as_mut_ptr(),
        );
        let mut e = e0;
        while e < e1 {
            let rem = e1 - e;
            let lm: __mmask8 = if rem >= LANES {
                0xff
            } else {
                ((1u32 << rem) - 1) as u8
            };
            let q = _mm512_maskz_loadu_pd(lm, qp.add(e));
            if !LIN {
                let cf = _mm512_min_pd(
                    _mm512_max_pd(_mm512_mul_pd(_mm512_sub_pd(q, qlo), inv_h), zero),
                    last,
                );
                _mm512_storeu_si512(cells.as_mut_ptr().cast(), _mm512_cvttpd_epi64(cf));
                _mm512_storeu_pd(qs.as_mut_ptr(), q);
            }
            let s = if curved {
                // `s_of_q` series branch, operation for operation
                let c = _mm512_sqrt_pd(_mm512_max_pd(q, zero));
                let mut x = _mm512_div_pd(c, two_r);
                if K == CLO {
                    x = _mm512_min_pd(x, onef);
                }
                let x2 = _mm512_mul_pd(x, x);
                let mut p = _mm512_add_pd(cv[3], _mm512_mul_pd(x2, cv[4]));
                p = _mm512_add_pd(cv[2], _mm512_mul_pd(x2, p));
                p = _mm512_add_pd(cv[1], _mm512_mul_pd(x2, p));
                p = _mm512_add_pd(cv[0], _mm512_mul_pd(x2, p));
                let a = _mm512_add_pd(x, _mm512_mul_pd(x, _mm512_mul_pd(x2, p)));
                _mm512_mul_pd(two_r, a)
            } else {
                _mm512_maskz_loadu_pd(lm, sp.add(e))
            };
            if LIN {
                // bin from s, then one exact q-space compare each way against edges rebuilt
                // as in `Binner::detect_linear` (s can sit one bin off at an edge)
                let g = _mm512_cvttpd_epi64(_mm512_min_pd(
                    _mm512_max_pd(_mm512_mul_pd(_mm512_sub_pd(s, s0v), inv_dsv), zero),
                    top,
                ));
                let gf = _mm512_cvtepi64_pd(g);
                let elo = _mm512_add_pd(s0v, _mm512_mul_pd(gf, dsv));
                let ehi = _mm512_add_pd(s0v, _mm512_mul_pd(_mm512_add_pd(gf, onef), dsv));
                let dn = _mm512_cmp_pd_mask::<_CMP_LT_OQ>(q, _mm512_mul_pd(elo, elo));
                let up = _mm512_cmp_pd_mask::<_CMP_GE_OQ>(q, _mm512_mul_pd(ehi, ehi));
                let g = _mm512_mask_sub_epi64(g, dn, g, one);
                let g = _mm512_mask_add_epi64(g, up, g, one);
                // tail lanes go to the spare bin nb (never flushed)
                let g = _mm512_mask_blend_epi64(lm, trash_v, g);
                _mm512_storeu_si512(bins.as_mut_ptr().cast(), g);
            }
            let ww = if UW {
                onef
            } else {
                _mm512_maskz_loadu_pd(lm, wp.add(e))
            };
            let ts = if UW { s } else { _mm512_mul_pd(ww, s) };
            _mm512_storeu_si512(
                tss.as_mut_ptr().cast(),
                _mm512_cvtpd_epi64(_mm512_mul_pd(ts, scale_s)),
            );
            if !UW || regions {
                let tw = _mm512_cvtpd_epi64(_mm512_mul_pd(ww, scale_w));
                _mm512_storeu_si512(tws.as_mut_ptr().cast(), tw);
            }
            if !ZZ {
                let zz = _mm512_maskz_loadu_pd(lm, zp.add(e));
                let tz = if UW { zz } else { _mm512_mul_pd(ww, zz) };
                let tz = _mm512_cvtpd_epi64(_mm512_mul_pd(tz, scale_z));
                _mm512_storeu_si512(tzs.as_mut_ptr().cast(), tz);
            }
            let mk = lm as u32;
            // scalar adds of all eight lanes, branch-free (slots of one step never alias)
            for k in 0..LANES {
                let bin = if LIN {
                    bins[k] as usize
                } else {
                    let c = cells[k] as usize;
                    let bin = *basep.add(c) as usize + (qs[k] >= *edgep.add(c)) as usize;
                    let bin = if (mk >> k) & 1 != 0 { bin } else { trash };
                    bins[k] = bin as i64;
                    bin
                };
                let x = bin * LANES + k;
                *lnp.add(x) += 1;
                *lsp.add(x) += tss[k];
                if !UW {
                    *lwp.add(x) += tws[k];
                }
                if !ZZ {
                    *lzp.add(x) += tzs[k];
                }
            }
            if regions {
                for k in 0..rem.min(LANES) {
                    let ij = buf.ij[e + k];
                    let (i, j) = ((ij >> 32) as usize, (ij & 0xffff_ffff) as usize);
                    acc.add_regions_fixed(bins[k] as usize, tws[k], a.reg[i], b.reg[j]);
                }
            }
            e += LANES;
        }
        e0 = e1;
    }
}

/// Smallest q whose square root takes the fast path of `sqrt_rn` (2^-900): above it every product
/// in the check stays normal, so it is exact.
const SQRT_TINY: f64 = f64::from_bits((1023 - 900) << 52);

/// Correctly rounded square root, bitwise `_mm512_sqrt_pd` (and `f64::sqrt`) for every input,
/// cheaper than vsqrtpd: a candidate from the rsqrt14 seed, checked exactly; only lanes that
/// fail the check (q < 2^-900, 0, inf, NaN, and sqrt q within ~2^-27 ulp of a midpoint: none of
/// 6.4e7 random q on the development machine) take vsqrtpd.
/// Lanes outside `care` are left unspecified (they never take the fallback).
#[inline]
#[target_feature(enable = "avx512f,avx512dq")]
pub(super) unsafe fn sqrt_rn(q: __m512d, care: __mmask8) -> __m512d {
    let s = sqrt_candidate(q);
    let redo = care & !sqrt_verified(q, s);
    if redo == 0 {
        s
    } else {
        _mm512_mask_sqrt_pd(s, redo, q)
    }
}

/// sqrt(q) within a few 2^-27 ulp before its final rounding (so correctly rounded unless sqrt q
/// lies that close to a midpoint), for 2^-900 <= q < inf. Seed y0 = rsqrt14 (rel. error
/// e0 < 2^-14); one coupled Newton step on s ~ sqrt q, h ~ 1/(2 sqrt q): r = 1/2 - s h, then
/// s, h *= 1 + r (error ~1.5 e0^2 < 2^-27); then two residual corrections s += (q - s^2) h,
/// each of which multiplies the error by ~e(h) (the residual is one exact fma).
#[inline]
#[target_feature(enable = "avx512f,avx512dq")]
unsafe fn sqrt_candidate(q: __m512d) -> __m512d {
    let half = _mm512_set1_pd(0.5);
    let y = _mm512_rsqrt14_pd(q);
    let (s, h) = (_mm512_mul_pd(q, y), _mm512_mul_pd(half, y));
    let r = _mm512_fnmadd_pd(s, h, half);
    let (s, h) = (_mm512_fmadd_pd(s, r, s), _mm512_fmadd_pd(h, r, h));
    let s = _mm512_fmadd_pd(_mm512_fnmadd_pd(s, s, q), h, s);
    _mm512_fmadd_pd(_mm512_fnmadd_pd(s, s, q), h, s)
}

/// Lanes where s = RN(sqrt q) is proven (exact test, whatever the candidate's accuracy, given
/// s > 0 normal and q >= 2^-900; false for q below that, inf or NaN).
///
/// With d = s - next_down(s), u = next_up(s) - s >= d (both exact) and R = q - s^2 (exact
/// real), s is wrong iff sqrt q lies beyond a midpoint (never on one: an odd 54-bit significand
/// squared is no double): R <= -s d + d^2/4 or R > s u + u^2/4. s is a multiple of d, s^2 and q
/// (near s^2) of d^2, so the first means R <= -s d; either way |R| >= s d =: b. b is exact (d a
/// power of two, no underflow) and rounding is monotonic, so |fma(-s, s, q)| >= b too: the test
/// |fma(-s, s, q)| < b rejects every wrong s. A correct s has -s d < R <= s u <= 2^53 d^2 (so
/// the fma is exact), and R < b unless R = s u, i.e. q = s next_up(s) exactly (rare; the
/// fallback takes it): the test accepts it.
#[inline]
#[target_feature(enable = "avx512f,avx512dq")]
unsafe fn sqrt_verified(q: __m512d, s: __m512d) -> __mmask8 {
    let one = _mm512_set1_epi64(1);
    let dn = _mm512_castsi512_pd(_mm512_sub_epi64(_mm512_castpd_si512(s), one));
    let b = _mm512_mul_pd(s, _mm512_sub_pd(s, dn));
    let r = _mm512_abs_pd(_mm512_fnmadd_pd(s, s, q));
    let dom = _mm512_cmp_pd_mask::<_CMP_GE_OQ>(q, _mm512_set1_pd(SQRT_TINY));
    _mm512_mask_cmp_pd_mask::<_CMP_LT_OQ>(dom, r, b)
}

#[cfg(test)]
mod tests {
    //! `sqrt_rn` against `f64::sqrt` (IEEE 754 correctly rounded square root) bitwise, and the
    //! exact check against candidates one ulp off.
    use super::super::kernel::Simd;
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn up(x: f64) -> f64 {
        f64::from_bits(x.to_bits() + 1)
    }
    /// next_down for x >= 0 (0 stays 0)
    fn down(x: f64) -> f64 {
        f64::from_bits(x.to_bits().saturating_sub(1))
    }

    /// Checks every q bitwise; returns the number of lanes the fast path took.
    fn check(qs: &[f64]) -> usize {
        let mut fast = 0;
        for c in qs.chunks(LANES) {
            let mut v = [0.0; LANES];
            v[..c.len()].copy_from_slice(c);
            let (mut got, mut cand) = ([0.0; LANES], [0.0; LANES]);
            let ok = unsafe {
                let q = _mm512_loadu_pd(v.as_ptr());
                _mm512_storeu_pd(got.as_mut_ptr(), sqrt_rn(q, 0xff));
                let s = sqrt_candidate(q);
                _mm512_storeu_pd(cand.as_mut_ptr(), s);
                sqrt_verified(q, s)
            };
            for k in 0..c.len() {
                let want = v[k].sqrt();
                let same = got[k].to_bits() == want.to_bits() || (got[k].is_nan() && want.is_nan());
                assert!(same, "q {:e}: {:e} vs {want:e}", v[k], got[k]);
                if (ok >> k) & 1 != 0 {
                    assert_eq!(cand[k].to_bits(), want.to_bits(), "accepted q {:e}", v[k]);
                    fast += 1;
                }
            }
        }
        fast
    }

    /// Verification of s = sqrt q (accepted unless q = s next_up(s)) and of its two neighbours
    /// (always rejected), for q in the fast domain.
    fn check_verify(qs: &[f64]) {
        for c in qs.chunks(LANES) {
            let mut v = [1.0; LANES];
            v[..c.len()].copy_from_slice(c);
            let s: [f64; LANES] = v.map(f64::sqrt);
            let ok = |f: fn(f64) -> f64| unsafe {
                let t = s.map(f);
                sqrt_verified(_mm512_loadu_pd(v.as_ptr()), _mm512_loadu_pd(t.as_ptr()))
            };
            let (ok0, oku, okd) = (ok(|x| x), ok(up), ok(down));
            for k in 0..c.len() {
                let on_product = s[k].mul_add(up(s[k]), -v[k]) == 0.0;
                assert!((ok0 >> k) & 1 != 0 || on_product, "rejected q {:e}", v[k]);
                assert_eq!(
                    ((oku | okd) >> k) & 1,
                    0,
                    "accepted a neighbour, q {:e}",
                    v[k]
                );
            }
        }
    }

    #[test]
    fn sqrt_rn_is_correctly_rounded() {
        if !Simd::Avx512.supported() {
            return;
        }
        let mut rng = ChaCha8Rng::seed_from_u64(17);
        let n = 3_000_000;
        // (a) log-uniform over [1e-6, 1e6], uniform over the counted range [0, 200^2]
        let log: Vec<f64> = (0..n)
            .map(|_| 10f64.powf(rng.gen_range(-6.0..6.0)))
            .collect();
        let lin: Vec<f64> = (0..n).map(|_| rng.gen_range(0.0..40_000.0)).collect();
        for qs in [&log, &lin] {
            check_verify(qs);
            let fast = check(qs);
            // the fast path must carry nearly all of them (common practice, no source)
            assert!(fast as f64 > 0.9999 * n as f64, "{fast} of {n}");
        }
        // (b) exact squares (s with <= 26 significant bits), rounded squares, their neighbours
        let mut qs = Vec::new();
        for _ in 0..500_000 {
            let k = rng.gen_range(1u64..1 << 26) as f64;
            let e = rng.gen_range(-60..40);
            let s = k * 2f64.powi(e);
            let t = rng.gen_range(0.0..200.0f64);
            let t2 = t * t;
            qs.extend([s * s, up(s * s), down(s * s), t2, up(t2), down(t2)]);
        }
        check_verify(&qs);
        check(&qs);
        // (c) powers of two and neighbours over the whole range, signed zeros, subnormals,
        // around the fast-path bound, inf, NaN, negatives
        let mut qs = vec![0.0, -0.0, f64::INFINITY, f64::NAN, -1.0, -f64::MIN_POSITIVE];
        qs.extend([
            f64::MAX,
            down(f64::MAX),
            f64::MIN_POSITIVE,
            down(f64::MIN_POSITIVE),
        ]);
        for e in -1074i32..=1023 {
            // 2^e built from its bits (powi underflows to 0 for the smallest subnormals)
            let p = if e >= -1022 {
                f64::from_bits(((e + 1023) as u64) << 52)
            } else {
                f64::from_bits(1u64 << (e + 1074))
            };
            qs.extend([p, up(p), up(up(p)), down(p), down(down(p)), 3.0 * p]);
        }
        for _ in 0..100_000 {
            qs.push(f64::from_bits(rng.gen_range(1..1u64 << 52)));
            qs.push(SQRT_TINY * rng.gen_range(0.5..2.0));
        }
        check(&qs);
        // (d) squared edges of linear and uneven bins, and a few ulps around them
        let mut qs = Vec::new();
        let edges = (0..=40).map(|k| 5.0 * k as f64);
        let edges = edges.chain((0..=300).map(|k| 1.5 + 0.7 * k as f64));
        for e in edges.chain((0..=16).map(|i| 2.0 + 0.4 * (i * i) as f64)) {
            let q = e * e;
            for d in -4i64..=4 {
                qs.push(f64::from_bits((q.to_bits() as i64 + d) as u64));
            }
        }
        check(&qs);
        let pos: Vec<f64> = qs
            .into_iter()
            .filter(|&q| q >= SQRT_TINY && q.is_finite())
            .collect();
        check_verify(&pos);
    }
}
