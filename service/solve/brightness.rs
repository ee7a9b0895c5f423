//! The body's brightness against the fitted orbit: both brightness laws of
//! [`crate::fit::photometry`] fitted to the magnitudes that came with the
//! astrometry, at the geometry (r, Delta, phase) of the recommended orbit.
//!
//! The total-magnitude law (M1, K1) is the one for an active body; the
//! (H, G) law the one for an inert body; both are reported because the
//! question of which the body is, is part of what the analyst asks.
//! Measurements much brighter than a law are listed as departures
//! (outburst candidates); a K1 far from the inert 5 is flagged.

use serde::Serialize;

use crate::astro::ephemeris::Ephemeris;
use crate::fit::lsq::OrbitFit;
use crate::fit::observe::AstrometricObservation;
use crate::fit::photometry::{
    fit_hg, fit_total_magnitude, v_offset_mag, FitSummary, GChoice, K1Choice, MagnitudeLaw,
    MagnitudeMeasurement, PhotometryError, PhotometrySettings,
};
use crate::fit::predict::{predict_places, PredictSettings, PredictionPoint};

use super::document::ValueSigma;

/// One magnitude as the records give it, for observation `index`.
#[derive(Debug, Clone, PartialEq)]
pub struct MagnitudeRecord {
    pub index: usize,
    pub mag: f64,
    pub band: Option<String>,
    pub sigma_mag: Option<f64>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DepartureDocument {
    pub obs_time: String,
    pub station: String,
    pub brighter_by_mag: f64,
    pub significance_sigma: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LawSummaryDocument {
    pub used: usize,
    pub rejected: usize,
    pub normalized_rms: f64,
    /// Measurements without a band, taken as V.
    pub band_assumed_v: usize,
    pub departures: Vec<DepartureDocument>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TotalLawDocument {
    pub m1: ValueSigma,
    /// Sigma 0 when fixed (`k1_fixed`).
    pub k1: ValueSigma,
    pub k1_fixed: bool,
    /// K1 - 5 and its significance, when K1 is free and far from inert.
    pub activity_sigma: Option<f64>,
    #[serde(flatten)]
    pub summary: LawSummaryDocument,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HgLawDocument {
    pub h: ValueSigma,
    /// Sigma 0 when fixed (`g_fixed`).
    pub g: ValueSigma,
    pub g_fixed: bool,
    #[serde(flatten)]
    pub summary: LawSummaryDocument,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BrightnessDocument {
    pub measurements: usize,
    pub total: Option<TotalLawDocument>,
    pub hg: Option<HgLawDocument>,
    /// Why a law could not be fitted, or was fitted with K1 fixed.
    pub problems: Vec<String>,
    /// "total" or "hg": the law with the smaller normalised RMS.
    pub preferred: Option<&'static str>,
    /// The preferred law, for predicted magnitudes.
    #[serde(skip)]
    pub law: Option<MagnitudeLaw>,
    /// Fitted parameters outside what small bodies show, or not
    /// determined at all, in words: the report prints these instead of
    /// the numbers.
    pub range_flags: Vec<String>,
}

/// Where the slope parameter G of small bodies lies, roughly (common
/// practice: asteroid G values cluster between about -0.1 and 0.6; a
/// margin is allowed either side).
pub const G_PLAUSIBLE: (f64, f64) = (-0.25, 0.8);
/// Where the total-magnitude slope K1 = 2.5 n of comets lies, roughly
/// (common practice: activity indices n from 0 to about 16).
pub const K1_PLAUSIBLE: (f64, f64) = (0.0, 40.0);

/// A fitted (not fixed) parameter that is not determined (its sigma
/// larger than itself) or lies outside `range`, in words; None when it
/// can be printed as a result.
pub fn range_flag(name: &str, v: &ValueSigma, fixed: bool, range: (f64, f64)) -> Option<String> {
    if fixed {
        return None;
    }
    if !(v.value.is_finite() && v.sigma.is_finite()) || v.sigma > v.value.abs() {
        return Some(format!(
            "{name} is not determined by these magnitudes ({:.2} +/- {:.2}: the sigma exceeds the value)",
            v.value, v.sigma
        ));
    }
    if v.value < range.0 || v.value > range.1 {
        return Some(format!(
            "{name} = {:.2} +/- {:.2} is outside what small bodies show ({} to {}): the fit is not physical, most likely too little phase or distance coverage",
            v.value, v.sigma, range.0, range.1
        ));
    }
    None
}

fn range_flags(total: Option<&TotalLawDocument>, hg: Option<&HgLawDocument>) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(t) = total {
        out.extend(range_flag("K1", &t.k1, t.k1_fixed, K1_PLAUSIBLE));
    }
    if let Some(h) = hg {
        out.extend(range_flag("G", &h.g, h.g_fixed, G_PLAUSIBLE));
    }
    out
}

fn value_sigma(value: f64, variance: f64) -> ValueSigma {
    ValueSigma {
        value,
        sigma: variance.max(0.0).sqrt(),
    }
}

fn law_summary(s: &FitSummary, observations: &[AstrometricObservation]) -> LawSummaryDocument {
    LawSummaryDocument {
        used: s.used_count,
        rejected: s.residuals.len() - s.used_count,
        normalized_rms: s.normalised_rms,
        band_assumed_v: s.residuals.iter().filter(|r| r.band_assumed_v).count(),
        departures: s
            .departures
            .iter()
            .filter_map(|d| {
                let o = observations.get(d.index)?;
                Some(DepartureDocument {
                    obs_time: o.time.utc().to_iso8601(3),
                    station: o.station.clone(),
                    brighter_by_mag: d.brighter_by_mag,
                    significance_sigma: d.significance_sigma,
                })
            })
            .collect(),
    }
}

/// Fits both laws to `magnitudes` at the geometry of `fit`. None when no
/// observation carries a magnitude.
pub fn brightness(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    observations: &[AstrometricObservation],
    magnitudes: &[MagnitudeRecord],
    settings: &PhotometrySettings,
) -> Option<BrightnessDocument> {
    if magnitudes.is_empty() {
        return None;
    }
    let mut problems = Vec::new();
    // A band without a known offset to V would bias the law by up to a
    // magnitude: those measurements are left out, and counted.
    let (magnitudes, unknown): (Vec<&MagnitudeRecord>, Vec<&MagnitudeRecord>) = magnitudes
        .iter()
        .partition(|m| m.band.as_deref().is_none_or(|b| v_offset_mag(b).is_some()));
    if !unknown.is_empty() {
        let mut bands: Vec<&str> = unknown.iter().filter_map(|m| m.band.as_deref()).collect();
        bands.sort_unstable();
        bands.dedup();
        problems.push(format!(
            "{} magnitudes left out: no known offset to V for band(s) {}",
            unknown.len(),
            bands.join(", ")
        ));
    }
    let points: Vec<PredictionPoint> = magnitudes
        .iter()
        .filter_map(|m| observations.get(m.index))
        .map(|o| PredictionPoint {
            time: o.time,
            observer: o.observer,
        })
        .collect();
    let places = match predict_places(ephemeris, fit, &points, &PredictSettings::default()) {
        Ok(p) => p,
        Err(e) => {
            problems.push(format!("the geometry of the measurements: {e}"));
            return Some(BrightnessDocument {
                measurements: magnitudes.len() + unknown.len(),
                total: None,
                hg: None,
                problems,
                preferred: None,
                law: None,
                range_flags: Vec::new(),
            });
        }
    };
    let data: Vec<MagnitudeMeasurement> = magnitudes
        .iter()
        .zip(&places)
        .map(|(m, p)| MagnitudeMeasurement {
            index: m.index,
            mag: m.mag,
            band: m.band.clone(),
            sigma_mag: m.sigma_mag,
            r_au: p.r_au,
            delta_au: p.delta_au,
            phase_rad: p.phase_rad,
        })
        .collect();

    let total = match fit_total_magnitude(&data, K1Choice::Free, settings) {
        Err(e @ (PhotometryError::RadiusSpan { .. } | PhotometryError::Singular)) => {
            problems.push(format!(
                "total-magnitude law: {e}; K1 fixed at {}",
                settings.inert_k1
            ));
            fit_total_magnitude(&data, K1Choice::Fixed(settings.inert_k1), settings)
        }
        other => other,
    };
    let total = match total {
        Ok(t) => Some(t),
        Err(e) => {
            problems.push(format!("total-magnitude law: {e}"));
            None
        }
    };
    let hg = match fit_hg(&data, GChoice::auto(), settings) {
        Ok(h) => Some(h),
        Err(e) => {
            problems.push(format!("(H, G) law: {e}"));
            None
        }
    };
    // The law that describes the data better (smaller normalised RMS):
    // the total law for an active body, (H, G) for an inert one.
    let preferred = match (&total, &hg) {
        (Some(t), Some(h)) if h.summary.normalised_rms < t.summary.normalised_rms => Some("hg"),
        (Some(_), _) => Some("total"),
        (None, Some(_)) => Some("hg"),
        (None, None) => None,
    };
    let law = match preferred {
        Some("total") => total.as_ref().map(|t| t.law()),
        Some(_) => hg.as_ref().map(|h| h.law()),
        None => None,
    };
    let total = total.map(|t| TotalLawDocument {
        m1: value_sigma(t.m1, t.covariance[(0, 0)]),
        k1: value_sigma(t.k1, t.covariance[(1, 1)]),
        k1_fixed: t.k1_fixed,
        activity_sigma: t.activity.map(|a| a.significance_sigma),
        summary: law_summary(&t.summary, observations),
    });
    let hg = hg.map(|h| HgLawDocument {
        h: value_sigma(h.h, h.covariance[(0, 0)]),
        g: value_sigma(h.g, h.covariance[(1, 1)]),
        g_fixed: h.g_fixed,
        summary: law_summary(&h.summary, observations),
    });
    Some(BrightnessDocument {
        measurements: magnitudes.len() + unknown.len(),
        range_flags: range_flags(total.as_ref(), hg.as_ref()),
        total,
        hg,
        problems,
        preferred,
        law,
    })
}
