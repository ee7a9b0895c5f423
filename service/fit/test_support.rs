//! A cheap, analytic stand-in for a planetary ephemeris, for unit tests.

use nalgebra::Vector3;

use crate::astro::constants::gm;
use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::observer::{GeodeticSite, ObserverPosition};
use crate::astro::time::{Epoch, TimeScales};

use super::observe::AstrometricObservation;

/// Planets on circles about a Sun that itself circles the barycentre (so
/// that the heliocentric-to-barycentric step of the model is exercised).
pub(crate) struct WobblingSun;

fn circle(radius_au: f64, inclination_rad: f64, phase_rad: f64, t: Epoch) -> StateVector {
    let n = (gm::SUN / radius_au.powi(3)).sqrt();
    let u = phase_rad + n * t.tdb_days_since_j2000();
    let (s, c) = u.sin_cos();
    let (si, ci) = inclination_rad.sin_cos();
    StateVector::new(
        radius_au * Vector3::new(c, s * ci, s * si),
        radius_au * n * Vector3::new(-s, c * ci, c * si),
    )
}

impl Ephemeris for WobblingSun {
    fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
        // The Sun's wobble: roughly Jupiter's pull, 0.005 au over 4333 days.
        let w = std::f64::consts::TAU / 4333.0;
        let (s, c) = (w * t.tdb_days_since_j2000()).sin_cos();
        let sun = StateVector::new(
            0.005 * Vector3::new(c, s, 0.0),
            0.005 * w * Vector3::new(-s, c, 0.0),
        );
        let (radius, inclination, phase) = match body {
            Body::Sun => return Ok(sun),
            Body::Mercury => (0.387, 0.12, 0.3),
            Body::Venus => (0.723, 0.06, 1.1),
            Body::Earth | Body::Moon => (1.0, 0.0, 1.75),
            Body::Mars => (1.524, 0.03, 4.0),
            Body::Jupiter => (5.203, 0.02, 0.6),
            Body::Saturn => (9.537, 0.04, 0.9),
            Body::Uranus => (19.19, 0.013, 5.5),
            Body::Neptune => (30.07, 0.03, 5.3),
        };
        let p = circle(radius, inclination, phase, t);
        Ok(StateVector::new(
            p.position_au + sun.position_au,
            p.velocity_au_per_day + sun.velocity_au_per_day,
        ))
    }
}

/// An observation shell at a TDB epoch from an invented site; RA/Dec are
/// filled in by the caller.
pub(crate) fn shell(t: Epoch, station: &str, east_longitude_deg: f64) -> AstrometricObservation {
    let site = GeodeticSite::new(east_longitude_deg, 20.0, 1500.0).unwrap();
    AstrometricObservation {
        time: TimeScales::builtin().resolve_tdb(t, None).unwrap(),
        observer: ObserverPosition::Geodetic(site),
        ra_rad: 0.0,
        dec_rad: 0.0,
        sigma_ra_arcsec: Some(0.5),
        sigma_dec_arcsec: Some(0.5),
        correlation: 0.0,
        sigma_time_s: None,
        station: station.to_string(),
    }
}

/// A main-belt-like heliocentric state near the Earth's opposition side at
/// epoch J2000 + 9000 d of [`WobblingSun`].
pub(crate) fn belt_state() -> (Epoch, StateVector) {
    let epoch = Epoch::from_tdb_days_since_j2000(9000.0);
    let earth = circle(1.0, 0.0, 1.75, epoch).position_au;
    let dir = earth / earth.norm();
    let r = 2.4;
    let speed = (gm::SUN / r).sqrt() * 1.05;
    let along = Vector3::z().cross(&dir).normalize();
    let velocity = speed * (along * 0.15_f64.cos() + Vector3::z() * 0.15_f64.sin());
    (
        epoch,
        StateVector::new(dir * r + Vector3::new(0.1, -0.2, 0.15), velocity),
    )
}
