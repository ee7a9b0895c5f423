//! Do new observations agree with an old solution?
//!
//! A solution predicts each new observation with an error of its own: the
//! parameter covariance C mapped through the partials B (2 x (6 + k) per
//! observation, stacked to 2n x (6 + k) for the batch). The residuals xi of
//! the batch then have covariance Gamma = Sigma + B C B^T, Sigma the
//! block-diagonal measurement covariance. Gamma is full: one orbit error
//! moves every predicted place together, so the batch is tested as one
//! vector, chi^2 = xi^T Gamma^-1 xi, against chi^2 with 2n degrees of
//! freedom (the new observations did not take part in the fit, so no
//! degrees of freedom are lost). The per-observation values
//! xi_i^T Gamma_ii^-1 xi_i say which observations carry the disagreement.

use nalgebra::{DMatrix, DVector, Matrix2, Vector2};
use thiserror::Error;

use crate::astro::ephemeris::Ephemeris;
use crate::astro::propagation::{PropagationError, PropagationSettings, Trajectory};

use super::lsq::OrbitFit;
use super::observe::{predict, residual_arcsec, AstrometricObservation, ObserveError, ObserverAt};
use super::stats::{chi2_ln_sf, sigma_of_ln_p};
use super::weights::{covariances, WeightError, WeightSettings};

/// The trajectory covers the batch plus this margin (light time).
const ARC_MARGIN_DAYS: f64 = 1.0;

#[derive(Debug, Error)]
pub enum ConsistencyError {
    #[error("the batch holds no observations")]
    EmptyBatch,
    #[error("the solution has no covariance to test against")]
    NoCovariance,
    #[error("the solution cannot be propagated over the batch: {0}")]
    Propagation(#[from] PropagationError),
    #[error("new observation {index}: {source}")]
    Observation { index: usize, source: ObserveError },
    #[error("weights: {0}")]
    Weights(#[from] WeightError),
    #[error("the batch's prediction covariance is not positive definite")]
    Covariance,
}

/// One new observation against the solution.
#[derive(Debug, Clone, PartialEq)]
pub struct BatchResidual {
    /// O - C in (RA cos Dec, Dec), arcsec.
    pub residual_arcsec: Vector2<f64>,
    /// The solution's own prediction covariance B_i C B_i^T, arcsec^2.
    pub prediction_covariance_arcsec2: Matrix2<f64>,
    /// xi_i^T Gamma_ii^-1 xi_i (2 dof).
    pub chi2: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Consistency {
    /// xi^T Gamma^-1 xi over the whole batch.
    pub chi2: f64,
    pub dof: usize,
    /// ln P(chi^2_dof > chi2): kept in logarithms so that a batch far off
    /// the solution does not report "p = 0".
    pub ln_p_value: f64,
    /// The same tail as a two-sided Gaussian sigma.
    pub sigma: f64,
    pub residuals: Vec<BatchResidual>,
}

impl Consistency {
    pub fn p_value(&self) -> f64 {
        self.ln_p_value.exp()
    }
}

/// The chi^2 of `batch` against the solution `fit`, with the batch's own
/// weights (`weights`, the settings the fit used) and the solution's
/// prediction covariance.
pub fn batch_consistency(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    batch: &[AstrometricObservation],
    weights: &WeightSettings,
    propagation: &PropagationSettings,
) -> Result<Consistency, ConsistencyError> {
    if batch.is_empty() {
        return Err(ConsistencyError::EmptyBatch);
    }
    let c = fit
        .covariance
        .as_ref()
        .ok_or(ConsistencyError::NoCovariance)?;
    let observers = batch
        .iter()
        .enumerate()
        .map(|(index, o)| {
            ObserverAt::of(o, ephemeris)
                .map_err(|source| ConsistencyError::Observation { index, source })
        })
        .collect::<Result<Vec<_>, _>>()?;
    let (first, last) = observers.iter().fold((fit.epoch, fit.epoch), |(a, b), o| {
        (
            if o.tdb < a { o.tdb } else { a },
            if o.tdb > b { o.tdb } else { b },
        )
    });
    let settings = PropagationSettings {
        partials: true,
        ..*propagation
    };
    let trajectory = Trajectory::integrate(
        ephemeris,
        &fit.model,
        fit.epoch,
        &fit.state,
        first.plus_days(-ARC_MARGIN_DAYS),
        last.plus_days(ARC_MARGIN_DAYS),
        &settings,
    )?;

    let n = batch.len();
    let k = c.nrows();
    let mut xi = DVector::zeros(2 * n);
    let mut b = DMatrix::zeros(2 * n, k);
    let mut rates = Vec::with_capacity(n);
    for (index, (o, at)) in batch.iter().zip(&observers).enumerate() {
        let p = predict(&trajectory, ephemeris, at, true)
            .map_err(|source| ConsistencyError::Observation { index, source })?;
        xi.rows_mut(2 * index, 2).copy_from(&residual_arcsec(o, &p));
        if let Some(partials) = &p.partials_arcsec {
            b.view_mut((2 * index, 0), (2, k))
                .copy_from(&partials.columns(0, k));
        }
        rates.push(p.rate_arcsec_per_s);
    }
    let sigma = covariances(batch, &rates, weights)?;
    let predicted = &b * c * b.transpose();
    let mut gamma = predicted.clone();
    for (i, s) in sigma.iter().enumerate() {
        let mut block = gamma.view_mut((2 * i, 2 * i), (2, 2));
        block += s;
    }
    let chi2 = gamma
        .clone()
        .cholesky()
        .ok_or(ConsistencyError::Covariance)?
        .solve(&xi)
        .dot(&xi);
    let residuals = (0..n)
        .map(|i| {
            let block = |m: &DMatrix<f64>| {
                Matrix2::new(
                    m[(2 * i, 2 * i)],
                    m[(2 * i, 2 * i + 1)],
                    m[(2 * i + 1, 2 * i)],
                    m[(2 * i + 1, 2 * i + 1)],
                )
            };
            let r = Vector2::new(xi[2 * i], xi[2 * i + 1]);
            let chi2 = block(&gamma)
                .try_inverse()
                .map_or(f64::INFINITY, |g| (r.transpose() * g * r)[(0, 0)]);
            BatchResidual {
                residual_arcsec: r,
                prediction_covariance_arcsec2: block(&predicted),
                chi2,
            }
        })
        .collect();
    let dof = 2 * n;
    let ln_p_value = chi2_ln_sf(chi2, dof as f64);
    Ok(Consistency {
        chi2,
        dof,
        ln_p_value,
        sigma: sigma_of_ln_p(ln_p_value),
        residuals,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::ephemeris::Body;
    use crate::astro::forces::ForceModel;
    use crate::fit::lsq::{fit_orbit, FitProblem, FitSettings};
    use crate::fit::test_support::{belt_observations as observations, belt_state, WobblingSun};

    fn gravity() -> ForceModel {
        ForceModel::new(&[Body::Jupiter], false, None).unwrap()
    }

    fn fitted(obs: &[AstrometricObservation]) -> OrbitFit {
        let (epoch, state) = belt_state();
        let model = gravity();
        let problem = FitProblem {
            ephemeris: &WobblingSun,
            model: &model,
            observations: obs,
        };
        fit_orbit(&problem, epoch, &state, &FitSettings::default()).unwrap()
    }

    fn against(fit: &OrbitFit, batch: &[AstrometricObservation]) -> Consistency {
        batch_consistency(
            &WobblingSun,
            fit,
            batch,
            &WeightSettings::default(),
            &PropagationSettings::default(),
        )
        .unwrap()
    }

    /// Noise-free data of the same orbit: every residual is round-off, so
    /// the batch chi^2 is near zero and the p-value near one.
    #[test]
    fn the_same_orbit_is_consistent() {
        let model = gravity();
        let fit = fitted(&observations(&model, -20.0, 20, 2.0));
        let later = observations(&model, 30.0, 6, 1.0);
        let c = against(&fit, &later);
        assert_eq!(c.dof, 12);
        assert!(c.chi2 < 1e-3, "chi2 {}", c.chi2);
        assert!(c.p_value() > 0.999);
        assert_eq!(c.residuals.len(), 6);
    }

    /// A 10-arcsec shift of one observation shows up in the batch and in
    /// that observation's own chi^2: a 10" offset in a 0.5" measurement is
    /// chi^2 = 400 before the prediction covariance is added.
    #[test]
    fn a_shifted_observation_is_flagged() {
        let model = gravity();
        let fit = fitted(&observations(&model, -20.0, 20, 2.0));
        let mut later = observations(&model, 30.0, 6, 1.0);
        later[3].dec_rad += 10.0 / crate::fit::observe::ARCSEC_PER_RAD;
        let c = against(&fit, &later);
        let worst = c
            .residuals
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.chi2.total_cmp(&b.1.chi2))
            .unwrap();
        assert_eq!(worst.0, 3);
        assert!(worst.1.chi2 > 100.0 && worst.1.chi2 <= 400.0 + 1e-6);
        assert!(c.sigma > 8.0, "sigma {}", c.sigma);
    }

    /// Far from the arc the prediction covariance grows, and Gamma with it:
    /// it must be carried, or a fine extrapolation would look like a miss.
    #[test]
    fn the_prediction_covariance_is_included() {
        let model = gravity();
        let fit = fitted(&observations(&model, -4.0, 8, 1.0));
        let later = observations(&model, 200.0, 2, 1.0);
        let c = against(&fit, &later);
        let p = c.residuals[0].prediction_covariance_arcsec2;
        // An 8-day arc extrapolated 200 days: far above the 0.25 arcsec^2
        // of one measurement.
        assert!(p.trace() > 1.0, "trace {}", p.trace());
    }

    #[test]
    fn an_empty_batch_is_an_error() {
        let model = gravity();
        let fit = fitted(&observations(&model, -20.0, 20, 2.0));
        let e = batch_consistency(
            &WobblingSun,
            &fit,
            &[],
            &WeightSettings::default(),
            &PropagationSettings::default(),
        );
        assert!(matches!(e, Err(ConsistencyError::EmptyBatch)));
    }
}
