//! Differential correction: weighted least squares over the heliocentric
//! state at an epoch and the free A_i, with outlier rejection and recovery.
//!
//! The step (one damped Gauss-Newton solve) is kept apart from the loop
//! that drives it ([`correct`]) and from the outer rejection loop
//! ([`fit_orbit`]).
//!
//! - Parameters q: position (au), velocity (au/day) and the free A_i in
//!   units of [`FitSettings::nongrav_unit_au_per_day2`] (1e-8 au/day^2), so
//!   that the columns of the Jacobian are of comparable size.
//! - Whitening: each observation's residual and partial rows are multiplied
//!   by L^-1, L the Cholesky factor of its 2 x 2 covariance, so the problem
//!   becomes an ordinary least-squares one, min |b - A dq|^2.
//! - Step: Levenberg-Marquardt, min |b - A dq|^2 + lambda |D dq|^2 with D
//!   the column norms of A (Marquardt's scaling), solved by an SVD of the
//!   stacked matrix [A; sqrt(lambda) D]. lambda falls tenfold after a step
//!   that lowers chi^2 and rises tenfold after one that does not.
//! - Convergence: the undamped Gauss-Newton step is shorter than
//!   [`FitSettings::step_tolerance_sigma`] in the metric of the formal
//!   covariance, |A dq_GN| < tol; chi^2 can then fall by at most tol^2.
//!   Since |dq_i| / sigma_i <= |A dq_GN| for every parameter, no parameter
//!   moves by more than tol of its sigma either.
//! - A minimum is also recognised when the line search stalls: when no
//!   damping lowers chi^2 (or the iteration limit is reached) while the
//!   Gauss-Newton step is below [`FitSettings::stall_tolerance_sigma`], the
//!   fit is at the floor that rounding and the integrator's own error put
//!   under chi^2, not diverging: the step could lower chi^2 by at most its
//!   square, far below anything that changes a conclusion. Only a stall
//!   with a larger step is divergence.
//! - Covariance: C = (A^T A)^-1 without damping, V S^-2 V^T from the SVD of
//!   A at the solution.
//! - Outliers (Carpino, Milani & Chesley 2003, Icarus 166, 248; memory):
//!   after each converged fit, chi^2_i = xi^T Gamma^-1 xi with
//!   Gamma = Sigma - B C B^T for used and Sigma + B C B^T for rejected
//!   observations; used ones above the rejection threshold are dropped
//!   (worst first, never leaving fewer than the minimum), rejected ones
//!   below the recovery threshold come back, and the fit is repeated until
//!   nothing changes.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use nalgebra::{DMatrix, DVector, Matrix2, Vector2, Vector3};
use thiserror::Error;

use crate::astro::ephemeris::{Ephemeris, StateVector};
use crate::astro::forces::{ForceModel, ForceModelError};
use crate::astro::propagation::{PropagationSettings, Trajectory};
use crate::astro::time::Epoch;

use super::observe::{predict, residual_arcsec, AstrometricObservation, ObserveError, ObserverAt};
use super::weights::{covariances, WeightError, WeightSettings};

/// A request to stop, shared with whoever may make it (the daemon's
/// shutdown). A fit checks it between iterations and ends as
/// [`Termination::Cancelled`]; nothing here waits for anything.
#[derive(Debug, Clone, Default)]
pub struct Cancel(Option<Arc<AtomicBool>>);

impl Cancel {
    /// A flag that `set` on any clone raises for all.
    pub fn new() -> Self {
        Self(Some(Arc::new(AtomicBool::new(false))))
    }

    pub fn set(&self) {
        if let Some(f) = &self.0 {
            f.store(true, Ordering::Relaxed);
        }
    }

    pub fn is_set(&self) -> bool {
        self.0.as_ref().is_some_and(|f| f.load(Ordering::Relaxed))
    }
}

/// Settings compare by their values; two cancel flags are the same
/// setting whatever their state.
impl PartialEq for Cancel {
    fn eq(&self, _: &Self) -> bool {
        true
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct FitSettings {
    /// Damped Gauss-Newton iterations per fit (each outlier pass is a fit).
    pub max_iterations: usize,
    /// Convergence: the Gauss-Newton step in units of the formal sigma.
    pub step_tolerance_sigma: f64,
    /// A stalled line search (or the iteration limit) with a Gauss-Newton
    /// step below this many sigma is a minimum, not a failure.
    pub stall_tolerance_sigma: f64,
    pub initial_damping: f64,
    /// Give up when lambda grows beyond this without lowering chi^2.
    pub max_damping: f64,
    /// Scale of the A_i inside the solver, au/day^2.
    pub nongrav_unit_au_per_day2: f64,
    pub outlier_rejection: bool,
    pub reject_chi2: f64,
    pub recover_chi2: f64,
    /// Rejection never leaves fewer observations in use than this.
    pub min_used_observations: usize,
    pub max_outlier_passes: usize,
    /// The trajectory covers the observations plus this margin (light time).
    pub arc_margin_days: f64,
    pub propagation: PropagationSettings,
    pub weights: WeightSettings,
    /// Raised to stop the fit at its next iteration.
    pub cancel: Cancel,
    /// Observations (by index) an analyst has forced in: never rejected as
    /// outliers. Empty for none.
    pub protected: Vec<bool>,
}

impl Default for FitSettings {
    fn default() -> Self {
        Self {
            max_iterations: 30,
            step_tolerance_sigma: 1e-3,
            // chi^2 could fall by at most 0.05^2 = 0.0025 more: no test,
            // sigma or verdict moves for that.
            stall_tolerance_sigma: 0.05,
            initial_damping: 1e-3,
            max_damping: 1e10,
            nongrav_unit_au_per_day2: 1e-8,
            outlier_rejection: true,
            reject_chi2: 8.0,
            recover_chi2: 7.0,
            min_used_observations: 6,
            max_outlier_passes: 12,
            arc_margin_days: 1.0,
            propagation: PropagationSettings::default(),
            weights: WeightSettings::default(),
            cancel: Cancel::default(),
            protected: Vec::new(),
        }
    }
}

/// Why the correction stopped.
#[derive(Debug, Clone, PartialEq)]
pub enum Termination {
    Converged,
    /// The iteration limit was reached before the step became small.
    MaxIterations,
    /// No damping could make chi^2 fall (or every trial orbit failed).
    Diverged {
        reason: String,
    },
    /// The whitened Jacobian is (numerically) rank deficient: the data do
    /// not determine every parameter.
    Singular {
        condition_number: f64,
    },
    /// Rejection and recovery kept changing the used set.
    OutlierCycle,
    /// Stopped on request (the daemon shutting down) before the end.
    Cancelled,
}

impl std::fmt::Display for Termination {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Converged => write!(f, "converged"),
            Self::MaxIterations => write!(f, "iteration limit reached"),
            Self::Diverged { reason } => write!(f, "diverged: {reason}"),
            Self::Singular { condition_number } => write!(
                f,
                "singular normal matrix (condition number {condition_number:.3e})"
            ),
            Self::OutlierCycle => write!(f, "outlier rejection did not settle"),
            Self::Cancelled => write!(f, "cancelled"),
        }
    }
}

#[derive(Debug, Error)]
pub enum FitError {
    #[error("{used} observations give {rows} equations for {parameters} parameters")]
    TooFewObservations {
        used: usize,
        rows: usize,
        parameters: usize,
    },
    #[error("{flags} used-set flags for {observations} observations")]
    UsedSetLength { flags: usize, observations: usize },
    #[error("{observers} observer places for {observations} observations")]
    ObserverCount {
        observers: usize,
        observations: usize,
    },
    #[error("observation {index}: {source}")]
    Observer { index: usize, source: ObserveError },
    #[error("the starting orbit cannot be evaluated: {0}")]
    StartingOrbit(ObserveError),
    #[error("weights: {0}")]
    Weights(#[from] WeightError),
    #[error("observation {index} has a covariance that is not positive definite")]
    Covariance { index: usize },
    #[error("force model: {0}")]
    Model(#[from] ForceModelError),
}

/// What is fitted: the data, the forces (whose non-gravitational term, if
/// any, gives the starting A_i and which are free) and the ephemeris.
pub struct FitProblem<'a> {
    pub ephemeris: &'a dyn Ephemeris,
    pub model: &'a ForceModel,
    pub observations: &'a [AstrometricObservation],
}

/// One observation's place in the solution.
#[derive(Debug, Clone, PartialEq)]
pub struct ObservationResidual {
    /// O - C in (RA cos Dec, Dec), arcsec.
    pub residual_arcsec: Vector2<f64>,
    /// The covariance the fit used, arcsec^2.
    pub covariance_arcsec2: Matrix2<f64>,
    /// xi^T Gamma^-1 xi (see the module notes).
    pub chi2: f64,
    pub used: bool,
}

#[derive(Debug, Clone, PartialEq)]
pub struct OrbitFit {
    pub epoch: Epoch,
    /// Heliocentric ICRF state at the epoch.
    pub state: StateVector,
    /// The fitted A_i as (component 0..3, au/day^2).
    pub nongrav_au_per_day2: Vec<(usize, f64)>,
    /// The model with the fitted A_i in place.
    pub model: ForceModel,
    /// (x, y, z au, vx, vy, vz au/day, free A_i au/day^2).
    pub parameters: DVector<f64>,
    /// Covariance of `parameters` (None when singular).
    pub covariance: Option<DMatrix<f64>>,
    pub chi2: f64,
    pub dof: usize,
    /// RMS over the used observations' residual components, arcsec.
    pub rms_arcsec: f64,
    /// sqrt(chi^2 / dof): 1 when the weights are right.
    pub normalised_rms: f64,
    pub residuals: Vec<ObservationResidual>,
    /// Gauss-Newton iterations over all passes.
    pub iterations: usize,
    pub outlier_passes: usize,
    pub termination: Termination,
}

impl OrbitFit {
    pub fn used_count(&self) -> usize {
        self.residuals.iter().filter(|r| r.used).count()
    }
}

/// Residuals and (optionally) partials of every observation for one orbit.
struct Evaluation {
    residuals: Vec<Vector2<f64>>,
    /// Rows in arcsec per scaled parameter.
    partials: Vec<DMatrix<f64>>,
    rates: Vec<Vector2<f64>>,
}

/// The fixed parts of a problem: observer places and the parameter scaling.
struct Setup<'a> {
    problem: &'a FitProblem<'a>,
    settings: &'a FitSettings,
    observers: &'a [ObserverAt],
    epoch: Epoch,
    start: Epoch,
    end: Epoch,
    /// Parameter unit of each column (au, au/day, or the A_i unit).
    scales: DVector<f64>,
    free: Vec<usize>,
}

impl Setup<'_> {
    fn model_with(&self, q: &DVector<f64>) -> Result<ForceModel, ForceModelError> {
        match self.problem.model.nongrav() {
            Some(ng) if !self.free.is_empty() => {
                let mut ng = *ng;
                for (j, component) in self.free.iter().enumerate() {
                    ng.a_au_per_day2[*component] = q[6 + j] * self.scales[6 + j];
                }
                self.problem.model.clone().with_nongrav(ng)
            }
            _ => Ok(self.problem.model.clone()),
        }
    }

    fn evaluate(&self, q: &DVector<f64>, partials: bool) -> Result<Evaluation, ObserveError> {
        let state = StateVector::new(
            Vector3::new(q[0], q[1], q[2]),
            Vector3::new(q[3], q[4], q[5]),
        );
        // A bad A_i is refused by the model; that trial orbit is unusable.
        let model = self.model_with(q).map_err(|_| ObserveError::ZeroDistance)?;
        let settings = PropagationSettings {
            partials,
            ..self.settings.propagation
        };
        let trajectory = Trajectory::integrate(
            self.problem.ephemeris,
            &model,
            self.epoch,
            &state,
            self.start,
            self.end,
            &settings,
        )?;
        let n = self.observers.len();
        let mut out = Evaluation {
            residuals: Vec::with_capacity(n),
            partials: Vec::with_capacity(if partials { n } else { 0 }),
            rates: Vec::with_capacity(n),
        };
        for (o, at) in self.problem.observations.iter().zip(self.observers) {
            let p = predict(&trajectory, self.problem.ephemeris, at, partials)?;
            out.residuals.push(residual_arcsec(o, &p));
            out.rates.push(p.rate_arcsec_per_s);
            if let Some(b) = p.partials_arcsec {
                // Per scaled parameter: d/dq = d/dp * scale.
                let mut b = b;
                for (j, s) in self.scales.iter().enumerate() {
                    b.column_mut(j).scale_mut(*s);
                }
                out.partials.push(b);
            }
        }
        Ok(out)
    }
}

/// Inverse Cholesky factors of the covariances (the whitening matrices).
fn whiteners(covariances: &[Matrix2<f64>]) -> Result<Vec<Matrix2<f64>>, FitError> {
    covariances
        .iter()
        .enumerate()
        .map(|(index, c)| {
            c.cholesky()
                .and_then(|ch| ch.l().try_inverse())
                .ok_or(FitError::Covariance { index })
        })
        .collect()
}

fn chi2_of(e: &Evaluation, whiten: &[Matrix2<f64>], used: &[bool]) -> f64 {
    e.residuals
        .iter()
        .zip(whiten)
        .zip(used)
        .filter(|(_, u)| **u)
        .map(|((r, w), _)| (w * r).norm_squared())
        .sum()
}

/// The whitened Jacobian A and residual vector b of the used observations.
fn whitened_system(
    e: &Evaluation,
    whiten: &[Matrix2<f64>],
    used: &[bool],
    n: usize,
) -> (DMatrix<f64>, DVector<f64>) {
    let rows = 2 * used.iter().filter(|u| **u).count();
    let mut a = DMatrix::zeros(rows, n);
    let mut b = DVector::zeros(rows);
    let mut row = 0;
    for i in (0..used.len()).filter(|i| used[*i]) {
        let w = DMatrix::from_column_slice(2, 2, whiten[i].as_slice());
        a.view_mut((row, 0), (2, n))
            .copy_from(&(&w * &e.partials[i]));
        b.rows_mut(row, 2).copy_from(&(whiten[i] * e.residuals[i]));
        row += 2;
    }
    (a, b)
}

/// Undamped solution pieces: the length of the Gauss-Newton step in sigma
/// units, the covariance of q and the condition number.
struct Linearised {
    step_sigma: f64,
    covariance: DMatrix<f64>,
    condition_number: f64,
}

/// Singular values below this fraction of the largest count as zero.
const RANK_TOLERANCE: f64 = 1e-13;

fn linearise(a: &DMatrix<f64>, b: &DVector<f64>) -> Linearised {
    let svd = a.clone().svd(true, true);
    let s = &svd.singular_values;
    let s_max = s.max();
    let s_min = s.min();
    let condition_number = if s_min > 0.0 {
        s_max / s_min
    } else {
        f64::INFINITY
    };
    let (u, v_t) = match (&svd.u, &svd.v_t) {
        (Some(u), Some(v_t)) => (u, v_t),
        // Both were asked for; without them nothing can be solved.
        _ => {
            return Linearised {
                step_sigma: 0.0,
                covariance: DMatrix::zeros(a.ncols(), a.ncols()),
                condition_number: f64::INFINITY,
            }
        }
    };
    let n = a.ncols();
    let utb = u.transpose() * b;
    let mut covariance = DMatrix::zeros(n, n);
    let mut projected = 0.0;
    for k in 0..s.len() {
        if s[k] <= RANK_TOLERANCE * s_max {
            continue;
        }
        let v = v_t.row(k).transpose();
        covariance += &v * v.transpose() / (s[k] * s[k]);
        projected += utb[k] * utb[k];
    }
    Linearised {
        step_sigma: projected.sqrt(),
        covariance,
        condition_number,
    }
}

/// The damped step: min |b - A dq|^2 + lambda |D dq|^2.
fn damped_step(a: &DMatrix<f64>, b: &DVector<f64>, lambda: f64) -> Option<DVector<f64>> {
    let (m, n) = a.shape();
    let mut stacked = DMatrix::zeros(m + n, n);
    stacked.view_mut((0, 0), (m, n)).copy_from(a);
    for j in 0..n {
        let d = a.column(j).norm();
        stacked[(m + j, j)] = lambda.sqrt() * if d > 0.0 { d } else { 1.0 };
    }
    let mut rhs = DVector::zeros(m + n);
    rhs.rows_mut(0, m).copy_from(b);
    stacked.svd(true, true).solve(&rhs, 0.0).ok()
}

/// How a correction that can make no more progress ends: at a minimum when
/// the Gauss-Newton step left is below the stall tolerance, otherwise with
/// the failure `otherwise` describes.
fn stalled(
    step_sigma: f64,
    settings: &FitSettings,
    otherwise: impl FnOnce() -> Termination,
) -> Termination {
    if step_sigma < settings.stall_tolerance_sigma {
        Termination::Converged
    } else {
        otherwise()
    }
}

/// Result of one correction with a fixed used set.
struct Corrected {
    q: DVector<f64>,
    evaluation: Evaluation,
    covariance: DMatrix<f64>,
    iterations: usize,
    termination: Termination,
}

/// Damped Gauss-Newton from `q` with the used set and whiteners fixed.
fn correct(
    setup: &Setup,
    mut q: DVector<f64>,
    mut evaluation: Evaluation,
    whiten: &[Matrix2<f64>],
    used: &[bool],
) -> Corrected {
    let settings = setup.settings;
    let n = q.len();
    let mut chi2 = chi2_of(&evaluation, whiten, used);
    let mut lambda = settings.initial_damping;
    let mut iterations = 0;
    let termination = loop {
        let (a, b) = whitened_system(&evaluation, whiten, used, n);
        let lin = linearise(&a, &b);
        if !lin.condition_number.is_finite() || lin.condition_number * RANK_TOLERANCE > 1.0 {
            break Termination::Singular {
                condition_number: lin.condition_number,
            };
        }
        if lin.step_sigma < settings.step_tolerance_sigma {
            break Termination::Converged;
        }
        if settings.cancel.is_set() {
            break Termination::Cancelled;
        }
        if iterations >= settings.max_iterations {
            break stalled(lin.step_sigma, settings, || Termination::MaxIterations);
        }
        iterations += 1;
        let accepted = loop {
            let Some(step) = damped_step(&a, &b, lambda) else {
                break None;
            };
            let trial_q = &q + step;
            if let Ok(trial) = setup.evaluate(&trial_q, true) {
                let trial_chi2 = chi2_of(&trial, whiten, used);
                if trial_chi2.is_finite() && trial_chi2 < chi2 {
                    lambda = (lambda * 0.1).max(1e-12);
                    break Some((trial_q, trial, trial_chi2));
                }
            }
            lambda *= 10.0;
            if lambda > settings.max_damping {
                break None;
            }
        };
        match accepted {
            Some((trial_q, trial, trial_chi2)) => {
                q = trial_q;
                evaluation = trial;
                chi2 = trial_chi2;
            }
            None => {
                break stalled(lin.step_sigma, settings, || Termination::Diverged {
                    reason: format!(
                        "no step lowers chi^2 = {chi2:.6e} (damping reached {lambda:.1e}); \
                         the Gauss-Newton step was {:.3e} sigma",
                        lin.step_sigma
                    ),
                })
            }
        }
    };
    let (a, b) = whitened_system(&evaluation, whiten, used, n);
    let covariance = linearise(&a, &b).covariance;
    Corrected {
        q,
        evaluation,
        covariance,
        iterations,
        termination,
    }
}

/// Carpino-Milani-Chesley chi^2 of every observation.
fn observation_chi2(
    evaluation: &Evaluation,
    covariances: &[Matrix2<f64>],
    covariance_q: &DMatrix<f64>,
    used: &[bool],
) -> Vec<f64> {
    (0..used.len())
        .map(|i| {
            let b = &evaluation.partials[i];
            let bcb = b * covariance_q * b.transpose();
            let bcb = Matrix2::new(bcb[(0, 0)], bcb[(0, 1)], bcb[(1, 0)], bcb[(1, 1)]);
            let sigma = covariances[i];
            let gamma = if used[i] { sigma - bcb } else { sigma + bcb };
            // A used observation that fixes the orbit almost alone can
            // leave Gamma without positive definiteness by round-off; its
            // own covariance is then the honest yardstick.
            let gamma = if gamma.determinant() > 0.0 && gamma[(0, 0)] > 0.0 {
                gamma
            } else {
                sigma
            };
            let xi = evaluation.residuals[i];
            gamma
                .try_inverse()
                .map_or(f64::INFINITY, |g| (xi.transpose() * g * xi)[(0, 0)])
        })
        .collect()
}

/// The free A_i components and the parameter count, once the used set is
/// known to fit the observations and to give enough equations.
fn check_used_set(
    problem: &FitProblem,
    start_used: &[bool],
) -> Result<(Vec<usize>, usize), FitError> {
    let observations = problem.observations;
    if start_used.len() != observations.len() {
        return Err(FitError::UsedSetLength {
            flags: start_used.len(),
            observations: observations.len(),
        });
    }
    let free: Vec<usize> = problem
        .model
        .nongrav()
        .map(|ng| ng.free.indices().collect())
        .unwrap_or_default();
    let n = 6 + free.len();
    let in_use = start_used.iter().filter(|u| **u).count();
    if 2 * in_use < n || in_use == 0 {
        return Err(FitError::TooFewObservations {
            used: in_use,
            rows: 2 * in_use,
            parameters: n,
        });
    }
    Ok((free, n))
}

/// Fits the heliocentric state at `epoch` (starting from `start`) and the
/// model's free A_i to the observations.
pub fn fit_orbit(
    problem: &FitProblem,
    epoch: Epoch,
    start: &StateVector,
    settings: &FitSettings,
) -> Result<OrbitFit, FitError> {
    let all = vec![true; problem.observations.len()];
    fit_orbit_from(problem, epoch, start, settings, &all)
}

/// [`fit_orbit`] starting from a given used set (one flag per
/// observation): with rejection off, the fit keeps exactly that set, which
/// is how models are compared on the same data.
pub fn fit_orbit_from(
    problem: &FitProblem,
    epoch: Epoch,
    start: &StateVector,
    settings: &FitSettings,
    start_used: &[bool],
) -> Result<OrbitFit, FitError> {
    check_used_set(problem, start_used)?;
    let observers = observer_places(problem)?;
    fit_orbit_observed(problem, &observers, epoch, start, settings, start_used)
}

/// Where the observer of each observation was, from the problem's
/// ephemeris. The places do not depend on the orbit or the force model, so
/// a caller fitting several models to the same observations computes them
/// once and hands them to [`fit_orbit_observed`].
pub fn observer_places(problem: &FitProblem) -> Result<Vec<ObserverAt>, FitError> {
    problem
        .observations
        .iter()
        .enumerate()
        .map(|(index, o)| {
            ObserverAt::of(o, problem.ephemeris)
                .map_err(|source| FitError::Observer { index, source })
        })
        .collect()
}

/// [`fit_orbit_from`] with the observer places already known (one per
/// observation, from [`observer_places`] with the same ephemeris).
pub fn fit_orbit_observed(
    problem: &FitProblem,
    observers: &[ObserverAt],
    epoch: Epoch,
    start: &StateVector,
    settings: &FitSettings,
    start_used: &[bool],
) -> Result<OrbitFit, FitError> {
    let observations = problem.observations;
    let (free, n) = check_used_set(problem, start_used)?;
    if observers.len() != observations.len() {
        return Err(FitError::ObserverCount {
            observers: observers.len(),
            observations: observations.len(),
        });
    }
    let first = observers
        .iter()
        .map(|o| o.tdb)
        .fold(epoch, |a, b| if b < a { b } else { a });
    let last = observers
        .iter()
        .map(|o| o.tdb)
        .fold(epoch, |a, b| if b > a { b } else { a });
    let mut scales = DVector::from_element(n, 1.0);
    for j in 6..n {
        scales[j] = settings.nongrav_unit_au_per_day2;
    }
    let setup = Setup {
        problem,
        settings,
        observers,
        epoch,
        start: first.plus_days(-settings.arc_margin_days),
        end: last.plus_days(settings.arc_margin_days),
        scales,
        free,
    };
    let mut q = DVector::zeros(n);
    for i in 0..3 {
        q[i] = start.position_au[i];
        q[i + 3] = start.velocity_au_per_day[i];
    }
    if let Some(ng) = problem.model.nongrav() {
        for (j, component) in setup.free.iter().enumerate() {
            q[6 + j] = ng.a_au_per_day2[*component] / setup.scales[6 + j];
        }
    }
    let mut evaluation = setup.evaluate(&q, true).map_err(FitError::StartingOrbit)?;

    let mut used = start_used.to_vec();
    let mut iterations = 0;
    let mut passes = 0;
    let (corrected, covs, chi2_each) = loop {
        passes += 1;
        let covs = covariances(observations, &evaluation.rates, &settings.weights)?;
        let whiten = whiteners(&covs)?;
        let corrected = correct(&setup, q, evaluation, &whiten, &used);
        iterations += corrected.iterations;
        let chi2_each =
            observation_chi2(&corrected.evaluation, &covs, &corrected.covariance, &used);
        if corrected.termination != Termination::Converged || !settings.outlier_rejection {
            break (corrected, covs, chi2_each);
        }
        let changed = revise_used_set(&mut used, &chi2_each, settings);
        if !changed {
            break (corrected, covs, chi2_each);
        }
        if passes >= settings.max_outlier_passes {
            let mut corrected = corrected;
            corrected.termination = Termination::OutlierCycle;
            break (corrected, covs, chi2_each);
        }
        q = corrected.q;
        evaluation = corrected.evaluation;
    };
    summarise(&setup, corrected, covs, chi2_each, used, iterations, passes)
}

/// One rejection-and-recovery decision; true when the used set changed.
fn revise_used_set(used: &mut [bool], chi2_each: &[f64], settings: &FitSettings) -> bool {
    let mut changed = false;
    for i in 0..used.len() {
        if !used[i] && chi2_each[i] < settings.recover_chi2 {
            used[i] = true;
            changed = true;
        }
    }
    let protected = |i: usize| settings.protected.get(i).copied().unwrap_or(false);
    let mut candidates: Vec<usize> = (0..used.len())
        .filter(|i| used[*i] && chi2_each[*i] > settings.reject_chi2 && !protected(*i))
        .collect();
    candidates.sort_by(|a, b| chi2_each[*b].total_cmp(&chi2_each[*a]));
    let in_use = used.iter().filter(|u| **u).count();
    let room = in_use.saturating_sub(settings.min_used_observations);
    for i in candidates.into_iter().take(room) {
        used[i] = false;
        changed = true;
    }
    changed
}

fn summarise(
    setup: &Setup,
    corrected: Corrected,
    covs: Vec<Matrix2<f64>>,
    chi2_each: Vec<f64>,
    used: Vec<bool>,
    iterations: usize,
    outlier_passes: usize,
) -> Result<OrbitFit, FitError> {
    let n = corrected.q.len();
    let whiten = whiteners(&covs)?;
    let chi2 = chi2_of(&corrected.evaluation, &whiten, &used);
    let used_count = used.iter().filter(|u| **u).count();
    let dof = (2 * used_count).saturating_sub(n);
    let sum_sq: f64 = corrected
        .evaluation
        .residuals
        .iter()
        .zip(&used)
        .filter(|(_, u)| **u)
        .map(|(r, _)| r.norm_squared())
        .sum();
    let rms_arcsec = (sum_sq / (2 * used_count).max(1) as f64).sqrt();
    let normalised_rms = if dof > 0 {
        (chi2 / dof as f64).sqrt()
    } else {
        f64::NAN
    };
    let scale = DMatrix::from_diagonal(&setup.scales);
    let parameters = corrected.q.component_mul(&setup.scales);
    let covariance = match corrected.termination {
        Termination::Singular { .. } => None,
        _ => Some(&scale * &corrected.covariance * &scale),
    };
    let model = setup.model_with(&corrected.q)?;
    let nongrav_au_per_day2 = setup
        .free
        .iter()
        .enumerate()
        .map(|(j, c)| (*c, parameters[6 + j]))
        .collect();
    let residuals = corrected
        .evaluation
        .residuals
        .iter()
        .zip(&covs)
        .zip(chi2_each.iter().zip(&used))
        .map(|((r, c), (x, u))| ObservationResidual {
            residual_arcsec: *r,
            covariance_arcsec2: *c,
            chi2: *x,
            used: *u,
        })
        .collect();
    Ok(OrbitFit {
        epoch: setup.epoch,
        state: StateVector::new(
            Vector3::new(parameters[0], parameters[1], parameters[2]),
            Vector3::new(parameters[3], parameters[4], parameters[5]),
        ),
        nongrav_au_per_day2,
        model,
        parameters,
        covariance,
        chi2,
        dof,
        rms_arcsec,
        normalised_rms,
        residuals,
        iterations,
        outlier_passes,
        termination: corrected.termination,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::ephemeris::Body;
    use crate::fit::test_support::{add_noise, belt_observations, belt_state, WobblingSun};

    /// The figure of the report that prompted the stall rule: a fit at its
    /// minimum whose Gauss-Newton step was 1.241e-3 sigma when the line
    /// search gave up.
    #[test]
    fn a_stall_with_a_tiny_step_is_a_minimum() {
        let settings = FitSettings::default();
        let diverged = || Termination::Diverged {
            reason: "no step lowers chi^2".into(),
        };
        assert_eq!(
            stalled(1.241e-3, &settings, diverged),
            Termination::Converged
        );
        assert_eq!(stalled(0.5, &settings, diverged), diverged());
        assert_eq!(
            stalled(0.5, &settings, || Termination::MaxIterations),
            Termination::MaxIterations
        );
    }

    fn problem_fit(settings: &FitSettings, start: &StateVector) -> OrbitFit {
        let model = ForceModel::new(&[Body::Jupiter], false, None).unwrap();
        let mut obs = belt_observations(&model, -20.0, 24, 2.0);
        add_noise(&mut obs, 15);
        let problem = FitProblem {
            ephemeris: &WobblingSun,
            model: &model,
            observations: &obs,
        };
        fit_orbit(&problem, belt_state().0, start, settings).unwrap()
    }

    /// A fit started at its own minimum and asked for a step no rounding
    /// can deliver (tolerance 0): every further step is rounding, so the
    /// line search stalls or the iteration limit comes, with a step far
    /// below the stall tolerance. That is a minimum and must be reported
    /// converged; with the stall rule switched off the same fit fails,
    /// which shows the rule is what recognised it.
    #[test]
    fn a_fit_stopped_at_its_minimum_is_converged() {
        let all_in = FitSettings {
            outlier_rejection: false,
            ..FitSettings::default()
        };
        let first = problem_fit(&all_in, &belt_state().1);
        assert_eq!(first.termination, Termination::Converged);
        let no_step_small_enough = FitSettings {
            step_tolerance_sigma: 0.0,
            max_iterations: 5,
            ..all_in
        };
        let again = problem_fit(&no_step_small_enough, &first.state);
        assert_eq!(again.termination, Termination::Converged);
        // Same minimum: chi^2 within rounding of the first fit's.
        assert!(
            (again.chi2 - first.chi2).abs() < 1e-6 * first.chi2,
            "{} vs {}",
            again.chi2,
            first.chi2
        );
        let without_rule = FitSettings {
            stall_tolerance_sigma: 0.0,
            ..no_step_small_enough
        };
        let failed = problem_fit(&without_rule, &first.state);
        assert_ne!(failed.termination, Termination::Converged);
    }

    /// A 20-arcsec error in one observation is rejected, unless an analyst
    /// forced that observation in.
    #[test]
    fn a_protected_observation_is_never_rejected() {
        let model = ForceModel::new(&[Body::Jupiter], false, None).unwrap();
        let mut obs = belt_observations(&model, -20.0, 24, 2.0);
        add_noise(&mut obs, 15);
        obs[5].dec_rad += 20.0 / crate::fit::observe::ARCSEC_PER_RAD;
        let problem = FitProblem {
            ephemeris: &WobblingSun,
            model: &model,
            observations: &obs,
        };
        let (epoch, start) = belt_state();
        let free = fit_orbit(&problem, epoch, &start, &FitSettings::default()).unwrap();
        assert!(!free.residuals[5].used, "the bad observation is rejected");
        let mut protected = vec![false; obs.len()];
        protected[5] = true;
        let settings = FitSettings {
            protected,
            ..FitSettings::default()
        };
        let forced = fit_orbit(&problem, epoch, &start, &settings).unwrap();
        assert!(forced.residuals[5].used, "forced in");
        assert_eq!(forced.termination, Termination::Converged);
    }
}
