//! Predictions from a fitted orbit: where an observer will see the body,
//! how it moves on the sky, how bright it should be and how uncertain the
//! place is.
//!
//! One trajectory is integrated from the fit's epoch over every prediction
//! time (backwards and forwards as needed, with a margin for the light
//! time), and each place comes from the observation model itself
//! ([`observe::predict`]): the same light-time solution, the same frames,
//! no aberration (astrometric places, comparable with catalogue stars).
//!
//! - Geometry: delta is |rho|, the observer-to-body distance at emission;
//!   r the heliocentric distance of the body at emission; the solar
//!   elongation the angle at the observer between the body and the Sun;
//!   the phase angle the angle at the body between the Sun and the
//!   observer. The Sun is taken where it is at the observation time: in
//!   its 8-minute light time to a 1 au observer it moves by about 6 km
//!   about the barycentre, 4e-8 rad.
//! - Rates: the model's own apparent motion, the observer-relative
//!   velocity projected on the sky ([`observe::Prediction`]). It leaves out
//!   the change of the light time along the arc, a relative error of order
//!   (d delta / dt) / c ~ 1e-4.
//! - Linear ellipse: C_sky = B C B^T, B the 2 x n partials of
//!   (RA cos Dec, Dec) with respect to the fitted parameters (from the
//!   state transition matrix and sensitivities at the emission time), C
//!   the fit's covariance.
//! - Monte Carlo ellipse: parameter vectors drawn from N(fit, C), each
//!   integrated through the full force model on its own (no
//!   linearisation); the ellipse is the sample covariance of the sample
//!   places' offsets from the nominal place, and the offset of their mean
//!   is reported beside it (a linear map leaves it at zero; a large one
//!   says the linear map has failed).
//! - Ellipse axes are 1 sigma; the position angle is that of the major
//!   axis, measured from north through east (the astronomical convention),
//!   in [0, 180).

use nalgebra::{DVector, Matrix2, Vector2, Vector3};
use thiserror::Error;

use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::forces::{ForceModel, ForceModelError};
use crate::astro::observer::{observer_barycentric_state, ObserverError, ObserverPosition};
use crate::astro::propagation::{PropagationError, PropagationSettings, Trajectory};
use crate::astro::time::{Epoch, ScaledInstant};

use super::lsq::OrbitFit;
use super::observe::{self, wrap_pi, ObserveError, ObserverAt, ARCSEC_PER_RAD};
use super::photometry::{predict_mag, MagnitudeLaw};
use super::sampling::{Gaussian, MultivariateNormal, SamplingError};

/// Fewest Monte Carlo samples accepted: below this a sample covariance of
/// two offsets means little.
pub const MIN_SAMPLES: usize = 10;

/// One place to predict: when, and from where.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictionPoint {
    pub time: ScaledInstant,
    pub observer: ObserverPosition,
}

/// How the uncertainty ellipse is made.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EllipseMethod {
    /// The covariance mapped through the partials.
    Linear,
    /// `samples` parameter vectors drawn with a generator seeded by `seed`,
    /// each propagated through the full force model.
    MonteCarlo { samples: usize, seed: u64 },
}

#[derive(Debug, Clone, PartialEq)]
pub struct PredictSettings {
    pub method: EllipseMethod,
    /// Integrator settings (partials are switched on where needed).
    pub propagation: PropagationSettings,
    /// The trajectory starts this long before the earliest time, for the
    /// light time: one day covers bodies out to 170 au.
    pub light_time_margin_days: f64,
    /// A brightness law gives each place a predicted magnitude.
    pub magnitude: Option<MagnitudeLaw>,
}

impl Default for PredictSettings {
    fn default() -> Self {
        Self {
            method: EllipseMethod::Linear,
            propagation: PropagationSettings::default(),
            light_time_margin_days: 1.0,
            magnitude: None,
        }
    }
}

#[derive(Debug, Error)]
pub enum PredictError {
    #[error("the fit has no covariance (its normal matrix is singular), so no uncertainty can be predicted")]
    NoCovariance,
    #[error("the fit's covariance is {rows} x {rows} for {parameters} parameters")]
    CovarianceShape { rows: usize, parameters: usize },
    #[error("the fit's covariance cannot be sampled: {0}")]
    Sampling(#[from] SamplingError),
    #[error("Monte Carlo needs at least {MIN_SAMPLES} samples, {samples} were asked for")]
    TooFewSamples { samples: usize },
    #[error("prediction {index}: observer position: {source}")]
    Observer { index: usize, source: ObserverError },
    #[error("propagating the fitted orbit: {0}")]
    Propagation(#[from] PropagationError),
    #[error("prediction {index}: {source}")]
    Place { index: usize, source: ObserveError },
    #[error("the Sun at prediction {index}: {source}")]
    Sun {
        index: usize,
        source: EphemerisError,
    },
    #[error("Monte Carlo sample {sample}: its A_i make no valid force model: {source}")]
    SampleModel {
        sample: usize,
        source: ForceModelError,
    },
    #[error("Monte Carlo sample {sample}: propagation failed: {source}")]
    SamplePropagation {
        sample: usize,
        source: PropagationError,
    },
    #[error("Monte Carlo sample {sample}, prediction {index}: {source}")]
    SamplePlace {
        sample: usize,
        index: usize,
        source: ObserveError,
    },
}

/// A 1-sigma uncertainty ellipse on the sky, in (RA cos Dec, Dec).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SkyEllipse {
    /// Covariance of (RA cos Dec, Dec), arcsec^2.
    pub covariance_arcsec2: Matrix2<f64>,
    pub semi_major_arcsec: f64,
    pub semi_minor_arcsec: f64,
    /// Of the major axis, from north through east, degrees in [0, 180).
    pub position_angle_deg: f64,
}

impl SkyEllipse {
    /// The ellipse of a 2 x 2 covariance (east, north): the square roots of
    /// its eigenvalues and the direction of the larger one's eigenvector.
    pub fn from_covariance(c: Matrix2<f64>) -> Self {
        let (a, b, d) = (c[(0, 0)], 0.5 * (c[(0, 1)] + c[(1, 0)]), c[(1, 1)]);
        let middle = 0.5 * (a + d);
        let half_split = (0.5 * (a - d)).hypot(b);
        // Angle of the major axis from east towards north.
        let from_east = 0.5 * (2.0 * b).atan2(a - d);
        let position_angle_deg = (90.0 - from_east.to_degrees()).rem_euclid(180.0);
        Self {
            covariance_arcsec2: c,
            semi_major_arcsec: (middle + half_split).max(0.0).sqrt(),
            semi_minor_arcsec: (middle - half_split).max(0.0).sqrt(),
            position_angle_deg,
        }
    }

    /// offset^T C^-1 offset for an offset (RA cos Dec, Dec) in arcsec:
    /// chi^2 with 2 degrees of freedom when the ellipse is right.
    pub fn mahalanobis2(&self, offset_arcsec: Vector2<f64>) -> Option<f64> {
        let inverse = self.covariance_arcsec2.try_inverse()?;
        Some((offset_arcsec.transpose() * inverse * offset_arcsec)[(0, 0)])
    }
}

/// Which method made an ellipse.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum EllipseSource {
    Linear,
    MonteCarlo {
        samples: usize,
        seed: u64,
        /// Mean of the sample places minus the nominal place,
        /// (RA cos Dec, Dec) arcsec.
        mean_offset_arcsec: Vector2<f64>,
    },
}

/// One predicted place.
#[derive(Debug, Clone, PartialEq)]
pub struct PlacePrediction {
    pub time: ScaledInstant,
    /// Topocentric astrometric RA (in [0, 2 pi)) and Dec, ICRF.
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// Observer to body at emission.
    pub delta_au: f64,
    /// Sun to body at emission.
    pub r_au: f64,
    pub elongation_rad: f64,
    pub phase_rad: f64,
    pub light_time_days: f64,
    /// d(RA) cos(Dec) / dt and d(Dec) / dt, arcsec per minute.
    pub rate_arcsec_per_min: Vector2<f64>,
    /// From [`PredictSettings::magnitude`], when given.
    pub magnitude: Option<f64>,
    pub ellipse: SkyEllipse,
    pub ellipse_source: EllipseSource,
    /// Linear method only: the covariance of each fitted parameter with
    /// the place, C B^T (n x 2, parameter units times arcsec): what an
    /// observation of this place would teach about each parameter.
    pub parameter_place_cov: Option<nalgebra::DMatrix<f64>>,
}

impl PlacePrediction {
    /// This place's offset from another RA, Dec (radians) as
    /// (RA cos Dec, Dec) arcsec, the RA difference scaled by this place's
    /// cos Dec.
    pub fn offset_arcsec(&self, ra_rad: f64, dec_rad: f64) -> Vector2<f64> {
        sky_offset_arcsec(self.ra_rad, self.dec_rad, ra_rad, dec_rad)
    }
}

/// (other - reference) in (RA cos Dec, Dec), arcsec, scaled by the
/// reference's cos Dec.
fn sky_offset_arcsec(ra0: f64, dec0: f64, ra: f64, dec: f64) -> Vector2<f64> {
    Vector2::new(wrap_pi(ra - ra0) * dec0.cos(), dec - dec0) * ARCSEC_PER_RAD
}

/// Angle between two vectors, accurate near 0 and pi.
fn angle_between(a: &Vector3<f64>, b: &Vector3<f64>) -> f64 {
    a.cross(b).norm().atan2(a.dot(b))
}

/// Solar elongation and phase angle, radians, from the body's heliocentric
/// position, the observer-to-body vector and the observer-to-Sun vector.
pub fn elongation_and_phase(
    body_heliocentric_au: &Vector3<f64>,
    rho_au: &Vector3<f64>,
    sun_from_observer_au: &Vector3<f64>,
) -> (f64, f64) {
    let elongation = angle_between(rho_au, sun_from_observer_au);
    // At the body: towards the Sun -r, towards the observer -rho.
    let phase = angle_between(body_heliocentric_au, rho_au);
    (elongation, phase)
}

/// The fit's parameter vector as a state and a force model.
fn orbit_of(
    fit: &OrbitFit,
    p: &DVector<f64>,
) -> Result<(StateVector, ForceModel), ForceModelError> {
    let state = StateVector::new(
        Vector3::new(p[0], p[1], p[2]),
        Vector3::new(p[3], p[4], p[5]),
    );
    let model = match fit.model.nongrav() {
        Some(ng) if ng.free.count() > 0 => {
            let mut ng = *ng;
            for (j, component) in ng.free.indices().enumerate() {
                ng.a_au_per_day2[component] = p[6 + j];
            }
            fit.model.clone().with_nongrav(ng)?
        }
        _ => fit.model.clone(),
    };
    Ok((state, model))
}

/// The integrated arc for the prediction times: from the earliest minus
/// the light-time margin to the latest (the fit's epoch is added by the
/// integration itself).
fn arc(observers: &[ObserverAt], margin_days: f64) -> (Epoch, Epoch) {
    let first = observers[0].tdb;
    let (start, end) = observers.iter().fold((first, first), |(a, b), o| {
        (
            if o.tdb < a { o.tdb } else { a },
            if o.tdb > b { o.tdb } else { b },
        )
    });
    (start.plus_days(-margin_days), end)
}

/// Predicts every point from `fit`, with the uncertainty ellipse the
/// settings ask for.
pub fn predict_places(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    points: &[PredictionPoint],
    settings: &PredictSettings,
) -> Result<Vec<PlacePrediction>, PredictError> {
    let covariance = fit.covariance.as_ref().ok_or(PredictError::NoCovariance)?;
    let n = fit.parameters.len();
    if covariance.nrows() != n || covariance.ncols() != n {
        return Err(PredictError::CovarianceShape {
            rows: covariance.nrows(),
            parameters: n,
        });
    }
    if let EllipseMethod::MonteCarlo { samples, .. } = settings.method {
        if samples < MIN_SAMPLES {
            return Err(PredictError::TooFewSamples { samples });
        }
    }
    if points.is_empty() {
        return Ok(Vec::new());
    }
    let observers = points
        .iter()
        .enumerate()
        .map(|(index, p)| {
            observer_barycentric_state(&p.observer, &p.time, ephemeris)
                .map(|state| ObserverAt {
                    tdb: p.time.tdb(),
                    state,
                })
                .map_err(|source| PredictError::Observer { index, source })
        })
        .collect::<Result<Vec<_>, _>>()?;
    let (start, end) = arc(&observers, settings.light_time_margin_days);
    let linear = settings.method == EllipseMethod::Linear;
    let nominal = Trajectory::integrate(
        ephemeris,
        &fit.model,
        fit.epoch,
        &fit.state,
        start,
        end,
        &PropagationSettings {
            partials: linear,
            ..settings.propagation
        },
    )?;

    let mut places = Vec::with_capacity(points.len());
    for (index, (point, at)) in points.iter().zip(&observers).enumerate() {
        let p = observe::predict(&nominal, ephemeris, at, linear)
            .map_err(|source| PredictError::Place { index, source })?;
        let body = nominal.state(p.emission)?.position_au;
        let sun = ephemeris
            .state(Body::Sun, at.tdb)
            .map_err(|source| PredictError::Sun { index, source })?
            .position_au;
        let (elongation_rad, phase_rad) =
            elongation_and_phase(&body, &p.rho_au, &(sun - at.state.position_au));
        let delta_au = p.rho_au.norm();
        let r_au = body.norm();
        let parameter_place_cov = p
            .partials_arcsec
            .as_ref()
            .map(|b| covariance * b.transpose());
        let ellipse = match (&p.partials_arcsec, &parameter_place_cov) {
            (Some(b), Some(cb)) => {
                let c = b * cb;
                SkyEllipse::from_covariance(Matrix2::new(
                    c[(0, 0)],
                    c[(0, 1)],
                    c[(1, 0)],
                    c[(1, 1)],
                ))
            }
            // Filled in by the Monte Carlo below.
            _ => SkyEllipse::from_covariance(Matrix2::zeros()),
        };
        places.push(PlacePrediction {
            time: point.time,
            ra_rad: p.ra_rad,
            dec_rad: p.dec_rad,
            delta_au,
            r_au,
            elongation_rad,
            phase_rad,
            light_time_days: p.light_time_days,
            rate_arcsec_per_min: p.rate_arcsec_per_s * 60.0,
            magnitude: settings
                .magnitude
                .map(|law| predict_mag(law, r_au, delta_au, phase_rad)),
            ellipse,
            ellipse_source: EllipseSource::Linear,
            parameter_place_cov,
        });
    }

    if let EllipseMethod::MonteCarlo { samples, seed } = settings.method {
        let spread = monte_carlo(
            ephemeris,
            fit,
            covariance,
            &observers,
            &places,
            (start, end),
            samples,
            seed,
            &settings.propagation,
        )?;
        for (place, moments) in places.iter_mut().zip(spread) {
            place.ellipse = SkyEllipse::from_covariance(moments.covariance());
            place.ellipse_source = EllipseSource::MonteCarlo {
                samples,
                seed,
                mean_offset_arcsec: moments.mean,
            };
        }
    }
    Ok(places)
}

/// Running mean and covariance of 2-vectors (Welford 1962, Technometrics
/// 4, 419): no cancellation however far the mean lies from zero.
#[derive(Debug, Clone, Copy)]
struct Moments {
    count: usize,
    mean: Vector2<f64>,
    /// Sum of outer products of deviations.
    scatter: Matrix2<f64>,
}

impl Moments {
    fn new() -> Self {
        Self {
            count: 0,
            mean: Vector2::zeros(),
            scatter: Matrix2::zeros(),
        }
    }

    fn add(&mut self, x: Vector2<f64>) {
        self.count += 1;
        let before = x - self.mean;
        self.mean += before / self.count as f64;
        self.scatter += before * (x - self.mean).transpose();
    }

    fn covariance(&self) -> Matrix2<f64> {
        self.scatter / (self.count.max(2) - 1) as f64
    }
}

/// Sample covariance and mean of the sky offsets of every point.
#[allow(clippy::too_many_arguments)]
fn monte_carlo(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    covariance: &nalgebra::DMatrix<f64>,
    observers: &[ObserverAt],
    nominal: &[PlacePrediction],
    (start, end): (Epoch, Epoch),
    samples: usize,
    seed: u64,
    propagation: &PropagationSettings,
) -> Result<Vec<Moments>, PredictError> {
    let distribution = MultivariateNormal::new(fit.parameters.clone(), covariance)?;
    let mut rng = Gaussian::new(seed);
    let mut moments = vec![Moments::new(); observers.len()];
    let settings = PropagationSettings {
        partials: false,
        ..*propagation
    };
    for sample in 0..samples {
        let p = distribution.draw(&mut rng);
        let (state, model) =
            orbit_of(fit, &p).map_err(|source| PredictError::SampleModel { sample, source })?;
        let trajectory =
            Trajectory::integrate(ephemeris, &model, fit.epoch, &state, start, end, &settings)
                .map_err(|source| PredictError::SamplePropagation { sample, source })?;
        for (index, (at, place)) in observers.iter().zip(nominal).enumerate() {
            let s = observe::predict(&trajectory, ephemeris, at, false).map_err(|source| {
                PredictError::SamplePlace {
                    sample,
                    index,
                    source,
                }
            })?;
            moments[index].add(place.offset_arcsec(s.ra_rad, s.dec_rad));
        }
    }
    Ok(moments)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::forces::{DistanceLaw, FreeParameters, NonGravModel};
    use crate::fit::lsq::Termination;
    use crate::fit::test_support::{belt_state, shell, WobblingSun};
    use nalgebra::DMatrix;

    /// Arithmetic of a 2 x 2 eigen-problem.
    const ELLIPSE_TOLERANCE: f64 = 1e-12;

    fn model() -> ForceModel {
        let ng = NonGravModel::new(
            DistanceLaw::InverseSquare,
            [2e-8, 0.0, 0.0],
            FreeParameters::new(true, false, false),
        );
        ForceModel::new(&[Body::Earth, Body::Jupiter], false, Some(ng)).unwrap()
    }

    /// A fit-shaped input: the belt state, A1 free, a diagonal covariance
    /// of 1e-7 au, 1e-9 au/day and 1e-10 au/day^2 (a short-arc orbit).
    fn synthetic_fit() -> OrbitFit {
        let (epoch, state) = belt_state();
        let model = model();
        let mut parameters: Vec<f64> = state
            .position_au
            .iter()
            .chain(state.velocity_au_per_day.iter())
            .copied()
            .collect();
        parameters.push(2e-8);
        let sigmas = [1e-7, 1e-7, 1e-7, 1e-9, 1e-9, 1e-9, 1e-10];
        let covariance =
            DMatrix::from_diagonal(&DVector::from_iterator(7, sigmas.iter().map(|s| s * s)));
        OrbitFit {
            epoch,
            state,
            nongrav_au_per_day2: vec![(0, 2e-8)],
            model,
            parameters: DVector::from_vec(parameters),
            covariance: Some(covariance),
            chi2: 0.0,
            dof: 0,
            rms_arcsec: 0.0,
            normalised_rms: 1.0,
            residuals: Vec::new(),
            iterations: 0,
            outlier_passes: 0,
            termination: Termination::Converged,
        }
    }

    fn point(t: Epoch) -> PredictionPoint {
        let o = shell(t, "ZQA", 17.0);
        PredictionPoint {
            time: o.time,
            observer: o.observer,
        }
    }

    fn settings() -> PredictSettings {
        PredictSettings {
            propagation: PropagationSettings {
                tolerance: 1e-12,
                ..PropagationSettings::default()
            },
            ..PredictSettings::default()
        }
    }

    #[test]
    fn ellipse_of_a_diagonal_covariance() {
        // A diagonal covariance's eigenvalues are its diagonal entries
        // (definition), so the axes are the two sigmas, along the axes.
        let e = SkyEllipse::from_covariance(Matrix2::new(4.0, 0.0, 0.0, 1.0));
        assert!((e.semi_major_arcsec - 2.0).abs() < ELLIPSE_TOLERANCE);
        assert!((e.semi_minor_arcsec - 1.0).abs() < ELLIPSE_TOLERANCE);
        // Wider in RA cos Dec: the major axis points east, PA 90.
        assert!((e.position_angle_deg - 90.0).abs() < 1e-9, "{e:?}");
        let e = SkyEllipse::from_covariance(Matrix2::new(1.0, 0.0, 0.0, 9.0));
        assert!((e.semi_major_arcsec - 3.0).abs() < ELLIPSE_TOLERANCE);
        assert!((e.semi_minor_arcsec - 1.0).abs() < ELLIPSE_TOLERANCE);
        // Wider in Dec: north, PA 0.
        assert!(e.position_angle_deg.abs() < 1e-9, "{e:?}");
        // Chi^2 of a 1-sigma step along an axis is 1 (definition).
        assert!((e.mahalanobis2(Vector2::new(0.0, 3.0)).unwrap() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn position_angle_runs_from_north_through_east() {
        // Position angle: from north towards east (the astronomical
        // convention; e.g. the Explanatory Supplement to the Astronomical
        // Almanac, memory). A major axis along (east, north) =
        // (sin PA, cos PA) must come back as PA, modulo 180.
        for pa_deg in [0.0_f64, 30.0, 45.0, 89.0, 120.0, 179.0, 210.0] {
            let (s, c) = pa_deg.to_radians().sin_cos();
            let major = Vector2::new(s, c);
            let minor = Vector2::new(c, -s);
            let cov = major * major.transpose() * 2.5_f64.powi(2)
                + minor * minor.transpose() * 0.4_f64.powi(2);
            let e = SkyEllipse::from_covariance(cov);
            assert!((e.semi_major_arcsec - 2.5).abs() < ELLIPSE_TOLERANCE);
            assert!((e.semi_minor_arcsec - 0.4).abs() < ELLIPSE_TOLERANCE);
            let expected = pa_deg.rem_euclid(180.0);
            let diff = (e.position_angle_deg - expected + 90.0).rem_euclid(180.0) - 90.0;
            assert!(diff.abs() < 1e-9, "PA {pa_deg}: {e:?}");
        }
        // North-east elongated: positive correlation of east and north.
        let e = SkyEllipse::from_covariance(Matrix2::new(1.0, 0.9, 0.9, 1.0));
        assert!((e.position_angle_deg - 45.0).abs() < 1e-9, "{e:?}");
    }

    #[test]
    fn elongation_and_phase_of_a_right_isosceles_triangle() {
        // Plane geometry: Sun at the origin, observer at (1, 0, 0), body
        // at (1, 1, 0). The right angle is at the observer (elongation
        // 90 deg), the legs are equal, so the angles at the Sun and at the
        // body (the phase angle) are 45 deg each.
        let sun_from_observer = Vector3::new(-1.0, 0.0, 0.0);
        let body = Vector3::new(1.0, 1.0, 0.0);
        let rho = Vector3::new(0.0, 1.0, 0.0);
        let (elongation, phase) = elongation_and_phase(&body, &rho, &sun_from_observer);
        assert!((elongation.to_degrees() - 90.0).abs() < 1e-12);
        assert!((phase.to_degrees() - 45.0).abs() < 1e-12);
        // Opposition, body at (2, 0, 0): elongation 180 deg, phase 0
        // (collinear; definition).
        let (elongation, phase) = elongation_and_phase(
            &Vector3::new(2.0, 0.0, 0.0),
            &Vector3::new(1.0, 0.0, 0.0),
            &sun_from_observer,
        );
        assert!((elongation.to_degrees() - 180.0).abs() < 1e-12);
        assert!(phase.abs() < 1e-12);
    }

    #[test]
    fn predicted_geometry_closes_the_sun_observer_body_triangle() {
        let fit = synthetic_fit();
        let p = predict_places(
            &WobblingSun,
            &fit,
            &[point(fit.epoch.plus_days(20.0))],
            &settings(),
        )
        .unwrap();
        let p = &p[0];
        // The angles of the Sun-observer-body triangle sum to 180 deg;
        // the Sun's angle follows from the three sides (law of cosines).
        let at = ObserverAt {
            tdb: p.time.tdb(),
            state: observer_barycentric_state(&point(p.time.tdb()).observer, &p.time, &WobblingSun)
                .unwrap(),
        };
        let sun = WobblingSun.state(Body::Sun, at.tdb).unwrap().position_au;
        let d_sun = (sun - at.state.position_au).norm();
        let (r, delta) = (p.r_au, p.delta_au);
        let at_sun = ((r * r + d_sun * d_sun - delta * delta) / (2.0 * r * d_sun)).acos();
        let sum = p.elongation_rad + p.phase_rad + at_sun;
        // The Sun moves ~1e-6 au during the light time between the two
        // sides' epochs: the triangle closes to about 1e-6 rad.
        assert!((sum - std::f64::consts::PI).abs() < 1e-5, "{sum}");
        assert!(p.light_time_days > 0.0);
        assert!(
            (p.light_time_days - p.delta_au / crate::astro::constants::C_AU_PER_DAY).abs() < 1e-12
        );
    }

    #[test]
    fn rates_agree_with_a_finite_difference_of_the_place() {
        let fit = synthetic_fit();
        // +-60 s around t: the place's curvature over that interval (the
        // site's diurnal acceleration) costs far less than the tolerance.
        let h_days = 60.0 / 86_400.0;
        let t = fit.epoch.plus_days(25.3);
        let points: Vec<PredictionPoint> = [-h_days, 0.0, h_days]
            .iter()
            .map(|d| point(t.plus_days(*d)))
            .collect();
        let p = predict_places(&WobblingSun, &fit, &points, &settings()).unwrap();
        let minutes = 2.0 * h_days * 1440.0;
        let numeric = Vector2::new(
            wrap_pi(p[2].ra_rad - p[0].ra_rad) * p[1].dec_rad.cos(),
            p[2].dec_rad - p[0].dec_rad,
        ) * ARCSEC_PER_RAD
            / minutes;
        let model = p[1].rate_arcsec_per_min;
        // The model's rate leaves out d(tau)/dt, of order
        // (d delta/dt)/c ~ 1e-4 of the rate (see the module notes).
        let error = (numeric - model).norm() / model.norm();
        assert!(
            error < 5e-4,
            "model {model} numeric {numeric} error {error:.2e}"
        );
        println!("rate {model} arcsec/min, relative difference {error:.2e}");
    }

    #[test]
    fn monte_carlo_agrees_with_the_linear_map_for_a_small_covariance() {
        let fit = synthetic_fit();
        let points: Vec<PredictionPoint> = [-30.0, 10.0, 60.0]
            .iter()
            .map(|d| point(fit.epoch.plus_days(*d)))
            .collect();
        let linear = predict_places(&WobblingSun, &fit, &points, &settings()).unwrap();
        let mc_settings = PredictSettings {
            method: EllipseMethod::MonteCarlo {
                samples: 400,
                seed: 5,
            },
            ..settings()
        };
        let mc = predict_places(&WobblingSun, &fit, &points, &mc_settings).unwrap();
        for (l, m) in linear.iter().zip(&mc) {
            assert_eq!(l.ellipse_source, EllipseSource::Linear);
            let EllipseSource::MonteCarlo {
                samples,
                mean_offset_arcsec,
                ..
            } = m.ellipse_source
            else {
                panic!("not Monte Carlo");
            };
            assert_eq!(samples, 400);
            assert_eq!((l.ra_rad, l.dec_rad), (m.ra_rad, m.dec_rad));
            // A sample sigma from N = 400 has a relative standard error of
            // about 1/sqrt(2 N) = 3.5% (normal theory; memory): 15% is
            // over four of them.
            let major = m.ellipse.semi_major_arcsec / l.ellipse.semi_major_arcsec;
            let minor = m.ellipse.semi_minor_arcsec / l.ellipse.semi_minor_arcsec;
            assert!((major - 1.0).abs() < 0.15, "major ratio {major}");
            assert!((minor - 1.0).abs() < 0.15, "minor ratio {minor}");
            // The mean of N draws lies within a few sigma / sqrt(N).
            let mean = mean_offset_arcsec.norm() / l.ellipse.semi_major_arcsec;
            assert!(mean < 5.0 / 400f64.sqrt(), "mean offset {mean}");
            println!("ratios major {major:.3} minor {minor:.3}");
        }
    }

    #[test]
    fn errors_say_what_is_missing() {
        let mut fit = synthetic_fit();
        let points = [point(fit.epoch)];
        let few = PredictSettings {
            method: EllipseMethod::MonteCarlo {
                samples: 3,
                seed: 1,
            },
            ..settings()
        };
        assert!(matches!(
            predict_places(&WobblingSun, &fit, &points, &few),
            Err(PredictError::TooFewSamples { samples: 3 })
        ));
        fit.covariance = None;
        let err = predict_places(&WobblingSun, &fit, &points, &settings()).unwrap_err();
        assert!(matches!(err, PredictError::NoCovariance), "{err}");
    }

    #[test]
    fn a_magnitude_law_gives_each_place_a_magnitude() {
        let fit = synthetic_fit();
        let law = MagnitudeLaw::Total { m1: 12.0, k1: 10.0 };
        let s = PredictSettings {
            magnitude: Some(law),
            ..settings()
        };
        let p = predict_places(&WobblingSun, &fit, &[point(fit.epoch.plus_days(3.0))], &s).unwrap();
        let expected = predict_mag(law, p[0].r_au, p[0].delta_au, p[0].phase_rad);
        assert_eq!(p[0].magnitude, Some(expected));
    }
}
