//! The place a month after the arc, seen from the geocentre, under each
//! model and averaged over them: how far the orbit can be trusted ahead,
//! and what the non-gravitational terms cost in pointing. With it, the
//! averaged place on the nights between (one integration per model for
//! all of them): what an observer points at next.
//!
//! The geocentre stands for every station: over a month the ellipse's
//! size depends on the geometry far more than on a few thousand km of
//! parallax.

use nalgebra::Vector3;
use serde::Serialize;

use crate::astro::ephemeris::Ephemeris;
use crate::astro::observer::ObserverPosition;
use crate::astro::time::TimeScales;
use crate::fit::predict::{PredictSettings, PredictionPoint};

use super::prediction::predict_with_average;
use super::Solution;

/// Days after the last observation the outlook looks.
pub const OUTLOOK_DAYS: f64 = 30.0;

/// The days after the last observation the averaged place is given for:
/// every night of the first week, then sparser out to the outlook.
pub const AHEAD_DAYS: [f64; 10] = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 14.0, 21.0, OUTLOOK_DAYS];

/// The model-averaged geocentric place some days after the arc.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AheadPlace {
    pub days_after_arc: f64,
    pub utc: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// The averaged 1-sigma ellipse (the models' disagreement included).
    pub semi_major_arcsec: f64,
    pub semi_minor_arcsec: f64,
    /// Of the major axis, from north through east, degrees.
    pub position_angle_deg: f64,
    /// The models' disagreement alone: the square root of the larger
    /// eigenvalue of the between-models part of the covariance.
    pub between_models_arcsec: f64,
}

/// One model's 1-sigma ellipse at the outlook time.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelEllipse {
    pub model: String,
    pub semi_major_arcsec: f64,
    pub semi_minor_arcsec: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Outlook {
    pub days_after_arc: f64,
    pub utc: String,
    /// Every converged model with a covariance that carried weight in
    /// the average, and gravity alone whatever its weight.
    pub models: Vec<ModelEllipse>,
    /// The model average's ellipse (the models' disagreement included).
    pub averaged: ModelEllipse,
    /// The averaged place at each of [`AHEAD_DAYS`], the last being the
    /// outlook's own time.
    pub ahead: Vec<AheadPlace>,
}

impl Outlook {
    pub fn of(&self, model: &str) -> Option<&ModelEllipse> {
        self.models.iter().find(|m| m.model == model)
    }
}

/// The outlook of a solution, or why there is none.
pub fn outlook(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    solution: &Solution,
    settings: &PredictSettings,
) -> Result<Outlook, String> {
    let ladder = &solution.ladder;
    let chosen = ladder
        .recommended_model()
        .ok_or("no model is recommended")?
        .name();
    let candidates = ladder.converged_models();
    let points = AHEAD_DAYS
        .iter()
        .map(|d| {
            Ok(PredictionPoint {
                time: scales
                    .resolve_tdb(solution.last.plus_days(*d), None)
                    .map_err(|e| e.to_string())?,
                observer: ObserverPosition::GeocentricIcrf {
                    position_km: Vector3::zeros(),
                    velocity_km_s: None,
                },
            })
        })
        .collect::<Result<Vec<_>, String>>()?;
    // The outlook's own time is the last of the days ahead.
    let last = points.len() - 1;
    let time = points[last].time;
    let predicted = predict_with_average(ephemeris, &candidates, &chosen, &points, settings)
        .map_err(|e| e.to_string())?;
    let mut models: Vec<ModelEllipse> = predicted
        .average
        .members
        .iter()
        .zip(&predicted.average.member_places)
        .map(|(m, p)| ModelEllipse {
            model: m.name.clone(),
            semi_major_arcsec: p[last].ellipse.semi_major_arcsec,
            semi_minor_arcsec: p[last].ellipse.semi_minor_arcsec,
        })
        .collect();
    // Gravity alone is the yardstick of the cost, weight or none.
    if !models.iter().any(|m| m.model == "gravity") {
        if let Some((_, _, fit)) = candidates.iter().find(|(n, _, _)| n == "gravity") {
            if fit.covariance.is_some() {
                let g =
                    crate::fit::predict::predict_places(ephemeris, fit, &points[last..], settings)
                        .map_err(|e| format!("gravity: {e}"))?;
                models.push(ModelEllipse {
                    model: "gravity".into(),
                    semi_major_arcsec: g[0].ellipse.semi_major_arcsec,
                    semi_minor_arcsec: g[0].ellipse.semi_minor_arcsec,
                });
            }
        }
    }
    let a = predicted
        .average
        .places
        .get(last)
        .ok_or("the average has no place")?;
    let ahead = AHEAD_DAYS
        .iter()
        .zip(&points)
        .zip(&predicted.average.places)
        .map(|((d, p), a)| AheadPlace {
            days_after_arc: *d,
            utc: p.time.utc().to_iso8601(0),
            ra_deg: a.ra_rad.to_degrees().rem_euclid(360.0),
            dec_deg: a.dec_rad.to_degrees(),
            semi_major_arcsec: a.ellipse.semi_major_arcsec,
            semi_minor_arcsec: a.ellipse.semi_minor_arcsec,
            position_angle_deg: a.ellipse.position_angle_deg,
            between_models_arcsec: a
                .between_models_arcsec2
                .symmetric_eigenvalues()
                .max()
                .max(0.0)
                .sqrt(),
        })
        .collect();
    Ok(Outlook {
        days_after_arc: OUTLOOK_DAYS,
        utc: time.utc().to_iso8601(0),
        models,
        averaged: ModelEllipse {
            model: "averaged".into(),
            semi_major_arcsec: a.ellipse.semi_major_arcsec,
            semi_minor_arcsec: a.ellipse.semi_minor_arcsec,
        },
        ahead,
    })
}
