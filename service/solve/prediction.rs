//! Predictions for a station and a time grid, as the JSON document the
//! `predict` command prints (and the API will serve) and as a table for a
//! person. Units are in the field names; angles in degrees, ellipse axes
//! in arcsec (1 sigma), rates in arcsec per minute.

use serde::Serialize;
use thiserror::Error;

use crate::astro::time::{ScaledInstant, TimeError, TimeScales, UtcTime};
use crate::fit::predict::{EllipseMethod, EllipseSource, PlacePrediction};

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
            ellipse: EllipseDocument {
                semi_major_arcsec: p.ellipse.semi_major_arcsec,
                semi_minor_arcsec: p.ellipse.semi_minor_arcsec,
                position_angle_deg: p.ellipse.position_angle_deg,
                method,
                mean_offset_arcsec,
            },
        }
    }
}

impl PredictionDocument {
    pub fn new(
        object: &str,
        model: &str,
        method: EllipseMethod,
        ephemeris: &str,
        station: &str,
        places: &[PlacePrediction],
    ) -> Self {
        Self {
            object: object.to_string(),
            model: model.to_string(),
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

    /// The document as a table for a person.
    pub fn text(&self) -> String {
        use std::fmt::Write;
        let mut out = String::new();
        let method = match self.monte_carlo {
            None => "linear covariance map".to_string(),
            Some(mc) => format!("Monte Carlo, {} samples, seed {}", mc.samples, mc.seed),
        };
        let _ = writeln!(
            out,
            "{}: model {}, station {}\nephemeris: {}\nellipse: 1 sigma, {method}\n",
            self.object, self.model, self.station, self.ephemeris
        );
        let _ = writeln!(
            out,
            "{:<24} {:>11} {:>11} {:>9} {:>9} {:>7} {:>6} {:>9} {:>9} {:>9} {:>9} {:>6}{}",
            "UTC",
            "RA deg",
            "Dec deg",
            "delta au",
            "r au",
            "elong",
            "phase",
            "dRA\"/min",
            "dDec\"/min",
            "a arcsec",
            "b arcsec",
            "PA",
            if self.entries.iter().any(|e| e.magnitude.is_some()) {
                "    mag"
            } else {
                ""
            }
        );
        for e in &self.entries {
            let _ = write!(
                out,
                "{:<24} {:>11.6} {:>+11.6} {:>9.5} {:>9.5} {:>7.2} {:>6.2} {:>+9.4} {:>+9.4} {:>9.3} {:>9.3} {:>6.1}",
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
                let _ = write!(out, " {m:>6.2}");
            }
            out.push('\n');
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
