//! Heliocentric planets from VSOP87 (Bretagnon & Francou 1988, A&A 202,
//! 309), version A: rectangular coordinates on the dynamical ecliptic and
//! equinox J2000, turned into ICRF axes.
//!
//! The frame chain matters at the 1000 km level for the outer planets:
//! VSOP87's own ecliptic-to-FK5 matrix (printed in the VSOP87 files'
//! documentation and in Meeus, Astronomical Algorithms, 2nd ed., ch. 26),
//! then the FK5/mean-J2000 to ICRS frame bias (IERS Conventions 2010,
//! ch. 5), taken from the IAU 2006 Fukushima-Williams angles at J2000.

use nalgebra::{Matrix3, Vector3};

use crate::astro::constants::J2000_JD;
use crate::astro::time::Epoch;

/// The planets VSOP87 supplies here (the Earth comes from epv00 instead).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Planet {
    Mercury,
    Venus,
    Mars,
    Jupiter,
    Saturn,
    Uranus,
    Neptune,
}

/// VSOP87 dynamical ecliptic and equinox J2000 to FK5 J2000 equatorial
/// (VSOP87 documentation, Bretagnon & Francou; Meeus ch. 26).
#[rustfmt::skip]
fn vsop87_to_fk5() -> Matrix3<f64> {
    Matrix3::new(
        1.000_000_000_000, 0.000_000_440_360, -0.000_000_190_919,
        -0.000_000_479_966, 0.917_482_137_087, -0.397_776_982_902,
        0.000_000_000_000, 0.397_776_982_902, 0.917_482_137_087,
    )
}

/// GCRS (ICRS axes) to mean equator and equinox of J2000: the frame bias,
/// as the IAU 2006 bias-precession matrix at J2000 itself (ERFA `bp06`'s
/// construction from `pfw06` + `fw2m`).
fn icrs_to_mean_j2000() -> Matrix3<f64> {
    let (gamma_bar, phi_bar, psi_bar, eps) = erfa::prenut::precession_angles_fw06(J2000_JD, 0.0);
    let m = erfa::prenut::fw_to_matrix(gamma_bar, phi_bar, psi_bar, eps);
    Matrix3::from_fn(|i, j| m[i][j])
}

/// The whole chain, VSOP87 ecliptic to ICRF axes.
pub fn vsop87_to_icrf() -> Matrix3<f64> {
    icrs_to_mean_j2000().transpose() * vsop87_to_fk5()
}

/// VSOP87A heliocentric position on the VSOP87 ecliptic, au.
pub fn vsop87_ecliptic_au(planet: Planet, t: Epoch) -> Vector3<f64> {
    // One f64 JD resolves 40 us, far below VSOP87's own error.
    let jd = t.tdb_jd();
    let c = match planet {
        Planet::Mercury => vsop87::vsop87a::mercury(jd),
        Planet::Venus => vsop87::vsop87a::venus(jd),
        Planet::Mars => vsop87::vsop87a::mars(jd),
        Planet::Jupiter => vsop87::vsop87a::jupiter(jd),
        Planet::Saturn => vsop87::vsop87a::saturn(jd),
        Planet::Uranus => vsop87::vsop87a::uranus(jd),
        Planet::Neptune => vsop87::vsop87a::neptune(jd),
    };
    Vector3::new(c.x, c.y, c.z)
}

/// Heliocentric position in ICRF axes, au, given the chain matrix from
/// [`vsop87_to_icrf`] (built once by the caller).
pub fn heliocentric_icrf_au(planet: Planet, t: Epoch, rotation: &Matrix3<f64>) -> Vector3<f64> {
    rotation * vsop87_ecliptic_au(planet, t)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frame_bias_matches_iers_offsets() {
        // IERS Conventions 2010, ch. 5, eq. 5.33: the frame bias offsets
        // d_psi_B = -0.041775 arcsec, d_eps_B = -0.0068192 arcsec and
        // d_alpha_0 = -0.0146 arcsec (memory). To first order the bias
        // matrix is I + [[0, da, -dpsi sin e], [-da, 0, -de],
        // [dpsi sin e, de, 0]] in SOFA's axes-rotation convention.
        const BIAS_TOLERANCE_RAD: f64 = 1e-11;
        let arcsec = std::f64::consts::PI / 648_000.0;
        let d_psi = -0.041_775 * arcsec;
        let d_eps = -0.006_819_2 * arcsec;
        let d_alpha = -0.014_6 * arcsec;
        let sin_e = (84_381.406 * arcsec).sin();
        let b = icrs_to_mean_j2000();
        assert!(
            (b[(0, 1)] - d_alpha).abs() < BIAS_TOLERANCE_RAD,
            "{}",
            b[(0, 1)]
        );
        assert!((b[(0, 2)] + d_psi * sin_e).abs() < BIAS_TOLERANCE_RAD);
        assert!((b[(1, 2)] + d_eps).abs() < BIAS_TOLERANCE_RAD);
    }

    #[test]
    fn chain_is_a_rotation() {
        const ORTHOGONALITY_TOLERANCE: f64 = 1e-11;
        let m = vsop87_to_icrf();
        let defect = m * m.transpose() - Matrix3::identity();
        assert!(defect.abs().max() < ORTHOGONALITY_TOLERANCE);
    }
}
