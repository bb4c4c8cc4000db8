//! AVX-512 leaf kernel for counts without mu bins in flat and periodic metrics, and in curved
//! ones wherever s_max is small against the curvature radius (the bulk of all counting).
//!
//! Two stages, so that the expensive per-pair work runs on full vectors of counted pairs only
//! (about 60% of the tested pairs of a leaf pair lie outside [s_min, s_max)):
//! 1. test: eight pairs per step, the quadratic form q and the in-range mask; the accepted
//!    lanes are compressed into a pair buffer (q, and w1 w2, the mean redshift and the pair's
//!    indices where they are needed);
//! 2. accumulate: eight buffered pairs per step, s, the bin (edges rebuilt in registers for
//!    linear bins, else the table with one exact compare) and the quantised terms, then a
//!    branch-free scalar pass adds the eight lanes into per-lane integer histograms (lane k
//!    writes slot `bin * 8 + k`, so lanes of one step never alias; tail lanes go to a spare
//!    slot). Gathers and scatters for this pass were no faster on the development machine.
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
}

impl PairBuf {
    pub(super) fn ensure(&mut self) {
        if self.q.len() < BUF + LANES {
            for v in [&mut self.q, &mut self.w, &mut self.z] {
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
                accumulate::<K, LIN, UW, ZZ>(&buf, n, a, b, g, bn, acc);
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
    accumulate::<K, LIN, UW, ZZ>(&buf, n, a, b, g, bn, acc);
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
    buf: &PairBuf,
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
                _mm512_sqrt_pd(q)
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
