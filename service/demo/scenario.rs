//! The demo's invented visitor and the nights it is observed on, made with
//! the project's own propagator and observation model. Pure: the
//! ephemeris, the time scales and a seed in, observation rows out.
//!
//! The body is strongly hyperbolic (e = 3.2, q = 1.1 au) with a
//! water-ice outgassing push (A1 = 1e-7 au/d^2) that only switches on as
//! it nears the Sun: found five months before perihelion at about 4.3 au
//! (hyperbolic Kepler equation, hand arithmetic), where gravity alone
//! explains everything, and followed in to 1.1 au, where it no longer
//! does. The stations are the shipped invented ones; each night a
//! station may be clouded out, or kept off the target by a bright Moon
//! near it; a tracklet is three or four exposures twelve minutes apart,
//! with Gaussian noise at the station's stated sigma and a handful of
//! gross outliers, as real follow-up has.

use nalgebra::Vector3;

use crate::astro::constants::gm;
use crate::astro::elements::CometaryElements;
use crate::astro::ephemeris::{Body, Ephemeris};
use crate::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use crate::astro::observer::{
    altitude_rad, observer_barycentric_state, zenith_gcrs, ObserverPosition,
};
use crate::astro::propagation::{PropagationSettings, Trajectory};
use crate::astro::time::{Epoch, ScaledInstant, TimeScales, UtcTime};
use crate::config::StationList;
use crate::fit::observe::{predict, ObserverAt, ARCSEC_PER_RAD};
use crate::fit::sampling::Gaussian;
use crate::solve::input::station_position;

use super::DemoError;

/// The invented designation.
pub const DESIGNATION: &str = "2027 ZV9";
/// The true radial push, au/d^2 at 1 au (water-ice law).
pub const TRUE_A1: f64 = 1e-7;
/// Days before perihelion of the first and the last night.
const FIRST_DAY: f64 = -150.0;
const LAST_DAY: f64 = -5.0;
/// Dark enough, high enough (the planner's own limits are similar).
const SUN_BELOW_DEG: f64 = -12.0;
const BODY_ABOVE_DEG: f64 = 25.0;
/// A night is lost to cloud with this chance, per station.
const CLOUDED: f64 = 0.35;
/// After the first fortnight of discovery follow-up, a clear station
/// observes with this chance.
const LATER_CADENCE: f64 = 0.45;
/// The Moon keeps a station off a target closer than this when it is
/// brighter than [`MOON_BRIGHT`] (illuminated fraction).
const MOON_NEAR_DEG: f64 = 60.0;
const MOON_BRIGHT: f64 = 0.7;
/// Minutes between the exposures of a tracklet.
const EXPOSURE_GAP_MIN: f64 = 12.0;
/// A station that states no sigma measures this well (arcsec).
const DEFAULT_SIGMA_ARCSEC: f64 = 0.8;
/// Gross outliers: this many, this far off (arcsec).
const OUTLIERS: usize = 4;
const OUTLIER_ARCSEC: (f64, f64) = (6.0, 15.0);

/// One station's tracklet on one night, as PSV rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Tracklet {
    pub station: String,
    /// The UTC date of its first exposure.
    pub date: String,
    pub mjd: f64,
    pub rows: Vec<String>,
}

/// Why a station did not observe on a night it could have.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Lost {
    pub clouded: usize,
    pub moonlit: usize,
}

#[derive(Debug, Clone)]
pub struct Scenario {
    pub designation: &'static str,
    /// The PSV header every file starts with.
    pub header: String,
    /// In time order.
    pub tracklets: Vec<Tracklet>,
    pub lost: Lost,
    pub perihelion_utc: String,
    pub outliers: usize,
}

/// The PSV column line; the fields are the ADES names.
const COLUMNS: &str =
    "provID  |mode|stn|obsTime                 |ra          |dec         |rmsRA|rmsDec|astCat|mag |band";

/// The true orbit: at perihelion 2027-06-20 0h TDB.
fn truth_elements() -> CometaryElements {
    // JD 2461576.5 is 2027-06-20 0h (hand arithmetic from J2000 = JD
    // 2451545.0 on 2000-01-01 12h: 10,031.5 days later).
    let tp = Epoch::from_tdb_jd(2_461_576.5, 0.0);
    CometaryElements {
        q_au: 1.1,
        e: 3.2,
        i_rad: 63.0f64.to_radians(),
        node_rad: 212.0f64.to_radians(),
        peri_rad: 118.0f64.to_radians(),
        tp,
        epoch: tp,
        gm_au3_per_day2: gm::SUN,
    }
}

/// The observations of the whole scenario.
pub fn scenario(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    stations: &StationList,
    seed: u64,
) -> Result<Scenario, DemoError> {
    let truth = truth_elements();
    let state = truth
        .to_state()
        .map_err(|e| DemoError::Scenario(format!("the invented orbit: {e}")))?;
    let model = ForceModel::gravity()
        .with_nongrav(NonGravModel::new(
            DistanceLaw::WaterIce,
            [TRUE_A1, 0.0, 0.0],
            FreeParameters::NONE,
        ))
        .map_err(|e| DemoError::Scenario(e.to_string()))?;
    let start = truth.tp.plus_days(FIRST_DAY - 2.0);
    let end = truth.tp.plus_days(LAST_DAY + 2.0);
    let trajectory = Trajectory::integrate(
        ephemeris,
        &model,
        truth.tp,
        &state,
        start,
        end,
        &PropagationSettings {
            partials: false,
            ..PropagationSettings::default()
        },
    )
    .map_err(|e| DemoError::Scenario(format!("integrating the invented orbit: {e}")))?;

    let mut rng = Gaussian::new(seed);
    let mut lost = Lost::default();
    let mut tracklets = Vec::new();
    let first_night = scales
        .resolve_tdb(truth.tp.plus_days(FIRST_DAY), None)
        .map_err(time_error)?
        .utc();
    let nights = (LAST_DAY - FIRST_DAY) as i64;
    let sites = stations
        .iter()
        .map(|s| Ok((s, station_position(stations, &s.code)?)))
        .collect::<Result<Vec<_>, crate::solve::input::StationError>>()
        .map_err(|e| DemoError::Scenario(e.to_string()))?;
    for n in 0..=nights {
        let day = first_night.mjd() + n;
        for (station, position) in &sites {
            let Some((best, direction)) = best_time(ephemeris, scales, &trajectory, position, day)?
            else {
                continue;
            };
            // Discovery follow-up: everyone who can, the first fortnight;
            // then the stations take turns.
            let keen = n < 14 || rng.uniform() < LATER_CADENCE;
            if rng.uniform() < CLOUDED {
                lost.clouded += 1;
                continue;
            }
            if moonlit(ephemeris, &best, &direction)? {
                lost.moonlit += 1;
                continue;
            }
            if !keen {
                continue;
            }
            let exposures = if rng.uniform() < 0.5 { 3 } else { 4 };
            let sigma = station.sigma_arcsec.unwrap_or(DEFAULT_SIGMA_ARCSEC);
            let mut rows = Vec::with_capacity(exposures);
            let mut first_mjd = None;
            for k in 0..exposures {
                let utc = later(&best.utc(), k as f64 * EXPOSURE_GAP_MIN * 60.0)?;
                let at = scales.resolve_utc(&utc, None).map_err(time_error)?;
                first_mjd.get_or_insert(utc.mjd() as f64 + utc.seconds_of_day() / 86_400.0);
                let observer = ObserverAt {
                    tdb: at.tdb(),
                    state: observer_barycentric_state(position, &at, ephemeris)
                        .map_err(|e| DemoError::Scenario(e.to_string()))?,
                };
                let place = predict(&trajectory, ephemeris, &observer, false)
                    .map_err(|e| DemoError::Scenario(format!("the invented place: {e}")))?;
                let (dx, dy) = (sigma * rng.next_normal(), sigma * rng.next_normal());
                let dec = place.dec_rad + dy / ARCSEC_PER_RAD;
                let ra = (place.ra_rad + dx / ARCSEC_PER_RAD / place.dec_rad.cos())
                    .rem_euclid(std::f64::consts::TAU);
                let mag = magnitude(&trajectory, &at, &place.rho_au)? + 0.15 * rng.next_normal();
                rows.push(psv_row(
                    &station.code,
                    &utc,
                    ra.to_degrees(),
                    dec.to_degrees(),
                    sigma,
                    mag,
                ));
            }
            let (y, m, d) = best.utc().calendar_date();
            tracklets.push(Tracklet {
                station: station.code.clone(),
                date: format!("{y:04}-{m:02}-{d:02}"),
                mjd: first_mjd.unwrap_or(day as f64),
                rows,
            });
        }
    }
    tracklets.sort_by(|a, b| a.mjd.total_cmp(&b.mjd));
    let outliers = add_outliers(&mut tracklets, &mut rng);
    let perihelion_utc = scales
        .resolve_tdb(truth.tp, None)
        .map_err(time_error)?
        .utc()
        .to_iso8601(0);
    Ok(Scenario {
        designation: DESIGNATION,
        header: format!(
            "# version=2022\n# comment\n! line Invented demo scenario: a hyperbolic visitor with a water-ice push,\n\
             ! line made by perihelix demo with its own propagator (no real object).\n{COLUMNS}\n"
        ),
        tracklets,
        lost,
        perihelion_utc,
        outliers,
    })
}

/// `utc` plus `seconds` (within the same or the next days; the demo's
/// nights have no leap second).
fn later(utc: &UtcTime, seconds: f64) -> Result<UtcTime, DemoError> {
    let total = utc.seconds_of_day() + seconds;
    let days = (total / 86_400.0).floor();
    UtcTime::from_mjd_seconds(utc.mjd() + days as i64, total - days * 86_400.0).map_err(time_error)
}

fn time_error(e: crate::astro::time::TimeError) -> DemoError {
    DemoError::Scenario(e.to_string())
}

/// The half-hour sample of UTC day `mjd` when the body stands highest at
/// `position` with the Sun well down, if any reaches [`BODY_ABOVE_DEG`], with
/// the body's geocentric direction then.
fn best_time(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    trajectory: &Trajectory,
    position: &ObserverPosition,
    mjd: i64,
) -> Result<Option<(ScaledInstant, Vector3<f64>)>, DemoError> {
    let mut best: Option<(f64, ScaledInstant, Vector3<f64>)> = None;
    for half_hour in 0..48 {
        let utc = UtcTime::from_mjd_seconds(mjd, half_hour as f64 * 1800.0).map_err(time_error)?;
        let at = scales.resolve_utc(&utc, None).map_err(time_error)?;
        let Some(zenith) = zenith_gcrs(position, &at) else {
            return Ok(None);
        };
        let earth = ephemeris
            .state(Body::Earth, at.tdb())
            .map_err(|e| DemoError::Scenario(e.to_string()))?;
        let sun = ephemeris
            .state(Body::Sun, at.tdb())
            .map_err(|e| DemoError::Scenario(e.to_string()))?;
        if altitude_rad(&zenith, &(sun.position_au - earth.position_au)).to_degrees()
            > SUN_BELOW_DEG
        {
            continue;
        }
        let body = trajectory
            .state(at.tdb())
            .map_err(|e| DemoError::Scenario(e.to_string()))?;
        let direction = body.position_au + sun.position_au - earth.position_au;
        let altitude = altitude_rad(&zenith, &direction).to_degrees();
        if altitude >= BODY_ABOVE_DEG && best.as_ref().is_none_or(|(a, _, _)| altitude > *a) {
            best = Some((altitude, at, direction));
        }
    }
    Ok(best.map(|(_, at, direction)| (at, direction)))
}

/// A bright Moon near the target (`target`: geocentric direction).
fn moonlit(
    ephemeris: &dyn Ephemeris,
    at: &ScaledInstant,
    target: &Vector3<f64>,
) -> Result<bool, DemoError> {
    let state = |b: Body| {
        ephemeris
            .state(b, at.tdb())
            .map(|s| s.position_au)
            .map_err(|e| DemoError::Scenario(e.to_string()))
    };
    let earth = state(Body::Earth)?;
    let to_moon = state(Body::Moon)? - earth;
    let to_sun = state(Body::Sun)? - earth;
    // Illuminated fraction from the Sun-Moon elongation (the phase angle
    // is about 180 deg less it): (1 - cos elongation) / 2.
    let fraction = (1.0 - to_moon.angle(&to_sun).cos()) / 2.0;
    Ok(fraction > MOON_BRIGHT && to_moon.angle(target).to_degrees() < MOON_NEAR_DEG)
}

/// A total magnitude with H = 11 and a 2.5 K log r term, K = 4 (an
/// active body brightening on its way in; invented).
fn magnitude(
    trajectory: &Trajectory,
    at: &ScaledInstant,
    rho_au: &Vector3<f64>,
) -> Result<f64, DemoError> {
    let r = trajectory
        .state(at.tdb())
        .map_err(|e| DemoError::Scenario(e.to_string()))?
        .position_au
        .norm();
    Ok(11.0 + 5.0 * rho_au.norm().log10() + 10.0 * r.log10())
}

fn psv_row(
    station: &str,
    utc: &UtcTime,
    ra_deg: f64,
    dec_deg: f64,
    sigma: f64,
    mag: f64,
) -> String {
    format!(
        "{DESIGNATION}|CCD |{station}|{}|{ra_deg:12.8}|{dec_deg:12.8}|{sigma:5.2}|{sigma:6.2}|Gaia3 |{mag:4.1}|V",
        utc.to_iso8601(3)
    )
}

/// Moves [`OUTLIERS`] exposures (never a tracklet's only good ones: one
/// per tracklet, spread over the arc) by a gross offset.
fn add_outliers(tracklets: &mut [Tracklet], rng: &mut Gaussian) -> usize {
    if tracklets.len() < 2 * OUTLIERS {
        return 0;
    }
    let mut moved = 0;
    for k in 0..OUTLIERS {
        // One in each quarter of the arc after the first fortnight's few.
        let lo = tracklets.len() * (2 * k + 1) / (2 * OUTLIERS + 1);
        let t = &mut tracklets[lo];
        let i = (rng.uniform() * t.rows.len() as f64) as usize % t.rows.len();
        let offset = OUTLIER_ARCSEC.0 + rng.uniform() * (OUTLIER_ARCSEC.1 - OUTLIER_ARCSEC.0);
        let mut fields: Vec<String> = t.rows[i].split('|').map(str::to_string).collect();
        if let Ok(dec) = fields[5].trim().parse::<f64>() {
            fields[5] = format!("{:12.8}", dec + offset / 3600.0);
            t.rows[i] = fields.join("|");
            moved += 1;
        }
    }
    moved
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::{shipped_stations, Config};

    fn made(seed: u64) -> Scenario {
        let stations = shipped_stations().expect("the shipped stations");
        let config = Config {
            stations: stations.clone(),
            ..Config::embedded_default(std::path::Path::new("."))
        };
        let ctx = crate::solve::SolveContext::new(&config).expect("the embedded ephemeris");
        scenario(ctx.ephemeris.as_ref(), &ctx.scales, &stations, seed).expect("a scenario")
    }

    /// The same seed makes the same nights; every row reads back through
    /// the PSV reader with its station and designation, in time order.
    #[test]
    fn the_scenario_is_reproducible_and_readable() {
        let a = made(7);
        assert_eq!(a.tracklets, made(7).tracklets);
        assert_ne!(a.tracklets, made(8).tracklets);
        assert_eq!(a.outliers, OUTLIERS);
        assert!(a.tracklets.len() > 50, "{} tracklets", a.tracklets.len());
        assert!(a.lost.clouded > 0);
        for t in &a.tracklets {
            assert!((3..=4).contains(&t.rows.len()));
        }
        assert!(a.tracklets.windows(2).all(|w| w[0].mjd <= w[1].mjd));
        let mut text = a.header.clone();
        for t in &a.tracklets {
            for r in &t.rows {
                text.push_str(r);
                text.push('\n');
            }
        }
        let rows: usize = a.tracklets.iter().map(|t| t.rows.len()).sum();
        let dir = std::env::temp_dir().join(format!("perihelix-scenario-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("a directory");
        let file = dir.join("demo.psv");
        std::fs::write(&file, text).expect("written");
        let outcome = crate::ingest::ingest_files(
            &[file],
            &shipped_stations().expect("the shipped stations"),
            &[],
        );
        let _ = std::fs::remove_dir_all(&dir);
        assert_eq!(outcome.objects.len(), 1);
        assert_eq!(outcome.objects[0].observations.len(), rows);
    }
}
