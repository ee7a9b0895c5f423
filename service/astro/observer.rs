//! Where the observer is: station sites and explicit positions.
//!
//! observer(t) = Earth's barycentric state + the observer's geocentric
//! state. For a site on the ground the geocentric state comes from WGS84
//! geodetic coordinates -> Earth-fixed (ITRS) -> GCRS through the one
//! equinox-based Earth orientation of [`super::frames::EarthOrientation`],
//! with polar motion neglected (< 20 m) and UT1 = UTC unless a UT1 - UTC is
//! given (|UT1 - UTC| < 0.9 s moves a site by up to 0.42 km).
//!
//! GCRS and BCRS axes are both aligned with the ICRF; the relativistic
//! scaling between geocentric and barycentric coordinates (~1e-8, well under
//! a millimetre over an Earth radius) is ignored, so the geocentric vector
//! is added to the Earth's barycentric position as it is.

use nalgebra::Vector3;
use thiserror::Error;

use super::constants::{AU_KM, SECONDS_PER_DAY};
use super::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use super::frames::EarthOrientation;
use super::time::ScaledInstant;

/// WGS84 equatorial radius, m (NIMA TR8350.2).
pub const WGS84_EQUATORIAL_RADIUS_M: f64 = 6_378_137.0;

/// Lowest and highest height accepted for a geodetic site, m: from below
/// the deepest ocean floor to the edge of space. Anything higher should come
/// as an explicit geocentric position.
const HEIGHT_RANGE_M: (f64, f64) = (-12_000.0, 100_000.0);

#[derive(Debug, Error, Clone, PartialEq)]
pub enum ObserverError {
    #[error("invalid observer site: {reason}")]
    InvalidSite { reason: String },
    #[error("Earth state for the observer: {0}")]
    Ephemeris(#[from] EphemerisError),
}

/// A place on (or just above) the ground, on the WGS84 ellipsoid.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeodeticSite {
    east_longitude_deg: f64,
    latitude_deg: f64,
    height_m: f64,
}

/// The parallax constants rho cos(phi') and rho sin(phi') of a site, in
/// units of the equatorial radius (phi' the geocentric latitude).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParallaxConstants {
    pub rho_cos_phi: f64,
    pub rho_sin_phi: f64,
}

impl GeodeticSite {
    /// East longitude and geodetic latitude in degrees, height above the
    /// ellipsoid in metres.
    pub fn new(
        east_longitude_deg: f64,
        latitude_deg: f64,
        height_m: f64,
    ) -> Result<Self, ObserverError> {
        let invalid = |reason: String| Err(ObserverError::InvalidSite { reason });
        if !east_longitude_deg.is_finite() {
            return invalid(format!("longitude {east_longitude_deg} is not a number"));
        }
        if !(latitude_deg.is_finite() && (-90.0..=90.0).contains(&latitude_deg)) {
            return invalid(format!("latitude {latitude_deg} deg is outside -90..90"));
        }
        if !(height_m.is_finite() && (HEIGHT_RANGE_M.0..=HEIGHT_RANGE_M.1).contains(&height_m)) {
            return invalid(format!(
                "height {height_m} m is outside {}..{} m",
                HEIGHT_RANGE_M.0, HEIGHT_RANGE_M.1
            ));
        }
        Ok(Self {
            east_longitude_deg,
            latitude_deg,
            height_m,
        })
    }

    pub fn east_longitude_deg(&self) -> f64 {
        self.east_longitude_deg
    }

    pub fn latitude_deg(&self) -> f64 {
        self.latitude_deg
    }

    pub fn height_m(&self) -> f64 {
        self.height_m
    }

    /// Earth-fixed geocentric position, km (ERFA `gd2gc`, WGS84).
    pub fn itrs_km(&self) -> Vector3<f64> {
        let (a, f) = erfa::Ellipsoid::WGS84.get_params();
        // ERFA refuses only a zero-size ellipsoid term, impossible for a
        // validated latitude and the WGS84 flattening; NaN would show at once.
        let xyz = erfa::transform::geodetic_to_geocentric_inner(
            a,
            f,
            self.east_longitude_deg.to_radians(),
            self.latitude_deg.to_radians(),
            self.height_m,
        )
        .unwrap_or([f64::NAN; 3]);
        Vector3::new(xyz[0], xyz[1], xyz[2]) / 1000.0
    }

    pub fn parallax_constants(&self) -> ParallaxConstants {
        let r = self.itrs_km() * 1000.0 / WGS84_EQUATORIAL_RADIUS_M;
        ParallaxConstants {
            rho_cos_phi: r.x.hypot(r.y),
            rho_sin_phi: r.z,
        }
    }
}

/// Where an observation was made from, as the record gives it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ObserverPosition {
    /// A site on the WGS84 ellipsoid (a station, or a roving observer's
    /// stated geodetic place).
    Geodetic(GeodeticSite),
    /// Earth-fixed geocentric Cartesian coordinates (ITRF), km.
    EarthFixed { itrs_km: Vector3<f64> },
    /// Geocentric position on ICRF axes (a spacecraft), km, with its
    /// geocentric velocity when the record gives one. Without it the
    /// observer is taken to move with the geocentre: only its position
    /// enters astrometric light-time, so this costs nothing there.
    GeocentricIcrf {
        position_km: Vector3<f64>,
        velocity_km_s: Option<Vector3<f64>>,
    },
}

impl ObserverPosition {
    /// A geocentric ICRF position given in au (and au/day).
    pub fn geocentric_icrf_au(
        position_au: Vector3<f64>,
        velocity_au_per_day: Option<Vector3<f64>>,
    ) -> Self {
        ObserverPosition::GeocentricIcrf {
            position_km: position_au * AU_KM,
            velocity_km_s: velocity_au_per_day.map(|v| v * AU_KM / SECONDS_PER_DAY),
        }
    }
}

/// Geocentric position and velocity on GCRS (ICRF-aligned) axes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeocentricState {
    pub position_km: Vector3<f64>,
    pub velocity_km_s: Vector3<f64>,
}

/// GCRS state of an Earth-fixed point: r = NPB^T R3(-GAST) r_ITRS and
/// v = omega x r, omega along the celestial pole of date.
pub fn earth_fixed_to_gcrs(itrs_km: &Vector3<f64>, at: &ScaledInstant) -> GeocentricState {
    let orientation = EarthOrientation::at(at.ut1(), at.tt());
    let position_km = orientation.terrestrial_to_celestial() * itrs_km;
    let velocity_km_s = orientation
        .angular_velocity_gcrs_rad_s()
        .cross(&position_km);
    GeocentricState {
        position_km,
        velocity_km_s,
    }
}

/// Geocentric GCRS state of any observer position.
pub fn geocentric_state(position: &ObserverPosition, at: &ScaledInstant) -> GeocentricState {
    match position {
        ObserverPosition::Geodetic(site) => earth_fixed_to_gcrs(&site.itrs_km(), at),
        ObserverPosition::EarthFixed { itrs_km } => earth_fixed_to_gcrs(itrs_km, at),
        ObserverPosition::GeocentricIcrf {
            position_km,
            velocity_km_s,
        } => GeocentricState {
            position_km: *position_km,
            velocity_km_s: velocity_km_s.unwrap_or_else(Vector3::zeros),
        },
    }
}

/// The local vertical of a ground observer on GCRS (ICRF) axes: the
/// ellipsoid normal of a geodetic site, the geocentric direction of an
/// Earth-fixed point (within 0.2 deg of the normal). None for an observer
/// off the ground, which has no horizon.
pub fn zenith_gcrs(position: &ObserverPosition, at: &ScaledInstant) -> Option<Vector3<f64>> {
    let itrs = match position {
        ObserverPosition::Geodetic(site) => {
            let (lon, lat) = (
                site.east_longitude_deg.to_radians(),
                site.latitude_deg.to_radians(),
            );
            Vector3::new(lat.cos() * lon.cos(), lat.cos() * lon.sin(), lat.sin())
        }
        ObserverPosition::EarthFixed { itrs_km } => itrs_km.try_normalize(0.0)?,
        ObserverPosition::GeocentricIcrf { .. } => return None,
    };
    Some(EarthOrientation::at(at.ut1(), at.tt()).terrestrial_to_celestial() * itrs)
}

/// Altitude above the horizon of a direction, radians, given the local
/// vertical (both on the same axes; refraction left out).
pub fn altitude_rad(zenith: &Vector3<f64>, direction: &Vector3<f64>) -> f64 {
    std::f64::consts::FRAC_PI_2 - zenith.angle(direction)
}

/// Barycentric ICRF state of the observer (au, au/day) at an instant:
/// the ephemeris's Earth plus the geocentric state.
pub fn observer_barycentric_state(
    position: &ObserverPosition,
    at: &ScaledInstant,
    ephemeris: &dyn Ephemeris,
) -> Result<StateVector, ObserverError> {
    let earth = ephemeris.state(Body::Earth, at.tdb())?;
    let geo = geocentric_state(position, at);
    Ok(StateVector::new(
        earth.position_au + geo.position_km / AU_KM,
        earth.velocity_au_per_day + geo.velocity_km_s * (SECONDS_PER_DAY / AU_KM),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::time::{Epoch, TimeScales, UtcTime};

    /// Meeus prints the parallax constants to 6 decimals; the IAU 1976
    /// ellipsoid he uses differs from WGS84 by far less.
    const PARALLAX_TOLERANCE: f64 = 1e-6;
    /// Site position agreement with pyerfa, km (1 m is the requirement;
    /// the two sides run the same ERFA algorithms).
    const POSITION_TOLERANCE_KM: f64 = 1e-3;
    /// Site velocity agreement with pyerfa, km/s (1 mm/s).
    const VELOCITY_TOLERANCE_KM_S: f64 = 1e-6;
    /// Arithmetic only.
    const SUM_TOLERANCE_AU: f64 = 1e-15;
    /// A km-sized vector recovered from a difference of ~1 au positions
    /// keeps about 1e-16 au = 1.5e-8 km.
    const RECOVERED_KM_TOLERANCE: f64 = 1e-6;

    #[test]
    fn parallax_constants_meeus_example_11a() {
        // Meeus, Astronomical Algorithms 2nd ed., Example 11.a (memory):
        // latitude +33 21' 22", height 1706 m -> rho sin phi' = 0.546861,
        // rho cos phi' = 0.836339.
        let lat = 33.0 + 21.0 / 60.0 + 22.0 / 3600.0;
        let site = GeodeticSite::new(-116.8625, lat, 1706.0).unwrap();
        let p = site.parallax_constants();
        assert!(
            (p.rho_sin_phi - 0.546_861).abs() < PARALLAX_TOLERANCE,
            "{p:?}"
        );
        assert!(
            (p.rho_cos_phi - 0.836_339).abs() < PARALLAX_TOLERANCE,
            "{p:?}"
        );
    }

    #[test]
    fn sites_are_validated() {
        assert!(GeodeticSite::new(10.0, 91.0, 0.0).is_err());
        assert!(GeodeticSite::new(f64::NAN, 10.0, 0.0).is_err());
        assert!(GeodeticSite::new(10.0, 10.0, 2.0e6).is_err());
        let err = GeodeticSite::new(10.0, -90.5, 0.0).unwrap_err();
        assert!(err.to_string().contains("-90.5"), "{err}");
    }

    #[test]
    fn gcrs_sites_match_pyerfa_fixture() {
        // tests/reference/fixtures/observer_gcrs.csv, from
        // tests/reference/make_time_observer_fixtures.py with pyerfa 2.0.1.5
        // (pnm06a, gst06a, pvtob; UT1 = UTC, no polar motion).
        let path = format!(
            "{}/tests/reference/fixtures/observer_gcrs.csv",
            env!("CARGO_MANIFEST_DIR")
        );
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
        let scales = TimeScales::default();
        let (mut worst_pos_km, mut worst_vel_km_s, mut rows) = (0.0_f64, 0.0_f64, 0);
        for line in text.lines().skip(1) {
            let f: Vec<&str> = line.split(',').collect();
            let v = |i: usize| f[i].parse::<f64>().unwrap();
            let site = GeodeticSite::new(v(1), v(2), v(3)).unwrap();
            let utc = UtcTime::parse_iso8601(f[4]).unwrap();
            let at = scales.resolve_utc(&utc, None).unwrap();
            let s = geocentric_state(&ObserverPosition::Geodetic(site), &at);
            let dp = (s.position_km - Vector3::new(v(5), v(6), v(7))).norm();
            let dv = (s.velocity_km_s - Vector3::new(v(8), v(9), v(10))).norm();
            assert!(dp < POSITION_TOLERANCE_KM, "{} {}: {dp} km", f[0], f[4]);
            assert!(dv < VELOCITY_TOLERANCE_KM_S, "{} {}: {dv} km/s", f[0], f[4]);
            worst_pos_km = worst_pos_km.max(dp);
            worst_vel_km_s = worst_vel_km_s.max(dv);
            rows += 1;
        }
        assert!(rows >= 300);
        println!(
            "{rows} site states: worst position {:.2e} m, velocity {:.2e} m/s",
            worst_pos_km * 1e3,
            worst_vel_km_s * 1e3
        );
    }

    #[test]
    fn ut1_offset_moves_an_equatorial_site_by_omega_r_dt() {
        // |UT1 - UTC| = 0.9 s turns the Earth by omega * 0.9 s; an equator
        // site moves by omega R 0.9 s = 0.419 km (common practice estimate).
        let scales = TimeScales::default();
        let utc = UtcTime::parse_iso8601("2031-05-05T05:05:05Z").unwrap();
        let site = ObserverPosition::Geodetic(GeodeticSite::new(20.0, 0.0, 0.0).unwrap());
        let a = geocentric_state(&site, &scales.resolve_utc(&utc, None).unwrap());
        let b = geocentric_state(&site, &scales.resolve_utc(&utc, Some(0.9)).unwrap());
        let moved_km = (a.position_km - b.position_km).norm();
        let expected_km = crate::astro::frames::EARTH_ROTATION_RATE_RAD_S * 6378.137 * 0.9;
        assert!(
            (moved_km - expected_km).abs() < 1e-3 * expected_km,
            "{moved_km} km"
        );
        // And the speed of a point on the equator: 0.4651 km/s.
        assert!((a.velocity_km_s.norm() - 0.465_1).abs() < 1e-4);
    }

    #[test]
    fn the_zenith_is_the_ellipsoid_normal() {
        // The geodetic vertical differs from the geocentric direction by
        // the angle of the vertical, at most 11.5 arcmin near latitude 45
        // deg on the WGS84 ellipsoid (memory; 0.19 deg), and by nothing
        // on the equator or at a pole.
        let scales = TimeScales::default();
        let at = scales
            .resolve_utc(
                &UtcTime::parse_iso8601("2026-09-01T03:00:00Z").unwrap(),
                None,
            )
            .unwrap();
        for (lat, most_deg) in [(0.0, 1e-6), (45.0, 0.2), (-30.0, 0.2)] {
            let site = ObserverPosition::Geodetic(GeodeticSite::new(-70.0, lat, 2000.0).unwrap());
            let zenith = zenith_gcrs(&site, &at).unwrap();
            let radial = geocentric_state(&site, &at).position_km;
            let off_deg = zenith.angle(&radial).to_degrees();
            assert!(off_deg < most_deg, "latitude {lat}: {off_deg} deg");
            // Straight up is at altitude 90 deg, the vertical's opposite
            // at -90 (definition).
            assert!((altitude_rad(&zenith, &radial).to_degrees() - 90.0).abs() < most_deg);
            assert!((altitude_rad(&zenith, &-zenith).to_degrees() + 90.0).abs() < 1e-9);
        }
        let space = ObserverPosition::GeocentricIcrf {
            position_km: Vector3::new(7000.0, 0.0, 0.0),
            velocity_km_s: None,
        };
        assert!(zenith_gcrs(&space, &at).is_none());
    }

    /// An ephemeris that answers one fixed Earth state, to check the sum.
    struct FixedEarth(StateVector);

    impl Ephemeris for FixedEarth {
        fn state(&self, body: Body, _t: Epoch) -> Result<StateVector, EphemerisError> {
            match body {
                Body::Earth => Ok(self.0),
                other => Err(EphemerisError::MissingBody { body: other.name() }),
            }
        }
    }

    #[test]
    fn barycentric_state_adds_the_geocentric_vector() {
        let earth = StateVector::new(
            Vector3::new(-0.18, 0.89, 0.39),
            Vector3::new(-0.0172, -0.0029, -0.0013),
        );
        let eph = FixedEarth(earth);
        let scales = TimeScales::default();
        let utc = UtcTime::parse_iso8601("2024-03-20T03:06:00Z").unwrap();
        let at = scales.resolve_utc(&utc, None).unwrap();

        // A spacecraft 1.5 million km out, given once in km and once in au.
        let pos_km = Vector3::new(1.2e6, -0.8e6, 0.4e6);
        let vel_km_s = Vector3::new(0.1, 0.2, -0.3);
        let in_km = ObserverPosition::GeocentricIcrf {
            position_km: pos_km,
            velocity_km_s: Some(vel_km_s),
        };
        let in_au = ObserverPosition::geocentric_icrf_au(
            pos_km / AU_KM,
            Some(vel_km_s * SECONDS_PER_DAY / AU_KM),
        );
        let a = observer_barycentric_state(&in_km, &at, &eph).unwrap();
        let b = observer_barycentric_state(&in_au, &at, &eph).unwrap();
        assert!((a.position_au - (earth.position_au + pos_km / AU_KM)).norm() < SUM_TOLERANCE_AU);
        assert!((a.position_au - b.position_au).norm() < SUM_TOLERANCE_AU);
        assert!((a.velocity_au_per_day - b.velocity_au_per_day).norm() < SUM_TOLERANCE_AU);

        // A ground site given geodetically and as its ITRF vector agree.
        let site = GeodeticSite::new(-155.5, 19.8, 4200.0).unwrap();
        let g = observer_barycentric_state(&ObserverPosition::Geodetic(site), &at, &eph).unwrap();
        let e = observer_barycentric_state(
            &ObserverPosition::EarthFixed {
                itrs_km: site.itrs_km(),
            },
            &at,
            &eph,
        )
        .unwrap();
        assert_eq!(g, e);
        let geo_km = (g.position_au - earth.position_au).norm() * AU_KM;
        assert!(
            (geo_km - site.itrs_km().norm()).abs() < RECOVERED_KM_TOLERANCE,
            "{geo_km}"
        );

        // Without a velocity the spacecraft moves with the geocentre.
        let still = ObserverPosition::GeocentricIcrf {
            position_km: pos_km,
            velocity_km_s: None,
        };
        let c = observer_barycentric_state(&still, &at, &eph).unwrap();
        assert_eq!(c.velocity_au_per_day, earth.velocity_au_per_day);

        // Ephemeris failures come through with their reason.
        struct NoEarth;
        impl Ephemeris for NoEarth {
            fn state(&self, body: Body, _t: Epoch) -> Result<StateVector, EphemerisError> {
                Err(EphemerisError::MissingBody { body: body.name() })
            }
        }
        let err = observer_barycentric_state(&in_km, &at, &NoEarth).unwrap_err();
        assert!(err.to_string().contains("Earth"), "{err}");
    }
}
