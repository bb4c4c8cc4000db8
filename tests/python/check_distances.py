"""Distances from `ringscale distances` against astropy.cosmology (reference library from PyPI).

Cases: flat, open (omega_k = +0.1), closed (omega_k = -0.1) and w0-wa cosmologies, z in
[0.01, 5], relative tolerance 1e-6. Both sides use the same T_cmb and N_eff with massless
neutrinos (m_nu_sum_ev = 0), so radiation is photons plus N_eff massless species in both.
"""
import json
import os
import subprocess
import sys
import tempfile

from astropy.cosmology import w0waCDM

BIN = os.environ.get("RINGSCALE_BIN", "target/release/ringscale")
ZS = [0.01, 0.1, 0.35, 0.7, 1.0, 1.8, 2.5, 3.3, 4.2, 5.0]
CASES = [
    dict(name="flat", h=0.6736, omega_b_h2=0.02237, omega_c_h2=0.12, omega_k=0.0, w0=-1.0, wa=0.0),
    dict(name="open", h=0.70, omega_b_h2=0.0224, omega_c_h2=0.115, omega_k=0.1, w0=-1.0, wa=0.0),
    dict(name="closed", h=0.65, omega_b_h2=0.0222, omega_c_h2=0.125, omega_k=-0.1, w0=-1.0, wa=0.0),
    dict(name="w0wa", h=0.68, omega_b_h2=0.0223, omega_c_h2=0.118, omega_k=0.0, w0=-0.9, wa=-0.3),
    dict(name="w0wa-curved", h=0.69, omega_b_h2=0.0225, omega_c_h2=0.12, omega_k=0.05, w0=-0.8, wa=0.4),
]
T_CMB, N_EFF = 2.7255, 3.046


def run_case(case):
    keys = {k: v for k, v in case.items() if k != "name"}
    keys.update(T_cmb=T_CMB, N_eff=N_EFF, m_nu_sum_ev=0.0)
    with tempfile.NamedTemporaryFile("w", suffix=".toml", delete=False) as f:
        for k, v in keys.items():
            f.write(f"{k} = {v!r}\n")
        path = f.name
    try:
        out = subprocess.run([BIN, "distances", "--cosmology", path, "--z", ",".join(map(str, ZS))],
                             check=True, capture_output=True, text=True).stdout
    finally:
        os.unlink(path)
    ours = json.loads(out)
    c = ours["cosmology"]
    h = case["h"]
    ref = w0waCDM(H0=100 * h, Om0=c["Omega_m"], Ode0=c["Omega_de"], w0=case["w0"], wa=case["wa"],
                  Tcmb0=T_CMB, Neff=N_EFF, m_nu=0.0, Ob0=case["omega_b_h2"] / h**2)
    assert abs(ref.Ok0 - case["omega_k"]) < 1e-12, (ref.Ok0, case["omega_k"])
    worst, n = 0.0, 0
    for row in ours["rows"]:
        z = row["z"]
        pairs = [
            (row["comoving_radial_mpc"], ref.comoving_distance(z).value),
            (row["comoving_transverse_mpc"], ref.comoving_transverse_distance(z).value),
            (row["angular_diameter_mpc"], ref.angular_diameter_distance(z).value),
            (row["luminosity_mpc"], ref.luminosity_distance(z).value),
            (row["hubble_distance_mpc"], (ref.hubble_distance / ref.efunc(z)).value),
        ]
        for a, b in pairs:
            rel = abs(a / b - 1.0)
            worst = max(worst, rel)
            if rel > 1e-6:
                print(f"FAIL {case['name']} z={z}: ours {a} astropy {b} rel {rel:.2e}")
                return worst, n, False
        n += 1
    return worst, n, True


def main():
    ok_all, total = True, 0
    for case in CASES:
        worst, n, ok = run_case(case)
        total += n
        ok_all &= ok
        print(f"{case['name']:12s} {n} redshifts, worst relative difference {worst:.2e}")
    print(f"{total} (cosmology, z) cases compared against astropy")
    if total < 40:
        print("FAIL: fewer than 40 cases")
        ok_all = False
    sys.exit(0 if ok_all else 1)


if __name__ == "__main__":
    main()
