#!/usr/bin/env bash
# Regenerates every file in demo_catalogs/ (the invented Lantern Bay Redshift Survey).
# Deterministic: the same seeds give bit-identical files for any thread count.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
RS=target/release/ringscale
D=demo_catalogs

# Galaxies and randoms: a 25-degree sky cap centred on RA 150, Dec 35, 0.4 < z < 0.7,
# nbar = 1e-4 (h/Mpc)^3, linear bias 2, 5 randoms per galaxy, true cosmology lantern_bay_truth.toml.
$RS mock survey --cosmology $D/lantern_bay_truth.toml --cap 150,35,25 --z-range 0.4:0.7 \
  --nbar 1e-4 --bias 2 --n-grid 256 --seed 2026 --random-factor 5 --single-precision \
  --out-galaxies $D/lantern_bay_galaxies.fits --out-randoms $D/lantern_bay_randoms.fits

# A small periodic box of the same universe: 500 Mpc/h, nbar = 3e-4, bias 2.
$RS mock box --cosmology $D/lantern_bay_truth.toml --n-grid 128 --box 500 --nbar 3e-4 \
  --bias 2 --seed 7 --single-precision --out $D/lantern_bay_box.fits
