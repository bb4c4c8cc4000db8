#!/usr/bin/env bash
# MPI check: a small plan run under `mpirun -n 2 ringscale run PLAN --mpi` must give outputs
# bit for bit equal to the single-process run. Needs a build with `--features mpi` and Open MPI.
# Usage: scripts/mpi_check.sh [BINARY=target/release/ringscale]
set -euo pipefail
cd "$(dirname "$0")/.."
BIN=$(realpath "${1:-target/release/ringscale}")
W=$(mktemp -d)
trap 'rm -rf "$W"' EXIT
"$BIN" mock survey --cap 40,10,10 --z-range 0.45:0.6 --nbar 2e-4 --n-grid 64 --seed 3 --random-factor 3 \
  --out-galaxies "$W/g.fits" --out-randoms "$W/r.fits" 2>/dev/null
for name in single mpi; do
  cat > "$W/$name.toml" <<PLAN
output = "$name-out"
[inputs]
data = "g.fits"
randoms = "r.fits"
[binning]
edges = "0:200:20"
[estimator]
rr_splits = 2
regions = 16
[fit]
plots = false
[run]
units = 4
PLAN
done
"$BIN" run "$W/single.toml" --log-format json 2>/dev/null
mpirun --allow-run-as-root --oversubscribe -np 2 "$BIN" run "$W/mpi.toml" --mpi --log-format json 2>/dev/null
status=0
for f in counts/dd.state.json counts/dr.state.json counts/rr.state.json xi/xi.ecsv xi/covariance.npy fit/fit.json; do
  if cmp -s "$W/single-out/$f" "$W/mpi-out/$f"; then echo "identical: $f"; else echo "DIFFERENT: $f"; status=1; fi
done
echo "mpi check: $([ $status = 0 ] && echo '6 passed, 0 failed' || echo 'failed')"
exit $status
