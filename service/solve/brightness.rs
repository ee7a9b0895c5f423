//! The body's brightness against the fitted orbit: both brightness laws of
//! [`crate::fit::photometry`] fitted to the magnitudes that came with the
//! astrometry, at the geometry (r, Delta, phase) of the recommended orbit.
//!
//! The total-magnitude law (M1, K1) is the one for an active body; the
//! (H, G) law the one for an inert body; both are reported because the
//! question of which the body is, is part of what the analyst asks.
//! Measurements much brighter than a law are listed as departures
//! (outburst candidates).
//!
//! Activity: a K1 far from the inert 5 is flagged only when the total law
//! is the better description of the magnitudes. The total law has no phase
//! term, so an inert body whose phase angle changes with its distance from
//! the Sun has that phase darkening folded into K1: the inert invented
//! body of the fixtures (0.035 mag/deg of phase) gets K1 = -0.2, "60 sigma
//! from 5", while the (H, G) law fits it five times better. When the
//! (H, G) fit itself failed, it stands in with G fixed at the edges of
//! what small bodies show and at the IAU default: if any of those
//! describes the magnitudes as well as the total law, phase alone could
//! explain them and the flag is withheld.

use serde::Serialize;

use crate::astro::ephemeris::Ephemeris;
use crate::fit::lsq::OrbitFit;
use crate::fit::observe::AstrometricObservation;
use crate::fit::photometry::{
    fit_hg, fit_total_magnitude, v_offset_mag, FitSummary, GChoice, HgFit, K1Choice, MagnitudeLaw,
    MagnitudeMeasurement, PhotometryError, PhotometrySettings, TotalMagnitudeFit,
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
    /// |K1 - 5| / sigma(K1), when K1 is free and far from inert and the
    /// total law is the preferred one (see the module notes: otherwise
    /// phase darkening alone can put K1 far from 5).
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
    /// Whether a failure of the (H, G) fit (a problem starting with
    /// [`HG_PROBLEM`]) bears on the answer: the total law is missing, or
    /// an (H, G) law with a fixed G fits as well as the total law, so the
    /// (H, G) law might have been the preferred one. The report leaves the
    /// failure out otherwise; the JSON keeps it in `problems`.
    #[serde(skip)]
    pub hg_failure_matters: bool,
}

/// How every problem of the (H, G) fit begins, so that the report can
/// tell it from the others.
pub const HG_PROBLEM: &str = "(H, G) law: ";

/// G values an inert body's phase darkening is tried with when the (H, G)
/// fit with its own G failed: the ends of [`G_PLAUSIBLE`] (the steepest
/// and the flattest phase curves small bodies show) and the IAU default.
const STAND_IN_G: [f64; 3] = [
    G_PLAUSIBLE.0,
    crate::fit::photometry::DEFAULT_G,
    G_PLAUSIBLE.1,
];

/// Whether an (H, G) law with a fixed G describes `data` at least as well
/// (normalised RMS) as the total law's `total_rms`: then phase darkening
/// alone could account for what the total law reads as K1. A stand-in
/// that cannot be fitted is no evidence either way and counts as no.
fn phase_alone_fits_as_well(
    data: &[MagnitudeMeasurement],
    total_rms: f64,
    settings: &PhotometrySettings,
) -> bool {
    STAND_IN_G.iter().any(|&g| {
        fit_hg(data, GChoice::Fixed(g), settings)
            .is_ok_and(|h| h.summary.normalised_rms <= total_rms)
    })
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
    range_flag_because(
        name,
        v,
        fixed,
        range,
        "most likely too little phase or distance coverage",
    )
}

/// [`range_flag`] with the likeliest reason for a value out of range.
fn range_flag_because(
    name: &str,
    v: &ValueSigma,
    fixed: bool,
    range: (f64, f64),
    likely: &str,
) -> Option<String> {
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
            "{name} = {:.2} +/- {:.2} is outside what small bodies show ({} to {}): the fit is not physical, {likely}",
            v.value, v.sigma, range.0, range.1
        ));
    }
    None
}

fn range_flags(
    total: Option<&TotalLawDocument>,
    hg: Option<&HgLawDocument>,
    preferred: Option<&str>,
) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(t) = total {
        // With (H, G) the better law, the likeliest reason for a K1 out of
        // range is the phase darkening the total law has no term for.
        let likely = if preferred == Some("hg") {
            "most likely because the total law has no phase term and has taken up the phase \
             darkening, which the (H, G) law describes better"
        } else {
            "most likely too little phase or distance coverage"
        };
        out.extend(range_flag_because(
            "K1",
            &t.k1,
            t.k1_fixed,
            K1_PLAUSIBLE,
            likely,
        ));
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
                hg_failure_matters: false,
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
            problems.push(format!("{HG_PROBLEM}{e}"));
            None
        }
    };
    let judged = judge(&data, total.as_ref(), hg.as_ref(), settings);
    let preferred = judged.preferred;
    let law = match preferred {
        Some("total") => total.as_ref().map(|t| t.law()),
        Some(_) => hg.as_ref().map(|h| h.law()),
        None => None,
    };
    let total = total.map(|t| TotalLawDocument {
        m1: value_sigma(t.m1, t.covariance[(0, 0)]),
        k1: value_sigma(t.k1, t.covariance[(1, 1)]),
        k1_fixed: t.k1_fixed,
        activity_sigma: t
            .activity
            .filter(|_| judged.activity_counts)
            .map(|a| a.significance_sigma),
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
        range_flags: range_flags(total.as_ref(), hg.as_ref(), preferred),
        total,
        hg,
        problems,
        preferred,
        law,
        hg_failure_matters: judged.hg_failure_matters,
    })
}

/// Which law describes the magnitudes, and what follows from it.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Judgement {
    /// "total" or "hg": the law with the smaller normalised RMS.
    preferred: Option<&'static str>,
    /// Whether a K1 far from 5 may be read as activity.
    activity_counts: bool,
    /// Whether a failed (H, G) fit bears on the answer.
    hg_failure_matters: bool,
}

fn judge(
    data: &[MagnitudeMeasurement],
    total: Option<&TotalMagnitudeFit>,
    hg: Option<&HgFit>,
    settings: &PhotometrySettings,
) -> Judgement {
    // The law that describes the data better (smaller normalised RMS):
    // the total law for an active body, (H, G) for an inert one.
    let preferred = match (total, hg) {
        (Some(t), Some(h)) if h.summary.normalised_rms < t.summary.normalised_rms => Some("hg"),
        (Some(_), _) => Some("total"),
        (None, Some(_)) => Some("hg"),
        (None, None) => None,
    };
    // Without an (H, G) result, the stand-ins say whether phase alone
    // could have done what the total law attributes to K1, and so whether
    // the (H, G) law might have been preferred had it been fitted.
    let phase_could_explain = match (total, hg) {
        (Some(t), None) => phase_alone_fits_as_well(data, t.summary.normalised_rms, settings),
        _ => false,
    };
    Judgement {
        preferred,
        // Activity is read off K1 only when the total law is the better
        // description: see the module notes.
        activity_counts: preferred == Some("total") && !phase_could_explain,
        hg_failure_matters: hg.is_none() && (total.is_none() || phase_could_explain),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::photometry::predict_mag;

    /// Invented geometry of an inbound body whose phase angle grows as it
    /// nears the Sun (r from 3.5 down to 1.2 au, phase from 5 to 45 deg):
    /// the case where phase darkening and distance from the Sun are tied.
    /// Not a real orbit; the laws only need the three numbers.
    fn inbound(law: MagnitudeLaw) -> Vec<MagnitudeMeasurement> {
        let n = 60;
        (0..n)
            .map(|k| {
                let t = k as f64 / (n - 1) as f64;
                let r_au = 3.5 - 2.3 * t;
                let delta_au = 2.6 - 1.8 * t + 0.1 * (9.0 * t).sin();
                let phase_rad = (5.0 + 40.0 * t).to_radians();
                // A small deterministic scatter, 0.05 mag at most, so the
                // fits have residuals to judge.
                let scatter = 0.05 * (12.9 * k as f64).sin();
                MagnitudeMeasurement {
                    index: k,
                    mag: predict_mag(law, r_au, delta_au, phase_rad) + scatter,
                    band: Some("V".into()),
                    sigma_mag: Some(0.1),
                    r_au,
                    delta_au,
                    phase_rad,
                }
            })
            .collect()
    }

    fn fits(
        data: &[MagnitudeMeasurement],
        settings: &PhotometrySettings,
    ) -> (TotalMagnitudeFit, Result<HgFit, PhotometryError>) {
        let total = fit_total_magnitude(data, K1Choice::Free, settings).expect("the total law");
        (total, fit_hg(data, GChoice::auto(), settings))
    }

    /// An inert body (H = 16, G = 0.15: the IAU default of Bowell et al.
    /// 1989) seen at a phase angle that grows as it nears the Sun: the
    /// total law, which has no phase term, reads the phase darkening as a
    /// K1 far from 5, and photometry.rs flags it. The flag must not reach
    /// the document, with the (H, G) fit or without it.
    #[test]
    fn phase_darkening_is_not_read_as_activity() {
        let settings = PhotometrySettings::default();
        let data = inbound(MagnitudeLaw::Hg { h: 16.0, g: 0.15 });
        let (total, hg) = fits(&data, &settings);
        let hg = hg.expect("the (H, G) law fits the body it made");
        assert!(
            total.activity.is_some(),
            "the premise: K1 = {} is flagged by the total law alone",
            total.k1
        );
        let j = judge(&data, Some(&total), Some(&hg), &settings);
        assert_eq!(j.preferred, Some("hg"));
        assert!(!j.activity_counts);
        // The (H, G) fit failed: its stand-ins with a fixed G fit as well,
        // so the flag is withheld and the failure is worth a note.
        let j = judge(&data, Some(&total), None, &settings);
        assert_eq!(j.preferred, Some("total"));
        assert!(!j.activity_counts);
        assert!(j.hg_failure_matters);
    }

    /// An active body (K1 = 10, the fixtures' law; M1 = 12.5) on the same
    /// path: the total law fits best, the flag stands, and the failure of
    /// the (H, G) fit (G runs off, as on the fixtures) is not worth a note.
    #[test]
    fn a_steep_brightening_is_read_as_activity() {
        let settings = PhotometrySettings::default();
        let data = inbound(MagnitudeLaw::Total { m1: 12.5, k1: 10.0 });
        let (total, hg) = fits(&data, &settings);
        assert!(total.activity.is_some(), "K1 = {}", total.k1);
        let j = judge(&data, Some(&total), hg.as_ref().ok(), &settings);
        assert_eq!(j.preferred, Some("total"));
        assert!(j.activity_counts);
        let j = judge(&data, Some(&total), None, &settings);
        assert!(j.activity_counts);
        assert!(!j.hg_failure_matters);
        // Only the (H, G) law was tried, and it failed: that matters.
        assert!(judge(&data, None, None, &settings).hg_failure_matters);
    }
}
