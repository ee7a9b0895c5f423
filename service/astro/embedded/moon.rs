//! The geocentric Moon from the truncated ELP-2000/82 series of Meeus,
//! Astronomical Algorithms (2nd ed., 1998), chapter 47.
//!
//! The series give longitude, latitude and distance referred to the mean
//! ecliptic and equinox of date; the result is turned into GCRS axes with
//! the IAU 2006 bias-precession angles of Fukushima and Williams, which
//! carries the frame bias too. Meeus quotes about 10 arcsec in longitude
//! and 4 arcsec in latitude, i.e. some 20 km at the Moon's distance.

use nalgebra::{Matrix3, Vector3};

use crate::astro::constants::{AU_KM, DAYS_PER_JULIAN_CENTURY, J2000_JD};
use crate::astro::time::Epoch;

/// One term of Meeus Table 47.A: multiples of D, M, M', F; the sine
/// coefficient of longitude (1e-6 degree) and the cosine coefficient of
/// distance (1e-3 km).
struct LongitudeDistanceTerm(i8, i8, i8, i8, f64, f64);

/// One term of Meeus Table 47.B: multiples of D, M, M', F and the sine
/// coefficient of latitude (1e-6 degree).
struct LatitudeTerm(i8, i8, i8, i8, f64);

#[rustfmt::skip]
const LONGITUDE_DISTANCE: [LongitudeDistanceTerm; 60] = [
    LongitudeDistanceTerm(0, 0, 1, 0, 6_288_774.0, -20_905_355.0),
    LongitudeDistanceTerm(2, 0, -1, 0, 1_274_027.0, -3_699_111.0),
    LongitudeDistanceTerm(2, 0, 0, 0, 658_314.0, -2_955_968.0),
    LongitudeDistanceTerm(0, 0, 2, 0, 213_618.0, -569_925.0),
    LongitudeDistanceTerm(0, 1, 0, 0, -185_116.0, 48_888.0),
    LongitudeDistanceTerm(0, 0, 0, 2, -114_332.0, -3_149.0),
    LongitudeDistanceTerm(2, 0, -2, 0, 58_793.0, 246_158.0),
    LongitudeDistanceTerm(2, -1, -1, 0, 57_066.0, -152_138.0),
    LongitudeDistanceTerm(2, 0, 1, 0, 53_322.0, -170_733.0),
    LongitudeDistanceTerm(2, -1, 0, 0, 45_758.0, -204_586.0),
    LongitudeDistanceTerm(0, 1, -1, 0, -40_923.0, -129_620.0),
    LongitudeDistanceTerm(1, 0, 0, 0, -34_720.0, 108_743.0),
    LongitudeDistanceTerm(0, 1, 1, 0, -30_383.0, 104_755.0),
    LongitudeDistanceTerm(2, 0, 0, -2, 15_327.0, 10_321.0),
    LongitudeDistanceTerm(0, 0, 1, 2, -12_528.0, 0.0),
    LongitudeDistanceTerm(0, 0, 1, -2, 10_980.0, 79_661.0),
    LongitudeDistanceTerm(4, 0, -1, 0, 10_675.0, -34_782.0),
    LongitudeDistanceTerm(0, 0, 3, 0, 10_034.0, -23_210.0),
    LongitudeDistanceTerm(4, 0, -2, 0, 8_548.0, -21_636.0),
    LongitudeDistanceTerm(2, 1, -1, 0, -7_888.0, 24_208.0),
    LongitudeDistanceTerm(2, 1, 0, 0, -6_766.0, 30_824.0),
    LongitudeDistanceTerm(1, 0, -1, 0, -5_163.0, -8_379.0),
    LongitudeDistanceTerm(1, 1, 0, 0, 4_987.0, -16_675.0),
    LongitudeDistanceTerm(2, -1, 1, 0, 4_036.0, -12_831.0),
    LongitudeDistanceTerm(2, 0, 2, 0, 3_994.0, -10_445.0),
    LongitudeDistanceTerm(4, 0, 0, 0, 3_861.0, -11_650.0),
    LongitudeDistanceTerm(2, 0, -3, 0, 3_665.0, 14_403.0),
    LongitudeDistanceTerm(0, 1, -2, 0, -2_689.0, -7_003.0),
    LongitudeDistanceTerm(2, 0, -1, 2, -2_602.0, 0.0),
    LongitudeDistanceTerm(2, -1, -2, 0, 2_390.0, 10_056.0),
    LongitudeDistanceTerm(1, 0, 1, 0, -2_348.0, 6_322.0),
    LongitudeDistanceTerm(2, -2, 0, 0, 2_236.0, -9_884.0),
    LongitudeDistanceTerm(0, 1, 2, 0, -2_120.0, 5_751.0),
    LongitudeDistanceTerm(0, 2, 0, 0, -2_069.0, 0.0),
    LongitudeDistanceTerm(2, -2, -1, 0, 2_048.0, -4_950.0),
    LongitudeDistanceTerm(2, 0, 1, -2, -1_773.0, 4_130.0),
    LongitudeDistanceTerm(2, 0, 0, 2, -1_595.0, 0.0),
    LongitudeDistanceTerm(4, -1, -1, 0, 1_215.0, -3_958.0),
    LongitudeDistanceTerm(0, 0, 2, 2, -1_110.0, 0.0),
    LongitudeDistanceTerm(3, 0, -1, 0, -892.0, 3_258.0),
    LongitudeDistanceTerm(2, 1, 1, 0, -810.0, 2_616.0),
    LongitudeDistanceTerm(4, -1, -2, 0, 759.0, -1_897.0),
    LongitudeDistanceTerm(0, 2, -1, 0, -713.0, -2_117.0),
    LongitudeDistanceTerm(2, 2, -1, 0, -700.0, 2_354.0),
    LongitudeDistanceTerm(2, 1, -2, 0, 691.0, 0.0),
    LongitudeDistanceTerm(2, -1, 0, -2, 596.0, 0.0),
    LongitudeDistanceTerm(4, 0, 1, 0, 549.0, -1_423.0),
    LongitudeDistanceTerm(0, 0, 4, 0, 537.0, -1_117.0),
    LongitudeDistanceTerm(4, -1, 0, 0, 520.0, -1_571.0),
    LongitudeDistanceTerm(1, 0, -2, 0, -487.0, -1_739.0),
    LongitudeDistanceTerm(2, 1, 0, -2, -399.0, 0.0),
    LongitudeDistanceTerm(0, 0, 2, -2, -381.0, -4_421.0),
    LongitudeDistanceTerm(1, 1, 1, 0, 351.0, 0.0),
    LongitudeDistanceTerm(3, 0, -2, 0, -340.0, 0.0),
    LongitudeDistanceTerm(4, 0, -3, 0, 330.0, 0.0),
    LongitudeDistanceTerm(2, -1, 2, 0, 327.0, 0.0),
    LongitudeDistanceTerm(0, 2, 1, 0, -323.0, 1_165.0),
    LongitudeDistanceTerm(1, 1, -1, 0, 299.0, 0.0),
    LongitudeDistanceTerm(2, 0, 3, 0, 294.0, 0.0),
    LongitudeDistanceTerm(2, 0, -1, -2, 0.0, 8_752.0),
];

#[rustfmt::skip]
const LATITUDE: [LatitudeTerm; 60] = [
    LatitudeTerm(0, 0, 0, 1, 5_128_122.0),
    LatitudeTerm(0, 0, 1, 1, 280_602.0),
    LatitudeTerm(0, 0, 1, -1, 277_693.0),
    LatitudeTerm(2, 0, 0, -1, 173_237.0),
    LatitudeTerm(2, 0, -1, 1, 55_413.0),
    LatitudeTerm(2, 0, -1, -1, 46_271.0),
    LatitudeTerm(2, 0, 0, 1, 32_573.0),
    LatitudeTerm(0, 0, 2, 1, 17_198.0),
    LatitudeTerm(2, 0, 1, -1, 9_266.0),
    LatitudeTerm(0, 0, 2, -1, 8_822.0),
    LatitudeTerm(2, -1, 0, -1, 8_216.0),
    LatitudeTerm(2, 0, -2, -1, 4_324.0),
    LatitudeTerm(2, 0, 1, 1, 4_200.0),
    LatitudeTerm(2, 1, 0, -1, -3_359.0),
    LatitudeTerm(2, -1, -1, 1, 2_463.0),
    LatitudeTerm(2, -1, 0, 1, 2_211.0),
    LatitudeTerm(2, -1, -1, -1, 2_065.0),
    LatitudeTerm(0, 1, -1, -1, -1_870.0),
    LatitudeTerm(4, 0, -1, -1, 1_828.0),
    LatitudeTerm(0, 1, 0, 1, -1_794.0),
    LatitudeTerm(0, 0, 0, 3, -1_749.0),
    LatitudeTerm(0, 1, -1, 1, -1_565.0),
    LatitudeTerm(1, 0, 0, 1, -1_491.0),
    LatitudeTerm(0, 1, 1, 1, -1_475.0),
    LatitudeTerm(0, 1, 1, -1, -1_410.0),
    LatitudeTerm(0, 1, 0, -1, -1_344.0),
    LatitudeTerm(1, 0, 0, -1, -1_335.0),
    LatitudeTerm(0, 0, 3, 1, 1_107.0),
    LatitudeTerm(4, 0, 0, -1, 1_021.0),
    LatitudeTerm(4, 0, -1, 1, 833.0),
    LatitudeTerm(0, 0, 1, -3, 777.0),
    LatitudeTerm(4, 0, -2, 1, 671.0),
    LatitudeTerm(2, 0, 0, -3, 607.0),
    LatitudeTerm(2, 0, 2, -1, 596.0),
    LatitudeTerm(2, -1, 1, -1, 491.0),
    LatitudeTerm(2, 0, -2, 1, -451.0),
    LatitudeTerm(0, 0, 3, -1, 439.0),
    LatitudeTerm(2, 0, 2, 1, 422.0),
    LatitudeTerm(2, 0, -3, -1, 421.0),
    LatitudeTerm(2, 1, -1, 1, -366.0),
    LatitudeTerm(2, 1, 0, 1, -351.0),
    LatitudeTerm(4, 0, 0, 1, 331.0),
    LatitudeTerm(2, -1, 1, 1, 315.0),
    LatitudeTerm(2, -2, 0, -1, 302.0),
    LatitudeTerm(0, 0, 1, 3, -283.0),
    LatitudeTerm(2, 1, 1, -1, -229.0),
    LatitudeTerm(1, 1, 0, -1, 223.0),
    LatitudeTerm(1, 1, 0, 1, 223.0),
    LatitudeTerm(0, 1, -2, -1, -220.0),
    LatitudeTerm(2, 1, -1, -1, -220.0),
    LatitudeTerm(1, 0, 1, 1, -185.0),
    LatitudeTerm(2, -1, -2, -1, 181.0),
    LatitudeTerm(0, 1, 2, 1, -177.0),
    LatitudeTerm(4, 0, -2, -1, 176.0),
    LatitudeTerm(4, -1, -1, -1, 166.0),
    LatitudeTerm(1, 0, 1, -1, -164.0),
    LatitudeTerm(4, 0, 1, -1, 132.0),
    LatitudeTerm(1, 0, -1, -1, -119.0),
    LatitudeTerm(4, -1, 0, -1, 115.0),
    LatitudeTerm(2, -2, 0, 1, 107.0),
];

/// A polynomial in Julian centuries T, degrees, lowest power first.
fn polynomial_deg(coefficients: &[f64], t: f64) -> f64 {
    coefficients.iter().rev().fold(0.0, |acc, c| acc * t + c)
}

/// Mean ecliptic longitude, latitude (radians) and distance (km) of the
/// Moon, referred to the mean ecliptic and equinox of date, at `t` Julian
/// centuries of TDB from J2000 (TT and TDB are the same here: the Moon
/// moves 0.5 arcsec per second and they differ by under 2 ms).
fn ecliptic_of_date(t: f64) -> (f64, f64, f64) {
    // Meeus eq. 47.1 gives the mean longitude with the light time folded
    // in (218.3164477 deg); the geometric value of Simon et al. (1994,
    // A&A 282, 663) is 218.31665436 deg, the rest as in eq. 47.1.
    let mean_longitude = polynomial_deg(
        &[
            218.316_654_36,
            481_267.881_234_21,
            -0.001_578_6,
            1.0 / 538_841.0,
            -1.0 / 65_194_000.0,
        ],
        t,
    );
    // Meeus eqs. 47.2-47.5.
    let elongation = polynomial_deg(
        &[
            297.850_192_1,
            445_267.111_403_4,
            -0.001_881_9,
            1.0 / 545_868.0,
            -1.0 / 113_065_000.0,
        ],
        t,
    );
    let sun_anomaly = polynomial_deg(
        &[
            357.529_109_2,
            35_999.050_290_9,
            -0.000_153_6,
            1.0 / 24_490_000.0,
        ],
        t,
    );
    let moon_anomaly = polynomial_deg(
        &[
            134.963_396_4,
            477_198.867_505_5,
            0.008_741_4,
            1.0 / 69_699.0,
            -1.0 / 14_712_000.0,
        ],
        t,
    );
    let node_distance = polynomial_deg(
        &[
            93.272_095_0,
            483_202.017_523_3,
            -0.003_653_9,
            -1.0 / 3_526_000.0,
            1.0 / 863_310_000.0,
        ],
        t,
    );
    // Meeus p. 338: A1 (Venus), A2 (Jupiter), A3, and the eccentricity
    // factor E (eq. 47.6) for terms in M.
    let a1 = (119.75 + 131.849 * t).to_radians();
    let a2 = (53.09 + 479_264.290 * t).to_radians();
    let a3 = (313.45 + 481_266.484 * t).to_radians();
    let e = 1.0 - 0.002_516 * t - 0.000_007_4 * t * t;

    let l = mean_longitude.to_radians();
    let d = elongation.to_radians();
    let m = sun_anomaly.to_radians();
    let mp = moon_anomaly.to_radians();
    let f = node_distance.to_radians();

    let eccentricity_factor = |multiple_of_m: i8| match multiple_of_m.abs() {
        1 => e,
        2 => e * e,
        _ => 1.0,
    };
    let argument = |nd: i8, nm: i8, nmp: i8, nf: i8| {
        f64::from(nd) * d + f64::from(nm) * m + f64::from(nmp) * mp + f64::from(nf) * f
    };

    let mut sum_l = 0.0;
    let mut sum_r = 0.0;
    for LongitudeDistanceTerm(nd, nm, nmp, nf, cl, cr) in &LONGITUDE_DISTANCE {
        let arg = argument(*nd, *nm, *nmp, *nf);
        let factor = eccentricity_factor(*nm);
        sum_l += cl * factor * arg.sin();
        sum_r += cr * factor * arg.cos();
    }
    let mut sum_b = 0.0;
    for LatitudeTerm(nd, nm, nmp, nf, cb) in &LATITUDE {
        sum_b += cb * eccentricity_factor(*nm) * argument(*nd, *nm, *nmp, *nf).sin();
    }
    // Meeus p. 338, the additive terms (1e-6 degree).
    sum_l += 3958.0 * a1.sin() + 1962.0 * (l - f).sin() + 318.0 * a2.sin();
    sum_b += -2235.0 * l.sin()
        + 382.0 * a3.sin()
        + 175.0 * (a1 - f).sin()
        + 175.0 * (a1 + f).sin()
        + 127.0 * (l - mp).sin()
        - 115.0 * (l + mp).sin();

    let longitude = l + (sum_l * 1e-6).to_radians();
    let latitude = (sum_b * 1e-6).to_radians();
    // Meeus eq. 47 (distance): 385000.56 km + sum_r in units of 1e-3 km.
    let distance_km = 385_000.56 + sum_r * 1e-3;
    (longitude, latitude, distance_km)
}

/// Rotation about the x axis in the sense of SOFA's `Rx`: a rotation of
/// the coordinate axes, not of the vector.
fn axes_rotation_x(angle: f64) -> Matrix3<f64> {
    let (s, c) = angle.sin_cos();
    Matrix3::new(1.0, 0.0, 0.0, 0.0, c, s, 0.0, -s, c)
}

fn axes_rotation_z(angle: f64) -> Matrix3<f64> {
    let (s, c) = angle.sin_cos();
    Matrix3::new(c, s, 0.0, -s, c, 0.0, 0.0, 0.0, 1.0)
}

/// Rotation from the mean ecliptic and equinox of date to GCRS axes. With
/// the Fukushima-Williams angles (gamma_bar, phi_bar, psi_bar) the GCRS
/// to ecliptic-of-date rotation is R3(-psi) R1(phi) R3(gamma) (IERS
/// Conventions 2010, ch. 5, eq. 5.40 without the final R1(-eps)), so its
/// transpose takes the Moon into GCRS axes, frame bias included.
fn ecliptic_of_date_to_gcrs(t_centuries: f64) -> Matrix3<f64> {
    let (gamma_bar, phi_bar, psi_bar, _eps) =
        erfa::prenut::precession_angles_fw06(J2000_JD, t_centuries * DAYS_PER_JULIAN_CENTURY);
    (axes_rotation_z(-psi_bar) * axes_rotation_x(phi_bar) * axes_rotation_z(gamma_bar)).transpose()
}

/// Geocentric position of the Moon, GCRS axes, au, at the TDB epoch `t`.
pub fn geocentric_position_au(t: Epoch) -> Vector3<f64> {
    let centuries = t.tdb_days_since_j2000() / DAYS_PER_JULIAN_CENTURY;
    let (longitude, latitude, distance_km) = ecliptic_of_date(centuries);
    let r = distance_km / AU_KM;
    let ecliptic = Vector3::new(
        r * latitude.cos() * longitude.cos(),
        r * latitude.cos() * longitude.sin(),
        r * latitude.sin(),
    );
    ecliptic_of_date_to_gcrs(centuries) * ecliptic
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn meeus_example_47a() {
        // Meeus, Astronomical Algorithms (2nd ed.), Example 47.a: 1992 April
        // 12, 0h TD (JDE 2448724.5): lambda = 133.162655 deg, beta =
        // -3.229126 deg, Delta = 368409.7 km (memory; mean ecliptic of date, before
        // nutation). The mean longitude here is the geometric one, which is
        // 0.000207 deg (0.74 arcsec, the light time) ahead of the book's.
        const LONGITUDE_TOLERANCE_DEG: f64 = 2e-6;
        const LIGHT_TIME_DEG: f64 = 218.316_654_36 - 218.316_447_7;
        const LATITUDE_TOLERANCE_DEG: f64 = 2e-6;
        const DISTANCE_TOLERANCE_KM: f64 = 0.1;
        let t = (2_448_724.5 - J2000_JD) / DAYS_PER_JULIAN_CENTURY;
        let (lon, lat, dist) = ecliptic_of_date(t);
        let lon_deg = lon.to_degrees().rem_euclid(360.0);
        assert!(
            (lon_deg - LIGHT_TIME_DEG - 133.162_655).abs() < LONGITUDE_TOLERANCE_DEG,
            "{lon_deg}"
        );
        assert!((lat.to_degrees() + 3.229_126).abs() < LATITUDE_TOLERANCE_DEG);
        assert!((dist - 368_409.7).abs() < DISTANCE_TOLERANCE_KM, "{dist}");
    }
}
