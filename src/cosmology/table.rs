//! Radial comoving distance lookup for millions of objects: a table of D_C on a uniform z grid,
//! interpolated by cubic Hermite polynomials using the exact derivative dD_C/dz = D_H(z).
//! With step 2e-3 the interpolation error is far below 1e-8 relative (tested against direct
//! integration); the error of a cubic Hermite scales as step^4 f''''/384.
use super::Cosmology;
use crate::{Error, Result};

#[derive(Debug, Clone)]
pub struct DistanceTable {
    cosmo: Cosmology,
    step: f64,
    z_max: f64,
    dc: Vec<f64>,
    dh: Vec<f64>,
}

impl DistanceTable {
    pub const DEFAULT_STEP: f64 = 2e-3;

    /// Build a table covering 0 <= z <= z_max (Mpc).
    pub fn new(cosmo: &Cosmology, z_max: f64) -> Result<Self> {
        if !(z_max > 0.0 && z_max <= 1100.0) {
            return Err(Error::input(format!(
                "distance table: z_max = {z_max} must be in (0, 1100]"
            )));
        }
        let step = Self::DEFAULT_STEP;
        let n = (z_max / step).ceil() as usize + 1;
        let dh0 = cosmo.hubble_distance0();
        let mut dc = Vec::with_capacity(n);
        let mut dh = Vec::with_capacity(n);
        let mut acc = 0.0;
        for i in 0..n {
            let z = i as f64 * step;
            if i > 0 {
                let lo = (i - 1) as f64 * step;
                acc += dh0 * super::gauss_legendre(|x| 1.0 / cosmo.e(x), lo, z, 1);
            }
            dc.push(acc);
            dh.push(cosmo.hubble_distance(z));
        }
        Ok(DistanceTable {
            cosmo: *cosmo,
            step,
            z_max: (n - 1) as f64 * step,
            dc,
            dh,
        })
    }

    pub fn cosmology(&self) -> &Cosmology {
        &self.cosmo
    }
    pub fn z_max(&self) -> f64 {
        self.z_max
    }

    /// Radial comoving distance in Mpc; `None` outside [0, z_max].
    #[inline]
    pub fn comoving_radial(&self, z: f64) -> Option<f64> {
        if !(0.0..=self.z_max).contains(&z) {
            return None;
        }
        let u = z / self.step;
        let i = (u.floor() as usize).min(self.dc.len() - 2);
        let t = u - i as f64;
        let (t2, t3) = (t * t, t * t * t);
        let h00 = 2.0 * t3 - 3.0 * t2 + 1.0;
        let h10 = t3 - 2.0 * t2 + t;
        let h01 = -2.0 * t3 + 3.0 * t2;
        let h11 = t3 - t2;
        Some(
            h00 * self.dc[i]
                + h10 * self.step * self.dh[i]
                + h01 * self.dc[i + 1]
                + h11 * self.step * self.dh[i + 1],
        )
    }

    /// Redshift for a radial comoving distance in Mpc (Newton on the table); `None` beyond it.
    pub fn redshift_at(&self, dc: f64) -> Option<f64> {
        if !(0.0..=*self.dc.last()?).contains(&dc) {
            return None;
        }
        // Bracket by binary search, then Newton with dD_C/dz = D_H.
        let i = self
            .dc
            .partition_point(|&d| d <= dc)
            .saturating_sub(1)
            .min(self.dc.len() - 2);
        let mut z = i as f64 * self.step
            + self.step * (dc - self.dc[i]) / (self.dc[i + 1] - self.dc[i]).max(1e-300);
        for _ in 0..8 {
            let f = self.comoving_radial(z.clamp(0.0, self.z_max))? - dc;
            let d = self.cosmo.hubble_distance(z);
            let dz = f / d;
            z = (z - dz).clamp(0.0, self.z_max);
            if dz.abs() < 1e-15 * (1.0 + z) {
                break;
            }
        }
        Some(z)
    }
}
