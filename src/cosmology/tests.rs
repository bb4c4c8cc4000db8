//! Checks of the background cosmology against published numbers, identities and direct
//! integration. The comparison with astropy lives in tests/python/check_distances.py.
use super::*;

fn curved(ok: f64) -> Cosmology {
    Cosmology {
        m_nu_sum_ev: 0.0,
        ..Cosmology::planck18().with_omega_k(ok)
    }
}

// Planck 2018 results VI (A&A 641, A6), Table 2, TT,TE,EE+lowE+lensing: r_drag = 147.09 Mpc.
// Aubourg et al. 2015 eq. 16 claims ~0.1%; the issue allows 0.2%.
#[test]
fn planck18_sound_horizon() {
    let rd = Cosmology::planck18().r_d();
    assert!((rd / 147.09 - 1.0).abs() < 2e-3, "r_d = {rd}");
}

// Facts of the trade (common practice, no source): r_d ~ 150 Mpc ~ 500 million light-years;
// the comoving particle horizon ~ 46 billion light-years (within 3%).
#[test]
fn facts_of_the_trade() {
    const MPC_IN_LY: f64 = 3.261_563_777e6; // light-years per Mpc (IAU definitions)
    let c = Cosmology::planck18();
    let rd_ly = c.r_d() * MPC_IN_LY;
    assert!((rd_ly / 4.8e8 - 1.0).abs() < 0.1, "r_d = {rd_ly:.3e} ly");
    let ph_ly = c.particle_horizon() * MPC_IN_LY;
    assert!(
        (ph_ly / 46e9 - 1.0).abs() < 0.03,
        "particle horizon = {ph_ly:.3e} ly"
    );
}

// Hogg 1999 (astro-ph/9905116) eqs. 16, 18, 21: D_L = (1+z)^2 D_A; D_M = D_C when flat.
#[test]
fn hogg_identities() {
    for ok in [-0.1, 0.0, 0.1] {
        let c = curved(ok);
        for z in [0.01, 0.3, 1.0, 3.0] {
            let (dl, da) = (c.luminosity(z), c.angular_diameter(z));
            assert!((dl / ((1.0 + z) * (1.0 + z) * da) - 1.0).abs() < 1e-14);
            if ok == 0.0 {
                assert_eq!(c.comoving_transverse(z), c.comoving_radial(z));
            } else if ok > 0.0 {
                assert!(c.comoving_transverse(z) > c.comoving_radial(z));
            } else {
                assert!(c.comoving_transverse(z) < c.comoving_radial(z));
            }
        }
    }
}

// D_V definition (Eisenstein et al. 2005 form, common practice): [z D_M^2 D_H]^(1/3).
#[test]
fn dv_definition_and_low_z_limit() {
    let c = Cosmology::planck18();
    let z = 0.5;
    let dv = c.dv(z);
    let direct = (z * c.comoving_transverse(z).powi(2) * c.hubble_distance(z)).cbrt();
    assert!((dv / direct - 1.0).abs() < 1e-14);
    // At low z all distances tend to c z / H0 (Hubble law, closed form).
    let z = 1e-4;
    assert!((c.dv(z) / (C_KM_S * z / (100.0 * c.h)) - 1.0).abs() < 1e-3);
}

// The interpolated table must agree with direct integration to better than 1e-8 relative.
#[test]
fn distance_table_interpolation_error_below_1e8() {
    for ok in [-0.1, 0.0, 0.1] {
        let c = Cosmology {
            w0: -0.9,
            wa: 0.2,
            ..curved(ok)
        };
        let t = DistanceTable::new(&c, 5.0).unwrap();
        let mut worst: f64 = 0.0;
        let mut z = 0.0012345;
        while z < 5.0 {
            let direct = c.comoving_radial(z);
            let interp = t.comoving_radial(z).unwrap();
            worst = worst.max((interp / direct - 1.0).abs());
            z += 0.0137;
        }
        assert!(worst < 1e-8, "omega_k={ok}: worst relative error {worst:e}");
        assert!(t.comoving_radial(5.1).is_none());
        // Inverse lookup.
        for z in [0.05, 0.4, 0.7, 2.5] {
            let zb = t.redshift_at(t.comoving_radial(z).unwrap()).unwrap();
            assert!((zb - z).abs() < 1e-10, "{zb} vs {z}");
        }
    }
}

// Direct integration converges: doubling the panels changes D_C by < 1e-12 (common practice).
#[test]
fn direct_integration_converged() {
    let c = curved(0.0);
    let z = 3.0;
    let f = |x: f64| 1.0 / c.e(x);
    let a = gauss_legendre(f, 0.0, z, 60);
    let b = gauss_legendre(f, 0.0, z, 120);
    assert!((a / b - 1.0).abs() < 1e-12);
}

// Closed form for an Einstein-de Sitter universe (Hogg 1999 eq. 15 limit):
// D_C = 2 c/H0 (1 - 1/sqrt(1+z)) when Omega_m = 1 and no radiation.
#[test]
fn einstein_de_sitter_closed_form() {
    // Omega_m = 1 with h = 0.5 means omega_m h^2 = 0.25; T_cmb tiny removes radiation.
    let c = Cosmology {
        h: 0.5,
        omega_b_h2: 0.05,
        omega_c_h2: 0.2,
        omega_k: 0.0,
        t_cmb: 1e-6,
        m_nu_sum_ev: 0.0,
        ..Cosmology::planck18()
    };
    assert!(c.omega_de().abs() < 1e-12);
    for z in [0.1, 1.0, 4.0] {
        let exact = 2.0 * c.hubble_distance0() * (1.0 - 1.0 / (1.0f64 + z).sqrt());
        assert!((c.comoving_radial(z) / exact - 1.0).abs() < 1e-12);
    }
}

#[test]
fn toml_loading_defaults_and_unknown_keys() {
    let c = Cosmology::from_toml_str("h = 0.7\nomega_k = -0.05\nT_cmb = 2.7\n").unwrap();
    assert_eq!(c.h, 0.7);
    assert_eq!(c.omega_k, -0.05);
    assert_eq!(c.t_cmb, 2.7);
    assert_eq!(c.omega_b_h2, Cosmology::planck18().omega_b_h2);
    let e = Cosmology::from_toml_str("h = 0.7\nomega_lambda = 0.7\n").unwrap_err();
    assert!(e.to_string().contains("omega_lambda"), "{e}");
    assert_eq!(e.exit_code(), 2);
    let e = Cosmology::from_toml_str("h = \"fast\"\n").unwrap_err();
    assert_eq!(e.exit_code(), 2);
    // A strongly closed model with little matter recollapses/bounces: E(z)^2 <= 0 somewhere.
    let e = Cosmology::from_toml_str(
        "h = 0.7\nomega_b_h2 = 0.001\nomega_c_h2 = 0.001\nomega_k = -3.0\n",
    )
    .unwrap_err();
    assert!(e.to_string().contains("E(z)^2"), "{e}");
    let e = Cosmology::from_toml_str("h = 0.7\nomega_c_h2 = -0.1\n").unwrap_err();
    assert!(e.to_string().contains("omega_c_h2"), "{e}");
}

// EH98 eq. 26 and Aubourg eq. 16 are two fits to the same quantity: they agree to a few per cent.
#[test]
fn sound_horizon_methods_agree_roughly() {
    let c = Cosmology::planck18();
    let a = c.sound_horizon(SoundHorizonMethod::Aubourg2015);
    let e = c.sound_horizon(SoundHorizonMethod::EisensteinHu98);
    assert!((a / e - 1.0).abs() < 0.05, "{a} vs {e}");
}
