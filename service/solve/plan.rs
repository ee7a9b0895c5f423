//! The observation that would settle it: for each station and each night
//! in a window, how well one tracklet there would tell the recommended
//! model from its rivals ([`crate::fit::discriminate`]), ranked.
//!
//! A night counts where the Sun is at least 12 degrees below the horizon
//! (nautical twilight's end) and the body at least 20 degrees above it
//! (common practice for astrometry: below that, extinction and
//! differential refraction spoil it). The nights are sampled every
//! `step_minutes`; each night is judged at its best sample.
//!
//! The rivals: every other converged model, weighted by exp(-dBIC/2) among
//! them, and a night is ranked by the weighted mean of its D^2 against
//! each (Box & Hill's criterion weighs the rival pairs by their
//! probabilities in the same way). One rival alone would mislead where the
//! data cannot choose: with nothing detected, A1 and A2 sit within noise
//! of each other in BIC, and planning against whichever is ahead by luck
//! can pick nights that settle a term the body does not have.

use std::collections::BTreeMap;

use nalgebra::{DMatrix, DVector, Matrix2, Vector2, Vector3};
use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::astro::ephemeris::{Body, Ephemeris};
use crate::astro::observer::{
    altitude_rad, observer_barycentric_state, zenith_gcrs, ObserverPosition,
};
use crate::astro::time::{ScaledInstant, TimeError, TimeScales, UtcTime};
use crate::fit::discriminate::{
    discrimination2, nights_to_settle, terms_statistic_after, tracklet_noise,
};
use crate::fit::lsq::OrbitFit;
use crate::fit::mixture::{bic_weights, NEGLIGIBLE_DELTA_BIC};
use crate::fit::predict::{predict_places, PredictSettings, PredictionPoint, SkyEllipse};

use serde_json::Value;

use crate::config::StationList;

use super::document::StationUse;
use super::input::station_position;
use super::prediction::{utc_grid, GridError};
use super::stored::{converged_fits, model_fit, StoredError};
use super::SolveSettings;

/// The Sun this far below the horizon or lower: dark enough.
pub const SUN_BELOW_DEG: f64 = -12.0;
/// The body this far above the horizon or higher.
pub const BODY_ABOVE_DEG: f64 = 20.0;
/// Observations in one night's tracklet: the fit's weights count a night
/// as at most this many independent measurements (see
/// [`crate::fit::weights`]), so more in one night buy nothing.
pub const TRACKLET_OBSERVATIONS: usize = 4;
/// Sampling of each night.
pub const STEP_MINUTES: f64 = 30.0;
/// The longest window one plan may cover.
pub const MOST_DAYS: f64 = 366.0;
/// Days ahead the plan the daemon stores with each solution covers.
pub const STORED_PLAN_DAYS: i64 = 30;

/// The stored plan's window: from `created` for [`STORED_PLAN_DAYS`].
pub fn stored_window(created_utc: &str) -> Result<(UtcTime, UtcTime), TimeError> {
    let from = UtcTime::parse_iso8601(created_utc)?;
    let to = UtcTime::from_mjd_seconds(from.mjd() + STORED_PLAN_DAYS, from.seconds_of_day())?;
    Ok((from, to))
}

/// Rivals lighter than this are left out of a plan.
pub const MIN_RIVAL_WEIGHT: f64 = 0.01;
/// Nights listed in the text (the JSON has them all).
const NIGHTS_SHOWN: usize = 15;

#[derive(Debug, Error)]
pub enum PlanError {
    #[error("the window: {0}")]
    Window(#[from] GridError),
    #[error("the window is {days:.0} days; at most {MOST_DAYS} are planned at once")]
    TooLong { days: f64 },
    #[error("no rival model: only {0} converged with a covariance")]
    NoRival(String),
    #[error("no converged model '{wanted}' with a covariance; the solution has: {have}")]
    NoModel { wanted: String, have: String },
    #[error("{0}")]
    Stored(#[from] StoredError),
    #[error(
        "no station to plan for: the station list has none of the observing stations; name one"
    )]
    NoStation,
    #[error("station {station}: {why}")]
    Station { station: String, why: String },
}

/// A station to plan for.
#[derive(Debug, Clone)]
pub struct PlanStation {
    pub code: String,
    pub position: ObserverPosition,
    /// One observation's astrometric sigma there.
    pub sigma_arcsec: f64,
}

/// One night at one station.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlanNight {
    pub station: String,
    /// The local date the night begins on (the evening's date).
    pub night: String,
    /// The best sample of the night.
    pub utc: String,
    /// Dark with the body high enough, sampled.
    pub observable_hours: f64,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub altitude_deg: f64,
    /// sqrt of the rivals' weighted mean D^2: the ranking.
    pub expected_sigma: f64,
    /// Against the heaviest rival: |a - b| between the two models'
    /// places...
    pub separation_arcsec: f64,
    /// ...sqrt(D^2), the split in sigmas one tracklet there would show...
    pub separation_sigma: f64,
    /// ...and the nights like this one needed for 3 sigma; None when no
    /// number is enough (the models' own ellipses overlap there).
    pub nights_to_3_sigma: Option<u32>,
    pub model_sigma_arcsec: f64,
    pub rival_sigma_arcsec: f64,
}

/// A station with no night in the window, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StationWithout {
    pub station: String,
    pub reason: String,
}

/// A rival and its weight among the rivals.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RivalShare {
    pub model: String,
    pub weight: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    pub model: String,
    /// The heaviest rival: the `separation_*` figures are against it.
    pub rival: String,
    /// Every rival the ranking weighs, heaviest first.
    pub rivals: Vec<RivalShare>,
    pub from_utc: String,
    pub to_utc: String,
    pub sun_below_deg: f64,
    pub body_above_deg: f64,
    pub tracklet_observations: usize,
    pub step_minutes: f64,
    /// Best first: by the expected separation over the rivals.
    pub nights: Vec<PlanNight>,
    pub stations_without_nights: Vec<StationWithout>,
}

/// The rivals of `model` among converged candidates with a covariance,
/// each weighted by exp(-dBIC/2) among them (normalised), heaviest first;
/// those below [`MIN_RIVAL_WEIGHT`] are left out and the rest
/// renormalised.
pub fn rivals_of<'a>(
    candidates: &'a [(String, Option<f64>, &'a OrbitFit)],
    model: &str,
) -> Vec<Rival<'a>> {
    let others: Vec<&(String, Option<f64>, &OrbitFit)> = candidates
        .iter()
        .filter(|(name, bic, fit)| {
            name != model && fit.covariance.is_some() && bic.is_some_and(f64::is_finite)
        })
        .collect();
    let best = others
        .iter()
        .filter_map(|c| c.1)
        .fold(f64::INFINITY, f64::min);
    let kept: Vec<&(String, Option<f64>, &OrbitFit)> = others
        .into_iter()
        .filter(|c| c.1.is_some_and(|b| b - best <= NEGLIGIBLE_DELTA_BIC))
        .collect();
    let weights = bic_weights(&kept.iter().map(|c| c.1).collect::<Vec<_>>());
    let mut rivals: Vec<Rival> = kept
        .into_iter()
        .zip(weights)
        .map(|(c, weight)| Rival {
            name: &c.0,
            weight,
            fit: c.2,
        })
        .collect();
    // Rivals below a percent move no ranking and cost a prediction each.
    rivals.retain(|r| r.weight >= MIN_RIVAL_WEIGHT);
    let total: f64 = rivals.iter().map(|r| r.weight).sum();
    for r in &mut rivals {
        r.weight /= total;
    }
    rivals.sort_by(|a, b| b.weight.total_cmp(&a.weight));
    rivals
}

/// A rival model with its share of the plausibility among the rivals.
#[derive(Debug, Clone, Copy)]
pub struct Rival<'a> {
    pub name: &'a str,
    pub weight: f64,
    pub fit: &'a OrbitFit,
}

/// The plan of `model` against `rival` (by name) or, when None, against
/// every plausible rival, from the converged candidates.
#[allow(clippy::too_many_arguments)]
pub fn plan_among(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    candidates: &[(String, Option<f64>, &OrbitFit)],
    model: &str,
    rival: Option<&str>,
    stations: &[PlanStation],
    from: &UtcTime,
    to: &UtcTime,
    settings: &PredictSettings,
) -> Result<Plan, PlanError> {
    let find = |name: &str| {
        candidates
            .iter()
            .find(|(n, _, fit)| n == name && fit.covariance.is_some())
            .ok_or_else(|| PlanError::NoModel {
                wanted: name.to_string(),
                have: candidates
                    .iter()
                    .map(|(n, _, _)| n.as_str())
                    .collect::<Vec<_>>()
                    .join(", "),
            })
    };
    let chosen = find(model)?;
    let rivals = match rival {
        Some(r) => {
            let other = find(r)?;
            vec![Rival {
                name: &other.0,
                weight: 1.0,
                fit: other.2,
            }]
        }
        None => rivals_of(candidates, model),
    };
    if rivals.is_empty() {
        return Err(PlanError::NoRival(model.to_string()));
    }
    plan(
        ephemeris,
        scales,
        (&chosen.0, chosen.2),
        &rivals,
        stations,
        from,
        to,
        settings,
    )
}

/// The stations of a stored solution document to plan for: `wanted`
/// codes, or every station that observed the body; each with the median
/// sigma it stated, else the station list's figure, else `fallback`.
/// Stations not in the list (roving or space observers) are left out and
/// named.
pub fn stations_of(
    document: &Value,
    list: &StationList,
    wanted: &[String],
    fallback_sigma_arcsec: f64,
) -> Result<(Vec<PlanStation>, Vec<StationWithout>), PlanError> {
    let used: Vec<StationUse> =
        serde_json::from_value(document["stations"].clone()).unwrap_or_default();
    let codes: Vec<String> = if wanted.is_empty() {
        used.iter().map(|u| u.station.clone()).collect()
    } else {
        wanted.to_vec()
    };
    let mut stations = Vec::new();
    let mut left_out = Vec::new();
    for code in codes {
        let position = match station_position(list, &code) {
            Ok(p) => p,
            Err(e) if wanted.is_empty() => {
                left_out.push(StationWithout {
                    station: code,
                    reason: format!("not planned for: {e}"),
                });
                continue;
            }
            Err(e) => {
                return Err(PlanError::Station {
                    station: code,
                    why: e.to_string(),
                })
            }
        };
        let stated = used
            .iter()
            .find(|u| u.station == code)
            .and_then(|u| u.median_sigma_arcsec);
        let listed = list.get(&code).and_then(|s| s.sigma_arcsec);
        stations.push(PlanStation {
            sigma_arcsec: stated.or(listed).unwrap_or(fallback_sigma_arcsec),
            code,
            position,
        });
    }
    Ok((stations, left_out))
}

/// The plan of a stored solution: its recommended model against `rival`
/// (or every plausible rival, weighed), for `wanted` stations (or every station that
/// observed the body). The one path of the command, the API and the
/// daemon.
#[allow(clippy::too_many_arguments)]
pub fn plan_stored(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    settings: &SolveSettings,
    list: &StationList,
    document: Option<&Value>,
    wanted: &[String],
    rival: Option<&str>,
    from: &UtcTime,
    to: &UtcTime,
) -> Result<Plan, PlanError> {
    let (gravity, laws) = (&settings.gravity, &settings.ladder.laws);
    let (model, _) = model_fit(document, None, gravity, laws)?;
    let fits = converged_fits(document, gravity, laws)?;
    let candidates: Vec<(String, Option<f64>, &OrbitFit)> = fits
        .iter()
        .map(|(name, bic, fit)| (name.clone(), *bic, fit))
        .collect();
    let (stations, left_out) = stations_of(
        document.unwrap_or(&Value::Null),
        list,
        wanted,
        settings.ladder.fit.weights.fallback_sigma_arcsec,
    )?;
    if stations.is_empty() {
        return Err(PlanError::NoStation);
    }
    let predict = settings.predict_settings();
    let mut plan = plan_among(
        ephemeris,
        scales,
        &candidates,
        &model,
        rival,
        &stations,
        from,
        to,
        &predict,
    )?;
    plan.stations_without_nights.extend(left_out);
    Ok(plan)
}

/// East longitude of a ground observer, degrees (for the local date).
fn east_longitude_deg(p: &ObserverPosition) -> f64 {
    match p {
        ObserverPosition::Geodetic(site) => site.east_longitude_deg(),
        ObserverPosition::EarthFixed { itrs_km } => itrs_km.y.atan2(itrs_km.x).to_degrees(),
        ObserverPosition::GeocentricIcrf { .. } => 0.0,
    }
}

/// The date a night begins on, locally: the UTC time moved by the
/// longitude's solar offset, less half a day, so that evening and the
/// following morning share one date.
fn night_label(t: &ScaledInstant, longitude_deg: f64) -> String {
    let u = t.utc();
    let seconds = u.seconds_of_day() + longitude_deg / 15.0 * 3600.0 - 43_200.0;
    let days = (seconds / 86_400.0).floor() as i64;
    match UtcTime::from_mjd_seconds(u.mjd() + days, seconds - days as f64 * 86_400.0) {
        Ok(local) => {
            let (y, m, d) = local.calendar_date();
            format!("{y:04}-{m:02}-{d:02}")
        }
        Err(_) => u.to_iso8601(0)[..10].to_string(),
    }
}

fn unit(ra: f64, dec: f64) -> Vector3<f64> {
    Vector3::new(dec.cos() * ra.cos(), dec.cos() * ra.sin(), dec.sin())
}

/// Ranks the nights of `stations` between `from` and `to` by how well a
/// tracklet would tell `model` from `rival`.
#[allow(clippy::too_many_arguments)]
pub fn plan(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    model: (&str, &OrbitFit),
    rivals: &[Rival],
    stations: &[PlanStation],
    from: &UtcTime,
    to: &UtcTime,
    settings: &PredictSettings,
) -> Result<Plan, PlanError> {
    let days =
        (to.mjd() - from.mjd()) as f64 + (to.seconds_of_day() - from.seconds_of_day()) / 86_400.0;
    if days > MOST_DAYS {
        return Err(PlanError::TooLong { days });
    }
    let times = utc_grid(from, to, STEP_MINUTES / 1440.0, scales)?;
    let mut nights = Vec::new();
    let mut without = Vec::new();
    for station in stations {
        let found = station_nights(ephemeris, model, rivals, station, &times, settings)?;
        if found.is_empty() {
            without.push(StationWithout {
                station: station.code.clone(),
                reason: format!(
                    "never dark (Sun below {SUN_BELOW_DEG} deg) with the body above {BODY_ABOVE_DEG} deg in the window"
                ),
            });
        }
        nights.extend(found);
    }
    nights.sort_by(|a, b| b.expected_sigma.total_cmp(&a.expected_sigma));
    Ok(Plan {
        model: model.0.to_string(),
        rival: rivals.first().map_or(String::new(), |r| r.name.to_string()),
        rivals: rivals
            .iter()
            .map(|r| RivalShare {
                model: r.name.to_string(),
                weight: r.weight,
            })
            .collect(),
        from_utc: from.to_iso8601(0),
        to_utc: to.to_iso8601(0),
        sun_below_deg: SUN_BELOW_DEG,
        body_above_deg: BODY_ABOVE_DEG,
        tracklet_observations: TRACKLET_OBSERVATIONS,
        step_minutes: STEP_MINUTES,
        nights,
        stations_without_nights: without,
    })
}

/// A rival's split from the model at one sample: the offset of its place
/// (arcsec), its place's covariance, and D^2.
type Split = (Vector2<f64>, Matrix2<f64>, f64);

/// How a rival's terms relate to the model's.
enum Nesting {
    /// The rival has the model's terms and more (same law, or the model
    /// is gravity alone): the rival's parameter indices of the extra ones.
    RivalAdds(Vec<usize>),
    /// The model has the rival's terms and more.
    ModelAdds(Vec<usize>),
    /// Neither holds the other (another law, or other terms).
    Apart,
}

fn nesting(model: &OrbitFit, rival: &OrbitFit) -> Nesting {
    let terms =
        |f: &OrbitFit| -> Vec<usize> { f.nongrav_au_per_day2.iter().map(|(c, _)| *c).collect() };
    let law = |f: &OrbitFit| {
        f.model
            .nongrav()
            .filter(|n| n.free.count() > 0)
            .map(|n| n.law)
    };
    // The extra terms' parameter indices in `richer` (6 + their place
    // among its A_i), when `richer` strictly holds `poorer`.
    let extra = |poorer: &OrbitFit, richer: &OrbitFit| -> Option<Vec<usize>> {
        let (p, r) = (terms(poorer), terms(richer));
        let same_family = p.is_empty() || law(poorer) == law(richer);
        let holds = p.iter().all(|c| r.contains(c)) && r.len() > p.len();
        (same_family && holds).then(|| {
            r.iter()
                .enumerate()
                .filter(|(_, c)| !p.contains(c))
                .map(|(j, _)| 6 + j)
                .collect()
        })
    };
    if let Some(e) = extra(model, rival) {
        Nesting::RivalAdds(e)
    } else if let Some(e) = extra(rival, model) {
        Nesting::ModelAdds(e)
    } else {
        Nesting::Apart
    }
}

/// The test statistic of `richer`'s `extra` terms after a tracklet at
/// `place` (predicted by `richer`, linear method).
fn terms_after(
    richer: &OrbitFit,
    extra: &[usize],
    place: &crate::fit::predict::PlacePrediction,
    noise: &Matrix2<f64>,
) -> Option<f64> {
    let c = richer.covariance.as_ref()?;
    let g = place.parameter_place_cov.as_ref()?;
    let k = extra.len();
    let a = DVector::from_iterator(k, extra.iter().map(|&i| richer.parameters[i]));
    let c_aa = DMatrix::from_fn(k, k, |i, j| c[(extra[i], extra[j])]);
    let g_a = DMatrix::from_fn(k, 2, |i, j| g[(extra[i], j)]);
    terms_statistic_after(&a, &c_aa, &g_a, &place.ellipse.covariance_arcsec2, noise)
}

fn station_nights(
    ephemeris: &dyn Ephemeris,
    model: (&str, &OrbitFit),
    rivals: &[Rival],
    station: &PlanStation,
    times: &[ScaledInstant],
    settings: &PredictSettings,
) -> Result<Vec<PlanNight>, PlanError> {
    let fail = |why: String| PlanError::Station {
        station: station.code.clone(),
        why,
    };
    // Dark instants first: the Sun's altitude needs no orbit.
    let mut dark = Vec::new();
    for t in times {
        let zenith = zenith_gcrs(&station.position, t)
            .ok_or_else(|| fail("an observer off the ground has no horizon to plan by".into()))?;
        let observer = observer_barycentric_state(&station.position, t, ephemeris)
            .map_err(|e| fail(e.to_string()))?;
        let sun = ephemeris
            .state(Body::Sun, t.tdb())
            .map_err(|e| fail(e.to_string()))?;
        let to_sun = sun.position_au - observer.position_au;
        if altitude_rad(&zenith, &to_sun).to_degrees() <= SUN_BELOW_DEG {
            dark.push((*t, zenith));
        }
    }
    if dark.is_empty() {
        return Ok(Vec::new());
    }
    let points: Vec<PredictionPoint> = dark
        .iter()
        .map(|(time, _)| PredictionPoint {
            time: *time,
            observer: station.position,
        })
        .collect();
    let a = predict_places(ephemeris, model.1, &points, settings)
        .map_err(|e| fail(format!("{}: {e}", model.0)))?;
    let others = rivals
        .iter()
        .map(|r| {
            predict_places(ephemeris, r.fit, &points, settings)
                .map_err(|e| fail(format!("{}: {e}", r.name)))
        })
        .collect::<Result<Vec<_>, _>>()?;
    let noise = tracklet_noise(station.sigma_arcsec, TRACKLET_OBSERVATIONS);
    let longitude = east_longitude_deg(&station.position);
    // Per night: the best sample and the count of good ones.
    let mut by_night: BTreeMap<String, (PlanNight, usize)> = BTreeMap::new();
    for (k, ((time, zenith), pa)) in dark.iter().zip(&a).enumerate() {
        let altitude = altitude_rad(zenith, &unit(pa.ra_rad, pa.dec_rad)).to_degrees();
        if altitude < BODY_ABOVE_DEG {
            continue;
        }
        let ca: Matrix2<f64> = pa.ellipse.covariance_arcsec2;
        // Each rival's split here and its score; the weighted mean score
        // ranks the night.
        let splits: Vec<Option<Split>> = others
            .iter()
            .map(|places| {
                let pb = &places[k];
                let d = pa.offset_arcsec(pb.ra_rad, pb.dec_rad);
                let cb = pb.ellipse.covariance_arcsec2;
                discrimination2(&d, &ca, &cb, &noise).map(|d2| (d, cb, d2))
            })
            .collect();
        let Some(Some((d, cb, d2))) = splits.first().copied() else {
            continue;
        };
        let expected2: f64 = splits
            .iter()
            .zip(rivals.iter().zip(&others))
            .map(|(split, (r, places))| {
                let score = match nesting(model.1, r.fit) {
                    Nesting::RivalAdds(extra) => terms_after(r.fit, &extra, &places[k], &noise),
                    Nesting::ModelAdds(extra) => terms_after(model.1, &extra, pa, &noise),
                    Nesting::Apart => None,
                };
                r.weight * score.or(split.map(|(_, _, d2)| d2)).unwrap_or(0.0)
            })
            .sum();
        let night = PlanNight {
            station: station.code.clone(),
            night: night_label(time, longitude),
            utc: time.utc().to_iso8601(0),
            observable_hours: 0.0,
            ra_deg: pa.ra_rad.to_degrees(),
            dec_deg: pa.dec_rad.to_degrees(),
            altitude_deg: altitude,
            expected_sigma: expected2.sqrt(),
            separation_arcsec: d.norm(),
            separation_sigma: d2.sqrt(),
            nights_to_3_sigma: nights_to_settle(&d, &ca, &cb, &noise),
            model_sigma_arcsec: pa.ellipse.semi_major_arcsec,
            rival_sigma_arcsec: SkyEllipse::from_covariance(cb).semi_major_arcsec,
        };
        let entry = by_night
            .entry(night.night.clone())
            .or_insert_with(|| (night.clone(), 0));
        entry.1 += 1;
        if night.expected_sigma > entry.0.expected_sigma {
            entry.0 = night;
        }
    }
    Ok(by_night
        .into_values()
        .map(|(mut night, samples)| {
            night.observable_hours = samples as f64 * STEP_MINUTES / 60.0;
            night
        })
        .collect())
}

impl Plan {
    /// The plan as a table for a person.
    pub fn text(&self) -> String {
        use std::fmt::Write;
        let mut out = String::new();
        let rivals: Vec<String> = self
            .rivals
            .iter()
            .map(|r| format!("{} {:.0}%", r.model, 100.0 * r.weight))
            .collect();
        let _ = writeln!(
            out,
            "Nights that would tell {} from its rivals, {} to {}\n\
             rivals, weighted by how well they fit (exp(-dBIC/2)): {}\n\
             (dark: Sun below {} deg; the body above {} deg; one tracklet of {} observations \
             at the station's astrometric sigma; sampled every {} minutes)\n",
            self.model,
            self.from_utc,
            self.to_utc,
            rivals.join(", "),
            self.sun_below_deg,
            self.body_above_deg,
            self.tracklet_observations,
            self.step_minutes
        );
        if self.nights.is_empty() {
            out.push_str("No station has an observable night in the window.\n");
        } else {
            let _ = writeln!(
                out,
                "{:<8} {:<10} {:<20} {:>6} {:>9} {:>10} {:>10} {:>10} {:>10}",
                "station",
                "night of",
                "best time (UTC)",
                "hours",
                "altitude",
                "expected",
                "split from",
                "split in",
                "nights to"
            );
            let _ = writeln!(
                out,
                "{:<8} {:<10} {:<20} {:>6} {:>9} {:>10} {:>10} {:>10} {:>10}",
                "", "", "", "dark", "(deg)", "sigmas", "rival (\")", "sigmas", "3 sigma"
            );
            for n in self.nights.iter().take(NIGHTS_SHOWN) {
                let _ = writeln!(
                    out,
                    "{:<8} {:<10} {:<20} {:>6.1} {:>9.0} {:>10.2} {:>10.3} {:>10.2} {:>10}",
                    n.station,
                    n.night,
                    n.utc,
                    n.observable_hours,
                    n.altitude_deg,
                    n.expected_sigma,
                    n.separation_arcsec,
                    n.separation_sigma,
                    n.nights_to_3_sigma
                        .map_or("not enough".to_string(), |k| k.to_string())
                );
            }
            if self.nights.len() > NIGHTS_SHOWN {
                let _ = writeln!(
                    out,
                    "... and {} more nights (all of them in --json)",
                    self.nights.len() - NIGHTS_SHOWN
                );
            }
            let _ = writeln!(
                out,
                "\nexpected sigmas: the split one tracklet would show, averaged over the rivals by \
                 weight (the ranking). The split columns are against the heaviest rival, {}; \
                 \"not enough\": the two models' own uncertainties overlap there, so more nights \
                 of that geometry cannot settle it.",
                self.rival
            );
        }
        for s in &self.stations_without_nights {
            let _ = writeln!(out, "{}: {}", s.station, s.reason);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_night_is_labelled_by_its_local_evening() {
        let scales = TimeScales::builtin();
        let at = |text: &str| {
            scales
                .resolve_utc(&UtcTime::parse_iso8601(text).unwrap(), None)
                .unwrap()
        };
        // At longitude -70 (UTC - 4 h 40 min of solar time), 02:00 UTC is
        // 21:20 local on the previous evening, 09:00 UTC is 04:20 local
        // the next morning: both belong to the night of 2026-08-31.
        assert_eq!(
            night_label(&at("2026-09-01T02:00:00Z"), -70.0),
            "2026-08-31"
        );
        assert_eq!(
            night_label(&at("2026-09-01T09:00:00Z"), -70.0),
            "2026-08-31"
        );
        // At +120 (UTC + 8 h), 13:00 UTC is 21:00 local on the same date.
        assert_eq!(
            night_label(&at("2026-09-01T13:00:00Z"), 120.0),
            "2026-09-01"
        );
        assert_eq!(
            night_label(&at("2026-09-01T20:00:00Z"), 120.0),
            "2026-09-01"
        );
    }
}
