//! Predictions for a station and a time grid, as the JSON document the
//! `predict` command prints and the API serves, and as tables for a
//! person: the chosen model's places and, beside them, the places averaged
//! over the ladder's models. Units are in the field names; angles in degrees, ellipse axes
//! in arcsec (1 sigma), rates in arcsec per minute.

use serde::Serialize;
use serde_json::Value;
use thiserror::Error;

use crate::astro::ephemeris::Ephemeris;
use crate::astro::forces::{DistanceLaw, ForceModel};
use crate::astro::time::{ScaledInstant, TimeError, TimeScales, UtcTime};
use crate::fit::lsq::OrbitFit;
use crate::fit::mixture::{
    predict_averaged, AveragedPrediction, Candidate, LeftOut, ModelPredictError,
};
use crate::fit::predict::{
    predict_places, EllipseMethod, EllipseSource, PlacePrediction, PredictError, PredictSettings,
    PredictionPoint, SkyEllipse,
};

use super::stored::{converged_fits, model_fit, StoredError};

/// Most grid times one request may ask for.
pub const MAX_GRID_POINTS: usize = 10_000;

const SECONDS_PER_DAY: f64 = 86_400.0;

/// Why a time grid cannot be made.
#[derive(Debug, Error)]
pub enum GridError {
    #[error("the last time {to} is before the first time {from}")]
    EndBeforeStart { from: String, to: String },
    #[error("the step must be a positive number of days, not {step_days}")]
    Step { step_days: f64 },
    #[error(
        "{from} to {to} every {step_days} days is {count} times; at most {MAX_GRID_POINTS} are allowed"
    )]
    TooManyPoints {
        from: String,
        to: String,
        step_days: f64,
        count: f64,
    },
    #[error("{0}")]
    Time(#[from] TimeError),
}

/// `from`, `from + step`, ... up to `to` (included when the steps land on
/// it), on the UTC clock: a step of 1 day keeps the time of day, across
/// leap seconds too.
pub fn utc_grid(
    from: &UtcTime,
    to: &UtcTime,
    step_days: f64,
    scales: &TimeScales,
) -> Result<Vec<ScaledInstant>, GridError> {
    let span_days = (to.mjd() - from.mjd()) as f64
        + (to.seconds_of_day() - from.seconds_of_day()) / SECONDS_PER_DAY;
    if span_days < 0.0 {
        return Err(GridError::EndBeforeStart {
            from: from.to_iso8601(3),
            to: to.to_iso8601(3),
        });
    }
    if !(step_days.is_finite() && step_days > 0.0) {
        return Err(GridError::Step { step_days });
    }
    // A step that lands on `to` to within a microsecond includes it.
    let count = (span_days / step_days + 1e-6 / (step_days * SECONDS_PER_DAY)).floor() + 1.0;
    if count > MAX_GRID_POINTS as f64 {
        return Err(GridError::TooManyPoints {
            from: from.to_iso8601(3),
            to: to.to_iso8601(3),
            step_days,
            count,
        });
    }
    (0..count as usize)
        .map(|k| {
            let utc = if k == 0 {
                *from
            } else {
                let s = from.seconds_of_day() + k as f64 * step_days * SECONDS_PER_DAY;
                let days = (s / SECONDS_PER_DAY).floor();
                UtcTime::from_mjd_seconds(from.mjd() + days as i64, s - days * SECONDS_PER_DAY)?
            };
            Ok(scales.resolve_utc(&utc, None)?)
        })
        .collect()
}

/// A model's places and the model average beside them.
#[derive(Debug, Clone, PartialEq)]
pub struct Predicted {
    /// The model asked for (the recommended one by default).
    pub model: String,
    pub places: Vec<PlacePrediction>,
    pub average: AveragedPrediction,
    pub left_out: Vec<LeftOut>,
}

/// A model's prediction that failed, named.
pub type PredictFailure = ModelPredictError;

/// Predicts from `chosen` and from every candidate that carries weight,
/// and averages the latter (see [`crate::fit::mixture`]). `candidates`
/// are the converged models with their BICs; `chosen` must be one of
/// them. A chosen model that takes part in the average is predicted once.
pub fn predict_with_average(
    ephemeris: &dyn Ephemeris,
    candidates: &[(String, Option<f64>, &OrbitFit)],
    chosen: &str,
    points: &[PredictionPoint],
    settings: &PredictSettings,
) -> Result<Predicted, PredictFailure> {
    let list: Vec<Candidate> = candidates
        .iter()
        .map(|(name, bic, fit)| Candidate {
            name,
            bic: *bic,
            fit,
        })
        .collect();
    let (average, left_out) = predict_averaged(ephemeris, &list, points, settings)?;
    let places = match average.places_of(chosen) {
        Some(p) => p.to_vec(),
        None => {
            let fit = candidates
                .iter()
                .find(|(name, _, _)| name == chosen)
                .map(|(_, _, fit)| *fit)
                .ok_or_else(|| PredictFailure::new(chosen, PredictError::NoCovariance))?;
            predict_places(ephemeris, fit, points, settings)
                .map_err(|source| PredictFailure::new(chosen, source))?
        }
    };
    Ok(Predicted {
        model: chosen.to_string(),
        places,
        average,
        left_out,
    })
}

/// Why a stored solution gives no prediction.
#[derive(Debug, Error)]
pub enum StoredPredictError {
    #[error("{0}")]
    Stored(#[from] StoredError),
    #[error("{0}")]
    Predict(#[from] Box<PredictFailure>),
}

/// [`predict_with_average`] from a stored solution document: `model` by
/// name (the recommended one when None) and the average over every
/// converged model it holds, under the configured gravity and laws.
pub fn predict_stored(
    ephemeris: &dyn Ephemeris,
    document: Option<&Value>,
    model: Option<&str>,
    gravity: &ForceModel,
    laws: &[DistanceLaw],
    points: &[PredictionPoint],
    settings: &PredictSettings,
) -> Result<Predicted, StoredPredictError> {
    let (chosen, _) = model_fit(document, model, gravity, laws)?;
    let fits = converged_fits(document, gravity, laws)?;
    let candidates: Vec<(String, Option<f64>, &OrbitFit)> = fits
        .iter()
        .map(|(name, bic, fit)| (name.clone(), *bic, fit))
        .collect();
    predict_with_average(ephemeris, &candidates, &chosen, points, settings)
        .map_err(|e| StoredPredictError::Predict(Box::new(e)))
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PredictionDocument {
    pub object: String,
    /// The ladder model the places come from.
    pub model: String,
    /// "linear" or "monte-carlo".
    pub method: &'static str,
    /// With the Monte Carlo method: the samples and the seed.
    pub monte_carlo: Option<MonteCarloDocument>,
    pub ephemeris: String,
    pub station: String,
    pub entries: Vec<PredictionEntry>,
    /// The same instants averaged over the ladder's models.
    pub averaged: AveragedDocument,
}

/// Places averaged over the converged models, weights exp(-dBIC/2), the
/// covariance by the law of total variance.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AveragedDocument {
    pub members: Vec<MemberDocument>,
    /// Models that took no part, and why.
    pub left_out: Vec<LeftOutDocument>,
    pub entries: Vec<AveragedEntry>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MemberDocument {
    pub model: String,
    pub delta_bic: f64,
    pub weight: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LeftOutDocument {
    pub model: String,
    pub reason: String,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AveragedEntry {
    pub utc: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// The averaged place minus the model's, (RA cos Dec, Dec).
    pub offset_from_model_arcsec: [f64; 2],
    /// 1 sigma, the models' disagreement included.
    pub ellipse: EllipseDocument,
    /// The semi-major axis of the models' disagreement alone (the spread
    /// of their places about the average), 1 sigma.
    pub between_models_arcsec: f64,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MonteCarloDocument {
    pub samples: usize,
    pub seed: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PredictionEntry {
    pub utc: String,
    pub tdb_jd: f64,
    /// Topocentric astrometric (ICRF), light time included.
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub delta_au: f64,
    pub r_au: f64,
    pub elongation_deg: f64,
    pub phase_deg: f64,
    pub light_time_s: f64,
    pub rates: RatesDocument,
    pub magnitude: Option<f64>,
    pub ellipse: EllipseDocument,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RatesDocument {
    pub ra_cos_dec_arcsec_per_min: f64,
    pub dec_arcsec_per_min: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EllipseDocument {
    pub semi_major_arcsec: f64,
    pub semi_minor_arcsec: f64,
    /// Of the major axis, from north through east.
    pub position_angle_deg: f64,
    /// "linear" or "monte-carlo": which method made this ellipse.
    pub method: &'static str,
    /// Monte Carlo only: the sample mean minus the nominal place,
    /// (RA cos Dec, Dec).
    pub mean_offset_arcsec: Option<[f64; 2]>,
}

fn method_name(method: EllipseMethod) -> &'static str {
    match method {
        EllipseMethod::Linear => "linear",
        EllipseMethod::MonteCarlo { .. } => "monte-carlo",
    }
}

impl PredictionEntry {
    pub fn new(p: &PlacePrediction) -> Self {
        let (method, mean_offset_arcsec) = match p.ellipse_source {
            EllipseSource::Linear => ("linear", None),
            EllipseSource::MonteCarlo {
                mean_offset_arcsec, ..
            } => (
                "monte-carlo",
                Some([mean_offset_arcsec.x, mean_offset_arcsec.y]),
            ),
        };
        Self {
            utc: p.time.utc().to_iso8601(3),
            tdb_jd: p.time.tdb().tdb_jd(),
            ra_deg: p.ra_rad.to_degrees(),
            dec_deg: p.dec_rad.to_degrees(),
            delta_au: p.delta_au,
            r_au: p.r_au,
            elongation_deg: p.elongation_rad.to_degrees(),
            phase_deg: p.phase_rad.to_degrees(),
            light_time_s: p.light_time_days * SECONDS_PER_DAY,
            rates: RatesDocument {
                ra_cos_dec_arcsec_per_min: p.rate_arcsec_per_min.x,
                dec_arcsec_per_min: p.rate_arcsec_per_min.y,
            },
            magnitude: p.magnitude,
            ellipse: ellipse_document(&p.ellipse, method, mean_offset_arcsec),
        }
    }
}

fn ellipse_document(
    e: &SkyEllipse,
    method: &'static str,
    mean_offset: Option<[f64; 2]>,
) -> EllipseDocument {
    EllipseDocument {
        semi_major_arcsec: e.semi_major_arcsec,
        semi_minor_arcsec: e.semi_minor_arcsec,
        position_angle_deg: e.position_angle_deg,
        method,
        mean_offset_arcsec: mean_offset,
    }
}

impl AveragedDocument {
    fn new(p: &Predicted, method: EllipseMethod) -> Self {
        Self {
            members: p
                .average
                .members
                .iter()
                .map(|m| MemberDocument {
                    model: m.name.clone(),
                    delta_bic: m.delta_bic,
                    weight: m.weight,
                })
                .collect(),
            left_out: p
                .left_out
                .iter()
                .map(|l| LeftOutDocument {
                    model: l.name.clone(),
                    reason: l.reason.clone(),
                })
                .collect(),
            entries: p
                .average
                .places
                .iter()
                .zip(&p.places)
                .map(|(a, m)| {
                    let offset = m.offset_arcsec(a.ra_rad, a.dec_rad);
                    AveragedEntry {
                        utc: m.time.utc().to_iso8601(3),
                        ra_deg: a.ra_rad.to_degrees(),
                        dec_deg: a.dec_rad.to_degrees(),
                        offset_from_model_arcsec: [offset.x, offset.y],
                        ellipse: ellipse_document(&a.ellipse, method_name(method), None),
                        between_models_arcsec: SkyEllipse::from_covariance(
                            a.between_models_arcsec2,
                        )
                        .semi_major_arcsec,
                    }
                })
                .collect(),
        }
    }
}

impl PredictionDocument {
    pub fn new(
        object: &str,
        predicted: &Predicted,
        method: EllipseMethod,
        ephemeris: &str,
        station: &str,
    ) -> Self {
        let places = &predicted.places;
        Self {
            averaged: AveragedDocument::new(predicted, method),
            object: object.to_string(),
            model: predicted.model.clone(),
            method: method_name(method),
            monte_carlo: match method {
                EllipseMethod::Linear => None,
                EllipseMethod::MonteCarlo { samples, seed } => {
                    Some(MonteCarloDocument { samples, seed })
                }
            },
            ephemeris: ephemeris.to_string(),
            station: station.to_string(),
            entries: places.iter().map(PredictionEntry::new).collect(),
        }
    }

    /// The document as tables for a person: the model's places, then
    /// the same instants averaged over the models.
    pub fn text(&self) -> String {
        use std::fmt::Write;
        let mut out = String::new();
        let method = match self.monte_carlo {
            None => "linear covariance map".to_string(),
            Some(mc) => format!("Monte Carlo, {} samples, seed {}", mc.samples, mc.seed),
        };
        let _ = writeln!(
            out,
            "{}: model {}, station {}\nephemeris: {}\nellipses: 1 sigma, {method}\n",
            self.object, self.model, self.station, self.ephemeris
        );
        let magnitudes = self.entries.iter().any(|e| e.magnitude.is_some());
        // Two heading lines: what, then the unit.
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>9} {:>9} {:>10} {:>6} {:>10} {:>9} {:>8} {:>8} {:>8}{}",
            "time",
            "RA",
            "Dec",
            "from obs.",
            "from Sun",
            "elongation",
            "phase",
            "motion RA",
            "motion",
            "ellipse",
            "ellipse",
            "ellipse",
            if magnitudes { "  predicted" } else { "" }
        );
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>9} {:>9} {:>10} {:>6} {:>10} {:>9} {:>8} {:>8} {:>8}{}",
            "(UTC)",
            "(deg)",
            "(deg)",
            "(au)",
            "(au)",
            "(deg)",
            "(deg)",
            "cosDec",
            "Dec",
            "major",
            "minor",
            "PA (deg)",
            if magnitudes { "  mag (V)" } else { "" }
        );
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>9} {:>9} {:>10} {:>6} {:>10} {:>9} {:>8} {:>8} {:>8}",
            "", "", "", "", "", "", "", "(\"/min)", "(\"/min)", "(\")", "(\")", ""
        );
        for e in &self.entries {
            let _ = write!(
                out,
                "{:<24} {:>11.6} {:>+11.6} {:>9.5} {:>9.5} {:>10.2} {:>6.2} {:>+10.4} {:>+9.4} {:>8.3} {:>8.3} {:>8.1}",
                e.utc,
                e.ra_deg,
                e.dec_deg,
                e.delta_au,
                e.r_au,
                e.elongation_deg,
                e.phase_deg,
                e.rates.ra_cos_dec_arcsec_per_min,
                e.rates.dec_arcsec_per_min,
                e.ellipse.semi_major_arcsec,
                e.ellipse.semi_minor_arcsec,
                e.ellipse.position_angle_deg
            );
            if let Some(m) = e.magnitude {
                let _ = write!(out, " {m:>10.2}");
            }
            out.push('\n');
        }
        let a = &self.averaged;
        let members: Vec<String> = a
            .members
            .iter()
            .map(|m| {
                if m.weight < 0.005 {
                    format!("{} <1%", m.model)
                } else {
                    format!("{} {:.0}%", m.model, 100.0 * m.weight)
                }
            })
            .collect();
        let _ = writeln!(
            out,
            "\nAveraged over the models the data allow (weights from BIC differences): {}",
            members.join(", ")
        );
        for l in &a.left_out {
            let _ = writeln!(out, "  left out: {} ({})", l.model, l.reason);
        }
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>10} {:>10} {:>8} {:>8} {:>8} {:>10}",
            "time",
            "RA",
            "Dec",
            "from model",
            "from model",
            "ellipse",
            "ellipse",
            "ellipse",
            "models'"
        );
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>10} {:>10} {:>8} {:>8} {:>8} {:>10}",
            "(UTC)",
            "(deg)",
            "(deg)",
            "RAcosDec",
            "Dec (\")",
            "major",
            "minor",
            "PA (deg)",
            "spread (\")"
        );
        for e in &a.entries {
            let _ = writeln!(
                out,
                "{:<24} {:>11.6} {:>+11.6} {:>+10.3} {:>+10.3} {:>8.3} {:>8.3} {:>8.1} {:>10.3}",
                e.utc,
                e.ra_deg,
                e.dec_deg,
                e.offset_from_model_arcsec[0],
                e.offset_from_model_arcsec[1],
                e.ellipse.semi_major_arcsec,
                e.ellipse.semi_minor_arcsec,
                e.ellipse.position_angle_deg,
                e.between_models_arcsec
            );
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn utc(text: &str) -> UtcTime {
        UtcTime::parse_iso8601(text).unwrap()
    }

    #[test]
    fn grid_keeps_the_clock_time_and_includes_the_end() {
        let g = utc_grid(
            &utc("2026-09-01T06:00:00Z"),
            &utc("2026-09-03T06:00:00Z"),
            0.5,
            TimeScales::builtin(),
        )
        .unwrap();
        let texts: Vec<String> = g.iter().map(|t| t.utc().to_iso8601(0)).collect();
        assert_eq!(
            texts,
            [
                "2026-09-01T06:00:00Z",
                "2026-09-01T18:00:00Z",
                "2026-09-02T06:00:00Z",
                "2026-09-02T18:00:00Z",
                "2026-09-03T06:00:00Z"
            ]
        );
    }

    #[test]
    fn a_grid_across_a_leap_second_stays_on_the_clock() {
        // 2016-12-31 had a leap second (IERS Bulletin C 52; memory): the
        // day is 86 401 s long, but the grid steps the UTC clock.
        let g = utc_grid(
            &utc("2016-12-31T12:00:00Z"),
            &utc("2017-01-01T12:00:00Z"),
            1.0,
            TimeScales::builtin(),
        )
        .unwrap();
        assert_eq!(g.len(), 2);
        assert_eq!(g[1].utc().to_iso8601(0), "2017-01-01T12:00:00Z");
        let elapsed_s = g[1].tdb().days_since(g[0].tdb()) * SECONDS_PER_DAY;
        assert!((elapsed_s - 86_401.0).abs() < 1e-3, "{elapsed_s}");
    }

    #[test]
    fn bad_grids_say_why() {
        let s = TimeScales::builtin();
        let (a, b) = (utc("2026-09-01T00:00:00Z"), utc("2026-09-02T00:00:00Z"));
        assert!(matches!(
            utc_grid(&b, &a, 1.0, s),
            Err(GridError::EndBeforeStart { .. })
        ));
        for step in [0.0, -1.0, f64::NAN] {
            assert!(matches!(
                utc_grid(&a, &b, step, s),
                Err(GridError::Step { .. })
            ));
        }
        let err = utc_grid(&a, &b, 1e-5, s).unwrap_err();
        assert!(
            err.to_string().contains("100001 times; at most 10000"),
            "{err}"
        );
        assert_eq!(utc_grid(&a, &a, 1.0, s).unwrap().len(), 1);
    }
}
