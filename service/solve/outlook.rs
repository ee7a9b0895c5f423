//! The place a month after the arc, seen from the geocentre, under each
//! model and averaged over them: how far the orbit can be trusted ahead,
//! and what the non-gravitational terms cost in pointing.
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
    let time = scales
        .resolve_tdb(solution.last.plus_days(OUTLOOK_DAYS), None)
        .map_err(|e| e.to_string())?;
    let points = [PredictionPoint {
        time,
        observer: ObserverPosition::GeocentricIcrf {
            position_km: Vector3::zeros(),
            velocity_km_s: None,
        },
    }];
    let predicted = predict_with_average(ephemeris, &candidates, &chosen, &points, settings)
        .map_err(|e| e.to_string())?;
    let mut models: Vec<ModelEllipse> = predicted
        .average
        .members
        .iter()
        .zip(&predicted.average.member_places)
        .map(|(m, p)| ModelEllipse {
            model: m.name.clone(),
            semi_major_arcsec: p[0].ellipse.semi_major_arcsec,
            semi_minor_arcsec: p[0].ellipse.semi_minor_arcsec,
        })
        .collect();
    // Gravity alone is the yardstick of the cost, weight or none.
    if !models.iter().any(|m| m.model == "gravity") {
        if let Some((_, _, fit)) = candidates.iter().find(|(n, _, _)| n == "gravity") {
            if fit.covariance.is_some() {
                let g = crate::fit::predict::predict_places(ephemeris, fit, &points, settings)
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
        .first()
        .ok_or("the average has no place")?;
    Ok(Outlook {
        days_after_arc: OUTLOOK_DAYS,
        utc: time.utc().to_iso8601(0),
        models,
        averaged: ModelEllipse {
            model: "averaged".into(),
            semi_major_arcsec: a.ellipse.semi_major_arcsec,
            semi_minor_arcsec: a.ellipse.semi_minor_arcsec,
        },
    })
}
