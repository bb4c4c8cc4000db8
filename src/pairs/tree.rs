//! KD-tree over leaf buckets with 4-D bounding boxes (the three spatial embedding coordinates
//! plus t), and conservative node-pair bounds on the quadratic form q.
use super::kernel::{CLO, OPE, PER};

/// Maximum points per leaf bucket.
pub(crate) const LEAF_SIZE: usize = 32;

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
    // the top levels split their two halves over the current rayon pool; the node order is
    // the sequential depth-first pre-order either way, so the tree never depends on threads
    let depth = if n >= PAR_MIN_POINTS { PAR_LEVELS } else { 0 };
    let nodes = build_par(c, &mut perm, 0, depth);
    (Tree { nodes }, perm)
}

/// Subtrees below this size are built on one thread.
const PAR_MIN_POINTS: usize = 20_000;
/// Levels of the tree whose halves are built in parallel (up to 2^PAR_LEVELS tasks).
const PAR_LEVELS: u32 = 4;

/// Bounds of the points `perm` (global positions start..start + perm.len()) and, when the
/// node is to be split, the split: (node, Some((axis, local mid))).
fn node_of(c: &[Vec<f64>; 4], perm: &mut [usize], start: usize) -> (Node, Option<usize>) {
    let mut lo = [f64::INFINITY; 4];
    let mut hi = [f64::NEG_INFINITY; 4];
    // an empty t column (flat metrics) means t = 0
    let dims = if c[3].is_empty() { 3 } else { 4 };
    if dims == 3 {
        (lo[3], hi[3]) = (0.0, 0.0);
    }
    for &p in perm.iter() {
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
        return (node, None);
    }
    let dim = (0..3)
        .max_by(|&x, &y| (hi[x] - lo[x]).total_cmp(&(hi[y] - lo[y])))
        .unwrap_or(0);
    // split near the middle at a multiple of 8 points from the start where possible, so
    // leaves fill whole 8-lane SIMD steps
    let half = len / 2;
    let mid = if half >= 8 { (half + 4) / 8 * 8 } else { half };
    perm.select_nth_unstable_by(mid, |&x, &y| c[dim][x].total_cmp(&c[dim][y]));
    (node, Some(mid))
}

/// Subtree of `perm` in depth-first pre-order, child indices relative to the returned vector.
fn build_par(c: &[Vec<f64>; 4], perm: &mut [usize], start: usize, depth: u32) -> Vec<Node> {
    if depth == 0 {
        let mut nodes = Vec::with_capacity(2 * perm.len() / LEAF_SIZE + 2);
        build_rec(c, perm, start, &mut nodes);
        return nodes;
    }
    let (node, split) = node_of(c, perm, start);
    let Some(mid) = split else {
        return vec![node];
    };
    let (pl, pr) = perm.split_at_mut(mid);
    let (ln, rn) = rayon::join(
        || build_par(c, pl, start, depth - 1),
        || build_par(c, pr, start + mid, depth - 1),
    );
    let mut nodes = Vec::with_capacity(1 + ln.len() + rn.len());
    nodes.push(Node {
        left: 1,
        right: 1 + ln.len() as u32,
        ..node
    });
    for (sub, off) in [(ln, 1u32), (rn, 1 + nodes[0].right - 1)] {
        nodes.extend(sub.into_iter().map(|mut nd| {
            if !nd.is_leaf() {
                nd.left += off;
                nd.right += off;
            }
            nd
        }));
    }
    nodes
}

/// Sequential subtree, appended to `nodes` (global child indices); returns its root index.
fn build_rec(c: &[Vec<f64>; 4], perm: &mut [usize], start: usize, nodes: &mut Vec<Node>) -> u32 {
    let (node, split) = node_of(c, perm, start);
    let id = nodes.len();
    nodes.push(node);
    if let Some(mid) = split {
        let (pl, pr) = perm.split_at_mut(mid);
        let l = build_rec(c, pl, start, nodes);
        let r = build_rec(c, pr, start + mid, nodes);
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parallel_build_equals_sequential_build() {
        // above PAR_MIN_POINTS the top levels are built with rayon::join; the nodes, their
        // order and the permutation must be those of the plain recursive build
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
        let mut perm: Vec<usize> = (0..n).collect();
        let mut seq = Vec::new();
        build_rec(&c, &mut perm, 0, &mut seq);
        for threads in [1, 3] {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let (t, p) = pool.install(|| build(&c));
            assert_eq!(p, perm, "{threads} threads");
            assert_eq!(t.nodes, seq, "{threads} threads");
        }
        assert!(seq.len() > 1000 && seq.iter().all(|nd| nd.len() > 0));
    }
}
