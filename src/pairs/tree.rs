//! KD-tree over leaf buckets with 4-D bounding boxes (the three spatial embedding coordinates
//! plus t), and conservative node-pair bounds on the quadratic form q.
use super::kernel::{CLO, OPE, PER};

/// Maximum points per leaf bucket. Inside a leaf the points are further ordered into compact
/// blocks of 8 (`order_blocks`), the SIMD step of the leaf kernel, whose steps with no pair in
/// range are cheap: a leaf then does little more pair work than eight-point leaves would,
/// without their node visits and kernel calls, at any density. (Measured, s_max = 200 Mpc/h,
/// 1 thread: block order saves 5-10%; against 32-point leaves, 128 made the 1e5-point box count
/// 10% faster, split RR of 2e6 survey randoms (ten 2e5-point subsets) 10-15% faster, full RR of
/// the 2e6 and 2e5 randoms the same within noise; 64 lay in between; 16 was 10-30% slower.)
pub(crate) const LEAF_SIZE: usize = 128;
/// Points per block inside a leaf (the kernel's lane count).
const BLOCK: usize = 8;

#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Node {
    pub lo: [f64; 4],
    pub hi: [f64; 4],
    pub start: usize,
    pub end: usize,
    /// Child node indices; `left == 0` marks a leaf (the root is never a child).
    pub left: u32,
    pub right: u32,
}

impl Node {
    /// Placeholder of a preallocated node array.
    pub const BLANK: Node = Node {
        lo: [0.0; 4],
        hi: [0.0; 4],
        start: 0,
        end: 0,
        left: 0,
        right: 0,
    };

    pub fn is_leaf(&self) -> bool {
        self.left == 0
    }
    pub fn len(&self) -> usize {
        self.end - self.start
    }
}

/// Tree nodes; node 0 is the root. Points are referred to by tree order.
#[derive(Debug, Clone)]
pub(crate) struct Tree {
    pub nodes: Vec<Node>,
}

/// Build the tree over `c` (3 or 4 coordinate arrays of equal, non-zero length; an empty c[3]
/// means t = 0). Returns the tree and
/// the permutation `perm` with tree position p holding original point `perm[p]`. Splits at the
/// median of the widest spatial axis; deterministic for a given input.
///
/// The parallel levels run on `pool` (else the current rayon pool); the arrays are allocated by
/// the calling thread, so pool workers allocate nothing.
///
/// Point indices are u32 (half the memory of usize at the peak of `Indexed::new`): callers
/// refuse catalogues of more than `MAX_POINTS` points.
pub(crate) fn build_in(c: &[Vec<f64>; 4], pool: Option<&rayon::ThreadPool>) -> (Tree, Vec<u32>) {
    let n = c[0].len();
    assert!(n <= MAX_POINTS, "tree: more than {MAX_POINTS} points");
    let mut perm: Vec<u32> = (0..n as u32).collect();
    // The top levels split their two halves over the current rayon pool. Every subtree's node
    // count follows from its point count alone (`count_nodes`), so each half writes its own
    // slice of one preallocated array in the sequential depth-first pre-order: the tree never
    // depends on threads, and no per-thread buffers are allocated.
    let depth = if n >= PAR_MIN_POINTS { PAR_LEVELS } else { 0 };
    let mut nodes = vec![Node::BLANK; count_nodes(n)];
    match pool {
        Some(p) => p.install(|| build_par(c, &mut perm, 0, &mut nodes, 0, depth)),
        None => build_par(c, &mut perm, 0, &mut nodes, 0, depth),
    }
    (Tree { nodes }, perm)
}

/// Most points a tree indexes (u32 point indices).
pub(crate) const MAX_POINTS: usize = u32::MAX as usize;

/// Subtrees below this size are built on one thread.
const PAR_MIN_POINTS: usize = 20_000;
/// Levels of the tree whose halves are built in parallel (up to 2^PAR_LEVELS tasks).
const PAR_LEVELS: u32 = 4;

/// Size of the left half of a node of `len` points (see `node_of`).
fn split_point(len: usize) -> usize {
    // near the middle at a multiple of 8 points where possible, so leaves fill whole 8-lane
    // SIMD steps
    let half = len / 2;
    if half >= 8 {
        (half + 4) / 8 * 8
    } else {
        half
    }
}

/// Number of nodes of a subtree of `len` points.
fn count_nodes(len: usize) -> usize {
    if len <= LEAF_SIZE {
        1
    } else {
        let mid = split_point(len);
        1 + count_nodes(mid) + count_nodes(len - mid)
    }
}

/// Subtree of `perm` (global positions from `start`) written to `out` in pre-order; `base` is
/// the global index of out[0].
fn build_par(
    c: &[Vec<f64>; 4],
    perm: &mut [u32],
    start: usize,
    out: &mut [Node],
    base: u32,
    depth: u32,
) {
    if depth == 0 {
        let mut cur = 0;
        build_seq(c, perm, start, out, &mut cur, base);
        debug_assert_eq!(cur, out.len());
        return;
    }
    let (node, split) = node_of(c, perm, start);
    let Some(mid) = split else {
        out[0] = node;
        return;
    };
    let nl = count_nodes(mid);
    out[0] = Node {
        left: base + 1,
        right: base + 1 + nl as u32,
        ..node
    };
    let (lo, ro) = out[1..].split_at_mut(nl);
    let (pl, pr) = perm.split_at_mut(mid);
    rayon::join(
        || build_par(c, pl, start, lo, base + 1, depth - 1),
        || build_par(c, pr, start + mid, ro, base + 1 + nl as u32, depth - 1),
    );
}

/// Sequential subtree written to out[*cur..] in pre-order; returns its root's global index.
fn build_seq(
    c: &[Vec<f64>; 4],
    perm: &mut [u32],
    start: usize,
    out: &mut [Node],
    cur: &mut usize,
    base: u32,
) -> u32 {
    let (node, split) = node_of(c, perm, start);
    let id = *cur;
    out[id] = node;
    *cur += 1;
    if let Some(mid) = split {
        let (pl, pr) = perm.split_at_mut(mid);
        let l = build_seq(c, pl, start, out, cur, base);
        let r = build_seq(c, pr, start + mid, out, cur, base);
        out[id].left = l;
        out[id].right = r;
    }
    base + id as u32
}

/// Bounds of the points `perm` (global positions start..start + perm.len()) and, when the
/// node is to be split, the split: (node, Some((axis, local mid))).
fn node_of(c: &[Vec<f64>; 4], perm: &mut [u32], start: usize) -> (Node, Option<usize>) {
    let mut lo = [f64::INFINITY; 4];
    let mut hi = [f64::NEG_INFINITY; 4];
    // an empty t column (flat metrics) means t = 0
    let dims = if c[3].is_empty() { 3 } else { 4 };
    if dims == 3 {
        (lo[3], hi[3]) = (0.0, 0.0);
    }
    for &p in perm.iter() {
        let p = p as usize;
        for d in 0..dims {
            lo[d] = lo[d].min(c[d][p]);
            hi[d] = hi[d].max(c[d][p]);
        }
    }
    let len = perm.len();
    let node = Node {
        lo,
        hi,
        start,
        end: start + len,
        left: 0,
        right: 0,
    };
    if len <= LEAF_SIZE {
        order_blocks(c, perm);
        return (node, None);
    }
    let dim = (0..3)
        .max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y])))
        .unwrap_or(0);
    let mid = split_point(len);
    perm.select_nth_unstable_by(mid, |&x, &y| {
        c[dim][x as usize].total_cmp(&c[dim][y as usize])
    });
    (node, Some(mid))
}

/// Order the points of a leaf into blocks of `BLOCK` (from the leaf start) that are compact in
/// space, by median splits of the widest axis at `split_point`. Only the order inside the leaf
/// changes (its box and the tree do not), and counts never depend on the order of pairs.
fn order_blocks(c: &[Vec<f64>; 4], perm: &mut [u32]) {
    let len = perm.len();
    if len <= BLOCK {
        return;
    }
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for &p in perm.iter() {
        for d in 0..3 {
            lo[d] = lo[d].min(c[d][p as usize]);
            hi[d] = hi[d].max(c[d][p as usize]);
        }
    }
    let dim = (0..3)
        .max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y])))
        .unwrap_or(0);
    // whole blocks on the left: up to two blocks, split at one block
    let mid = if len <= 2 * BLOCK {
        BLOCK
    } else {
        split_point(len)
    };
    perm.select_nth_unstable_by(mid, |&x, &y| {
        c[dim][x as usize].total_cmp(&c[dim][y as usize])
    });
    let (l, r) = perm.split_at_mut(mid);
    order_blocks(c, l);
    order_blocks(c, r);
}

/// Bounds [qmin, qmax] on q over all pairs with one point in box `a` and one in box `b`.
///
/// Why this is conservative: for each coordinate the difference |x_a - x_b| lies in
/// [dmin, dmax] computed from the boxes (for a periodic box, the minimum image distance of the
/// whole difference interval); q is a sum of +-(difference)^2 terms, so the lower bound takes
/// dmin^2 for + terms and -dmax^2 for the - term (open space), and vice versa for the upper
/// bound. For closed space q is the squared chord in the 4-D embedding (all + terms); for open
/// space it is the Minkowski interval |dX|^2 - dt^2 on the hyperboloid. Floating-point rounding is
/// monotone in each operand and the same operation order as `pair_q` is used; callers still
/// pad the pruning thresholds.
#[inline]
pub(crate) fn node_bounds<const K: u8>(a: &Node, b: &Node, l: f64, hl: f64) -> (f64, f64) {
    box_bounds::<K>(&a.lo, &a.hi, &b.lo, &b.hi, l, hl)
}

/// `node_bounds` for boxes given by their corners (a point is a box with lo = hi).
#[inline]
pub(crate) fn box_bounds<const K: u8>(
    alo: &[f64; 4],
    ahi: &[f64; 4],
    blo: &[f64; 4],
    bhi: &[f64; 4],
    l: f64,
    hl: f64,
) -> (f64, f64) {
    let mut dmin = [0.0f64; 4];
    let mut dmax = [0.0f64; 4];
    for d in 0..4 {
        let lo = blo[d] - ahi[d];
        let hi = bhi[d] - alo[d];
        if K == PER && d < 3 {
            // differences lie in (-L, L); distance to the nearest multiple of L
            dmin[d] = if lo <= 0.0 && hi >= 0.0 {
                0.0
            } else if lo > 0.0 {
                lo.min(l - hi).max(0.0)
            } else {
                (-hi).min(lo + l).max(0.0)
            };
            dmax[d] = lo.abs().max(hi.abs()).min(hl);
        } else {
            dmin[d] = lo.max(-hi).max(0.0);
            dmax[d] = lo.abs().max(hi.abs());
        }
    }
    let mut qmin = dmin[0] * dmin[0] + dmin[1] * dmin[1] + dmin[2] * dmin[2];
    let mut qmax = dmax[0] * dmax[0] + dmax[1] * dmax[1] + dmax[2] * dmax[2];
    if K == CLO {
        qmin += dmin[3] * dmin[3];
        qmax += dmax[3] * dmax[3];
    } else if K == OPE {
        qmin -= dmax[3] * dmax[3];
        qmax -= dmin[3] * dmin[3];
    }
    (qmin, qmax)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parallel_build_equals_sequential_build() {
        // above PAR_MIN_POINTS the top levels are built with rayon::join into slices of one
        // array; the nodes, their order and the permutation must be those of the plain
        // sequential pre-order build
        let n = 3 * PAR_MIN_POINTS + 13;
        let mut s = 0x9e37_79b9_7f4a_7c15u64;
        let mut next = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        let c: [Vec<f64>; 4] = [
            (0..n).map(|_| 500.0 * next()).collect(),
            (0..n).map(|_| 300.0 * next()).collect(),
            (0..n).map(|_| 100.0 * next()).collect(),
            Vec::new(),
        ];
        let mut perm: Vec<u32> = (0..n as u32).collect();
        let mut seq = vec![Node::BLANK; count_nodes(n)];
        let mut cur = 0;
        build_seq(&c, &mut perm, 0, &mut seq, &mut cur, 0);
        assert_eq!(cur, seq.len());
        for threads in [1, 3] {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let (t, p) = build_in(&c, Some(&pool));
            assert_eq!(p, perm, "{threads} threads");
            assert_eq!(t.nodes, seq, "{threads} threads");
        }
        assert!(seq.len() > 1000 && seq.iter().all(|nd| nd.len() > 0));
    }
}
