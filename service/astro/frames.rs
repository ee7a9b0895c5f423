//! Rotations between the ICRF, the J2000 ecliptic and the frames of date.
//!
//! Earth orientation follows one convention only, the equinox-based one of
//! IAU 2006/2000A: a GCRS vector goes to the true equator and equinox of
//! date by the NPB matrix (ERFA `pnm06a`), and from there to the Earth-fixed
//! frame by a rotation of the Greenwich apparent sidereal time (ERFA
//! `gst06`, built from the same NPB). Mixing the Earth rotation angle with
//! the equinox-based NPB would be off by the equation of the origins (about
//! 1150 arcsec in 2025), so the angle is never taken from anywhere else.
//! Polar motion (below 20 m at the surface) is not modelled.

use nalgebra::{Matrix3, Vector3};

use super::ephemeris::StateVector;
use super::time::JulianDate;

pub use super::constants::OBLIQUITY_J2000_ARCSEC;

const ARCSEC_TO_RAD: f64 = std::f64::consts::PI / (180.0 * 3600.0);

/// Rate of the Earth rotation angle, rad/s of UT1: 2 pi x 1.00273781191135448
/// turns per day (IERS Conventions 2010 eq. 5.15; the rate ERFA `pvtob` uses).
pub const EARTH_ROTATION_RATE_RAD_S: f64 =
    std::f64::consts::TAU * 1.002_737_811_911_354_48 / 86_400.0;

/// The J2000 obliquity used for ecliptic elements, in radians.
pub fn obliquity_j2000_rad() -> f64 {
    OBLIQUITY_J2000_ARCSEC * ARCSEC_TO_RAD
}

/// Matrix taking ICRF vectors to the J2000 ecliptic: a rotation about x by
/// the obliquity. The ICRF frame bias (tens of milliarcseconds) is left out,
/// as is common practice for small-body ecliptic elements.
pub fn icrf_to_ecliptic_matrix() -> Matrix3<f64> {
    let (s, c) = obliquity_j2000_rad().sin_cos();
    Matrix3::new(1.0, 0.0, 0.0, 0.0, c, s, 0.0, -s, c)
}

pub fn icrf_to_ecliptic(v: &Vector3<f64>) -> Vector3<f64> {
    icrf_to_ecliptic_matrix() * v
}

pub fn ecliptic_to_icrf(v: &Vector3<f64>) -> Vector3<f64> {
    icrf_to_ecliptic_matrix().transpose() * v
}

pub fn state_icrf_to_ecliptic(s: &StateVector) -> StateVector {
    let m = icrf_to_ecliptic_matrix();
    StateVector::new(m * s.position_au, m * s.velocity_au_per_day)
}

pub fn state_ecliptic_to_icrf(s: &StateVector) -> StateVector {
    let m = icrf_to_ecliptic_matrix().transpose();
    StateVector::new(m * s.position_au, m * s.velocity_au_per_day)
}

fn from_erfa(m: [[f64; 3]; 3]) -> Matrix3<f64> {
    Matrix3::new(
        m[0][0], m[0][1], m[0][2], m[1][0], m[1][1], m[1][2], m[2][0], m[2][1], m[2][2],
    )
}

fn to_erfa(m: &Matrix3<f64>) -> [[f64; 3]; 3] {
    [
        [m[(0, 0)], m[(0, 1)], m[(0, 2)]],
        [m[(1, 0)], m[(1, 1)], m[(1, 2)]],
        [m[(2, 0)], m[(2, 1)], m[(2, 2)]],
    ]
}

/// Orientation of the Earth at one instant, equinox-based (IAU 2006/2000A).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EarthOrientation {
    /// GCRS -> true equator and equinox of date (bias, precession, nutation).
    npb: Matrix3<f64>,
    /// Greenwich apparent sidereal time, radians, from the same NPB.
    gast_rad: f64,
}

impl EarthOrientation {
    /// From UT1 (for the rotation) and TT (for precession-nutation), both
    /// two-part Julian dates.
    pub fn at(ut1: JulianDate, tt: JulianDate) -> Self {
        let npb = erfa::prenut::pn_matrix_06a(tt.jd1, tt.jd2);
        let gast_rad = erfa::time::gst06(ut1.jd1, ut1.jd2, tt.jd1, tt.jd2, npb);
        Self {
            npb: from_erfa(npb),
            gast_rad,
        }
    }

    /// GCRS -> true equator and equinox of date.
    pub fn npb(&self) -> Matrix3<f64> {
        self.npb
    }

    pub fn gast_rad(&self) -> f64 {
        self.gast_rad
    }

    /// Earth-fixed (ITRS, polar motion neglected) -> GCRS:
    /// NPB^T R3(-GAST).
    pub fn terrestrial_to_celestial(&self) -> Matrix3<f64> {
        let (s, c) = self.gast_rad.sin_cos();
        let spin = Matrix3::new(c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0);
        self.npb.transpose() * spin
    }

    /// The Earth's angular velocity vector in GCRS, rad/s: along the
    /// celestial pole of date (the third row of NPB). The slow drift of the
    /// pole itself (precession-nutation, ~1e-11 rad/s) is neglected.
    pub fn angular_velocity_gcrs_rad_s(&self) -> Vector3<f64> {
        self.npb.transpose() * Vector3::new(0.0, 0.0, EARTH_ROTATION_RATE_RAD_S)
    }

    /// The CIP coordinates X, Y in GCRS (ERFA `bpn2xy`), exposed for checks.
    pub fn celestial_pole_xy(&self) -> (f64, f64) {
        erfa::prenut::bpn_to_xy(to_erfa(&self.npb))
    }
}

/// Greenwich mean sidereal time, radians (IAU 2006, ERFA `gmst06`).
pub fn gmst_rad(ut1: JulianDate, tt: JulianDate) -> f64 {
    erfa::time::gmst06(ut1.jd1, ut1.jd2, tt.jd1, tt.jd2)
}

/// Earth rotation angle, radians (IAU 2000, ERFA `era00`).
pub fn earth_rotation_angle_rad(ut1: JulianDate) -> f64 {
    erfa::earth::earth_rotation_angle_00(ut1.jd1, ut1.jd2)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rotations are built from one sin/cos pair: rounding only.
    const ROTATION_TOLERANCE: f64 = 1e-15;
    /// Meeus's GMST is the IAU 1982 expression; the IAU 2006 one used here
    /// is tied to the Earth rotation angle and differs from it by 3.3 ms of
    /// time at 1987 (pyerfa 2.0.1.5: erfa.gmst82(2446895.5, 0.0) and
    /// erfa.gmst06(2446895.5, 0.0, 2446895.5, 55/86400) differ by 3.31 ms).
    const GMST_MODEL_DIFFERENCE_S: f64 = 5e-3;
    /// Same function as ERFA's: rounding only.
    const GMST_SAME_MODEL_TOLERANCE_S: f64 = 1e-6;

    #[test]
    fn ecliptic_pole_and_round_trip() {
        // The ecliptic pole lies at RA 18h, Dec 90 deg - eps in ICRF, with
        // eps = 84381.448 arcsec = 23.439291111 deg (SCIENCE.md, memory).
        let eps = obliquity_j2000_rad();
        assert!((eps.to_degrees() - 23.439_291_111).abs() < 1e-9);
        let pole_icrf = ecliptic_to_icrf(&Vector3::z());
        let expected = Vector3::new(0.0, -eps.sin(), eps.cos());
        assert!((pole_icrf - expected).norm() < ROTATION_TOLERANCE);
        // The equinox direction is shared by both frames.
        assert!((icrf_to_ecliptic(&Vector3::x()) - Vector3::x()).norm() < ROTATION_TOLERANCE);
        let v = Vector3::new(0.3, -1.2, 2.5);
        assert!((ecliptic_to_icrf(&icrf_to_ecliptic(&v)) - v).norm() < 4.0 * ROTATION_TOLERANCE);
        let s = StateVector::new(v, Vector3::new(-0.01, 0.002, 0.007));
        let back = state_ecliptic_to_icrf(&state_icrf_to_ecliptic(&s));
        assert!((back.position_au - s.position_au).norm() < 4.0 * ROTATION_TOLERANCE);
        assert!((back.velocity_au_per_day - s.velocity_au_per_day).norm() < ROTATION_TOLERANCE);
    }

    #[test]
    fn gmst_meeus_example_12a() {
        // Meeus, Astronomical Algorithms 2nd ed., Example 12.a (memory):
        // 1987 April 10, 0h UT -> GMST = 13h 10m 46.3668s. TT = UT + 55 s
        // (Delta T in 1987, memory); its effect here is ~5 microseconds.
        let ut1 = JulianDate {
            jd1: 2_446_895.5,
            jd2: 0.0,
        };
        let tt = JulianDate {
            jd1: 2_446_895.5,
            jd2: 55.0 / 86_400.0,
        };
        let gmst_s = gmst_rad(ut1, tt) / std::f64::consts::TAU * 86_400.0;
        let meeus_s = 13.0 * 3600.0 + 10.0 * 60.0 + 46.3668;
        assert!(
            (gmst_s - meeus_s).abs() < GMST_MODEL_DIFFERENCE_S,
            "GMST {gmst_s} s"
        );
        // pyerfa 2.0.1.5: erfa.gmst06(2446895.5, 0.0, 2446895.5, 55/86400)
        // * 86400 / (2 pi) = 47446.3701348438 s.
        assert!((gmst_s - 47_446.370_134_843_8).abs() < GMST_SAME_MODEL_TOLERANCE_S);
    }

    #[test]
    fn earth_rotation_is_proper_and_consistent() {
        let ut1 = JulianDate {
            jd1: 2_460_676.5,
            jd2: 0.3,
        };
        let tt = JulianDate {
            jd1: 2_451_545.0,
            jd2: 2_460_676.8 - 2_451_545.0 + 69.184 / 86_400.0,
        };
        let eo = EarthOrientation::at(ut1, tt);
        let m = eo.terrestrial_to_celestial();
        assert!((m * m.transpose() - Matrix3::identity()).norm() < 1e-14);
        assert!((m.determinant() - 1.0).abs() < 1e-14);
        // The Earth-fixed pole maps onto the celestial pole of date, and
        // the rotation axis is that same pole.
        let (x, y) = eo.celestial_pole_xy();
        let pole = m * Vector3::z();
        assert!((pole.x - x).abs() < 1e-15 && (pole.y - y).abs() < 1e-15);
        let axis = eo.angular_velocity_gcrs_rad_s() / EARTH_ROTATION_RATE_RAD_S;
        assert!((axis - pole).norm() < 1e-15);
        // GAST - ERA is minus the equation of the origins, which grows by
        // the precession in RA: about -1150 arcsec in 2025 (SCIENCE.md),
        // so a mixed convention would be caught here.
        let eo_arcsec =
            (eo.gast_rad() - earth_rotation_angle_rad(ut1)).rem_euclid(std::f64::consts::TAU);
        let eo_arcsec = if eo_arcsec > std::f64::consts::PI {
            eo_arcsec - std::f64::consts::TAU
        } else {
            eo_arcsec
        } / ARCSEC_TO_RAD;
        assert!(
            (eo_arcsec - 1150.0).abs() < 40.0,
            "GAST - ERA = {eo_arcsec} arcsec"
        );
    }
}
