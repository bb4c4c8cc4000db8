//! AVX-512 leaf kernel for counts without mu bins in flat and periodic metrics, and in curved
//! ones wherever s_max is small against the curvature radius (the bulk of all counting). Eight
//! pairs per step in vector registers: the quadratic form, the in-range mask, s, the bin (edges
//! rebuilt in registers for linear bins) and the quantised terms; then a branch-free scalar
//! pass over the eight lanes (doing the table bin lookup with one exact compare for other
//! bins) adds into per-lane integer histograms, rejected lanes into a spare slot. (Measured on the development machine: gathers
//! and scatters for these steps were no faster, and masked per-lane branches mispredict.)
//! Lane k always writes slot `bin * 8 + k`, so lanes of one step never alias. Each pair term is
//! quantised exactly as `Quant::fix_*` do (multiply by 2^frac, convert with the default
//! round-to-nearest-even), so the result is bitwise that of the scalar kernels. Rows whose point
//! is farther than s_max from the whole b leaf box are skipped before any pair is tested.
#![cfg(target_arch = "x86_64")]

use super::kernel::{
    leaf_ref, Acc, Binner, Geo, LeafPair, Pts, ASINH_C, ASIN_C, CLO, LANES, OPE, PER,
};
use super::tree::box_bounds;
use std::arch::x86_64::*;

/// One leaf pair in metric K (flat, periodic, or curved when every counted pair takes the
/// series branch of `s_of_q`, which the caller checks); LIN bins through edges rebuilt in
/// registers (`Binner::lin`, linear edges) instead of the table; UW / ZZ drop the weight and
/// redshift terms (unit weights, zero redshifts).
///
/// # Safety
/// The CPU must support AVX-512F and AVX-512DQ; `bn.table_ok` must hold; `acc` must have been
/// built for `bn.nb` bins.
#[target_feature(enable = "avx512f,avx512dq")]
pub(crate) unsafe fn leaf<const K: u8, const LIN: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    let (na, nbl) = (lp.a1 - lp.a0, lp.b1 - lp.b0);
    let tests = if lp.same {
        na * na.saturating_sub(1) / 2
    } else {
        na * nbl
    } as u64;
    let periodic = K == PER;
    let curved = K == CLO || K == OPE;
    // lane sums are folded into the totals per leaf pair, or per row for very large weights
    let per_row = !acc.reserve_lanes(tests);
    if per_row && (nbl as u64) > acc.q.lane_limit {
        // not even one row fits the lane histograms: the reference kernel (same result)
        leaf_ref::<K, false>(a, b, lp, g, bn, acc);
        return;
    }
    if UW {
        acc.unit_w = true;
    }
    acc.lanes_w |= !UW;
    acc.lanes_z |= !ZZ;
    let nreg = acc.nreg;
    let qlo = _mm512_set1_pd(bn.qlo());
    let qhi = _mm512_set1_pd(bn.qhi());
    let inv_h = _mm512_set1_pd(bn.inv_h);
    let last = _mm512_set1_pd(bn.last_cell);
    let zero = _mm512_setzero_pd();
    let half = _mm512_set1_pd(0.5);
    let scale_w = _mm512_set1_pd(acc.q.scale[0]);
    let scale_s = _mm512_set1_pd(acc.q.scale[1]);
    let scale_z = _mm512_set1_pd(acc.q.scale[2]);
    let box_l = _mm512_set1_pd(g.box_l);
    let hl = _mm512_set1_pd(g.half_l);
    let neg_hl = _mm512_set1_pd(-g.half_l);
    let (bxp, byp, bzp) = (b.c[0].as_ptr(), b.c[1].as_ptr(), b.c[2].as_ptr());
    let btp = b.c[3].as_ptr();
    let two_r = _mm512_set1_pd(2.0 * g.radius);
    let coef = if K == CLO { ASIN_C } else { ASINH_C };
    let cv = coef.map(|c| _mm512_set1_pd(c));
    let (bwp, bzzp) = (b.w.as_ptr(), b.z.as_ptr());
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
    let mut cells = [0i64; LANES];
    let mut qs = [0f64; LANES];
    let mut tss = [0i64; LANES];
    let mut tzs = [0i64; LANES];
    let mut bins = [0i64; LANES];
    let mut tws = [0i64; LANES];
    for i in lp.a0..lp.a1 {
        if lp.q_cut.is_finite() {
            // rows whose point lies too far from the whole b box are skipped (exact: every
            // pair q is >= the point-to-box bound, see `tree::node_bounds`)
            let p = [a.c[0][i], a.c[1][i], a.c[2][i], a.t_at::<K>(i)];
            let qmin = box_bounds::<K>(&p, &p, &lp.b_lo, &lp.b_hi, g.box_l, g.half_l).0;
            if qmin >= lp.q_cut {
                continue;
            }
        }
        if per_row {
            acc.reserve_lanes(nbl as u64);
        }
        // derived per row: a fold of the lanes (above) writes through the vectors themselves
        let (lnp, lwp, lsp, lzp) = (
            acc.ln.as_mut_ptr(),
            acc.lw.as_mut_ptr(),
            acc.ls.as_mut_ptr(),
            acc.lz.as_mut_ptr(),
        );
        let ax = _mm512_set1_pd(a.c[0][i]);
        let ay = _mm512_set1_pd(a.c[1][i]);
        let az = _mm512_set1_pd(a.c[2][i]);
        let at = _mm512_set1_pd(a.t_at::<K>(i));
        let aw = _mm512_set1_pd(a.w[i]);
        let azz = _mm512_set1_pd(if ZZ { 0.0 } else { a.z[i] });
        let mut j = if lp.same { i + 1 } else { lp.b0 };
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
            if m != 0 {
                if !LIN {
                    let cf = _mm512_min_pd(
                        _mm512_max_pd(_mm512_mul_pd(_mm512_sub_pd(q, qlo), inv_h), zero),
                        last,
                    );
                    let cell = _mm512_cvttpd_epi64(cf);
                    _mm512_storeu_si512(cells.as_mut_ptr().cast(), cell);
                    _mm512_storeu_pd(qs.as_mut_ptr(), q);
                }
                let mk = m as u32;
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
                    // bin from s, then one exact q-space compare each way against edges
                    // rebuilt as in `Binner::detect_linear` (s can sit one bin off at an edge)
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
                    // rejected lanes go to the spare bin nb (never flushed)
                    let g = _mm512_mask_blend_epi64(m, trash_v, g);
                    _mm512_storeu_si512(bins.as_mut_ptr().cast(), g);
                }
                let ww = if UW {
                    _mm512_set1_pd(1.0)
                } else {
                    _mm512_mul_pd(aw, _mm512_maskz_loadu_pd(lm, bwp.add(j)))
                };
                let ts = if UW { s } else { _mm512_mul_pd(ww, s) };
                let ts = _mm512_cvtpd_epi64(_mm512_mul_pd(ts, scale_s));
                let tw = _mm512_cvtpd_epi64(_mm512_mul_pd(ww, scale_w));
                _mm512_storeu_si512(tss.as_mut_ptr().cast(), ts);
                if !UW {
                    _mm512_storeu_si512(tws.as_mut_ptr().cast(), tw);
                }
                if !ZZ {
                    let zz = _mm512_mul_pd(
                        half,
                        _mm512_add_pd(azz, _mm512_maskz_loadu_pd(lm, bzzp.add(j))),
                    );
                    let tz = if UW { zz } else { _mm512_mul_pd(ww, zz) };
                    let tz = _mm512_cvtpd_epi64(_mm512_mul_pd(tz, scale_z));
                    _mm512_storeu_si512(tzs.as_mut_ptr().cast(), tz);
                }
                // scalar adds of all eight lanes, branch-free (slots of one step never alias)
                for k in 0..LANES {
                    let bin = if LIN {
                        bins[k] as usize
                    } else {
                        let c = cells[k] as usize;
                        let bin = *basep.add(c) as usize + (qs[k] >= *edgep.add(c)) as usize;
                        // rejected lanes go to the spare bin nb (never flushed)
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
                if nreg > 0 {
                    if UW {
                        _mm512_storeu_si512(tws.as_mut_ptr().cast(), tw);
                    }
                    let mut mm = m;
                    while mm != 0 {
                        let k = mm.trailing_zeros() as usize;
                        mm &= mm - 1;
                        acc.add_regions_fixed(bins[k] as usize, tws[k], a.reg[i], b.reg[j + k]);
                    }
                }
            }
            j += LANES;
        }
    }
}
