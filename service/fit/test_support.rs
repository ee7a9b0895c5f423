//! A cheap, analytic stand-in for a planetary ephemeris, for unit tests.

use nalgebra::Vector3;

use crate::astro::constants::gm;
use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::observer::{GeodeticSite, ObserverPosition};
use crate::astro::time::{Epoch, TimeScales};

use crate::astro::forces::ForceModel;
use crate::astro::propagation::{PropagationSettings, Trajectory};

use super::observe::{predict, AstrometricObservation, ObserverAt};
use super::sampling::Gaussian;

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

/// Observations of the [`belt_state`] orbit under `model`, every `step`
/// days from `from` days after its epoch, alternately from two invented
/// sites, with the places the model itself gives.
pub(crate) fn belt_observations(
    model: &ForceModel,
    from: f64,
    count: usize,
    step: f64,
) -> Vec<AstrometricObservation> {
    let (epoch, state) = belt_state();
    let eph = WobblingSun;
    let shells: Vec<_> = (0..count)
        .map(|i| {
            let t = epoch.plus_days(from + step * i as f64);
            shell(
                t,
                if i % 2 == 0 { "X01" } else { "X02" },
                40.0 * (i % 2) as f64,
            )
        })
        .collect();
    let (first, last) = (shells[0].time.tdb(), shells[count - 1].time.tdb());
    let start = if first < epoch { first } else { epoch }.plus_days(-1.0);
    let end = if last > epoch { last } else { epoch }.plus_days(1.0);
    let trajectory = Trajectory::integrate(
        &eph,
        model,
        epoch,
        &state,
        start,
        end,
        &PropagationSettings::default(),
    )
    .unwrap();
    shells
        .into_iter()
        .map(|mut o| {
            let at = ObserverAt::of(&o, &eph).unwrap();
            let p = predict(&trajectory, &eph, &at, false).unwrap();
            o.ra_rad = p.ra_rad;
            o.dec_rad = p.dec_rad;
            o
        })
        .collect()
}

/// Adds seeded Gaussian noise of each observation's own sigma (0.5 arcsec
/// from [`shell`]) to its RA cos Dec and Dec.
pub(crate) fn add_noise(observations: &mut [AstrometricObservation], seed: u64) {
    let mut rng = Gaussian::new(seed);
    for o in observations {
        let (sra, sdec) = (
            o.sigma_ra_arcsec.unwrap_or(1.0),
            o.sigma_dec_arcsec.unwrap_or(1.0),
        );
        o.ra_rad += rng.next_normal() * sra / super::observe::ARCSEC_PER_RAD / o.dec_rad.cos();
        o.dec_rad += rng.next_normal() * sdec / super::observe::ARCSEC_PER_RAD;
    }
}

/// A body pushed by A1 = 3e-6 au/day^2 under the inverse-square law,
/// observed for 240 days with seeded 0.5 arcsec noise, and its ladder
/// (inverse-square rungs only) with the first `gravity_failures` fits of
/// gravity alone made to fail: no iteration allowed and no stall accepted,
/// so each ends at the iteration limit, through the real fitter.
pub(crate) fn outgassing_ladder(
    gravity_failures: usize,
) -> (Vec<AstrometricObservation>, super::ladder::Ladder) {
    outgassing_ladder_with(gravity_failures, super::ladder::LadderSettings::default())
}

/// [`outgassing_ladder`] with `settings` (whose laws are replaced by the
/// inverse-square law alone).
pub(crate) fn outgassing_ladder_with(
    gravity_failures: usize,
    settings: super::ladder::LadderSettings,
) -> (Vec<AstrometricObservation>, super::ladder::Ladder) {
    use super::ladder::{run_ladder, LadderSettings, ModelFit, Start};
    use super::lsq::{fit_orbit_observed, observer_places, FitProblem, FitSettings};
    use crate::astro::forces::{DistanceLaw, FreeParameters, NonGravModel};
    use std::cell::Cell;

    let gravity = ForceModel::new(&[Body::Jupiter], false, None).unwrap();
    let truth = gravity
        .clone()
        .with_nongrav(NonGravModel::new(
            DistanceLaw::InverseSquare,
            [3e-6, 0.0, 0.0],
            FreeParameters::new(true, false, false),
        ))
        .unwrap();
    let mut observations = belt_observations(&truth, -120.0, 60, 4.0);
    add_noise(&mut observations, 7);
    let (epoch, start) = belt_state();
    let problem = FitProblem {
        ephemeris: &WobblingSun,
        model: &gravity,
        observations: &observations,
    };
    let observers = observer_places(&problem).unwrap();
    let failures_left = Cell::new(gravity_failures);
    let fit_one = |m: &ModelFit, from: &Start, used: &[bool], settings: &FitSettings| {
        let model = match m.law {
            None => gravity.clone(),
            Some(law) => {
                let mut a = [0.0; 3];
                for c in m.free.indices() {
                    a[c] = from.a[c];
                }
                gravity
                    .clone()
                    .with_nongrav(NonGravModel::new(law, a, m.free))?
            }
        };
        let mut settings = settings.clone();
        if m.law.is_none() && failures_left.get() > 0 {
            failures_left.set(failures_left.get() - 1);
            settings.max_iterations = 0;
            settings.stall_tolerance_sigma = 0.0;
        }
        let problem = FitProblem {
            ephemeris: &WobblingSun,
            model: &model,
            observations: &observations,
        };
        fit_orbit_observed(&problem, &observers, epoch, &from.state, &settings, used)
    };
    let settings = LadderSettings {
        laws: vec![DistanceLaw::InverseSquare],
        ..settings
    };
    let ladder = run_ladder(&fit_one, &start, observations.len(), &settings).unwrap();
    (observations, ladder)
}
