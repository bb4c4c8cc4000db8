//! KD-tree over leaf buckets with 4-D bounding boxes (the three spatial embedding coordinates
//! plus t), and conservative node-pair bounds on the quadratic form q.
use super::kernel::{CLO, OPE, PER};

/// Maximum points per leaf bucket.
pub(crate) const LEAF_SIZE: usize = 32;

#[derive(Debug, Clone)]
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
pub(crate) fn build(c: &[Vec<f64>; 4]) -> (Tree, Vec<usize>) {
    let n = c[0].len();
    let mut perm: Vec<usize> = (0..n).collect();
    let mut nodes = Vec::with_capacity(2 * n / LEAF_SIZE + 2);
    build_rec(c, &mut perm, 0, n, &mut nodes);
    (Tree { nodes }, perm)
}

fn build_rec(
    c: &[Vec<f64>; 4],
    perm: &mut [usize],
    start: usize,
    end: usize,
    nodes: &mut Vec<Node>,
) -> u32 {
    let mut lo = [f64::INFINITY; 4];
    let mut hi = [f64::NEG_INFINITY; 4];
    // an empty t column (flat metrics) means t = 0
    let dims = if c[3].is_empty() { 3 } else { 4 };
    if dims == 3 {
        (lo[3], hi[3]) = (0.0, 0.0);
    }
    for &p in &perm[start..end] {
        for d in 0..dims {
            lo[d] = lo[d].min(c[d][p]);
            hi[d] = hi[d].max(c[d][p]);
        }
    }
    let id = nodes.len();
    nodes.push(Node {
        lo,
        hi,
        start,
        end,
        left: 0,
        right: 0,
    });
    if end - start > LEAF_SIZE {
        let dim = (0..3)
            .max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y])))
            .unwrap_or(0);
        // split near the middle at a multiple of 8 points from the start where possible, so
        // leaves fill whole 8-lane SIMD steps
        let half = (end - start) / 2;
        let mid = start + if half >= 8 { (half + 4) / 8 * 8 } else { half };
        perm[start..end]
            .select_nth_unstable_by(mid - start, |&x, &y| c[dim][x].total_cmp(&c[dim][y]));
        let l = build_rec(c, perm, start, mid, nodes);
        let r = build_rec(c, perm, mid, end, nodes);
        nodes[id].left = l;
        nodes[id].right = r;
    }
    id as u32
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
    let mut dmin = [0.0f64; 4];
    let mut dmax = [0.0f64; 4];
    for d in 0..4 {
        let lo = b.lo[d] - a.hi[d];
        let hi = b.hi[d] - a.lo[d];
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
