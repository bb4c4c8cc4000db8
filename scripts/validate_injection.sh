#!/usr/bin/env bash
# Injection and recovery: lognormal survey mocks made under a true cosmology A are analysed under
# fiducials B (flat with another Omega_m, and curved with Omega_k = -0.05 and +0.05). Each fit's
# alpha is compared with alpha_expected = [D_V^A(z_eff)/r_d^A] / [D_V^B(z_eff)/r_d^B].
# Usage: scripts/validate_injection.sh [N_SEEDS=10] [WORKDIR=validation_out]
set -euo pipefail
cd "$(dirname "$0")/.."
N=${1:-10}
W=${2:-validation_out}
cargo build --release --quiet
RS=$PWD/target/release/ringscale
mkdir -p "$W"
TRUTH=demo_catalogs/lantern_bay_truth.toml
# Fiducials B: flat with lower Omega_m (omega_c_h2 0.105), and curved versions of Planck 2018.
printf 'omega_c_h2 = 0.105\n' > "$W/flat_low_om.toml"
printf 'omega_k = -0.05\n' > "$W/closed.toml"
printf 'omega_k = 0.05\n' > "$W/open.toml"
for seed in $(seq 1 "$N"); do
  d="$W/seed$seed"
  mkdir -p "$d"
  [ -f "$d/g.fits" ] || "$RS" mock survey --cosmology "$TRUTH" --cap 150,35,20 --z-range 0.4:0.7 \
      --nbar 1e-4 --bias 2 --n-grid 256 --seed "$((1000 + seed))" --random-factor 5 \
      --out-galaxies "$d/g.fits" --out-randoms "$d/r.fits" 2>/dev/null
  for fid in flat_low_om closed open; do
    [ -f "$d/$fid/fit/fit.json" ] && continue
    "$RS" count --data "$d/g.fits" --randoms "$d/r.fits" --cosmology "$W/$fid.toml" --edges 0:200:40 \
        --rr-splits 10 --regions 40 --out "$d/$fid/counts" 2>/dev/null
    "$RS" xi --counts "$d/$fid/counts" --out "$d/$fid/xi" 2>/dev/null
    "$RS" fit --xi "$d/$fid/xi" --out "$d/$fid/fit" --no-plots >/dev/null
  done
done
python3 - "$W" "$N" "$RS" "$TRUTH" <<'PY'
import json, subprocess, sys, math
W, N, RS, TRUTH = sys.argv[1], int(sys.argv[2]), sys.argv[3], sys.argv[4]
def dv_rd(cosmo, z):
    d = json.loads(subprocess.run([RS, "distances", "--cosmology", cosmo, "--z", repr(z)], check=True, capture_output=True, text=True).stdout)
    return d["rows"][0]["dv_mpc"] / d["r_d_mpc"]
print("| fiducial B | seeds | mean alpha | mean alpha_expected | std of alpha | mean sigma | (mean - expected)/(std/sqrt(N)) | max abs pull |")
print("|---|---|---|---|---|---|---|---|")
ok = True
for fid in ["flat_low_om", "closed", "open"]:
    a, e, s, pulls = [], [], [], []
    for seed in range(1, N + 1):
        r = json.load(open(f"{W}/seed{seed}/{fid}/fit/fit.json"))
        z = r["z_eff"]
        exp = dv_rd(TRUTH, z) / dv_rd(f"{W}/{fid}.toml", z)
        err = r["alpha_err_lo"] if r["alpha"] > exp else r["alpha_err_hi"]
        a.append(r["alpha"]); e.append(exp); s.append(r["alpha_err"]); pulls.append((r["alpha"] - exp) / err)
    ma, me = sum(a) / N, sum(e) / N
    sd = math.sqrt(sum((x - ma) ** 2 for x in a) / (N - 1))
    dm = (ma - me) / (sd / math.sqrt(N))
    mp = max(abs(p) for p in pulls)
    ok &= abs(ma - me) < sd and mp < 3
    print(f"| {fid} | {N} | {ma:.4f} | {me:.4f} | {sd:.4f} | {sum(s)/N:.4f} | {dm:+.2f} | {mp:.2f} |")
print("criteria (mean within 1 sigma of the per-seed scatter, every pull < 3):", "met" if ok else "NOT met")
PY
