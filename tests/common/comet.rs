//! An invented long-period comet made with the crate's own propagator: it
//! starts far out on a bound barycentric orbit and is carried in under the
//! full force model, so whatever its heliocentric osculating orbit looks
//! like near the Sun, its original orbit is known exactly.
//!
//! Where the original 1/a is taken: the barycentric 1/a beyond about
//! 250 au, before the planets act (Marsden, Sekanina & Everhart 1978,
//! AJ 83, 64). A comet near parabolic needs about 300 years to come in
//! from there, and neither ephemeris the crate reads reaches that far back
//! (the embedded theories start in 1900, DE421 half a year earlier). So
//! the far leg, from 250 au to 1900 (about 140 au by then), is the
//! barycentric two-body conic with the whole solar system's GM. Beyond
//! 140 au the planets' departure from one point mass at the barycentre
//! changes 1/a by about 2 sum(GM_p a_p^2) / (GM r^3) ~ 1e-7 1/au, far
//! below what a one-apparition arc determines. From 1900 the crate's
//! propagator carries it in: the far-field forces (the fit's own choice
//! beyond 30 au) and then the full model (Sun, planets, Moon, relativity),
//! both in barycentric coordinates.

use nalgebra::Vector3;

use perihelix::astro::constants::gm;
use perihelix::astro::elements::CometaryElements;
use perihelix::astro::ephemeris::{Body, Ephemeris, StateVector};
use perihelix::astro::forces::{ForceModel, Origin};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::{Epoch, TimeScales, UtcTime};
use perihelix::config::StationList;
use perihelix::fit::observe::{predict, AstrometricObservation, ObserverAt, ARCSEC_PER_RAD};
use perihelix::fit::sampling::Gaussian;
use perihelix::solve::input::station_position;

/// Barycentric distance of the original orbit (Marsden, Sekanina &
/// Everhart 1978, AJ 83, 64).
pub const ORIGINAL_DISTANCE_AU: f64 = 250.0;

/// 1900 January 1.0 TDB in days from J2000: the first day the embedded
/// theories cover (the span `EmbeddedEphemeris::full_span` reports), and
/// inside DE421 (from 1899 July 29).
const EPHEMERIS_START_DAYS: f64 = -36_524.5;

/// Tighter than the fit's 1e-9, so the truth is not what limits the
/// comparison; 1e-12 stalls the step control on long arcs (see
/// `Synthetic::truth_state_at`).
const TRUTH_TOLERANCE: f64 = 1e-11;

/// Inside this barycentric distance the inner planets are forces of
/// their own; outside it they join the Sun as one central mass, as in the
/// fit's own original and future integrations (`ForceModel::far_field`:
/// their quadrupole is 3e-9 of the acceleration at 30 au). With the
/// embedded ephemeris, filling its Earth and Moon tables for a century of
/// 8-day segments would otherwise cost tens of seconds.
const FAR_FIELD_AU: f64 = 30.0;

/// When the conic comes in to `distance_au` from the barycentre: a
/// bisection, since the distance falls monotonically towards perihelion,
/// and 400 years before it a near-parabolic comet with q of a few au is
/// far beyond 250 au.
fn inbound_time(conic: &CometaryElements, distance_au: f64) -> Epoch {
    let distance = |t: Epoch| conic.state_at(t).expect("the conic").position_au.norm();
    let (mut early, mut late) = (conic.tp.plus_days(-400.0 * 365.25), conic.tp);
    assert!(distance(early) > distance_au);
    for _ in 0..80 {
        let mid = early.plus_days(0.5 * late.days_since(early));
        if distance(mid) > distance_au {
            early = mid;
        } else {
            late = mid;
        }
    }
    early
}

/// The barycentric orbit far out, as conic elements about the whole
/// solar system's mass.
#[derive(Debug, Clone, Copy)]
pub struct FarOrbit {
    pub q_au: f64,
    /// Barycentric 1/a, 1/au (positive: bound).
    pub inverse_a_per_au: f64,
    pub i_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    /// Perihelion time of the far conic; the planets move the real one by
    /// days.
    pub perihelion: Epoch,
}

/// The comet: its far state and the trajectory the full model gives.
pub struct InventedComet {
    pub far: FarOrbit,
    conic: CometaryElements,
    /// Where the comet is 250 au from the barycentre, inbound.
    pub far_epoch: Epoch,
    /// Barycentric ICRF state there.
    pub far_state: StateVector,
    /// Where the integration takes over from the conic: the start of the
    /// ephemeris.
    pub handover: Epoch,
    /// Barycentric, far-field forces, from the handover to 30 au.
    outer: Trajectory,
    /// Where the full model takes over from the far-field one.
    pub switch: Epoch,
    /// Barycentric, full model, from 30 au to past the arc.
    inner: Trajectory,
    /// The real perihelion: heliocentric r . v = 0 on the trajectory.
    pub perihelion: Epoch,
}

/// Barycentric 1/a of a barycentric state with the total GM: the
/// two-body energy the original orbit is judged by (Marsden, Sekanina &
/// Everhart 1978, AJ 83, 64).
pub fn barycentric_inverse_a(state: &StateVector) -> f64 {
    2.0 / state.position_au.norm()
        - state.velocity_au_per_day.norm_squared() / gm::SOLAR_SYSTEM_TOTAL
}

impl InventedComet {
    /// Builds the comet and integrates it in until `end`.
    pub fn build(ephemeris: &dyn Ephemeris, far: FarOrbit, end: Epoch) -> Self {
        let conic = CometaryElements {
            q_au: far.q_au,
            e: 1.0 - far.q_au * far.inverse_a_per_au,
            i_rad: far.i_deg.to_radians(),
            node_rad: far.node_deg.to_radians(),
            peri_rad: far.peri_deg.to_radians(),
            tp: far.perihelion,
            epoch: far.perihelion,
            gm_au3_per_day2: gm::SOLAR_SYSTEM_TOTAL,
        };
        let far_epoch = inbound_time(&conic, ORIGINAL_DISTANCE_AU);
        let far_state = conic.state_at(far_epoch).expect("the conic");
        let handover = Epoch::from_tdb_days_since_j2000(EPHEMERIS_START_DAYS);
        let switch = inbound_time(&conic, FAR_FIELD_AU);
        let settings = PropagationSettings {
            partials: false,
            tolerance: TRUTH_TOLERANCE,
            ..PropagationSettings::default()
        };
        let start = conic.state_at(handover).expect("the conic");
        let outer = Trajectory::integrate(
            ephemeris,
            &ForceModel::gravity().far_field(),
            handover,
            &start,
            handover,
            switch,
            &settings,
        )
        .expect("the comet integrates in from 1900");
        let inner = Trajectory::integrate(
            ephemeris,
            &ForceModel::gravity().with_origin(Origin::Barycentre),
            switch,
            &outer.state(switch).expect("the far-field leg's end"),
            switch,
            end,
            &settings,
        )
        .expect("the comet integrates in from 30 au");
        let mut comet = Self {
            far,
            conic,
            far_epoch,
            far_state,
            handover,
            outer,
            switch,
            inner,
            perihelion: far.perihelion,
        };
        comet.perihelion = comet.find_perihelion(ephemeris);
        comet
    }

    /// Heliocentric ICRF state on the full-model trajectory.
    pub fn heliocentric(&self, ephemeris: &dyn Ephemeris, t: Epoch) -> StateVector {
        let b = self.inner.state(t).expect("inside the trajectory");
        b.relative_to(&ephemeris.state(Body::Sun, t).expect("the Sun"))
    }

    /// Barycentric state: the conic before the handover, the full model
    /// after.
    pub fn barycentric(&self, t: Epoch) -> StateVector {
        if t < self.handover {
            self.conic.state_at(t).expect("the conic")
        } else if t < self.switch {
            self.outer.state(t).expect("inside the far-field leg")
        } else {
            self.inner.state(t).expect("inside the trajectory")
        }
    }

    /// Heliocentric osculating elements (GM of the Sun), as the fit
    /// reports them.
    pub fn osculating(&self, ephemeris: &dyn Ephemeris, t: Epoch) -> CometaryElements {
        CometaryElements::from_state(&self.heliocentric(ephemeris, t), t, gm::SUN)
            .expect("elements of the truth")
    }

    fn find_perihelion(&self, ephemeris: &dyn Ephemeris) -> Epoch {
        let radial = |t: Epoch| {
            let s = self.heliocentric(ephemeris, t);
            s.position_au.dot(&s.velocity_au_per_day)
        };
        let (mut a, mut b) = (
            self.far.perihelion.plus_days(-60.0),
            self.far.perihelion.plus_days(60.0),
        );
        assert!(
            radial(a) < 0.0 && radial(b) > 0.0,
            "no perihelion near the conic's"
        );
        for _ in 0..60 {
            let mid = a.plus_days(0.5 * b.days_since(a));
            if radial(mid) < 0.0 {
                a = mid;
            } else {
                b = mid;
            }
        }
        a
    }

    /// A heliocentric trajectory under the fit's own force model over
    /// `[start, end]`, started from the full-model state at perihelion:
    /// the form the crate's observation model takes.
    pub fn arc(&self, ephemeris: &dyn Ephemeris, start: Epoch, end: Epoch) -> Trajectory {
        let settings = PropagationSettings {
            partials: false,
            tolerance: TRUTH_TOLERANCE,
            ..PropagationSettings::default()
        };
        Trajectory::integrate(
            ephemeris,
            &ForceModel::gravity(),
            self.perihelion,
            &self.heliocentric(ephemeris, self.perihelion),
            start,
            end,
            &settings,
        )
        .expect("the arc integrates")
    }
}

/// One made observation, as written to the file.
#[derive(Debug, Clone)]
pub struct MadeObservation {
    pub utc: String,
    pub station: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub sigma_arcsec: f64,
}

/// How the comet was observed.
#[derive(Debug, Clone)]
pub struct Campaign {
    /// Nights from `first_night` on, one a UTC day.
    pub first_night: Epoch,
    pub nights: usize,
    /// Chance that a night is observed at all (weather, Moon, scheduling).
    pub night_probability: f64,
    /// Positions per observed night, drawn from this range.
    pub per_night: std::ops::RangeInclusive<usize>,
    /// Station codes with the astrometric sigma each one achieves, arcsec.
    pub stations: Vec<(&'static str, f64)>,
    /// Nights with the comet closer to the Sun on the sky are skipped.
    pub min_elongation_deg: f64,
    pub seed: u64,
}

/// The body's places as the crate's observation model computes them
/// (light time, topocentric, from the stations of `stations`), with seeded
/// Gaussian noise of each station's sigma.
pub fn observe(
    ephemeris: &dyn Ephemeris,
    trajectory: &Trajectory,
    stations: &StationList,
    campaign: &Campaign,
) -> Vec<MadeObservation> {
    let scales = TimeScales::builtin();
    let mut rng = Gaussian::new(campaign.seed);
    let first_mjd = scales
        .tdb_to_utc(campaign.first_night)
        .expect("a UTC day")
        .mjd();
    let span = campaign.per_night.end() - campaign.per_night.start() + 1;
    let mut out = Vec::new();
    for night in 0..campaign.nights {
        if rng.uniform() > campaign.night_probability {
            continue;
        }
        // uniform() is below 1, so the index is in range.
        let pick = (rng.uniform() * campaign.stations.len() as f64) as usize;
        let (code, sigma) = campaign.stations[pick];
        let site = stations.get(code).expect("an invented station");
        let observer = station_position(stations, code).expect("a station place");
        // Local midnight in UTC from the east longitude, then up to two
        // hours either side, so each station observes in its own night.
        let midnight_s = (-site.longitude_deg / 15.0).rem_euclid(24.0) * 3600.0;
        let count = campaign.per_night.start() + (rng.uniform() * span as f64) as usize;
        let mut seconds = midnight_s + (rng.uniform() - 0.5) * 4.0 * 3600.0;
        let mut night_rows = Vec::new();
        for _ in 0..count {
            let millis = (seconds * 1000.0).round() as i64;
            let mjd = first_mjd + night as i64 + millis.div_euclid(86_400_000);
            let utc = UtcTime::from_mjd_seconds(mjd, millis.rem_euclid(86_400_000) as f64 / 1000.0)
                .expect("a UTC time");
            let text = utc.to_iso8601(3);
            // Read back from its own text, as the fit will read it.
            let utc = UtcTime::parse_iso8601(&text).expect("our own time text");
            let time = scales.resolve_utc(&utc, None).expect("time scales");
            let template = AstrometricObservation {
                time,
                observer,
                ra_rad: 0.0,
                dec_rad: 0.0,
                sigma_ra_arcsec: Some(sigma),
                sigma_dec_arcsec: Some(sigma),
                correlation: 0.0,
                sigma_time_s: None,
                station: code.to_string(),
            };
            let at = ObserverAt::of(&template, ephemeris).expect("the observer's place");
            let place = predict(trajectory, ephemeris, &at, false).expect("a computed place");
            night_rows.push((text, at, place));
            seconds += 900.0 + 600.0 * rng.uniform();
        }
        let (_, at, place) = &night_rows[0];
        let sun = ephemeris.state(Body::Sun, at.tdb).expect("the Sun");
        let to_sun: Vector3<f64> = sun.position_au - at.state.position_au;
        let elongation = to_sun.angle(&place.rho_au).to_degrees();
        if elongation < campaign.min_elongation_deg {
            continue;
        }
        for (text, _, place) in night_rows {
            let noise = sigma / ARCSEC_PER_RAD;
            let ra = place.ra_rad + rng.next_normal() * noise / place.dec_rad.cos();
            let dec = place.dec_rad + rng.next_normal() * noise;
            out.push(MadeObservation {
                utc: text,
                station: code.to_string(),
                ra_deg: ra.to_degrees().rem_euclid(360.0),
                dec_deg: dec.to_degrees(),
                sigma_arcsec: sigma,
            });
        }
    }
    out
}

/// The observations as an ADES PSV (version 2022) file in the layout of
/// tests/reference/fixtures/synthetic/*/noisy.psv.
pub fn psv(designation: &str, rows: &[MadeObservation]) -> String {
    let mut text = String::from(
        "# version=2022\n# comment\n! line Invented astrometry of an invented comet, made by\n\
         ! line tests/common/comet.rs with the crate's own propagator.\n\
         provID  |mode|stn|obsTime                 |ra          |dec         |rmsRA|rmsDec|astCat\n",
    );
    for r in rows {
        text.push_str(&format!(
            "{designation}|CCD |{}|{}|{:12.8}|{:+12.8}|{:5.2}|{:6.2}|Gaia3 \n",
            r.station, r.utc, r.ra_deg, r.dec_deg, r.sigma_arcsec, r.sigma_arcsec
        ));
    }
    text
}
