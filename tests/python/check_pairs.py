"""Raw pair counts from `ringscale count` against scipy.spatial.cKDTree.count_neighbors
(reference library from PyPI), non-periodic and periodic (boxsize), auto and cross.

cKDTree counts ordered pairs with distance <= r (self pairs included for an auto count); we
convert to unordered distinct pairs with s < r, so the cumulative counts must agree exactly for
edges that no pair distance hits exactly (random edges make a tie improbable, and we check none).
"""
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
from scipy.spatial import cKDTree

BIN = os.environ.get("RINGSCALE_BIN", "target/release/ringscale")


def write_csv(path, pts, w=None):
    cols = "X,Y,Z" + (",W" if w is not None else "")
    data = pts if w is None else np.column_stack([pts, w])
    np.savetxt(path, data, delimiter=",", header=cols, comments="", fmt="%.17g")


def read_counts(path):
    lines = [l for l in open(path) if not l.startswith("#")]
    header = lines[0].split()
    rows = [l.split() for l in lines[1:]]
    col = {name: [r[i] for r in rows] for i, name in enumerate(header)}
    return np.array([int(v) for v in col["npairs"]], dtype=np.int64), np.array([float(v) for v in col["s_hi"]])


def run(args):
    r = subprocess.run([BIN, "count"] + args, capture_output=True, text=True)
    if r.returncode != 0:
        print(r.stderr)
        raise SystemExit(1)


def check(tag, a, b, box, edges, tmp):
    pa = os.path.join(tmp, f"{tag}_a.csv")
    write_csv(pa, a)
    args = ["--data", pa, "--cartesian", "--edges-file", os.path.join(tmp, "edges.txt"), "--out", os.path.join(tmp, tag)]
    np.savetxt(os.path.join(tmp, "edges.txt"), edges, fmt="%.17g")
    if box is not None:
        args += ["--box", repr(box)]
    if b is not None:
        pb = os.path.join(tmp, f"{tag}_b.csv")
        write_csv(pb, b)
        args += ["--randoms", pb, "--rr-splits", "1"]
    run(args)
    ta = cKDTree(a, boxsize=box)
    # Auto: ordered pairs including self pairs -> unordered distinct pairs.
    cum = ta.count_neighbors(ta, edges) 
    cum = (cum - len(a)) // 2
    ours, _ = read_counts(os.path.join(tmp, tag, "dd.ecsv"))
    # Strict '<' in ours vs '<=' in cKDTree: make sure no pair distance equals an edge.
    ref = np.diff(cum)
    ok = np.array_equal(ours, ref)
    print(f"{tag} auto: {ours.sum()} pairs in range, {'equal' if ok else 'DIFFERENT'} to cKDTree")
    if not ok:
        print(ours, ref)
        return False
    if b is not None:
        tb = cKDTree(b, boxsize=box)
        cross = np.diff(ta.count_neighbors(tb, edges))
        ours_dr, _ = read_counts(os.path.join(tmp, tag, "dr.ecsv"))
        ok = np.array_equal(ours_dr, cross)
        print(f"{tag} cross: {ours_dr.sum()} pairs, {'equal' if ok else 'DIFFERENT'} to cKDTree")
        if not ok:
            return False
        # RR (M = 1) is the auto count of the randoms.
        rr = (tb.count_neighbors(tb, edges) - len(b)) // 2
        ours_rr, _ = read_counts(os.path.join(tmp, tag, "rr.ecsv"))
        ok = np.array_equal(ours_rr, np.diff(rr))
        print(f"{tag} rr: {'equal' if ok else 'DIFFERENT'} to cKDTree")
        if not ok:
            return False
    return True


def main():
    rng = np.random.default_rng(20261201)
    L = 500.0
    edges = np.sort(rng.uniform(1.0, 120.0, 25))
    ok = True
    with tempfile.TemporaryDirectory() as tmp:
        a = rng.uniform(0, L, (3000, 3))
        b = rng.uniform(0, L, (4000, 3))
        ok &= check("open_box", a, b, None, edges, tmp)
        ok &= check("periodic", a, b, L, edges, tmp)
        # Clustered points (many close pairs) exercise the tree's near-field paths.
        centres = rng.uniform(0, L, (40, 3))
        c = (centres[rng.integers(0, 40, 3000)] + rng.normal(0, 8.0, (3000, 3))) % L
        ok &= check("clustered", c, None, L, edges, tmp)
    print("pair counts vs cKDTree:", "ok" if ok else "FAILED")
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
