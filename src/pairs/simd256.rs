//! AVX2 leaf kernel for counts without mu bins in flat and periodic metrics, and in curved ones
//! wherever s_max is small against the curvature radius: the two stages of `simd512` on
//! 4-wide vectors, for x86-64 CPUs without AVX-512.
//!
//! 1. test: four pairs per step, q and the in-range mask; the accepted lanes are moved to the
//!    front of the vector by a permutation chosen by the 4-bit mask (`PERM`), stored full width
//!    into the pair buffer, and the buffer end advances by the number of accepted lanes;
//! 2. accumulate: eight buffered pairs per step (two vectors), s, the bin (edges rebuilt in
//!    registers for linear bins, else the table with one exact compare) and the quantised
//!    terms, then the same branch-free scalar adds into the per-lane integer histograms as the
//!    AVX-512 kernel (eight lanes, slot `bin * 8 + lane`, tail lanes into the spare slot).
//!
//! Bitwise equality with `leaf_ref`: every value comes from the same f64 operations in the same
//! order as `pair_q`, `s_of_q` and `Quant::fix_*` (separate multiplies and adds: this module
//! enables AVX2 only, never FMA). AVX2 has no f64 -> i64 conversion; `fix` rounds with the
//! magic-number addition where that is exact and with the scalar conversion elsewhere.
#![cfg(target_arch = "x86_64")]

use super::kernel::PAIR_BUF as BUF;
use super::kernel::{Acc, Binner, Geo, LeafPair, Pts, ASINH_C, ASIN_C, CLO, LANES, OPE, PER};
use super::simd512::PairBuf;
use std::arch::x86_64::*;

/// Doubles per vector.
const W: usize = 4;

/// `_mm256_permutevar8x32` indices moving the 64-bit lanes set in a 4-bit mask to the front, in
/// order (the remaining positions are don't-care slack).
static PERM: [[i32; 8]; 16] = perm_table();

const fn perm_table() -> [[i32; 8]; 16] {
    let mut t = [[0i32; 8]; 16];
    let mut m = 0;
    while m < 16 {
        let mut p = 0;
        let mut k = 0;
        while k < W {
            if (m >> k) & 1 != 0 {
                t[m][2 * p] = 2 * k as i32;
                t[m][2 * p + 1] = 2 * k as i32 + 1;
                p += 1;
            }
            k += 1;
        }
        m += 1;
    }
    t
}

/// Set lanes of a 4-bit mask (a table: POPCNT is not part of AVX2).
const POP4: [u8; 16] = [0, 1, 1, 2, 1, 2, 2, 3, 1, 2, 2, 3, 2, 3, 3, 4];

/// 1.5 * 2^52: y + M rounds y to an integer held in the low mantissa bits (see `fix`).
const MAGIC: f64 = 6755399441055744.0;
/// Largest |y| for which the magic-number conversion is used.
const MAGIC_LIM: f64 = 2251799813685248.0; // 2^51

/// Lanes k < n of a 64-bit lane mask.
#[inline]
#[target_feature(enable = "avx2")]
fn first_lanes(n: usize) -> __m256i {
    _mm256_cmpgt_epi64(_mm256_set1_epi64x(n as i64), _mm256_set_epi64x(3, 2, 1, 0))
}

/// Four doubles from `p`: a plain load, or (TAIL) a masked one that never touches the memory
/// of the lanes outside `lm` (they read 0).
#[inline]
#[target_feature(enable = "avx2")]
unsafe fn ld<const TAIL: bool>(p: *const f64, lm: __m256i) -> __m256d {
    if TAIL {
        _mm256_maskload_pd(p, lm)
    } else {
        _mm256_loadu_pd(p)
    }
}

/// Per-row broadcasts and per-leaf constants of stage 1.
struct Row {
    ax: __m256d,
    ay: __m256d,
    az: __m256d,
    at: __m256d,
    aw: __m256d,
    azz: __m256d,
    qlo: __m256d,
    qhi: __m256d,
    half: __m256d,
    box_l: __m256d,
    hl: __m256d,
    neg_hl: __m256d,
    /// (i << 32) | j0 for the pair indices of the regions.
    ij0: i64,
    j0: usize,
}

/// Raw pointers into the pair buffer.
struct Out {
    q: *mut f64,
    w: *mut f64,
    z: *mut f64,
    ij: *mut u64,
}

/// One stage-1 step: pairs (i, j..j+4) (TAIL: only the lanes in `lm`) tested, the accepted
/// ones compressed to the buffer at `n`; returns the new buffer end.
#[inline]
#[target_feature(enable = "avx2")]
#[allow(clippy::too_many_arguments)]
unsafe fn step<const K: u8, const UW: bool, const ZZ: bool, const TAIL: bool>(
    r: &Row,
    b: &Pts,
    j: usize,
    lm: __m256i,
    regions: bool,
    out: &Out,
    n: usize,
) -> usize {
    let mut dx = _mm256_sub_pd(r.ax, ld::<TAIL>(b.c[0].as_ptr().add(j), lm));
    let mut dy = _mm256_sub_pd(r.ay, ld::<TAIL>(b.c[1].as_ptr().add(j), lm));
    let mut dz = _mm256_sub_pd(r.az, ld::<TAIL>(b.c[2].as_ptr().add(j), lm));
    if K == PER {
        // same steps as `wrap`: d > L/2 -> d - L, else d < -L/2 -> d + L
        for d in [&mut dx, &mut dy, &mut dz] {
            let up = _mm256_cmp_pd::<_CMP_GT_OQ>(*d, r.hl);
            let v = _mm256_blendv_pd(*d, _mm256_sub_pd(*d, r.box_l), up);
            let dn = _mm256_andnot_pd(up, _mm256_cmp_pd::<_CMP_LT_OQ>(v, r.neg_hl));
            *d = _mm256_blendv_pd(v, _mm256_add_pd(v, r.box_l), dn);
        }
    }
    let mut q = _mm256_add_pd(
        _mm256_add_pd(_mm256_mul_pd(dx, dx), _mm256_mul_pd(dy, dy)),
        _mm256_mul_pd(dz, dz),
    );
    if K == CLO || K == OPE {
        // same order as `pair_q`: spatial part first, then -+ dt^2
        let dt = _mm256_sub_pd(r.at, ld::<TAIL>(b.c[3].as_ptr().add(j), lm));
        let t2 = _mm256_mul_pd(dt, dt);
        q = if K == CLO {
            _mm256_add_pd(q, t2)
        } else {
            _mm256_sub_pd(q, t2)
        };
    }
    let inr = _mm256_and_pd(
        _mm256_cmp_pd::<_CMP_GE_OQ>(q, r.qlo),
        _mm256_cmp_pd::<_CMP_LT_OQ>(q, r.qhi),
    );
    let mut m = _mm256_movemask_pd(inr) as usize;
    if TAIL {
        m &= _mm256_movemask_pd(_mm256_castsi256_pd(lm)) as usize;
    }
    // compressed full-width stores: the accepted lanes land at n.., the rest is slack
    let pm = _mm256_loadu_si256(PERM[m].as_ptr().cast());
    let compress = |v: __m256d| _mm256_castps_pd(_mm256_permutevar8x32_ps(_mm256_castpd_ps(v), pm));
    _mm256_storeu_pd(out.q.add(n), compress(q));
    if !UW {
        let ww = _mm256_mul_pd(r.aw, ld::<TAIL>(b.w.as_ptr().add(j), lm));
        _mm256_storeu_pd(out.w.add(n), compress(ww));
    }
    if !ZZ {
        let zz = _mm256_mul_pd(
            r.half,
            _mm256_add_pd(r.azz, ld::<TAIL>(b.z.as_ptr().add(j), lm)),
        );
        _mm256_storeu_pd(out.z.add(n), compress(zz));
    }
    if regions {
        let ij = _mm256_add_epi64(
            _mm256_set1_epi64x(r.ij0 + (j - r.j0) as i64),
            _mm256_set_epi64x(3, 2, 1, 0),
        );
        _mm256_storeu_si256(out.ij.add(n).cast(), _mm256_permutevar8x32_epi32(ij, pm));
    }
    n + POP4[m] as usize
}

/// One leaf pair in metric K (flat, periodic, or curved when every counted pair takes the
/// series branch of `s_of_q`, which the caller checks); LIN bins through edges rebuilt in
/// registers (`Binner::lin`) instead of the table; UW / ZZ drop the weight and redshift terms
/// (unit weights, zero redshifts).
///
/// # Safety
/// The CPU must support AVX2; `bn.table_ok` must hold; `acc` must have been built for `bn.nb`
/// bins; the b leaf holds at most `BUF` points.
#[target_feature(enable = "avx2")]
pub(crate) unsafe fn leaf<const K: u8, const LIN: bool, const UW: bool, const ZZ: bool>(
    a: &Pts,
    b: &Pts,
    lp: LeafPair,
    g: &Geo,
    bn: &Binner,
    acc: &mut Acc,
) {
    if UW {
        acc.unit_w = true;
    }
    acc.lanes_w |= !UW;
    acc.lanes_z |= !ZZ;
    let regions = acc.nreg > 0;
    let mut buf = std::mem::take(&mut acc.buf);
    buf.ensure();
    let out = Out {
        q: buf.q.as_mut_ptr(),
        w: buf.w.as_mut_ptr(),
        z: buf.z.as_mut_ptr(),
        ij: buf.ij.as_mut_ptr(),
    };
    let zero = _mm256_setzero_pd();
    let mut row = Row {
        ax: zero,
        ay: zero,
        az: zero,
        at: zero,
        aw: zero,
        azz: zero,
        qlo: _mm256_set1_pd(bn.qlo()),
        qhi: _mm256_set1_pd(bn.qhi()),
        half: _mm256_set1_pd(0.5),
        box_l: _mm256_set1_pd(g.box_l),
        hl: _mm256_set1_pd(g.half_l),
        neg_hl: _mm256_set1_pd(-g.half_l),
        ij0: 0,
        j0: 0,
    };
    let mut n = 0usize;
    let prune = lp.q_cut.is_finite();
    let mut r0 = lp.a0;
    while r0 < lp.a1 {
        let rows = (lp.a1 - r0).min(W);
        let mut live = (1u32 << rows) - 1;
        if prune {
            live &= live_rows::<K>(a, r0, rows, &lp, g);
        }
        let r = r0;
        r0 += W;
        while live != 0 {
            let i = r + live.trailing_zeros() as usize;
            live &= live - 1;
            let j0 = if lp.same { i + 1 } else { lp.b0 };
            if n + (lp.b1 - j0) > BUF {
                accumulate::<K, LIN, UW, ZZ>(&mut buf, n, a, b, g, bn, acc);
                n = 0;
            }
            row.ax = _mm256_set1_pd(a.c[0][i]);
            row.ay = _mm256_set1_pd(a.c[1][i]);
            row.az = _mm256_set1_pd(a.c[2][i]);
            row.at = _mm256_set1_pd(a.t_at::<K>(i));
            row.aw = _mm256_set1_pd(a.w[i]);
            row.azz = _mm256_set1_pd(if ZZ { 0.0 } else { a.z[i] });
            row.ij0 = ((i << 32) | j0) as i64;
            row.j0 = j0;
            let all = _mm256_set1_epi64x(-1);
            let mut j = j0;
            while j + 2 * W <= lp.b1 {
                n = step::<K, UW, ZZ, false>(&row, b, j, all, regions, &out, n);
                n = step::<K, UW, ZZ, false>(&row, b, j + W, all, regions, &out, n);
                j += 2 * W;
            }
            if j + W <= lp.b1 {
                n = step::<K, UW, ZZ, false>(&row, b, j, all, regions, &out, n);
                j += W;
            }
            if j < lp.b1 {
                let lm = first_lanes(lp.b1 - j);
                n = step::<K, UW, ZZ, true>(&row, b, j, lm, regions, &out, n);
            }
        }
    }
    accumulate::<K, LIN, UW, ZZ>(&mut buf, n, a, b, g, bn, acc);
    acc.buf = buf;
}

/// Rows among the `rows` (<= 4) from `r0` whose point may lie within the leaf pair's cut of
/// the b leaf box: the point-to-box lower bound on q of `tree::box_bounds`, operation for
/// operation as in `simd512::live_rows`. Skipping the others is exact (every pair of a skipped
/// row has q >= that bound >= `q_cut`).
#[target_feature(enable = "avx2")]
unsafe fn live_rows<const K: u8>(a: &Pts, r0: usize, rows: usize, lp: &LeafPair, g: &Geo) -> u32 {
    let lm = first_lanes(rows);
    let zero = _mm256_setzero_pd();
    let l = _mm256_set1_pd(g.box_l);
    let dims = if K == CLO || K == OPE { 4 } else { 3 };
    let mut dmin = [zero; 4];
    let mut dmax3 = zero;
    for (d, dmin_d) in dmin.iter_mut().enumerate().take(dims) {
        let p = _mm256_maskload_pd(a.c[d].as_ptr().add(r0), lm);
        let lo = _mm256_sub_pd(_mm256_set1_pd(lp.b_lo[d]), p);
        let hi = _mm256_sub_pd(_mm256_set1_pd(lp.b_hi[d]), p);
        let neg_hi = _mm256_sub_pd(zero, hi);
        *dmin_d = if K == PER {
            // distance to the nearest multiple of L: 0 inside, else the shorter way round
            let right = _mm256_min_pd(lo, _mm256_sub_pd(l, hi));
            let left = _mm256_min_pd(neg_hi, _mm256_add_pd(lo, l));
            let pos = _mm256_cmp_pd::<_CMP_GT_OQ>(lo, zero);
            let v = _mm256_max_pd(_mm256_blendv_pd(left, right, pos), zero);
            let inside = _mm256_and_pd(
                _mm256_cmp_pd::<_CMP_LE_OQ>(lo, zero),
                _mm256_cmp_pd::<_CMP_GE_OQ>(hi, zero),
            );
            _mm256_blendv_pd(v, zero, inside)
        } else {
            _mm256_max_pd(_mm256_max_pd(lo, neg_hi), zero)
        };
        if d == 3 {
            let abs_lo = _mm256_max_pd(lo, _mm256_sub_pd(zero, lo));
            let abs_hi = _mm256_max_pd(hi, _mm256_sub_pd(zero, hi));
            dmax3 = _mm256_max_pd(abs_lo, abs_hi);
        }
    }
    let sq = |v| _mm256_mul_pd(v, v);
    let mut q = _mm256_add_pd(_mm256_add_pd(sq(dmin[0]), sq(dmin[1])), sq(dmin[2]));
    if K == CLO {
        q = _mm256_add_pd(q, sq(dmin[3]));
    } else if K == OPE {
        q = _mm256_sub_pd(q, sq(dmax3));
    }
    let cut = _mm256_cmp_pd::<_CMP_NGE_UQ>(q, _mm256_set1_pd(lp.q_cut));
    _mm256_movemask_pd(cut) as u32
}

/// round_ties_even(x * scale) as i64 for four lanes, stored at `out`: bitwise `Quant::fix_*`.
///
/// Exactness of the fast path: y = x * scale is the same product as in `fix_*`. For |y| < 2^51,
/// y + M (M = 1.5 * 2^52, even) lies in (2^52, 2^52 + 2^52), where doubles are spaced exactly
/// 1, so the addition (round to nearest even, the default mode) yields M + k with k the integer
/// nearest to y; at a tie y = m + 1/2 it picks the even one of M + m, M + m + 1, whose parity
/// is that of m, m + 1 as M is even, so k = round_ties_even(y). The result may reach 2^53
/// only if k = 2^51. In [2^52, 2^53] the bit pattern of a double v is that of 2^52 plus
/// (v - 2^52) (the exponent step to 2^53 adds exactly 2^52 to the pattern, as does the value),
/// so pattern(y + M) - pattern(M) = k as a 64-bit integer. Lanes with |y| >= 2^51 (or NaN)
/// send the whole vector through the scalar conversion of `fix_*`.
#[inline]
#[target_feature(enable = "avx2")]
unsafe fn fix(x: __m256d, scale: __m256d, out: *mut i64) {
    let y = _mm256_mul_pd(x, scale);
    let abs = _mm256_andnot_pd(_mm256_set1_pd(-0.0), y);
    let big = _mm256_cmp_pd::<_CMP_NLT_UQ>(abs, _mm256_set1_pd(MAGIC_LIM));
    if _mm256_movemask_pd(big) == 0 {
        let magic = _mm256_set1_pd(MAGIC);
        let t = _mm256_add_pd(y, magic);
        let k = _mm256_sub_epi64(_mm256_castpd_si256(t), _mm256_castpd_si256(magic));
        _mm256_storeu_si256(out.cast(), k);
    } else {
        let mut v = [0f64; W];
        _mm256_storeu_pd(v.as_mut_ptr(), y);
        for (k, &y) in v.iter().enumerate() {
            *out.add(k) = y.round_ties_even() as i64;
        }
    }
}

/// Stage 2: add the `n` buffered pairs to the lane histograms.
#[target_feature(enable = "avx2")]
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
    // lanes past n read zeros (finite values; their terms go to the spare slot)
    for v in [&mut buf.q, &mut buf.w, &mut buf.z] {
        v[n..n + LANES].fill(0.0);
    }
    let curved = K == CLO || K == OPE;
    let qlo = _mm256_set1_pd(bn.qlo());
    let inv_h = _mm256_set1_pd(bn.inv_h);
    let last = _mm256_set1_pd(bn.last_cell);
    let zero = _mm256_setzero_pd();
    let scale_w = _mm256_set1_pd(acc.q.scale[0]);
    let scale_s = _mm256_set1_pd(acc.q.scale[1]);
    let scale_z = _mm256_set1_pd(acc.q.scale[2]);
    let two_r = _mm256_set1_pd(2.0 * g.radius);
    let coef = if K == CLO { ASIN_C } else { ASINH_C };
    let cv = coef.map(|c| _mm256_set1_pd(c));
    let (basep, edgep) = (bn.base.as_ptr(), bn.edge.as_ptr());
    let trash = bn.nb;
    let (s0, ds, inv_ds) = bn.lin.unwrap_or((0.0, 1.0, 1.0));
    let (s0v, dsv, inv_dsv) = (
        _mm256_set1_pd(s0),
        _mm256_set1_pd(ds),
        _mm256_set1_pd(inv_ds),
    );
    let top = _mm256_set1_pd((bn.n_s - 1) as f64);
    let onef = _mm256_set1_pd(1.0);
    let (qp, wp, zp) = (buf.q.as_ptr(), buf.w.as_ptr(), buf.z.as_ptr());
    let regions = acc.nreg > 0;
    let mut cells = [0i32; LANES];
    let mut bins32 = [0i32; LANES];
    let mut qs = [0f64; LANES];
    let mut tss = [0i64; LANES];
    let mut tzs = [0i64; LANES];
    let mut bins = [0usize; LANES];
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
            for h in 0..LANES / W {
                let o = h * W;
                let q = _mm256_loadu_pd(qp.add(e + o));
                if !LIN {
                    let cf = _mm256_min_pd(
                        _mm256_max_pd(_mm256_mul_pd(_mm256_sub_pd(q, qlo), inv_h), zero),
                        last,
                    );
                    // cells < 2^20: the 32-bit conversion is exact
                    _mm_storeu_si128(cells.as_mut_ptr().add(o).cast(), _mm256_cvttpd_epi32(cf));
                    _mm256_storeu_pd(qs.as_mut_ptr().add(o), q);
                }
                let s = if curved {
                    // `s_of_q` series branch, operation for operation
                    let c = _mm256_sqrt_pd(_mm256_max_pd(q, zero));
                    let mut x = _mm256_div_pd(c, two_r);
                    if K == CLO {
                        x = _mm256_min_pd(x, onef);
                    }
                    let x2 = _mm256_mul_pd(x, x);
                    let mut p = _mm256_add_pd(cv[3], _mm256_mul_pd(x2, cv[4]));
                    p = _mm256_add_pd(cv[2], _mm256_mul_pd(x2, p));
                    p = _mm256_add_pd(cv[1], _mm256_mul_pd(x2, p));
                    p = _mm256_add_pd(cv[0], _mm256_mul_pd(x2, p));
                    let a = _mm256_add_pd(x, _mm256_mul_pd(x, _mm256_mul_pd(x2, p)));
                    _mm256_mul_pd(two_r, a)
                } else {
                    _mm256_sqrt_pd(q)
                };
                if LIN {
                    // bin from s, then one exact q-space compare each way against edges
                    // rebuilt as in `Binner::detect_linear` (s can sit one bin off at an
                    // edge); truncation in f64 equals the AVX-512 kernel's integer round trip
                    // (values in [0, n_s - 1])
                    let gf = _mm256_round_pd::<{ _MM_FROUND_TO_ZERO | _MM_FROUND_NO_EXC }>(
                        _mm256_min_pd(
                            _mm256_max_pd(_mm256_mul_pd(_mm256_sub_pd(s, s0v), inv_dsv), zero),
                            top,
                        ),
                    );
                    let elo = _mm256_add_pd(s0v, _mm256_mul_pd(gf, dsv));
                    let ehi = _mm256_add_pd(s0v, _mm256_mul_pd(_mm256_add_pd(gf, onef), dsv));
                    let dn = _mm256_cmp_pd::<_CMP_LT_OQ>(q, _mm256_mul_pd(elo, elo));
                    let up = _mm256_cmp_pd::<_CMP_GE_OQ>(q, _mm256_mul_pd(ehi, ehi));
                    // small integers: exact in f64
                    let gf = _mm256_sub_pd(gf, _mm256_and_pd(dn, onef));
                    let gf = _mm256_add_pd(gf, _mm256_and_pd(up, onef));
                    _mm_storeu_si128(bins32.as_mut_ptr().add(o).cast(), _mm256_cvttpd_epi32(gf));
                }
                let ww = if UW {
                    onef
                } else {
                    _mm256_loadu_pd(wp.add(e + o))
                };
                let ts = if UW { s } else { _mm256_mul_pd(ww, s) };
                fix(ts, scale_s, tss.as_mut_ptr().add(o));
                if !UW || regions {
                    fix(ww, scale_w, tws.as_mut_ptr().add(o));
                }
                if !ZZ {
                    let zz = _mm256_loadu_pd(zp.add(e + o));
                    let tz = if UW { zz } else { _mm256_mul_pd(ww, zz) };
                    fix(tz, scale_z, tzs.as_mut_ptr().add(o));
                }
            }
            // scalar adds of all eight lanes, branch-free (slots of one step never alias)
            for k in 0..LANES {
                let bin = if LIN {
                    bins32[k] as usize
                } else {
                    let c = cells[k] as usize;
                    *basep.add(c) as usize + (qs[k] >= *edgep.add(c)) as usize
                };
                // tail lanes go to the spare bin nb (never flushed)
                let bin = if k < rem { bin } else { trash };
                bins[k] = bin;
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
                    acc.add_regions_fixed(bins[k], tws[k], a.reg[i], b.reg[j]);
                }
            }
            e += LANES;
        }
        e0 = e1;
    }
}
