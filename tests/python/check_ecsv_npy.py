"""Our ECSV tables and NPY arrays read with astropy.table (ECSV 1.0 standard) and numpy.load
(NPY format 1.0), both reference libraries from PyPI: values must come back bit for bit."""
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
from astropy.table import Table

BIN = os.environ.get("RINGSCALE_BIN", "target/release/ringscale")


def main():
    zs = "0.01,0.3,0.7,1.5,4"
    ecsv = subprocess.run([BIN, "distances", "--z", zs, "--format", "ecsv"], check=True, capture_output=True, text=True).stdout
    js = json.loads(subprocess.run([BIN, "distances", "--z", zs], check=True, capture_output=True, text=True).stdout)
    with tempfile.TemporaryDirectory() as tmp:
        p = os.path.join(tmp, "d.ecsv")
        open(p, "w").write(ecsv)
        t = Table.read(p, format="ascii.ecsv")
    ok = True
    for i, row in enumerate(js["rows"]):
        for k, v in row.items():
            if float(t[k][i]) != v:
                print(f"FAIL row {i} {k}: {t[k][i]!r} != {v!r}")
                ok = False
    if t.meta["r_d_mpc"] != js["r_d_mpc"] or t.meta["cosmology"]["h"] != js["cosmology"]["h"]:
        print("FAIL meta", t.meta)
        ok = False
    print(f"distances ECSV read by astropy: {len(t)} rows, {'bit-identical' if ok else 'MISMATCH'}")

    # Count outputs: ECSV columns and the per-region NPY array.
    with tempfile.TemporaryDirectory() as tmp:
        rng = np.random.default_rng(3)
        pts = rng.uniform(0, 300, (2000, 3))
        cat = os.path.join(tmp, "pts.csv")
        np.savetxt(cat, pts, delimiter=",", header="X,Y,Z", comments="", fmt="%.17g")
        counts = os.path.join(tmp, "counts")
        subprocess.run([BIN, "count", "--data", cat, "--cartesian", "--box", "300", "--edges", "0:100:10",
                        "--regions", "5", "--out", counts], check=True, capture_output=True)
        t = Table.read(os.path.join(counts, "dd.ecsv"), format="ascii.ecsv")
        if t.meta["provenance"]["box_size"] != 300.0 or t.meta["provenance"]["binning"]["s_edges"][-1] != 100.0:
            print("FAIL count meta", t.meta["provenance"])
            ok = False
        st = json.load(open(os.path.join(counts, "dd.state.json")))
        if list(t["npairs"]) != st["counts"]["npairs"]:
            print("FAIL dd.ecsv npairs differ from the exact state")
            ok = False
        arr = np.load(os.path.join(counts, "dd_regions.npy"))
        nreg = st["counts"]["n_regions"]
        if arr.shape != (2, nreg, len(t)):
            print("FAIL regions array shape", arr.shape)
            ok = False
        print(f"counts ECSV and NPY read by astropy/numpy: {'ok' if ok else 'MISMATCH'}")
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
