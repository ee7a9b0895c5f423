//! The observation model: where a trajectory puts the body on the sky of
//! one observation, and how that place moves with the fitted parameters.
//!
//! Frames and origins: the [`Trajectory`] is heliocentric (ICRF axes); the
//! observer comes barycentric from [`observer_barycentric_state`]. The light
//! leaves the body at t_e = t - tau, so the body's barycentric position is
//! the trajectory's heliocentric one at t_e plus the Sun's barycentric
//! position at t_e, and tau solves tau = |x(t - tau) - R(t)| / c by fixed
//! point iteration (each pass gains about v/c ~ 1e-4, so three passes reach
//! round-off; we iterate to 1e-13 day or at most [`LIGHT_TIME_PASSES`]).
//! Astrometric places, measured against catalogue stars, carry the same
//! aberration and light deflection as the stars, so none is applied.
//!
//! Partials: the parameters are the heliocentric state at the trajectory's
//! epoch and the free A_i. d x(t_e) / d p comes from the state transition
//! matrix and the sensitivities at the emission time, and the dependence of
//! t_e itself on p (through tau) is included: with rho = x(t_e) - R(t),
//! d t_e = -(rho_hat . d rho) / c, so
//! d rho = (I + v rho_hat^T / c)^-1 X dp = X dp - v (rho_hat . X dp) / (c + rho_hat . v),
//! v the body's barycentric velocity at t_e. The term is of order v/c
//! ~ 1e-4 of the partials.

use nalgebra::{DMatrix, Matrix2x3, Vector2, Vector3};
use thiserror::Error;

use crate::astro::constants::C_AU_PER_DAY;
use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::observer::{observer_barycentric_state, ObserverError, ObserverPosition};
use crate::astro::propagation::{PropagationError, Trajectory};
use crate::astro::time::{Epoch, ScaledInstant};

/// Radians to arcseconds.
pub const ARCSEC_PER_RAD: f64 = 180.0 * 3600.0 / std::f64::consts::PI;

/// Most fixed-point passes of the light-time equation.
pub const LIGHT_TIME_PASSES: usize = 6;

/// Light-time convergence, days (~1e-8 s).
const LIGHT_TIME_TOLERANCE_DAYS: f64 = 1e-13;

/// One astrometric position as the fitter needs it.
#[derive(Debug, Clone, PartialEq)]
pub struct AstrometricObservation {
    /// The observation time in every scale (TDB for the dynamics, UT1 and TT
    /// for the observer's place).
    pub time: ScaledInstant,
    pub observer: ObserverPosition,
    /// Astrometric right ascension and declination (ICRF), radians.
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// Stated uncertainty of RA * cos(Dec), arcsec (`None` when not given).
    pub sigma_ra_arcsec: Option<f64>,
    /// Stated uncertainty of Dec, arcsec.
    pub sigma_dec_arcsec: Option<f64>,
    /// Correlation of the RA * cos(Dec) and Dec errors (0 when not given).
    pub correlation: f64,
    /// Stated uncertainty of the time, seconds.
    pub sigma_time_s: Option<f64>,
    /// Station code, for per-station defaults and night grouping.
    pub station: String,
}

#[derive(Debug, Error)]
pub enum ObserveError {
    #[error("observer position: {0}")]
    Observer(#[from] ObserverError),
    #[error("Sun position at the emission time: {0}")]
    Ephemeris(#[from] EphemerisError),
    #[error("body position at the emission time: {0}")]
    Propagation(#[from] PropagationError),
    #[error("the body coincides with the observer")]
    ZeroDistance,
}

/// Where the observer was, once per observation: it does not depend on the
/// orbit, so a fit computes it once.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ObserverAt {
    pub tdb: Epoch,
    /// Barycentric ICRF state, au and au/day.
    pub state: StateVector,
}

impl ObserverAt {
    pub fn of(
        observation: &AstrometricObservation,
        ephemeris: &dyn Ephemeris,
    ) -> Result<Self, ObserveError> {
        Ok(Self {
            tdb: observation.time.tdb(),
            state: observer_barycentric_state(&observation.observer, &observation.time, ephemeris)?,
        })
    }
}

/// The computed place of the body for one observation.
#[derive(Debug, Clone, PartialEq)]
pub struct Prediction {
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// Observer-to-body vector at emission, au.
    pub rho_au: Vector3<f64>,
    pub emission: Epoch,
    pub light_time_days: f64,
    /// Apparent motion on the sky: d(RA) cos(Dec)/dt and d(Dec)/dt in
    /// arcsec per second (from the body's motion relative to the observer).
    pub rate_arcsec_per_s: Vector2<f64>,
    /// 2 x (6 + k) partials of (RA cos Dec, Dec) in arcsec per parameter
    /// unit (au, au/day, au/day^2), when asked for.
    pub partials_arcsec: Option<DMatrix<f64>>,
}

/// Rows mapping a change of rho to (cos(Dec) d RA, d Dec), radians per au.
fn sky_projection(rho: &Vector3<f64>) -> Matrix2x3<f64> {
    let (x, y, z) = (rho.x, rho.y, rho.z);
    let r2 = rho.norm_squared();
    let r = r2.sqrt();
    let rxy = x.hypot(y);
    Matrix2x3::new(
        -y / (rxy * r),
        x / (rxy * r),
        0.0,
        -x * z / (rxy * r2),
        -y * z / (rxy * r2),
        rxy / r2,
    )
}

/// RA in [0, 2 pi) and Dec of a direction.
pub fn ra_dec(rho: &Vector3<f64>) -> (f64, f64) {
    let ra = rho.y.atan2(rho.x).rem_euclid(std::f64::consts::TAU);
    let dec = (rho.z / rho.norm()).clamp(-1.0, 1.0).asin();
    (ra, dec)
}

/// The computed place at the observer's time; with `partials` the
/// trajectory must carry its variational equations.
pub fn predict(
    trajectory: &Trajectory,
    ephemeris: &dyn Ephemeris,
    observer: &ObserverAt,
    partials: bool,
) -> Result<Prediction, ObserveError> {
    let receiver = observer.state.position_au;
    let mut tau = 0.0;
    let mut body = barycentric_body(trajectory, ephemeris, observer.tdb)?;
    for _ in 0..LIGHT_TIME_PASSES {
        let next = (body.position_au - receiver).norm() / C_AU_PER_DAY;
        let change = (next - tau).abs();
        tau = next;
        body = barycentric_body(trajectory, ephemeris, observer.tdb.plus_days(-tau))?;
        if change < LIGHT_TIME_TOLERANCE_DAYS {
            break;
        }
    }
    let emission = observer.tdb.plus_days(-tau);
    let rho = body.position_au - receiver;
    if rho.norm() == 0.0 || rho.x.hypot(rho.y) == 0.0 {
        return Err(ObserveError::ZeroDistance);
    }
    let (ra, dec) = ra_dec(&rho);
    let projection = sky_projection(&rho);
    let relative_velocity = body.velocity_au_per_day - observer.state.velocity_au_per_day;
    let rate_arcsec_per_s = projection * relative_velocity * (ARCSEC_PER_RAD / 86_400.0);

    let partials_arcsec = if partials {
        let at = trajectory.state_with_partials(emission)?;
        let k = at.sensitivity.ncols();
        // X = d x(t_e) / d p, positions only, 3 x (6 + k).
        let mut x = DMatrix::zeros(3, 6 + k);
        x.view_mut((0, 0), (3, 6))
            .copy_from(&at.stm.fixed_rows::<3>(0));
        if k > 0 {
            x.view_mut((0, 6), (3, k))
                .copy_from(&at.sensitivity.rows(0, 3));
        }
        let rho_hat = rho / rho.norm();
        let v = body.velocity_au_per_day;
        let denominator = C_AU_PER_DAY + rho_hat.dot(&v);
        // d rho = X dp - v (rho_hat . X dp) / (c + rho_hat . v)
        let along = rho_hat.transpose() * &x;
        let d_rho = &x - DMatrix::from_column_slice(3, 1, v.as_slice()) * along / denominator;
        let proj = DMatrix::from_column_slice(2, 3, projection.as_slice());
        Some(proj * d_rho * ARCSEC_PER_RAD)
    } else {
        None
    };
    Ok(Prediction {
        ra_rad: ra,
        dec_rad: dec,
        rho_au: rho,
        emission,
        light_time_days: tau,
        rate_arcsec_per_s,
        partials_arcsec,
    })
}

/// Barycentric state of the body: heliocentric trajectory + the Sun.
fn barycentric_body(
    trajectory: &Trajectory,
    ephemeris: &dyn Ephemeris,
    t: Epoch,
) -> Result<StateVector, ObserveError> {
    let helio = trajectory.state(t)?;
    let sun = ephemeris.state(Body::Sun, t)?;
    Ok(StateVector::new(
        helio.position_au + sun.position_au,
        helio.velocity_au_per_day + sun.velocity_au_per_day,
    ))
}

/// Observed minus computed in (RA cos Dec, Dec), arcsec. The RA difference
/// is wrapped into (-pi, pi] and scaled by the cosine of the observed Dec.
pub fn residual_arcsec(
    observation: &AstrometricObservation,
    prediction: &Prediction,
) -> Vector2<f64> {
    let d_ra = wrap_pi(observation.ra_rad - prediction.ra_rad);
    Vector2::new(
        d_ra * observation.dec_rad.cos() * ARCSEC_PER_RAD,
        (observation.dec_rad - prediction.dec_rad) * ARCSEC_PER_RAD,
    )
}

/// An angle brought into (-pi, pi].
pub fn wrap_pi(angle: f64) -> f64 {
    use std::f64::consts::{PI, TAU};
    let a = angle.rem_euclid(TAU);
    if a > PI {
        a - TAU
    } else {
        a
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::ephemeris::Body;
    use crate::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
    use crate::astro::propagation::PropagationSettings;
    use crate::fit::test_support::{belt_state, shell, WobblingSun};

    /// Central differences of the re-integrated model against the chain
    /// rule, relative to the partial column's size: the brief asks 1e-5.
    const PARTIAL_RELATIVE_TOLERANCE: f64 = 1e-5;
    /// The light-time equation solved to round-off of a few-au distance.
    const LIGHT_TIME_RESIDUAL_DAYS: f64 = 1e-12;

    fn model() -> ForceModel {
        let ng = NonGravModel::new(
            DistanceLaw::InverseSquare,
            [3e-8, -2e-8, 0.0],
            FreeParameters::new(true, true, false),
        );
        ForceModel::new(&[Body::Earth, Body::Jupiter], false, Some(ng)).unwrap()
    }

    fn settings() -> PropagationSettings {
        PropagationSettings {
            tolerance: 1e-12,
            ..PropagationSettings::default()
        }
    }

    fn trajectory(state: &StateVector, model: &ForceModel, epoch: Epoch) -> Trajectory {
        Trajectory::integrate(
            &WobblingSun,
            model,
            epoch,
            state,
            epoch.plus_days(-40.0),
            epoch.plus_days(40.0),
            &settings(),
        )
        .unwrap()
    }

    #[test]
    fn light_time_equation_is_solved() {
        let (epoch, state) = belt_state();
        let m = model();
        let tr = trajectory(&state, &m, epoch);
        let obs = shell(epoch.plus_days(12.3), "ZQA", 17.0);
        let at = ObserverAt::of(&obs, &WobblingSun).unwrap();
        let p = predict(&tr, &WobblingSun, &at, false).unwrap();
        // tau = |x(t - tau) - R(t)| / c, with x barycentric.
        let sun = WobblingSun.state(Body::Sun, p.emission).unwrap();
        let x = tr.state(p.emission).unwrap().position_au + sun.position_au;
        let tau = (x - at.state.position_au).norm() / C_AU_PER_DAY;
        assert!((tau - p.light_time_days).abs() < LIGHT_TIME_RESIDUAL_DAYS);
        let (ra, dec) = ra_dec(&p.rho_au);
        assert_eq!((ra, dec), (p.ra_rad, p.dec_rad));
    }

    #[test]
    fn residuals_wrap_right_ascension() {
        let mut obs = shell(Epoch::J2000, "ZQA", 0.0);
        obs.ra_rad = 1e-6;
        obs.dec_rad = 0.5;
        let p = Prediction {
            ra_rad: std::f64::consts::TAU - 1e-6,
            dec_rad: 0.5,
            rho_au: Vector3::x(),
            emission: Epoch::J2000,
            light_time_days: 0.0,
            rate_arcsec_per_s: Vector2::zeros(),
            partials_arcsec: None,
        };
        let r = residual_arcsec(&obs, &p);
        // 2e-6 rad * cos(0.5) in arcsec: definition of the residual.
        let expected = 2e-6 * 0.5_f64.cos() * ARCSEC_PER_RAD;
        assert!((r.x - expected).abs() < 1e-9, "{r}");
        assert_eq!(r.y, 0.0);
    }

    #[test]
    fn partials_match_central_differences() {
        let (epoch, state) = belt_state();
        let nominal_model = model();
        let nominal = trajectory(&state, &nominal_model, epoch);
        let times = [-35.0, -3.2, 0.0, 18.7, 39.0];
        let observations: Vec<ObserverAt> = times
            .iter()
            .map(|d| {
                ObserverAt::of(&shell(epoch.plus_days(*d), "ZQB", 250.0), &WobblingSun).unwrap()
            })
            .collect();
        // Steps large enough that the re-integrations' round-off (~1e-14 au
        // in position) stays far below the difference; the model is so
        // nearly linear in the A_i that a step of several times their size
        // costs nothing in truncation.
        let steps = [1e-6, 1e-6, 1e-6, 1e-6, 1e-6, 1e-6, 1e-7, 1e-7];
        let perturbed = |column: usize, h: f64| -> Trajectory {
            let mut s = state;
            let mut m = nominal_model.clone();
            if column < 3 {
                s.position_au[column] += h;
            } else if column < 6 {
                s.velocity_au_per_day[column - 3] += h;
            } else {
                let mut ng = *m.nongrav().unwrap();
                ng.a_au_per_day2[column - 6] += h;
                m = m.with_nongrav(ng).unwrap();
            }
            trajectory(&s, &m, epoch)
        };
        let mut worst = 0.0_f64;
        for (column, h) in steps.iter().enumerate() {
            let plus = perturbed(column, *h);
            let minus = perturbed(column, -*h);
            let mut pairs = Vec::new();
            for at in &observations {
                let p0 = predict(&nominal, &WobblingSun, at, true).unwrap();
                let analytic = p0
                    .partials_arcsec
                    .as_ref()
                    .unwrap()
                    .column(column)
                    .into_owned();
                let pp = predict(&plus, &WobblingSun, at, false).unwrap();
                let pm = predict(&minus, &WobblingSun, at, false).unwrap();
                let numeric = Vector2::new(
                    wrap_pi(pp.ra_rad - pm.ra_rad) * p0.dec_rad.cos(),
                    pp.dec_rad - pm.dec_rad,
                ) * (ARCSEC_PER_RAD / (2.0 * h));
                pairs.push((at.tdb, Vector2::new(analytic[0], analytic[1]), numeric));
            }
            // Relative to the partial's size over the arc: near the epoch
            // the velocity and A_i partials go to zero, and their absolute
            // error is what matters there.
            let scale = pairs.iter().map(|(_, a, _)| a.norm()).fold(0.0, f64::max);
            for (t, analytic, numeric) in pairs {
                let error = (numeric - analytic).norm() / scale;
                worst = worst.max(error);
                assert!(
                    error < PARTIAL_RELATIVE_TOLERANCE,
                    "column {column} at {t}: analytic {analytic} numeric {numeric}"
                );
            }
        }
        println!("worst relative partial error {worst:.2e}");
    }
}
