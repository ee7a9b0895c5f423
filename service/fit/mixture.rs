//! Model-averaged predictions: where the body will be when the data
//! cannot choose between the ladder's models.
//!
//! Each converged model predicts its own place and ellipse; the averaged
//! place is the mixture of those Gaussians with weights proportional to
//! exp(-dBIC/2) (the BIC approximation to posterior model probabilities
//! under equal priors: Burnham & Anderson 2002, Model Selection and
//! Multimodel Inference, sec. 4.2 and 6.4; Hoeting et al. 1999, Statistical
//! Science 14, 382). Its mean is the weighted mean of the models' places
//! and its covariance, by the law of total variance, the weighted
//! within-model covariances plus the spread of the models' places about
//! that mean: when the models disagree by more than their own ellipses,
//! the averaged ellipse grows to cover both.
//!
//! The same rule with scalars (1/a, an element) is [`average_scalar`], so
//! the verdicts and the predictions weigh models alike.
//!
//! Offsets are taken in the tangent plane of the first member's place,
//! (RA cos Dec, Dec) arcsec; the models' places differ by arcseconds to
//! arcminutes, where the plane's curvature is far below the ellipses.

use nalgebra::{Matrix2, Vector2};
use thiserror::Error;

use crate::astro::ephemeris::Ephemeris;

use super::lsq::OrbitFit;
use super::observe::ARCSEC_PER_RAD;
use super::predict::{
    predict_places, EllipseSource, PlacePrediction, PredictError, PredictSettings, PredictionPoint,
    SkyEllipse,
};

/// Models this far above the best in BIC carry a weight below e^-30,
/// 1e-13, and are left out of an average: their share of the mean and
/// of the spread is then below any figure printed, and predicting them
/// (a Monte Carlo above all) would be wasted work.
pub const NEGLIGIBLE_DELTA_BIC: f64 = 60.0;

/// Normalised weights exp(-dBIC/2) of models with these BICs; models
/// with no finite BIC get weight 0. All zeros when none has one.
pub fn bic_weights(bics: &[Option<f64>]) -> Vec<f64> {
    let best = bics
        .iter()
        .flatten()
        .copied()
        .filter(|b| b.is_finite())
        .fold(f64::INFINITY, f64::min);
    let raw: Vec<f64> = bics
        .iter()
        .map(|b| match b {
            Some(b) if b.is_finite() && best.is_finite() => (-(b - best) / 2.0).exp(),
            _ => 0.0,
        })
        .collect();
    let total: f64 = raw.iter().sum();
    if total > 0.0 {
        raw.iter().map(|w| w / total).collect()
    } else {
        raw
    }
}

/// The mixture of scalar estimates (value, sigma) with the given weights
/// (normalised here): its mean and its standard deviation by the law of
/// total variance. None when no weight is positive.
pub fn average_scalar(points: &[(f64, f64, f64)]) -> Option<(f64, f64)> {
    let total: f64 = points.iter().map(|(w, _, _)| w).sum();
    if points.is_empty() || total.is_nan() || total <= 0.0 {
        return None;
    }
    let mean = points.iter().map(|(w, v, _)| w * v).sum::<f64>() / total;
    let variance = points
        .iter()
        .map(|(w, v, s)| w * (s * s + (v - mean).powi(2)))
        .sum::<f64>()
        / total;
    Some((mean, variance.sqrt()))
}

/// One model's share of an average.
#[derive(Debug, Clone, PartialEq)]
pub struct Member {
    pub name: String,
    /// BIC above the best model taking part.
    pub delta_bic: f64,
    /// Normalised over the members.
    pub weight: f64,
}

/// A model that may take part: its name, BIC and fit.
#[derive(Debug, Clone, Copy)]
pub struct Candidate<'a> {
    pub name: &'a str,
    pub bic: Option<f64>,
    pub fit: &'a OrbitFit,
}

/// A model-averaged place.
#[derive(Debug, Clone, PartialEq)]
pub struct AveragedPlace {
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// The mixture's 1-sigma ellipse (total variance).
    pub ellipse: SkyEllipse,
    /// The part of the covariance that is the models' disagreement alone
    /// (the spread of their places), arcsec^2.
    pub between_models_arcsec2: Matrix2<f64>,
}

/// Places from every member and their average.
#[derive(Debug, Clone, PartialEq)]
pub struct AveragedPrediction {
    pub members: Vec<Member>,
    /// Each member's own places, in the members' order.
    pub member_places: Vec<Vec<PlacePrediction>>,
    pub places: Vec<AveragedPlace>,
}

impl AveragedPrediction {
    /// A member's own places, by model name.
    pub fn places_of(&self, name: &str) -> Option<&[PlacePrediction]> {
        self.members
            .iter()
            .position(|m| m.name == name)
            .map(|i| self.member_places[i].as_slice())
    }
}

/// The centre a member's place stands for: the nominal place, moved by
/// the Monte Carlo samples' mean where there is one (the mixture is of
/// the members' distributions, not of their nominal places).
fn centre_offset(reference: &PlacePrediction, place: &PlacePrediction) -> Vector2<f64> {
    let nominal = reference.offset_arcsec(place.ra_rad, place.dec_rad);
    match place.ellipse_source {
        EllipseSource::Linear => nominal,
        EllipseSource::MonteCarlo {
            mean_offset_arcsec, ..
        } => nominal + mean_offset_arcsec,
    }
}

/// Averages members' places at the same instants: `members` pairs each
/// member's (normalised) weight with its places. Empty input gives an
/// empty average; every member must have as many places as the first.
pub fn average_places(members: &[(f64, &[PlacePrediction])]) -> Vec<AveragedPlace> {
    let Some((_, first)) = members.first() else {
        return Vec::new();
    };
    let total: f64 = members.iter().map(|(w, _)| w).sum();
    (0..first.len())
        .map(|k| {
            let reference = &first[k];
            let centres: Vec<(f64, Vector2<f64>, Matrix2<f64>)> = members
                .iter()
                .map(|(w, places)| {
                    let p = &places[k];
                    (
                        w / total,
                        centre_offset(reference, p),
                        p.ellipse.covariance_arcsec2,
                    )
                })
                .collect();
            let mean: Vector2<f64> = centres.iter().map(|(w, m, _)| *w * m).sum();
            let within: Matrix2<f64> = centres.iter().map(|(w, _, c)| *w * c).sum();
            let between: Matrix2<f64> = centres
                .iter()
                .map(|(w, m, _)| {
                    let d = m - mean;
                    *w * d * d.transpose()
                })
                .sum();
            let cos_dec = reference.dec_rad.cos();
            AveragedPlace {
                ra_rad: (reference.ra_rad + mean.x / ARCSEC_PER_RAD / cos_dec)
                    .rem_euclid(std::f64::consts::TAU),
                dec_rad: reference.dec_rad + mean.y / ARCSEC_PER_RAD,
                ellipse: SkyEllipse::from_covariance(within + between),
                between_models_arcsec2: between,
            }
        })
        .collect()
}

/// A model's prediction that failed.
#[derive(Debug, Error)]
#[error("predicting from model {model}: {source}")]
pub struct ModelPredictError {
    pub model: String,
    pub source: Box<PredictError>,
}

impl ModelPredictError {
    pub fn new(model: &str, source: PredictError) -> Self {
        Self {
            model: model.to_string(),
            source: Box::new(source),
        }
    }
}

/// Why a model was left out of an average.
#[derive(Debug, Clone, PartialEq)]
pub struct LeftOut {
    pub name: String,
    pub reason: String,
}

/// Predicts every candidate that carries weight (no covariance, or a BIC
/// more than [`NEGLIGIBLE_DELTA_BIC`] above the best, leaves a model
/// out) and averages them. Fails only when a member's prediction fails;
/// returns the models left out beside the average.
pub fn predict_averaged(
    ephemeris: &dyn Ephemeris,
    candidates: &[Candidate],
    points: &[PredictionPoint],
    settings: &PredictSettings,
) -> Result<(AveragedPrediction, Vec<LeftOut>), ModelPredictError> {
    let best = candidates
        .iter()
        .filter(|c| c.fit.covariance.is_some())
        .filter_map(|c| c.bic)
        .filter(|b| b.is_finite())
        .fold(f64::INFINITY, f64::min);
    let mut left_out = Vec::new();
    let mut taking_part = Vec::new();
    for c in candidates {
        let reason = match c.bic {
            _ if c.fit.covariance.is_none() => Some("no covariance".to_string()),
            Some(b) if b.is_finite() && b - best <= NEGLIGIBLE_DELTA_BIC => None,
            Some(b) if b.is_finite() => Some(format!(
                "BIC {:.1} above the best: weight below 1e-13",
                b - best
            )),
            _ => Some("no BIC".to_string()),
        };
        match reason {
            None => taking_part.push(*c),
            Some(reason) => left_out.push(LeftOut {
                name: c.name.to_string(),
                reason,
            }),
        }
    }
    let weights = bic_weights(&taking_part.iter().map(|c| c.bic).collect::<Vec<_>>());
    let mut member_places = Vec::with_capacity(taking_part.len());
    for c in &taking_part {
        let places = predict_places(ephemeris, c.fit, points, settings)
            .map_err(|e| ModelPredictError::new(c.name, e))?;
        member_places.push(places);
    }
    let members: Vec<Member> = taking_part
        .iter()
        .zip(&weights)
        .map(|(c, w)| Member {
            name: c.name.to_string(),
            delta_bic: c.bic.unwrap_or(f64::NAN) - best,
            weight: *w,
        })
        .collect();
    let weighted: Vec<(f64, &[PlacePrediction])> = weights
        .iter()
        .zip(&member_places)
        .map(|(w, p)| (*w, p.as_slice()))
        .collect();
    let places = average_places(&weighted);
    Ok((
        AveragedPrediction {
            members,
            member_places,
            places,
        },
        left_out,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::time::{Epoch, TimeScales};
    use crate::fit::predict::EllipseSource;

    fn place(ra_deg: f64, dec_deg: f64, c: Matrix2<f64>, source: EllipseSource) -> PlacePrediction {
        PlacePrediction {
            time: TimeScales::builtin()
                .resolve_tdb(Epoch::from_tdb_jd(2_461_000.5, 0.0), None)
                .unwrap(),
            ra_rad: ra_deg.to_radians(),
            dec_rad: dec_deg.to_radians(),
            delta_au: 1.0,
            r_au: 2.0,
            elongation_rad: 2.0,
            phase_rad: 0.3,
            light_time_days: 0.005,
            rate_arcsec_per_min: Vector2::zeros(),
            magnitude: None,
            ellipse: SkyEllipse::from_covariance(c),
            ellipse_source: source,
            parameter_place_cov: None,
        }
    }

    #[test]
    fn weights_follow_exp_of_minus_half_delta_bic() {
        // exp(-dBIC/2) normalised (Burnham & Anderson 2002, eq. 4.2):
        // dBIC 0 and 2 give 1 : e^-1, i.e. 0.7311 and 0.2689.
        let w = bic_weights(&[Some(100.0), Some(102.0), None]);
        assert!(
            (w[0] - 1.0 / (1.0 + (-1.0f64).exp())).abs() < 1e-12,
            "{w:?}"
        );
        assert!((w[1] - 0.2689414213699951).abs() < 1e-12, "{w:?}");
        assert_eq!(w[2], 0.0);
        assert_eq!(bic_weights(&[None, Some(f64::NAN)]), vec![0.0, 0.0]);
    }

    #[test]
    fn scalar_mixture_is_the_law_of_total_variance() {
        // Two equal-weight N(0, 1) and N(2, 1): mean 1, variance
        // 1 + 1 = 2 (law of total variance: E[Var] + Var[E]).
        let (m, s) = average_scalar(&[(0.5, 0.0, 1.0), (0.5, 2.0, 1.0)]).unwrap();
        assert!((m - 1.0).abs() < 1e-15);
        assert!((s - 2f64.sqrt()).abs() < 1e-15);
        assert_eq!(average_scalar(&[]), None);
        assert_eq!(average_scalar(&[(0.0, 1.0, 1.0)]), None);
    }

    #[test]
    fn two_disagreeing_models_widen_the_ellipse_along_their_split() {
        // Two models 2 arcsec apart in Dec, each with a round 0.5 arcsec
        // ellipse, equal weights: the mean lies half way, the Dec variance
        // is 0.25 + 1 (the spread of +/-1 arcsec), RA stays 0.25 (law of
        // total variance; the arithmetic is the test's own).
        let c = Matrix2::new(0.25, 0.0, 0.0, 0.25);
        let a = [place(30.0, 10.0, c, EllipseSource::Linear)];
        let b = [place(30.0, 10.0 + 2.0 / 3600.0, c, EllipseSource::Linear)];
        let avg = average_places(&[(0.5, &a), (0.5, &b)]);
        let p = &avg[0];
        assert!((p.dec_rad.to_degrees() - (10.0 + 1.0 / 3600.0)).abs() < 1e-12);
        assert!((p.ra_rad.to_degrees() - 30.0).abs() < 1e-12);
        let cov = p.ellipse.covariance_arcsec2;
        assert!((cov[(1, 1)] - 1.25).abs() < 1e-9, "{cov}");
        assert!((cov[(0, 0)] - 0.25).abs() < 1e-9, "{cov}");
        assert!((p.between_models_arcsec2[(1, 1)] - 1.0).abs() < 1e-9);
        // The major axis along the split: north, position angle 0.
        assert!(p.ellipse.position_angle_deg.abs() < 1e-6);
    }

    #[test]
    fn a_single_member_is_its_own_average() {
        let c = Matrix2::new(0.5, 0.1, 0.1, 0.3);
        let a = [place(350.0, -20.0, c, EllipseSource::Linear)];
        let avg = average_places(&[(1.0, &a)]);
        assert!((avg[0].ra_rad - a[0].ra_rad).abs() < 1e-15);
        assert!((avg[0].dec_rad - a[0].dec_rad).abs() < 1e-15);
        assert!((avg[0].ellipse.covariance_arcsec2 - c).norm() < 1e-15);
    }

    #[test]
    fn monte_carlo_members_are_averaged_about_their_sample_means() {
        // A member whose samples' mean sits 1 arcsec east of its nominal
        // place stands for a distribution centred there.
        let c = Matrix2::new(0.04, 0.0, 0.0, 0.04);
        let moved = EllipseSource::MonteCarlo {
            samples: 100,
            seed: 1,
            mean_offset_arcsec: Vector2::new(1.0, 0.0),
        };
        let a = [place(100.0, 0.0, c, moved)];
        let avg = average_places(&[(1.0, &a)]);
        let east_arcsec = (avg[0].ra_rad - a[0].ra_rad) * ARCSEC_PER_RAD;
        assert!((east_arcsec - 1.0).abs() < 1e-9, "{east_arcsec}");
    }

    #[test]
    fn ra_wraps_at_zero() {
        let c = Matrix2::new(0.04, 0.0, 0.0, 0.04);
        let a = [place(359.9999, 0.0, c, EllipseSource::Linear)];
        let b = [place(0.0001, 0.0, c, EllipseSource::Linear)];
        let avg = average_places(&[(0.5, &a), (0.5, &b)]);
        let ra = avg[0].ra_rad.to_degrees();
        assert!(ra.abs() < 1e-9 || (ra - 360.0).abs() < 1e-9, "{ra}");
    }
}
