//! Distances and horizons derived from E(z) (Hogg 1999, astro-ph/9905116).
use super::Cosmology;

/// 10-point Gauss-Legendre nodes and weights on [-1, 1] (common practice, no source).
const GL_X: [f64; 5] = [
    0.148_874_338_981_631_2,
    0.433_395_394_129_247_2,
    0.679_409_568_299_024_4,
    0.865_063_366_688_984_5,
    0.973_906_528_517_171_7,
];
const GL_W: [f64; 5] = [
    0.295_524_224_714_752_9,
    0.269_266_719_309_996_4,
    0.219_086_362_515_982,
    0.149_451_349_150_580_6,
    0.066_671_344_308_688_1,
];

/// Integrate `f` over [a, b] with `panels` panels of 10-point Gauss-Legendre.
/// Smooth integrands (as every E(z) integrand here) converge far below 1e-12.
pub fn gauss_legendre(f: impl Fn(f64) -> f64, a: f64, b: f64, panels: usize) -> f64 {
    let n = panels.max(1);
    let width = (b - a) / n as f64;
    let mut total = 0.0;
    for p in 0..n {
        let lo = a + width * p as f64;
        let mid = lo + 0.5 * width;
        let half = 0.5 * width;
        let mut s = 0.0;
        for k in 0..5 {
            s += GL_W[k] * (f(mid - half * GL_X[k]) + f(mid + half * GL_X[k]));
        }
        total += s * half;
    }
    total
}

/// How to compute the sound horizon at the drag epoch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SoundHorizonMethod {
    /// Aubourg et al. 2015, PRD 92, 123516, eq. 16 (~0.1% of a Boltzmann code).
    #[default]
    Aubourg2015,
    /// Eisenstein & Hu 1998, ApJ 496, 605, eq. 26 (a few per cent).
    EisensteinHu98,
}

impl Cosmology {
    /// Line-of-sight comoving distance D_C(z) in Mpc by direct integration.
    pub fn comoving_radial(&self, z: f64) -> f64 {
        if z == 0.0 {
            return 0.0;
        }
        let panels = ((z / 0.05).ceil() as usize).clamp(2, 4000);
        self.hubble_distance0() * gauss_legendre(|x| 1.0 / self.e(x), 0.0, z, panels)
    }

    /// Transverse comoving distance for a line-of-sight distance `dc` (Mpc): sinh/sin branches.
    pub fn transverse_from_radial(&self, dc: f64) -> f64 {
        let ok = self.omega_k;
        if ok == 0.0 {
            return dc;
        }
        let dh = self.hubble_distance0();
        let sk = ok.abs().sqrt();
        let x = sk * dc / dh;
        if ok > 0.0 {
            dh / sk * x.sinh()
        } else {
            dh / sk * x.sin()
        }
    }

    /// Transverse comoving distance D_M(z) in Mpc.
    pub fn comoving_transverse(&self, z: f64) -> f64 {
        self.transverse_from_radial(self.comoving_radial(z))
    }
    /// Angular diameter distance D_A = D_M / (1+z) in Mpc.
    pub fn angular_diameter(&self, z: f64) -> f64 {
        self.comoving_transverse(z) / (1.0 + z)
    }
    /// Luminosity distance D_L = (1+z) D_M in Mpc.
    pub fn luminosity(&self, z: f64) -> f64 {
        self.comoving_transverse(z) * (1.0 + z)
    }
    /// Hubble distance D_H(z) = c / H(z) in Mpc.
    pub fn hubble_distance(&self, z: f64) -> f64 {
        self.hubble_distance0() / self.e(z)
    }
    /// Volume-averaged distance D_V = [z D_M^2 D_H]^(1/3) in Mpc.
    pub fn dv(&self, z: f64) -> f64 {
        let dm = self.comoving_transverse(z);
        (z * dm * dm * self.hubble_distance(z)).cbrt()
    }

    /// Comoving particle horizon (radius of the observable universe) in Mpc:
    /// c/H0 * integral over ln a from 0 to 1 of da / (a^2 E(a)), in ln a so that the
    /// radiation era near a = 0 is resolved.
    pub fn particle_horizon(&self) -> f64 {
        let f = |ln_a: f64| {
            let a = ln_a.exp();
            let z = 1.0 / a - 1.0;
            1.0 / (a * self.e(z))
        };
        self.hubble_distance0() * gauss_legendre(f, -40.0, 0.0, 400)
    }

    /// Sound horizon at the drag epoch r_d in Mpc.
    pub fn sound_horizon(&self, method: SoundHorizonMethod) -> f64 {
        match method {
            SoundHorizonMethod::Aubourg2015 => {
                // Aubourg et al. 2015, eq. 16: omega_cb excludes neutrinos.
                let ocb = self.omega_b_h2 + self.omega_c_h2;
                let onu = self.omega_nu_h2();
                55.154 * (-72.3 * (onu + 0.0006).powi(2)).exp()
                    / (ocb.powf(0.25351) * self.omega_b_h2.powf(0.12807))
            }
            SoundHorizonMethod::EisensteinHu98 => {
                // Eisenstein & Hu 1998, eq. 26 (in Mpc, with omega_m h^2 and omega_b h^2).
                let om = self.omega_m_h2();
                let ob = self.omega_b_h2;
                44.5 * (9.83 / om).ln() / (1.0 + 10.0 * ob.powf(0.75)).sqrt()
            }
        }
    }

    /// Default sound horizon (Aubourg et al. 2015).
    pub fn r_d(&self) -> f64 {
        self.sound_horizon(SoundHorizonMethod::Aubourg2015)
    }
}
