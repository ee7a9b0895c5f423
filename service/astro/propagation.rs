//! Trajectories: a state and its partials at any epoch inside an arc.
//!
//! A [`Trajectory`] is integrated once, forwards and backwards from the
//! epoch of its initial state, and then answered from the integrator's dense
//! output: no query integrates again.
//!
//! With partials on, the integrated coordinates are the heliocentric
//! position r and the 3 x (6 + k) matrix X = d r / d(r0, v0, A_free), whose
//! second derivative follows from the variational equations
//! X'' = (d a/d r) X + (d a/d v) X' + [0 | d a/d A]
//! with X(t0) = [I 0 | 0], X'(t0) = [0 I | 0]. Stacking X over X' gives the
//! 6 x 6 state transition matrix and the 6 x k sensitivities.
//!
//! Non-gravitational time offset DT: the law needs |r(t - DT)|. It is taken
//! from a gravity-only reference trajectory, with its own state transition
//! matrix, integrated first from the same initial state over the arc
//! widened by DT. The reference leaves out the non-gravitational change of
//! that distance (second order in A_i). The lagged distance depends on the
//! initial state through the reference's STM, and that dependence is
//! chained into the variational equations: column c of X'' gains
//! (d a / d r_lag) (r_lag_hat . d r(t - DT) / d y0_c).

use nalgebra::{Matrix6, Matrix6xX, Vector3};
use thiserror::Error;

use super::constants::gm;
use super::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use super::forces::{ForceModel, Origin, PerturberPositions};
use super::integrator::{
    integrate, DenseOutput, IntegrationError, IntegrationStats, RadauSettings, SecondOrderSystem,
};
use super::time::Epoch;

/// How to integrate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PropagationSettings {
    /// Step-control tolerance of the integrator (see [`RadauSettings`]).
    pub tolerance: f64,
    /// Integrate the state transition matrix and the A_i sensitivities.
    pub partials: bool,
    /// Give up after this many steps in either direction.
    pub max_steps: usize,
}

impl Default for PropagationSettings {
    fn default() -> Self {
        Self {
            tolerance: 1e-9,
            partials: true,
            max_steps: 200_000,
        }
    }
}

#[derive(Debug, Error)]
pub enum PropagationError {
    #[error("{epoch} is outside the integrated arc {start} .. {end}")]
    OutsideArc {
        epoch: Epoch,
        start: Epoch,
        end: Epoch,
    },
    #[error("the arc end {end} is before its start {start}")]
    EmptyArc { start: Epoch, end: Epoch },
    #[error("this trajectory was integrated without partials")]
    NoPartials,
    #[error("initial state is not finite or has zero radius or angular momentum")]
    BadInitialState,
    #[error("integration failed: {0}")]
    Integration(#[from] IntegrationError<EphemerisError>),
}

/// The state and its partial derivatives at one epoch.
#[derive(Debug, Clone, PartialEq)]
pub struct StatePartials {
    pub state: StateVector,
    /// d(r, v)(t) / d(r0, v0).
    pub stm: Matrix6<f64>,
    /// d(r, v)(t) / d A_i for the free A_i, in the order A1, A2, A3.
    pub sensitivity: Matrix6xX<f64>,
}

/// A heliocentric small-body trajectory over an arc, with dense output.
#[derive(Debug, Clone)]
pub struct Trajectory {
    epoch: Epoch,
    initial: StateVector,
    start: Epoch,
    end: Epoch,
    /// Columns of X: 6 with partials (+ free A_i), 0 without.
    columns: usize,
    forward: Option<DenseOutput>,
    backward: Option<DenseOutput>,
    stats: IntegrationStats,
}

impl Trajectory {
    /// Integrates `initial` (heliocentric ICRF state at `epoch`) under
    /// `model` over `[start, end]`; an epoch outside the arc widens it to
    /// include the epoch.
    pub fn integrate(
        ephemeris: &dyn Ephemeris,
        model: &ForceModel,
        epoch: Epoch,
        initial: &StateVector,
        start: Epoch,
        end: Epoch,
        settings: &PropagationSettings,
    ) -> Result<Self, PropagationError> {
        if end < start {
            return Err(PropagationError::EmptyArc { start, end });
        }
        let r = initial.position_au;
        let v = initial.velocity_au_per_day;
        let finite = r.iter().chain(v.iter()).all(|x| x.is_finite());
        if !finite || r.norm() == 0.0 || r.cross(&v).norm() == 0.0 {
            return Err(PropagationError::BadInitialState);
        }
        let start = if epoch < start { epoch } else { start };
        let end = if epoch > end { epoch } else { end };

        let dt = model.time_offset_days();
        let reference = if dt != 0.0 {
            let reference_settings = PropagationSettings {
                partials: true,
                ..*settings
            };
            Some(Trajectory::integrate(
                ephemeris,
                &model.without_nongrav(),
                epoch,
                initial,
                start.plus_days(-dt.max(0.0)),
                end.plus_days((-dt).max(0.0)),
                &reference_settings,
            )?)
        } else {
            None
        };

        let columns = if settings.partials {
            6 + model.free_parameter_count()
        } else {
            0
        };
        let mut equations = Equations {
            model,
            ephemeris,
            epoch,
            columns,
            lag: reference.as_ref().map(|reference| (reference, dt)),
        };
        let (y0, yd0) = initial_coordinates(initial, columns);
        let radius = r.norm();
        // A small fraction of the local orbital time scale; the step control
        // corrects it within a step or two.
        let radial_time = (radius.powi(3) / gm::SUN).sqrt();
        let radau = RadauSettings {
            tolerance: settings.tolerance,
            initial_step: (0.05 * radial_time).min(radius / v.norm()),
            max_steps: settings.max_steps,
            ..RadauSettings::default()
        };

        let mut stats = IntegrationStats::default();
        let mut run = |t_end: f64| -> Result<Option<DenseOutput>, PropagationError> {
            if t_end == 0.0 {
                return Ok(None);
            }
            let (dense, s) = integrate(&mut equations, 0.0, &y0, &yd0, t_end, &radau)?;
            stats += s;
            Ok(Some(dense))
        };
        let forward = run(end.days_since(epoch))?;
        let backward = run(start.days_since(epoch))?;
        Ok(Self {
            epoch,
            initial: *initial,
            start,
            end,
            columns,
            forward,
            backward,
            stats,
        })
    }

    pub fn epoch(&self) -> Epoch {
        self.epoch
    }

    /// The integrated arc.
    pub fn span(&self) -> (Epoch, Epoch) {
        (self.start, self.end)
    }

    /// Steps and force evaluations of the integration, both directions.
    /// The gravity-only reference run made when DT is set is not counted.
    pub fn stats(&self) -> IntegrationStats {
        self.stats
    }

    pub fn has_partials(&self) -> bool {
        self.columns > 0
    }

    /// Number of A_i sensitivity columns.
    pub fn parameter_count(&self) -> usize {
        self.columns.saturating_sub(6)
    }

    /// Heliocentric state at `t`.
    pub fn state(&self, t: Epoch) -> Result<StateVector, PropagationError> {
        let (y, yd) = self.coordinates(t)?;
        Ok(StateVector::new(
            Vector3::new(y[0], y[1], y[2]),
            Vector3::new(yd[0], yd[1], yd[2]),
        ))
    }

    /// State, state transition matrix and sensitivities at `t`.
    pub fn state_with_partials(&self, t: Epoch) -> Result<StatePartials, PropagationError> {
        if self.columns == 0 {
            return Err(PropagationError::NoPartials);
        }
        let (y, yd) = self.coordinates(t)?;
        let k = self.columns - 6;
        let mut stm = Matrix6::zeros();
        let mut sensitivity = Matrix6xX::zeros(k);
        for c in 0..self.columns {
            for row in 0..3 {
                let x = y[3 + 3 * c + row];
                let xd = yd[3 + 3 * c + row];
                if c < 6 {
                    stm[(row, c)] = x;
                    stm[(row + 3, c)] = xd;
                } else {
                    sensitivity[(row, c - 6)] = x;
                    sensitivity[(row + 3, c - 6)] = xd;
                }
            }
        }
        Ok(StatePartials {
            state: StateVector::new(
                Vector3::new(y[0], y[1], y[2]),
                Vector3::new(yd[0], yd[1], yd[2]),
            ),
            stm,
            sensitivity,
        })
    }

    fn coordinates(&self, t: Epoch) -> Result<(Vec<f64>, Vec<f64>), PropagationError> {
        if t < self.start || t > self.end {
            return Err(PropagationError::OutsideArc {
                epoch: t,
                start: self.start,
                end: self.end,
            });
        }
        let offset = t.days_since(self.epoch);
        let track = if offset > 0.0 {
            self.forward.as_ref()
        } else if offset < 0.0 {
            self.backward.as_ref()
        } else {
            None
        };
        match track {
            Some(dense) => {
                let n = dense.dimension();
                let mut y = vec![0.0; n];
                let mut yd = vec![0.0; n];
                dense
                    .evaluate(offset, &mut y, &mut yd)
                    .ok_or(PropagationError::OutsideArc {
                        epoch: t,
                        start: self.start,
                        end: self.end,
                    })?;
                Ok((y, yd))
            }
            None => Ok(initial_coordinates(&self.initial, self.columns)),
        }
    }
}

/// y = (r, X columns), y' = (v, X' columns) at the epoch.
fn initial_coordinates(state: &StateVector, columns: usize) -> (Vec<f64>, Vec<f64>) {
    let n = 3 * (1 + columns);
    let mut y = vec![0.0; n];
    let mut yd = vec![0.0; n];
    for i in 0..3 {
        y[i] = state.position_au[i];
        yd[i] = state.velocity_au_per_day[i];
    }
    if columns >= 6 {
        for i in 0..3 {
            // d r / d r0 = I, d v / d v0 = I at the epoch.
            y[3 + 3 * i + i] = 1.0;
            yd[3 + 3 * (i + 3) + i] = 1.0;
        }
    }
    (y, yd)
}

/// What the equations need at one epoch: the perturbers and, with a time
/// offset, the lagged distance (inside `positions`) and its gradient with
/// respect to the initial state.
struct Node {
    positions: PerturberPositions,
    lag_gradient: Option<[f64; 6]>,
}

/// The equations of motion (and variational equations) in days from the
/// trajectory's epoch.
struct Equations<'a> {
    model: &'a ForceModel,
    ephemeris: &'a dyn Ephemeris,
    epoch: Epoch,
    columns: usize,
    lag: Option<(&'a Trajectory, f64)>,
}

impl SecondOrderSystem for Equations<'_> {
    type Node = Node;
    type Error = EphemerisError;

    fn dimension(&self) -> usize {
        3 * (1 + self.columns)
    }

    fn controlled_dimension(&self) -> usize {
        3
    }

    fn node(&mut self, t: f64) -> Result<Node, EphemerisError> {
        let at = self.epoch.plus_days(t);
        let positions = self.model.perturber_positions(self.ephemeris, at)?;
        Ok(match self.lag {
            Some((reference, dt)) => {
                let (lo, hi) = reference.span();
                let lagged = at.plus_days(-dt);
                // The reference covers the widened arc; the clamp only
                // absorbs round-off at its ends.
                let lagged = if lagged < lo {
                    lo
                } else if lagged > hi {
                    hi
                } else {
                    lagged
                };
                let origin = match self.model.origin() {
                    Origin::Sun => Ok(Vector3::zeros()),
                    Origin::Barycentre => self
                        .ephemeris
                        .state(Body::Sun, lagged)
                        .map(|sun| sun.position_au),
                };
                match (reference.state_with_partials(lagged), origin) {
                    (Ok(p), Ok(sun)) => {
                        // The law wants the heliocentric distance.
                        let r = p.state.position_au - sun;
                        let radius = r.norm();
                        // d |r_lag| / d y0 = r_lag_hat^T (position rows of the STM).
                        let gradient = (r / radius).transpose() * p.stm.fixed_rows::<3>(0);
                        let mut lag_gradient = [0.0; 6];
                        lag_gradient.copy_from_slice(gradient.as_slice());
                        Node {
                            positions: positions.with_lagged_distance(radius),
                            lag_gradient: Some(lag_gradient),
                        }
                    }
                    _ => Node {
                        positions,
                        lag_gradient: None,
                    },
                }
            }
            None => Node {
                positions,
                lag_gradient: None,
            },
        })
    }

    fn acceleration(
        &mut self,
        node: &Node,
        y: &[f64],
        yd: &[f64],
        out: &mut [f64],
    ) -> Result<(), EphemerisError> {
        let r = Vector3::new(y[0], y[1], y[2]);
        let v = Vector3::new(yd[0], yd[1], yd[2]);
        if self.columns == 0 {
            let a = self.model.acceleration(&node.positions, &r, &v);
            out[..3].copy_from_slice(a.as_slice());
            return Ok(());
        }
        let (a, partials) = self
            .model
            .acceleration_with_partials(&node.positions, &r, &v);
        out[..3].copy_from_slice(a.as_slice());
        let parameters = partials.d_parameters.as_slice();
        for c in 0..self.columns {
            let base = 3 + 3 * c;
            let x = Vector3::new(y[base], y[base + 1], y[base + 2]);
            let xd = Vector3::new(yd[base], yd[base + 1], yd[base + 2]);
            let mut col = partials.d_position * x + partials.d_velocity * xd;
            if c >= 6 {
                if let Some(p) = parameters.get(c - 6) {
                    col += p;
                }
            } else if let Some(gradient) = &node.lag_gradient {
                col += partials.d_lagged_distance * gradient[c];
            }
            out[base..base + 3].copy_from_slice(col.as_slice());
        }
        Ok(())
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::astro::constants::{gm, C_AU_PER_DAY};
    use crate::astro::ephemeris::Body;
    use crate::astro::forces::{DistanceLaw, FreeParameters, NonGravModel};
    use crate::astro::kepler;

    /// Finite-difference agreement of the STM and sensitivities (brief).
    const PARTIALS_REL_TOL: f64 = 1e-6;
    /// Two-body integration against the universal-variable solution,
    /// relative to the heliocentric distance.
    const KEPLER_REL_TOL: f64 = 1e-12;
    /// Perihelion advance against Einstein's formula.
    const PRECESSION_REL_TOL: f64 = 0.01;
    /// Relative energy drift of a long two-body run.
    const ENERGY_REL_TOL: f64 = 1e-11;

    /// Planets on circular, slightly inclined orbits about a Sun fixed at
    /// the origin: a stand-in ephemeris with the right sizes and periods.
    pub(crate) struct CircularPlanets;

    impl CircularPlanets {
        fn orbit(body: Body) -> (f64, f64, f64) {
            // (radius au, inclination rad, phase at J2000 rad): round
            // numbers near the planets' own.
            match body {
                Body::Mercury => (0.387, 0.12, 0.3),
                Body::Venus => (0.723, 0.06, 1.1),
                Body::Earth | Body::Moon => (1.0, 0.0, 1.75),
                Body::Mars => (1.524, 0.03, 4.0),
                Body::Jupiter => (5.203, 0.02, 0.6),
                Body::Saturn => (9.537, 0.04, 0.9),
                Body::Uranus => (19.19, 0.013, 5.5),
                Body::Neptune => (30.07, 0.03, 5.3),
                Body::Sun => (0.0, 0.0, 0.0),
            }
        }
    }

    impl Ephemeris for CircularPlanets {
        fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
            if body == Body::Sun {
                return Ok(StateVector::new(Vector3::zeros(), Vector3::zeros()));
            }
            let (a, inc, phase) = Self::orbit(body);
            let n = (gm::SUN / (a * a * a)).sqrt();
            let u = phase + n * t.tdb_days_since_j2000();
            let (s, c) = u.sin_cos();
            let (si, ci) = inc.sin_cos();
            let mut r = Vector3::new(a * c, a * s * ci, a * s * si);
            let mut v = Vector3::new(-a * n * s, a * n * c * ci, a * n * c * si);
            if body == Body::Moon {
                // 0.00257 au from the Earth, monthly.
                let nm = std::f64::consts::TAU / 27.32;
                let (sm, cm) = (nm * t.tdb_days_since_j2000()).sin_cos();
                r += Vector3::new(0.00257 * cm, 0.00257 * sm, 0.0);
                v += Vector3::new(-0.00257 * nm * sm, 0.00257 * nm * cm, 0.0);
            }
            Ok(StateVector::new(r, v))
        }
    }

    /// Heliocentric state from perihelion distance, eccentricity and true
    /// anomaly, on a plane tilted by fixed angles.
    pub(crate) fn conic_state(q: f64, e: f64, true_anomaly: f64) -> StateVector {
        let p = q * (1.0 + e);
        let (s, c) = true_anomaly.sin_cos();
        let radius = p / (1.0 + e * c);
        let h = (gm::SUN / p).sqrt();
        let r = Vector3::new(radius * c, radius * s, 0.0);
        let v = Vector3::new(-h * s, h * (e + c), 0.0);
        let rotation = nalgebra::Rotation3::from_euler_angles(0.5, 0.2, 1.0);
        StateVector::new(rotation * r, rotation * v)
    }

    fn full_model(law: DistanceLaw, dt_days: f64) -> ForceModel {
        let ng = NonGravModel::new(law, [2e-8, -1e-8, 5e-9], FreeParameters::ALL)
            .with_time_offset(dt_days);
        ForceModel::gravity().with_nongrav(ng).unwrap()
    }

    fn check_partials(initial: StateVector, model: &ForceModel, span_days: (f64, f64)) {
        let ephemeris = CircularPlanets;
        let epoch = Epoch::from_tdb_days_since_j2000(9000.0);
        let start = epoch.plus_days(span_days.0);
        let end = epoch.plus_days(span_days.1);
        let settings = PropagationSettings::default();
        let run = |state: &StateVector, model: &ForceModel| {
            Trajectory::integrate(&ephemeris, model, epoch, state, start, end, &settings).unwrap()
        };
        let nominal = run(&initial, model);
        let queries = [
            start,
            epoch.plus_days(0.37 * span_days.0),
            epoch.plus_days(0.61 * span_days.1),
            end,
        ];
        let analytic: Vec<StatePartials> = queries
            .iter()
            .map(|t| nominal.state_with_partials(*t).unwrap())
            .collect();

        let state_vector = |s: &StateVector| {
            nalgebra::Vector6::new(
                s.position_au.x,
                s.position_au.y,
                s.position_au.z,
                s.velocity_au_per_day.x,
                s.velocity_au_per_day.y,
                s.velocity_au_per_day.z,
            )
        };
        let mut worst: f64 = 0.0;
        // Initial-state columns: steps of 1e-7 au and 1e-9 au/day.
        for j in 0..6 {
            let step = if j < 3 { 1e-7 } else { 1e-9 };
            let shifted = |sign: f64| {
                let mut s = initial;
                if j < 3 {
                    s.position_au[j] += sign * step;
                } else {
                    s.velocity_au_per_day[j - 3] += sign * step;
                }
                run(&s, model)
            };
            let (plus, minus) = (shifted(1.0), shifted(-1.0));
            for (t, a) in queries.iter().zip(&analytic) {
                let fd = (state_vector(&plus.state(*t).unwrap())
                    - state_vector(&minus.state(*t).unwrap()))
                    / (2.0 * step);
                let err = (a.stm.column(j) - fd).norm() / fd.norm();
                worst = worst.max(err);
                assert!(err < PARTIALS_REL_TOL, "STM column {j} at {t}: {err:e}");
            }
        }
        // A_i columns: steps of 1e-10 au/day^2.
        for i in 0..3 {
            let step = 1e-10;
            let ng = *model.nongrav().unwrap();
            let shifted = |sign: f64| {
                let mut ng = ng;
                ng.a_au_per_day2[i] += sign * step;
                run(&initial, &model.clone().with_nongrav(ng).unwrap())
            };
            let (plus, minus) = (shifted(1.0), shifted(-1.0));
            for (t, a) in queries.iter().zip(&analytic) {
                let fd = (state_vector(&plus.state(*t).unwrap())
                    - state_vector(&minus.state(*t).unwrap()))
                    / (2.0 * step);
                let err = (a.sensitivity.column(i) - fd).norm() / fd.norm();
                worst = worst.max(err);
                assert!(err < PARTIALS_REL_TOL, "A{} column at {t}: {err:e}", i + 1);
            }
        }
        eprintln!("worst relative partials error {worst:e}");
    }

    #[test]
    fn partials_hyperbolic() {
        // e = 3, q = 1.2 au, seen from 0.4 rad before perihelion.
        let state = conic_state(1.2, 3.0, -0.4);
        check_partials(
            state,
            &full_model(DistanceLaw::WaterIce, 0.0),
            (-60.0, 90.0),
        );
    }

    #[test]
    fn partials_near_parabolic() {
        let state = conic_state(0.8, 1.0001, 0.3);
        check_partials(
            state,
            &full_model(DistanceLaw::InverseSquare, 0.0),
            (-120.0, 150.0),
        );
    }

    #[test]
    fn partials_bound() {
        // e = 0.6, q = 1.0 au (a = 2.5 au).
        let state = conic_state(1.0, 0.6, 2.0);
        check_partials(
            state,
            &full_model(DistanceLaw::WaterIceScaled { r0_au: 5.0 }, 0.0),
            (-400.0, 300.0),
        );
    }

    #[test]
    fn partials_with_time_offset() {
        // With DT the lagged distance comes from the gravity-only reference
        // and its STM, so the chain is exact for that model.
        let state = conic_state(1.0, 0.6, -0.5);
        check_partials(
            state,
            &full_model(DistanceLaw::WaterIce, 25.0),
            (-100.0, 200.0),
        );
    }

    fn two_body_against_kepler(state: StateVector, span_days: f64) -> f64 {
        let epoch = Epoch::J2000;
        let trajectory = Trajectory::integrate(
            &CircularPlanets,
            &ForceModel::two_body(),
            epoch,
            &state,
            epoch.plus_days(-span_days),
            epoch.plus_days(span_days),
            &PropagationSettings {
                partials: false,
                ..Default::default()
            },
        )
        .unwrap();
        let mut worst: f64 = 0.0;
        for i in 0..=400 {
            let dt = span_days * (i as f64 / 200.0 - 1.0);
            let got = trajectory.state(epoch.plus_days(dt)).unwrap();
            let (want, _) = kepler::propagate(&state, dt, gm::SUN).unwrap();
            let err = (got.position_au - want.position_au).norm() / want.position_au.norm();
            worst = worst.max(err);
        }
        worst
    }

    #[test]
    fn two_body_matches_universal_kepler() {
        // Reference: astro::kepler's universal-variable solution (Vallado,
        // Algorithm 8), itself checked against published examples.
        for (state, span) in [
            (conic_state(1.0, 0.6, 0.0), 2.0 * 1444.0), // two periods of a = 2.5 au
            (conic_state(1.2, 3.0, -0.4), 365.25),
            (conic_state(0.8, 1.0001, 0.3), 365.25),
        ] {
            let worst = two_body_against_kepler(state, span);
            eprintln!("two-body worst relative error {worst:e}");
            assert!(worst < KEPLER_REL_TOL, "{worst:e}");
        }
    }

    fn eccentricity_vector(s: &StateVector) -> Vector3<f64> {
        let r = s.position_au;
        let v = s.velocity_au_per_day;
        (r * (v.norm_squared() - gm::SUN / r.norm()) - v * r.dot(&v)) / gm::SUN
    }

    #[test]
    fn relativity_advances_perihelion_like_einstein() {
        // Mercury-like orbit: a = 0.387098 au, e = 0.205630 (memory).
        let (a, e) = (0.387_098, 0.205_630);
        let state = conic_state(a * (1.0 - e), e, 0.0);
        let period = std::f64::consts::TAU * (a * a * a / gm::SUN).sqrt();
        let orbits = 200.0;
        let model = ForceModel::new(&[], true, None).unwrap();
        let epoch = Epoch::J2000;
        let end = epoch.plus_days(orbits * period);
        let settings = PropagationSettings {
            partials: false,
            ..Default::default()
        };
        let trajectory = Trajectory::integrate(
            &CircularPlanets,
            &model,
            epoch,
            &state,
            epoch,
            end,
            &settings,
        )
        .unwrap();
        let e0 = eccentricity_vector(&state);
        let e1 = eccentricity_vector(&trajectory.state(end).unwrap());
        let advance_rad = e0.cross(&e1).norm().atan2(e0.dot(&e1));
        // Einstein: 6 pi mu / (c^2 a (1 - e^2)) per orbit (Weinberg 1972,
        // Gravitation and Cosmology, eq. 8.6.11; memory); 43 arcsec per
        // century for Mercury (memory).
        let per_orbit = 6.0 * std::f64::consts::PI * gm::SUN
            / (C_AU_PER_DAY * C_AU_PER_DAY * a * (1.0 - e * e));
        let expected = per_orbit * orbits;
        let rel = (advance_rad - expected).abs() / expected;
        let arcsec_per_century = advance_rad / (orbits * period) * 36_525.0 * 206_264.806;
        eprintln!("perihelion advance {arcsec_per_century:.3} arcsec/century, rel err {rel:e}");
        assert!(rel < PRECESSION_REL_TOL);
        assert!((arcsec_per_century - 43.0).abs() < 0.01 * 43.0);
    }

    #[test]
    fn long_two_body_run_keeps_energy() {
        let state = conic_state(1.0, 0.6, 0.0);
        let energy = |s: &StateVector| {
            0.5 * s.velocity_au_per_day.norm_squared() - gm::SUN / s.position_au.norm()
        };
        let e0 = energy(&state);
        let epoch = Epoch::J2000;
        let end = epoch.plus_days(100.0 * 1444.0);
        let settings = PropagationSettings {
            partials: false,
            ..Default::default()
        };
        let trajectory = Trajectory::integrate(
            &CircularPlanets,
            &ForceModel::two_body(),
            epoch,
            &state,
            epoch,
            end,
            &settings,
        )
        .unwrap();
        let mut worst: f64 = 0.0;
        for i in 1..=1000 {
            let t = epoch.plus_days(100.0 * 1444.0 * i as f64 / 1000.0);
            worst = worst.max(((energy(&trajectory.state(t).unwrap()) - e0) / e0).abs());
        }
        eprintln!("energy drift {worst:e} over {:?}", trajectory.stats());
        assert!(worst < ENERGY_REL_TOL, "{worst:e}");
    }

    #[test]
    fn queries_outside_the_arc_fail() {
        let state = conic_state(1.0, 0.6, 0.0);
        let epoch = Epoch::J2000;
        let trajectory = Trajectory::integrate(
            &CircularPlanets,
            &ForceModel::gravity(),
            epoch,
            &state,
            epoch.plus_days(-10.0),
            epoch.plus_days(20.0),
            &PropagationSettings::default(),
        )
        .unwrap();
        assert!(matches!(
            trajectory.state(epoch.plus_days(20.5)),
            Err(PropagationError::OutsideArc { .. })
        ));
        assert!(trajectory.state(epoch.plus_days(-10.0)).is_ok());
        let at_epoch = trajectory.state_with_partials(epoch).unwrap();
        assert_eq!(at_epoch.stm, Matrix6::identity());
        assert_eq!(at_epoch.sensitivity.ncols(), 0);
    }

    /// The planets of [`CircularPlanets`] without the Moon, whose monthly
    /// circle there is not an orbit about the Sun (a Sun it moved would
    /// not move as the heliocentric equations assume).
    const MOONLESS: [Body; 8] = [
        Body::Mercury,
        Body::Venus,
        Body::Earth,
        Body::Mars,
        Body::Jupiter,
        Body::Saturn,
        Body::Uranus,
        Body::Neptune,
    ];

    /// [`CircularPlanets`] about a Sun that moves as the planets pull it,
    /// so that the barycentre stays at the origin: heliocentric and
    /// barycentric coordinates then differ as they do in the real system.
    struct MovingSun;

    impl MovingSun {
        fn sun(t: Epoch) -> StateVector {
            let (mut r, mut v) = (Vector3::zeros(), Vector3::zeros());
            for body in MOONLESS {
                let p = CircularPlanets.state(body, t).unwrap();
                r -= p.position_au * (body.gm() / gm::SUN);
                v -= p.velocity_au_per_day * (body.gm() / gm::SUN);
            }
            StateVector::new(r, v)
        }
    }

    impl Ephemeris for MovingSun {
        fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
            let sun = Self::sun(t);
            if body == Body::Sun {
                return Ok(sun);
            }
            let p = CircularPlanets.state(body, t)?;
            Ok(StateVector::new(
                p.position_au + sun.position_au,
                p.velocity_au_per_day + sun.velocity_au_per_day,
            ))
        }
    }

    fn shifted(s: &StateVector, by: &StateVector, sign: f64) -> StateVector {
        StateVector::new(
            s.position_au + by.position_au * sign,
            s.velocity_au_per_day + by.velocity_au_per_day * sign,
        )
    }

    #[test]
    fn barycentric_and_heliocentric_states_follow_the_same_orbit() {
        let epoch = Epoch::from_tdb_days_since_j2000(9000.0);
        let helio = conic_state(1.5, 0.5, 0.4);
        let ng = NonGravModel::new(
            DistanceLaw::WaterIce,
            [2e-8, -1e-8, 5e-9],
            FreeParameters::ALL,
        );
        let model = ForceModel::new(&MOONLESS, true, Some(ng)).unwrap();
        let settings = PropagationSettings {
            tolerance: 1e-12,
            ..PropagationSettings::default()
        };
        let (start, end) = (epoch.plus_days(-200.0), epoch.plus_days(365.0));
        let h = Trajectory::integrate(&MovingSun, &model, epoch, &helio, start, end, &settings)
            .unwrap();
        let bary_model = model.clone().with_origin(Origin::Barycentre);
        let bary0 = shifted(&helio, &MovingSun::sun(epoch), 1.0);
        let b = Trajectory::integrate(
            &MovingSun,
            &bary_model,
            epoch,
            &bary0,
            start,
            end,
            &settings,
        )
        .unwrap();
        for days in [-200.0, -50.0, 120.0, 365.0] {
            let t = epoch.plus_days(days);
            let (ph, pb) = (
                h.state_with_partials(t).unwrap(),
                b.state_with_partials(t).unwrap(),
            );
            let back = shifted(&pb.state, &MovingSun::sun(t), -1.0);
            // The same equations in two frames, integrated with the same
            // steps: agreement to rounding (measured: 5e-16 au).
            let dr = (back.position_au - ph.state.position_au).norm();
            assert!(dr < 1e-12, "{days} d: {dr:e} au");
            let ds = (pb.stm - ph.stm).norm() / ph.stm.norm();
            let da = (&pb.sensitivity - &ph.sensitivity).norm() / ph.sensitivity.norm();
            assert!(
                ds < 1e-10 && da < 1e-10,
                "{days} d: STM {ds:e}, sensitivities {da:e}"
            );
        }
    }

    #[test]
    fn far_field_forces_match_the_full_model_beyond_the_planets() {
        // A body leaving at 40 au on a weakly hyperbolic orbit, 30 years.
        let epoch = Epoch::from_tdb_days_since_j2000(9000.0);
        let r: Vector3<f64> = Vector3::new(30.0, 25.0, 8.0);
        let escape: f64 = (2.0 * gm::SUN / r.norm()).sqrt();
        let v = Vector3::new(0.9, 0.7, 0.2).normalize() * escape * 1.05;
        let start = StateVector::new(r, v);
        let gravity = ForceModel::new(&MOONLESS, true, None).unwrap();
        let full = gravity.clone().with_origin(Origin::Barycentre);
        let far = gravity.far_field();
        let settings = PropagationSettings::default();
        let end = epoch.plus_days(30.0 * 365.25);
        let run = |model: &ForceModel| {
            Trajectory::integrate(&MovingSun, model, epoch, &start, epoch, end, &settings).unwrap()
        };
        let (a, b) = (run(&full), run(&far));
        let (sa, sb) = (a.state(end).unwrap(), b.state(end).unwrap());
        let inverse_a = |s: &StateVector| {
            2.0 / s.position_au.norm()
                - s.velocity_au_per_day.norm_squared() / gm::SOLAR_SYSTEM_TOTAL
        };
        let dr = (sa.position_au - sb.position_au).norm() / sa.position_au.norm();
        let d_inv_a = (inverse_a(&sa) - inverse_a(&sb)).abs();
        eprintln!(
            "far field: {dr:e} relative position, {d_inv_a:e} 1/au, steps {} vs {}",
            a.stats().accepted_steps,
            b.stats().accepted_steps
        );
        // The neglected quadrupole of the inner planets is ~3e-9 of the
        // acceleration at 30 au (estimate in ForceModel::far_field); over
        // 30 years it shows as 1.5e-8 of the distance and 3e-9 1/au
        // (measured), far below the 1e-6 1/au to which original orbits
        // are discussed (Marsden, Sekanina & Everhart 1978; memory).
        assert!(dr < 1e-7, "{dr:e}");
        assert!(d_inv_a < 1e-8, "{d_inv_a:e}");
        assert!(b.stats().accepted_steps < a.stats().accepted_steps);
    }
}
