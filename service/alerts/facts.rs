//! The numbers the rules read, taken from one solution (and, for what
//! moved, from the solution before it): typed, so that the rules and the
//! words are pure functions of them, testable without a fit.
//!
//! Building the facts runs the predictions the rules compare (the place
//! some days ahead from both solutions, and the recommended and
//! gravity-only ellipses), so it needs the ephemeris; it reads no store.

use std::collections::BTreeMap;

use serde::Serialize;
use serde_json::Value;

use crate::astro::time::UtcTime;
use crate::config::StationList;
use nalgebra::Vector2;

use crate::fit::mixture::AveragedPlace;
use crate::fit::observe::{wrap_pi, ARCSEC_PER_RAD};
use crate::fit::predict::{predict_places, PredictionPoint};
use crate::solve::document::{SolutionDocument, ValueSigma};
use crate::solve::prediction::predict_stored;
use crate::solve::stored::model_fit;
use crate::solve::SolveContext;

/// The new observations against the previous solution's prediction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BatchFacts {
    pub against_seq: u64,
    pub observations: usize,
    pub chi2: Option<f64>,
    pub dof: Option<usize>,
    pub p_value: Option<f64>,
    pub log10_p_value: Option<f64>,
    /// New observations the new fit rejected, left out of the test.
    pub outliers_left_out: usize,
    /// The files and stations the batch came from.
    pub files: Vec<String>,
    pub stations: Vec<String>,
}

/// A place predicted some days after the fit from the reference station.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlaceFacts {
    pub days: f64,
    pub utc: String,
    pub station: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// The place and ellipse are averaged over the ladder's models
    /// (weights exp(-dBIC/2)), so a law the data cannot choose widens
    /// them. Semi-major axis of that 1-sigma ellipse:
    pub sigma_arcsec: f64,
    /// The same from the recommended model alone.
    pub recommended_sigma_arcsec: f64,
    /// The same from gravity alone, when that model converged.
    pub gravity_sigma_arcsec: Option<f64>,
    /// How far the previous solution's prediction for the same instant
    /// lies, and that distance in sigmas of the previous ellipse along it.
    pub shift_arcsec: Option<f64>,
    pub shift_sigma: Option<f64>,
}

/// One model of the ladder, in a line.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LadderLine {
    pub name: String,
    pub converged: bool,
    pub recommended: bool,
    pub normalized_rms: Option<f64>,
    /// BIC above the best converged model's.
    pub delta_bic: Option<f64>,
}

/// A measured magnitude brighter than the fitted law allows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DepartureFacts {
    pub obs_time: String,
    pub station: String,
    pub brighter_by_mag: f64,
    pub significance_sigma: f64,
}

/// Everything the rules and the words need of one solution.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SolutionFacts {
    pub object_id: String,
    pub designation: String,
    pub seq: u64,
    pub created_utc: String,
    pub observations: usize,
    pub arc_days: Option<f64>,
    pub converged: bool,
    pub failure: Option<String>,
    pub recommended: Option<String>,
    pub previous_seq: Option<u64>,
    pub previous_recommended: Option<String>,
    /// The terms of the previous solution's recommended model.
    pub previous_terms: Option<Vec<String>>,
    /// Of the recommended model.
    pub terms: Vec<String>,
    pub law: Option<String>,
    /// Whether the data choose the recommended model's law: every other
    /// law's fit with the same terms is at least
    /// [`crate::solve::verdicts::BIC_MARGIN`] worse
    /// in BIC.
    pub law_determined: bool,
    pub nongrav: BTreeMap<String, ValueSigma>,
    pub one_over_a_original_per_au: Option<ValueSigma>,
    /// Heliocentric osculating, at the fit epoch.
    pub e: Option<ValueSigma>,
    pub e_minus_one_sigmas: Option<f64>,
    pub v_inf_km_s: Option<ValueSigma>,
    pub q_au: Option<ValueSigma>,
    /// The same from gravity alone.
    pub gravity_e: Option<ValueSigma>,
    pub gravity_q_au: Option<ValueSigma>,
    pub gravity_normalized_rms: Option<f64>,
    pub gravity_trend_p_value: Option<f64>,
    pub ng_significance_sigma: Option<f64>,
    pub ng_significance_unknown: Option<String>,
    pub ladder: Vec<LadderLine>,
    pub batch: Option<BatchFacts>,
    pub places: Vec<PlaceFacts>,
    /// Brightness departures among the observations new since the
    /// previous solution.
    pub departures: Vec<DepartureFacts>,
    /// Hours since the last converged solution (or since the first one
    /// was due, when none ever converged); None when this one converged.
    pub hours_without_solution: Option<f64>,
}

/// What the facts are built from.
pub struct FactsInput<'a> {
    pub object_id: &'a str,
    pub designation: &'a str,
    pub seq: u64,
    pub created_utc: &'a str,
    pub observations: usize,
    /// The new solution's document (None when the fit failed), typed and
    /// as stored.
    pub document: Option<&'a SolutionDocument>,
    pub document_value: Option<&'a Value>,
    pub failure: Option<&'a str>,
    pub previous_seq: Option<u64>,
    pub previous_document: Option<&'a Value>,
    pub previous_recommended: Option<&'a str>,
    /// When the previous solution's newest observation was taken: the
    /// departures after it are the new batch's.
    pub previous_last_obs_utc: Option<&'a str>,
    pub batch: Option<BatchFacts>,
    pub hours_without_solution: Option<f64>,
    /// Days after the fit the places are predicted for.
    pub prediction_days: &'a [f64],
}

/// Builds the facts; a prediction that cannot be made leaves its place
/// out (the rules then do not judge it) and is logged.
pub fn solution_facts(
    ctx: &SolveContext,
    stations: &StationList,
    input: &FactsInput<'_>,
) -> SolutionFacts {
    let doc = input.document;
    let recommended = doc.and_then(|d| d.models.iter().find(|m| m.recommended));
    let gravity = doc.and_then(|d| d.models.iter().find(|m| m.terms.is_empty()));
    let best_bic = doc
        .into_iter()
        .flat_map(|d| d.models.iter())
        .filter(|m| m.converged)
        .filter_map(|m| m.bic)
        .fold(f64::INFINITY, f64::min);
    let ladder = doc
        .into_iter()
        .flat_map(|d| d.models.iter())
        .map(|m| LadderLine {
            name: m.name.clone(),
            converged: m.converged,
            recommended: m.recommended,
            normalized_rms: m.normalized_rms,
            delta_bic: m.bic.filter(|_| m.converged).map(|b| b - best_bic),
        })
        .collect();
    let elements = recommended.and_then(|m| m.elements.as_ref());
    SolutionFacts {
        object_id: input.object_id.to_string(),
        designation: input.designation.to_string(),
        seq: input.seq,
        created_utc: input.created_utc.to_string(),
        observations: input.observations,
        arc_days: doc.map(|d| d.arc_days),
        converged: recommended.is_some(),
        failure: input.failure.map(str::to_string),
        recommended: recommended.map(|m| m.name.clone()),
        previous_seq: input.previous_seq,
        previous_recommended: input.previous_recommended.map(str::to_string),
        previous_terms: input.previous_document.and_then(recommended_terms),
        terms: recommended.map(|m| m.terms.clone()).unwrap_or_default(),
        law: recommended.and_then(|m| m.law.clone()),
        // The verdict's own reading, so the mail and the report agree;
        // without a rival law that converged there is nothing to choose.
        law_determined: recommended.is_some()
            && doc
                .and_then(|d| d.law.as_ref())
                .is_none_or(|l| l.determined),
        nongrav: recommended.map(|m| m.nongrav.clone()).unwrap_or_default(),
        // The bound verdict's figure: averaged over the models when the
        // data cannot tell their laws apart.
        one_over_a_original_per_au: doc
            .and_then(|d| d.bound.as_ref())
            .map(|b| b.one_over_a_original_per_au),
        e: elements.map(|e| e.e),
        e_minus_one_sigmas: elements.map(|e| e.e_minus_one_sigmas),
        v_inf_km_s: elements.and_then(|e| e.v_inf_km_s),
        q_au: elements.map(|e| e.q_au),
        gravity_e: gravity.and_then(|m| m.elements.as_ref()).map(|e| e.e),
        gravity_q_au: gravity.and_then(|m| m.elements.as_ref()).map(|e| e.q_au),
        gravity_normalized_rms: gravity
            .filter(|m| m.converged)
            .and_then(|m| m.normalized_rms),
        gravity_trend_p_value: gravity
            .filter(|m| m.converged)
            .and_then(|m| m.trend.as_ref())
            .map(|t| t.p_value),
        ng_significance_sigma: doc.and_then(|d| d.ng_significance_sigma),
        ng_significance_unknown: doc.and_then(|d| d.ng_significance_unknown.clone()),
        ladder,
        batch: input.batch.clone(),
        places: places(ctx, stations, input),
        departures: departures(doc, input.previous_last_obs_utc),
        hours_without_solution: if recommended.is_some() {
            None
        } else {
            input.hours_without_solution
        },
    }
}

/// The terms of a stored document's recommended model.
fn recommended_terms(doc: &Value) -> Option<Vec<String>> {
    let name = doc["recommended"].as_str()?;
    let model = doc["models"]
        .as_array()?
        .iter()
        .find(|m| m["name"].as_str() == Some(name))?;
    serde_json::from_value(model["terms"].clone()).ok()
}

/// The station that observed the object most (ties: the first in code
/// order): where its observers are, so where a shift matters.
fn reference_station(doc: &SolutionDocument) -> Option<String> {
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for r in &doc.residuals {
        *counts.entry(r.station.as_str()).or_default() += 1;
    }
    let most = counts.values().copied().max()?;
    counts
        .into_iter()
        .find(|(_, n)| *n == most)
        .map(|(s, _)| s.to_string())
}

fn places(ctx: &SolveContext, stations: &StationList, input: &FactsInput<'_>) -> Vec<PlaceFacts> {
    let Some(doc) = input.document else {
        return Vec::new();
    };
    if doc.recommended.is_none() || input.prediction_days.is_empty() {
        return Vec::new();
    }
    let Some(station) = reference_station(doc) else {
        return Vec::new();
    };
    match try_places(ctx, stations, input, &station) {
        Ok(p) => p,
        Err(why) => {
            tracing::warn!(object = %input.object_id, seq = input.seq, "no predictions for the alert rules: {why}");
            Vec::new()
        }
    }
}

fn try_places(
    ctx: &SolveContext,
    stations: &StationList,
    input: &FactsInput<'_>,
    station: &str,
) -> Result<Vec<PlaceFacts>, String> {
    let observer =
        crate::solve::input::station_position(stations, station).map_err(|e| e.to_string())?;
    let created = UtcTime::parse_iso8601(input.created_utc).map_err(|e| e.to_string())?;
    let t0 = ctx.scales.utc_to_tdb(&created).map_err(|e| e.to_string())?;
    let points = input
        .prediction_days
        .iter()
        .map(|d| {
            Ok(PredictionPoint {
                time: ctx
                    .scales
                    .resolve_tdb(t0.plus_days(*d), None)
                    .map_err(|e| e.to_string())?,
                observer,
            })
        })
        .collect::<Result<Vec<_>, String>>()?;
    let settings = &ctx.settings;
    let p = settings.predict_settings();
    let predict = |document: Option<&Value>| {
        predict_stored(
            ctx.ephemeris.as_ref(),
            document,
            None,
            &settings.gravity,
            &settings.ladder.laws,
            &points,
            &p,
        )
        .map_err(|e| e.to_string())
    };
    let now = predict(input.document_value)?;
    // Gravity alone's ellipse: its own places when it took part in the
    // average, else predicted on its own.
    let gravity = match now.average.places_of("gravity") {
        Some(places) => Some(places.to_vec()),
        None => model_fit(
            input.document_value,
            Some("gravity"),
            &settings.gravity,
            &settings.ladder.laws,
        )
        .ok()
        .and_then(|(_, fit)| predict_places(ctx.ephemeris.as_ref(), &fit, &points, &p).ok()),
    };
    let before = match input.previous_document {
        Some(d) => predict(Some(d)).ok(),
        None => None,
    };
    Ok(now
        .average
        .places
        .iter()
        .zip(&now.places)
        .enumerate()
        .map(|(k, (a, p))| {
            let shift = before
                .as_ref()
                .and_then(|b| b.average.places.get(k))
                .map(|b| shift(a, b));
            PlaceFacts {
                days: input.prediction_days[k],
                utc: p.time.utc().to_iso8601(0),
                station: station.to_string(),
                ra_deg: a.ra_rad.to_degrees(),
                dec_deg: a.dec_rad.to_degrees(),
                sigma_arcsec: a.ellipse.semi_major_arcsec,
                recommended_sigma_arcsec: p.ellipse.semi_major_arcsec,
                gravity_sigma_arcsec: gravity
                    .as_ref()
                    .and_then(|g| g.get(k))
                    .map(|g| g.ellipse.semi_major_arcsec),
                shift_arcsec: shift.map(|s| s.0),
                shift_sigma: shift.and_then(|s| s.1),
            }
        })
        .collect())
}

/// The distance from the old place to the new one, arcsec, and in sigmas
/// of the old ellipse along that direction: whether observers pointing
/// where they were told, with the uncertainty they were told, would now
/// miss it.
fn shift(now: &AveragedPlace, before: &AveragedPlace) -> (f64, Option<f64>) {
    let offset = Vector2::new(
        wrap_pi(now.ra_rad - before.ra_rad) * before.dec_rad.cos(),
        now.dec_rad - before.dec_rad,
    ) * ARCSEC_PER_RAD;
    let distance = offset.norm();
    let sigmas = before.ellipse.mahalanobis2(offset).map(f64::sqrt);
    (distance, sigmas)
}

fn departures(doc: Option<&SolutionDocument>, after_utc: Option<&str>) -> Vec<DepartureFacts> {
    let Some(b) = doc.and_then(|d| d.photometry.as_ref()) else {
        return Vec::new();
    };
    let list = match b.preferred {
        Some("hg") => b.hg.as_ref().map(|l| &l.summary.departures),
        _ => b.total.as_ref().map(|l| &l.summary.departures),
    };
    let after = after_utc.and_then(|t| UtcTime::parse_iso8601(t).ok());
    let is_new = |time: &str| match (&after, UtcTime::parse_iso8601(time)) {
        (Some(a), Ok(t)) => (t.mjd(), t.seconds_of_day()) > (a.mjd(), a.seconds_of_day()),
        _ => true,
    };
    list.into_iter()
        .flatten()
        .filter(|d| is_new(&d.obs_time))
        .map(|d| DepartureFacts {
            obs_time: d.obs_time.clone(),
            station: d.station.clone(),
            brighter_by_mag: d.brighter_by_mag,
            significance_sigma: d.significance_sigma,
        })
        .collect()
}
