//! Observation weights: one 2 x 2 covariance of (RA cos Dec, Dec) per
//! observation, in arcsec^2.
//!
//! Built in this order:
//! 1. the stated sigmas, else the station's default, else
//!    [`WeightSettings::fallback_sigma_arcsec`] (1 arcsec, the unit weight
//!    of Vereš et al. 2017, Icarus 296, 139);
//! 2. each sigma raised to the floor;
//! 3. optionally, every sigma of a station's night inflated by sqrt(N / 4)
//!    when the night holds N > 4 observations (Vereš et al. 2017; memory),
//!    because many positions from one telescope in one night share errors.
//!    A night is a maximal run of one station's observations, in time
//!    order, in which each follows the previous by less than
//!    [`WeightSettings::night_gap_hours`] (12 h): a chain, so a station
//!    observing round the clock forms one long "night";
//! 4. the correlation gives the off-diagonal term;
//! 5. a stated time uncertainty adds sigma_t^2 w w^T, w the sky-plane
//!    rate of motion (arcsec/s): a time error shifts the position along
//!    the direction of motion only.

use std::collections::HashMap;

use nalgebra::{Matrix2, Vector2};
use thiserror::Error;

use super::observe::AstrometricObservation;

#[derive(Debug, Clone, PartialEq)]
pub struct WeightSettings {
    /// Smallest sigma accepted, arcsec.
    pub floor_arcsec: f64,
    /// Sigma for observations with none stated and no station default.
    pub fallback_sigma_arcsec: f64,
    /// Per-station sigma for observations that state none, arcsec.
    pub station_sigma_arcsec: HashMap<String, f64>,
    /// Inflate crowded nights by sqrt(N / 4).
    pub night_inflation: bool,
    /// Largest gap inside one night, hours.
    pub night_gap_hours: f64,
    /// Nights with more observations than this are inflated.
    pub night_free_count: usize,
}

impl Default for WeightSettings {
    fn default() -> Self {
        Self {
            floor_arcsec: 0.05,
            fallback_sigma_arcsec: 1.0,
            station_sigma_arcsec: HashMap::new(),
            night_inflation: true,
            night_gap_hours: 12.0,
            night_free_count: 4,
        }
    }
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum WeightError {
    #[error("observation {index} ({station}): {what} = {value} is not a positive number")]
    BadSigma {
        index: usize,
        station: String,
        what: &'static str,
        value: f64,
    },
    #[error("observation {index} ({station}): correlation {value} is outside (-1, 1)")]
    BadCorrelation {
        index: usize,
        station: String,
        value: f64,
    },
    #[error("{count} sky-plane rates for {observations} observations")]
    RateCount { count: usize, observations: usize },
}

/// The sqrt(N / 4) factor of every observation (1 outside crowded nights).
pub fn night_factors(
    observations: &[AstrometricObservation],
    settings: &WeightSettings,
) -> Vec<f64> {
    let mut factors = vec![1.0; observations.len()];
    if !settings.night_inflation {
        return factors;
    }
    let mut by_station: HashMap<&str, Vec<usize>> = HashMap::new();
    for (i, o) in observations.iter().enumerate() {
        by_station.entry(o.station.as_str()).or_default().push(i);
    }
    let gap_days = settings.night_gap_hours / 24.0;
    let free = settings.night_free_count.max(1);
    for mut indices in by_station.into_values() {
        indices.sort_by(|a, b| {
            let ta = observations[*a].time.tdb();
            let tb = observations[*b].time.tdb();
            ta.partial_cmp(&tb).unwrap_or(std::cmp::Ordering::Equal)
        });
        let mut start = 0;
        for end in 1..=indices.len() {
            let closes = end == indices.len() || {
                let prev = observations[indices[end - 1]].time.tdb();
                let next = observations[indices[end]].time.tdb();
                next.days_since(prev) >= gap_days
            };
            if closes {
                let n = end - start;
                if n > free {
                    let factor = (n as f64 / free as f64).sqrt();
                    for &i in &indices[start..end] {
                        factors[i] = factor;
                    }
                }
                start = end;
            }
        }
    }
    factors
}

/// Covariances (arcsec^2) of all observations; `rates_arcsec_per_s` are
/// the sky-plane rates of the current orbit, one per observation.
pub fn covariances(
    observations: &[AstrometricObservation],
    rates_arcsec_per_s: &[Vector2<f64>],
    settings: &WeightSettings,
) -> Result<Vec<Matrix2<f64>>, WeightError> {
    if rates_arcsec_per_s.len() != observations.len() {
        return Err(WeightError::RateCount {
            count: rates_arcsec_per_s.len(),
            observations: observations.len(),
        });
    }
    let factors = night_factors(observations, settings);
    observations
        .iter()
        .zip(rates_arcsec_per_s)
        .zip(factors)
        .enumerate()
        .map(|(index, ((o, rate), factor))| {
            let bad = |what: &'static str, value: f64| WeightError::BadSigma {
                index,
                station: o.station.clone(),
                what,
                value,
            };
            let default = settings
                .station_sigma_arcsec
                .get(&o.station)
                .copied()
                .unwrap_or(settings.fallback_sigma_arcsec);
            let pick = |stated: Option<f64>, what| match stated {
                Some(s) if s.is_finite() && s > 0.0 => Ok(s),
                Some(s) => Err(bad(what, s)),
                None if default.is_finite() && default > 0.0 => Ok(default),
                None => Err(bad("default sigma", default)),
            };
            let sigma_ra = pick(o.sigma_ra_arcsec, "rmsRA")?.max(settings.floor_arcsec) * factor;
            let sigma_dec = pick(o.sigma_dec_arcsec, "rmsDec")?.max(settings.floor_arcsec) * factor;
            if !(o.correlation.is_finite() && o.correlation.abs() < 1.0) {
                return Err(WeightError::BadCorrelation {
                    index,
                    station: o.station.clone(),
                    value: o.correlation,
                });
            }
            let off = o.correlation * sigma_ra * sigma_dec;
            let mut covariance = Matrix2::new(sigma_ra * sigma_ra, off, off, sigma_dec * sigma_dec);
            if let Some(st) = o.sigma_time_s {
                if !(st.is_finite() && st >= 0.0) {
                    return Err(bad("rmsTime", st));
                }
                covariance += rate * rate.transpose() * (st * st);
            }
            Ok(covariance)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::time::Epoch;
    use crate::fit::test_support::shell;

    /// Arithmetic only.
    const EXACT: f64 = 1e-12;

    fn at_hours(hours: f64, station: &str) -> AstrometricObservation {
        shell(
            Epoch::from_tdb_days_since_j2000(9000.0 + hours / 24.0),
            station,
            10.0,
        )
    }

    #[test]
    fn stated_default_and_fallback_sigmas() {
        let mut a = at_hours(0.0, "ZQA");
        a.sigma_ra_arcsec = Some(0.3);
        a.sigma_dec_arcsec = Some(0.4);
        a.correlation = 0.5;
        let mut b = at_hours(1.0, "ZQB");
        b.sigma_ra_arcsec = None;
        b.sigma_dec_arcsec = None;
        let mut c = at_hours(2.0, "ZQC");
        c.sigma_ra_arcsec = Some(0.01);
        c.sigma_dec_arcsec = None;
        let mut settings = WeightSettings::default();
        settings.station_sigma_arcsec.insert("ZQB".into(), 0.4);
        let cov = covariances(&[a, b, c], &[Vector2::zeros(); 3], &settings).unwrap();
        // Expected values: the definitions in the module header.
        assert!((cov[0] - Matrix2::new(0.09, 0.06, 0.06, 0.16)).norm() < EXACT);
        assert!((cov[1] - Matrix2::new(0.16, 0.0, 0.0, 0.16)).norm() < EXACT);
        assert!((cov[2] - Matrix2::new(0.0025, 0.0, 0.0, 1.0)).norm() < EXACT);
    }

    #[test]
    fn timing_error_lies_along_the_motion() {
        let mut a = at_hours(0.0, "ZQA");
        a.sigma_time_s = Some(2.0);
        let rate = Vector2::new(0.3, 0.4); // 0.5 arcsec/s
        let cov = covariances(&[a], &[rate], &WeightSettings::default()).unwrap();
        // sigma^2 I + (2 s)^2 w w^T.
        let expected = Matrix2::new(0.25 + 0.36, 0.48, 0.48, 0.25 + 0.64);
        assert!((cov[0] - expected).norm() < EXACT, "{}", cov[0]);
    }

    #[test]
    fn crowded_nights_are_inflated() {
        // Six from ZQA within 5 hours, then a gap of 20 h and two more; four
        // from ZQB in the same hours (not crowded).
        let mut obs: Vec<_> = (0..6).map(|i| at_hours(i as f64, "ZQA")).collect();
        obs.push(at_hours(25.0, "ZQA"));
        obs.push(at_hours(26.0, "ZQA"));
        obs.extend((0..4).map(|i| at_hours(i as f64 + 0.5, "ZQB")));
        let factors = night_factors(&obs, &WeightSettings::default());
        let crowded = (6.0_f64 / 4.0).sqrt();
        for (i, f) in factors.iter().enumerate() {
            let expected = if i < 6 { crowded } else { 1.0 };
            assert!((f - expected).abs() < EXACT, "observation {i}: {f}");
        }
        let off = WeightSettings {
            night_inflation: false,
            ..WeightSettings::default()
        };
        assert!(night_factors(&obs, &off).iter().all(|f| *f == 1.0));
    }

    #[test]
    fn bad_uncertainties_are_refused() {
        let mut a = at_hours(0.0, "ZQA");
        a.sigma_dec_arcsec = Some(-1.0);
        let err = covariances(&[a], &[Vector2::zeros()], &WeightSettings::default()).unwrap_err();
        assert!(err.to_string().contains("rmsDec"), "{err}");
        let mut b = at_hours(0.0, "ZQA");
        b.correlation = 1.0;
        assert!(covariances(&[b], &[Vector2::zeros()], &WeightSettings::default()).is_err());
    }
}
