#!/usr/bin/env python3
"""Single-thread reference timing for `ringscale bench`: scipy cKDTree.count_neighbors on a
Cartesian CSV (header X,Y,Z). Times reading the file plus building the tree and counting
(interpreter start-up and imports excluded). Prints JSON: seconds, pairs (distinct pairs with
s < rmax), and the cumulative counts at the bin edges."""
import argparse
import json
import time

import numpy as np
from scipy.spatial import cKDTree


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", required=True)
    ap.add_argument("--rmax", type=float, required=True)
    ap.add_argument("--nbins", type=int, required=True)
    ap.add_argument("--box", type=float, default=None)
    a = ap.parse_args()
    t0 = time.perf_counter()
    xyz = np.loadtxt(a.points, delimiter=",", skiprows=1, dtype=np.float64)
    if xyz.ndim == 1:
        xyz = xyz[None, :]
    if a.box is not None:
        xyz = np.mod(xyz, a.box)
        xyz[xyz >= a.box] = 0.0
        tree = cKDTree(xyz, boxsize=a.box)
    else:
        tree = cKDTree(xyz)
    # count_neighbors is inclusive (d <= r); the engine's bins are [lo, hi). Use the largest
    # double below each edge so that both count d < r.
    edges = np.linspace(0.0, a.rmax, a.nbins + 1)[1:]
    r = np.nextafter(edges, 0.0)
    cum = tree.count_neighbors(tree, r, cumulative=True)
    dt = time.perf_counter() - t0
    n = len(xyz)
    pairs = (cum - n) // 2  # ordered pairs incl. self -> distinct unordered pairs
    print(json.dumps({"seconds": dt, "pairs": int(pairs[-1]), "cumulative": [int(v) for v in pairs]}))


if __name__ == "__main__":
    main()
