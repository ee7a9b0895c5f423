//! Adaptive high-order integrator with dense output: Gauss-Radau spacings,
//! 15th order, for second-order systems y'' = F(t, y, y') (Everhart 1985,
//! "An efficient integrator that uses Gauss-Radau spacings", IAU Colloq. 83,
//! Dynamics of Comets, p. 185).
//!
//! Over one step t0 + s h, s in [0, 1], the acceleration is written as a
//! polynomial F(s) = F0 + b1 s + ... + b7 s^7, equivalently in Newton form
//! F0 + g1 s + g2 s (s - h1) + ... with the Gauss-Radau fractions h1..h7.
//! Integrating it twice gives the predictor for y and y' at each node; the
//! accelerations found there update the g (divided differences) and hence
//! the b, and the pass is repeated until b7 stops changing
//! (predictor-corrector). The position at the step end is then of order 15.
//!
//! Step control: b7 is the last term of the series, so |b7| / |F| measures
//! how well a degree-7 polynomial covers the step. The next step is
//! h (tolerance / (|b7|/|F|))^(1/7), and a step whose ratio falls well below
//! 1 is redone with the smaller step. Between steps the b are carried over by
//! re-expanding the polynomial about the new start, plus the correction
//! the previous prediction needed (Everhart's scheme), so that the
//! predictor-corrector usually converges in two or three passes.
//!
//! Dense output: the converged b of each step are kept; the same double
//! integral that predicts the nodes gives y and y' anywhere inside the step.
//!
//! The integrator knows nothing about orbits. A [`SecondOrderSystem`] first
//! prepares what depends on time alone ([`SecondOrderSystem::node`], e.g.
//! planet positions) once per distinct epoch, then evaluates the
//! acceleration as often as the iteration asks.

use thiserror::Error;

/// The Gauss-Radau fractions of the step: h0 = 0 and the seven roots of
/// (P7(x) + P8(x)) / (1 + x) mapped from [-1, 1] to [0, 1] (Everhart 1985;
/// the test below recomputes them from the Legendre polynomials).
const NODES: [f64; 8] = [
    0.0,
    0.056_262_560_536_922_146_465_652_191_031_8,
    0.180_240_691_736_892_364_987_579_942_780,
    0.352_624_717_113_169_637_373_907_769_648,
    0.547_153_626_330_555_383_001_448_554_766,
    0.734_210_177_215_410_531_523_210_605_558,
    0.885_320_946_839_095_768_090_359_771_030,
    0.977_520_613_561_287_501_891_174_488_626,
];

/// Factors of the double integral of s^k: s^(k+2) / ((k+1)(k+2)). Kept as
/// reciprocals: the predictor runs for every coordinate at every node, and
/// divisions there cost more than the force model.
const POSITION_FACTORS: [f64; 8] = [
    1.0 / 2.0,
    1.0 / 6.0,
    1.0 / 12.0,
    1.0 / 20.0,
    1.0 / 30.0,
    1.0 / 42.0,
    1.0 / 56.0,
    1.0 / 72.0,
];
/// Factors of the single integral of s^k: s^(k+1) / (k+1).
const VELOCITY_FACTORS: [f64; 8] = [
    1.0,
    1.0 / 2.0,
    1.0 / 3.0,
    1.0 / 4.0,
    1.0 / 5.0,
    1.0 / 6.0,
    1.0 / 7.0,
    1.0 / 8.0,
];

/// Predictor-corrector: stop when b7 changes by less than this fraction of
/// the acceleration (round-off level).
const CORRECTOR_CONVERGED: f64 = 1e-16;
/// Accept a corrector that stalled at round-off once it is below this.
const CORRECTOR_GOOD_ENOUGH: f64 = 1e-12;
const CORRECTOR_MAX_PASSES: usize = 12;
/// A step whose proposed successor is below this fraction of it is redone.
const REJECT_BELOW: f64 = 0.7;
/// Largest growth from one step to the next.
const MAX_GROWTH: f64 = 2.0;
/// Smallest shrink on a rejection.
const MIN_SHRINK: f64 = 0.1;

/// A system of second-order equations y'' = F(t, y, y').
pub trait SecondOrderSystem {
    /// What the acceleration needs that depends on time alone.
    type Node;
    type Error: std::error::Error + 'static;

    /// Number of scalar coordinates y.
    fn dimension(&self) -> usize;

    /// The leading coordinates that step-size control watches; the others
    /// (e.g. variational equations) follow the step the state chose.
    fn controlled_dimension(&self) -> usize {
        self.dimension()
    }

    /// Prepares the time-dependent data at `t`. Called once per distinct
    /// epoch the integrator visits.
    fn node(&mut self, t: f64) -> Result<Self::Node, Self::Error>;

    /// Writes F(t, y, y') into `out`.
    fn acceleration(
        &mut self,
        node: &Self::Node,
        y: &[f64],
        yd: &[f64],
        out: &mut [f64],
    ) -> Result<(), Self::Error>;
}

/// Integration settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RadauSettings {
    /// Target for |b7| / |F| (dimensionless). 1e-9 keeps the local error of
    /// a planetary orbit at the level of double-precision round-off.
    pub tolerance: f64,
    /// First step to try, in the time unit of the system (its size only;
    /// the direction comes from the end time).
    pub initial_step: f64,
    /// Steps are never longer than this.
    pub max_step: f64,
    /// Give up when the step control asks for less than this.
    pub min_step: f64,
    /// Give up after this many accepted steps.
    pub max_steps: usize,
}

impl Default for RadauSettings {
    fn default() -> Self {
        Self {
            tolerance: 1e-9,
            initial_step: 1.0,
            max_step: f64::INFINITY,
            min_step: 1e-10,
            max_steps: 100_000,
        }
    }
}

/// What an integration cost.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct IntegrationStats {
    pub accepted_steps: usize,
    pub rejected_steps: usize,
    pub force_evaluations: usize,
    pub node_evaluations: usize,
}

impl std::ops::AddAssign for IntegrationStats {
    fn add_assign(&mut self, other: Self) {
        self.accepted_steps += other.accepted_steps;
        self.rejected_steps += other.rejected_steps;
        self.force_evaluations += other.force_evaluations;
        self.node_evaluations += other.node_evaluations;
    }
}

#[derive(Debug, Error)]
pub enum IntegrationError<E: std::error::Error + 'static> {
    #[error("the equations of motion failed at t = {t}: {source}")]
    System {
        t: f64,
        #[source]
        source: E,
    },
    #[error("the step fell below {min_step} at t = {t}")]
    StepTooSmall { t: f64, min_step: f64 },
    #[error("more than {max_steps} steps were needed (reached t = {t})")]
    TooManySteps { t: f64, max_steps: usize },
    #[error("the acceleration is not finite at t = {t}")]
    NotFinite { t: f64 },
    #[error("initial values: expected {expected} coordinates, got {got}")]
    WrongDimension { expected: usize, got: usize },
    #[error("invalid settings: {reason}")]
    BadSettings { reason: &'static str },
}

/// The converged polynomial of every step: y and y' anywhere inside the
/// integrated span without integrating again.
#[derive(Debug, Clone, PartialEq)]
pub struct DenseOutput {
    dimension: usize,
    /// Start time of each step, in integration order.
    starts: Vec<f64>,
    /// Signed length of each step.
    steps: Vec<f64>,
    /// Per step: y0, y'0, F0, b1..b7, each `dimension` long.
    coefficients: Vec<f64>,
    t_begin: f64,
    t_end: f64,
}

/// Coefficient blocks stored per step: y0, y'0, F0 and b1..b7.
const BLOCKS: usize = 10;

impl DenseOutput {
    pub fn dimension(&self) -> usize {
        self.dimension
    }

    /// Where the integration started.
    pub fn t_begin(&self) -> f64 {
        self.t_begin
    }

    /// Where it ended (before or after `t_begin`).
    pub fn t_end(&self) -> f64 {
        self.t_end
    }

    pub fn covers(&self, t: f64) -> bool {
        let (lo, hi) = if self.t_end >= self.t_begin {
            (self.t_begin, self.t_end)
        } else {
            (self.t_end, self.t_begin)
        };
        t >= lo && t <= hi
    }

    /// y and y' at `t`; `None` outside the span.
    pub fn evaluate(&self, t: f64, y: &mut [f64], yd: &mut [f64]) -> Option<()> {
        if !self.covers(t) || y.len() != self.dimension || yd.len() != self.dimension {
            return None;
        }
        if self.starts.is_empty() {
            // Zero-length span: nothing was stepped, only the start is known.
            return None;
        }
        let forward = self.t_end >= self.t_begin;
        let after = if forward {
            self.starts.partition_point(|s| *s <= t)
        } else {
            self.starts.partition_point(|s| *s >= t)
        };
        let index = after.saturating_sub(1).min(self.starts.len() - 1);
        let h = self.steps[index];
        let s = ((t - self.starts[index]) / h).clamp(0.0, 1.0);
        let n = self.dimension;
        let block = &self.coefficients[index * BLOCKS * n..(index + 1) * BLOCKS * n];
        series_at(block, n, s, h, y, yd);
        Some(())
    }

    fn push(&mut self, t0: f64, h: f64, y0: &[f64], yd0: &[f64], f0: &[f64], b: &[f64]) {
        self.starts.push(t0);
        self.steps.push(h);
        self.coefficients.extend_from_slice(y0);
        self.coefficients.extend_from_slice(yd0);
        self.coefficients.extend_from_slice(f0);
        self.coefficients.extend_from_slice(b);
    }
}

/// y and y' at fraction s of a step from its block (y0, y'0, F0, b1..b7).
fn series_at(block: &[f64], n: usize, s: f64, h: f64, y: &mut [f64], yd: &mut [f64]) {
    let (y0, rest) = block.split_at(n);
    let (yd0, terms) = rest.split_at(n);
    predict(y0, yd0, terms, n, s, h, y, yd);
}

/// The predictor: y(s) = y0 + s h y'0 + (s h)^2 sum_k c_k s^k / ((k+1)(k+2))
/// and y'(s) = y'0 + s h sum_k c_k s^k / (k+1), with c = (F0, b1..b7) laid
/// out as 8 blocks of n in `terms`.
#[allow(clippy::too_many_arguments)]
fn predict(
    y0: &[f64],
    yd0: &[f64],
    terms: &[f64],
    n: usize,
    s: f64,
    h: f64,
    y: &mut [f64],
    yd: &mut [f64],
) {
    let sh = s * h;
    for i in 0..n {
        let mut p = terms[7 * n + i] * POSITION_FACTORS[7];
        let mut q = terms[7 * n + i] * VELOCITY_FACTORS[7];
        for k in (0..7).rev() {
            let c = terms[k * n + i];
            p = p * s + c * POSITION_FACTORS[k];
            q = q * s + c * VELOCITY_FACTORS[k];
        }
        y[i] = y0[i] + sh * (yd0[i] + sh * p);
        yd[i] = yd0[i] + sh * q;
    }
}

/// The changes of y and y' over a whole step (s = 1), kept apart from y0
/// and y'0 so that they can be added with compensation.
fn step_increments(yd0: &[f64], terms: &[f64], n: usize, h: f64, dy: &mut [f64], dyd: &mut [f64]) {
    for i in 0..n {
        let mut p = 0.0;
        let mut q = 0.0;
        for k in 0..8 {
            let c = terms[k * n + i];
            p += c * POSITION_FACTORS[k];
            q += c * VELOCITY_FACTORS[k];
        }
        dy[i] = h * (yd0[i] + h * p);
        dyd[i] = h * q;
    }
}

/// Conversion tables between the Newton (g) and power (b) forms.
struct Tables {
    /// c[j][k]: coefficient of s^k in prod_{i<j} (s - h_i), j, k = 1..7.
    c: [[f64; 8]; 8],
    /// p[i][j] = prod_{m<i} (h_j - h_m): the Newton basis at the nodes.
    p: [[f64; 8]; 8],
}

impl Tables {
    fn new() -> Self {
        let mut c = [[0.0; 8]; 8];
        // prod_{i<1} (s - h_i) = s.
        c[1][1] = 1.0;
        for j in 2..8 {
            for k in 1..=j {
                let shifted = if k >= 1 { c[j - 1][k - 1] } else { 0.0 };
                c[j][k] = shifted - NODES[j - 1] * c[j - 1][k];
            }
        }
        let mut p = [[0.0; 8]; 8];
        for (i, row) in p.iter_mut().enumerate() {
            for (j, value) in row.iter_mut().enumerate() {
                *value = (0..i).map(|m| NODES[j] - NODES[m]).product();
            }
        }
        Self { c, p }
    }

    /// g from b: c is unit upper triangular, so back-substitute from b7.
    fn g_from_b(&self, b: &[f64], g: &mut [f64], n: usize) {
        for k in (1..8).rev() {
            for i in 0..n {
                let mut value = b[(k - 1) * n + i];
                for j in (k + 1)..8 {
                    value -= self.c[j][k] * g[(j - 1) * n + i];
                }
                g[(k - 1) * n + i] = value;
            }
        }
    }
}

/// Integrates `system` from `t0` (state `y0`, `yd0`) to `t_end`, forwards
/// or backwards, and returns the dense output of the whole run.
pub fn integrate<S: SecondOrderSystem>(
    system: &mut S,
    t0: f64,
    y0: &[f64],
    yd0: &[f64],
    t_end: f64,
    settings: &RadauSettings,
) -> Result<(DenseOutput, IntegrationStats), IntegrationError<S::Error>> {
    let n = system.dimension();
    let nc = system.controlled_dimension().min(n);
    if y0.len() != n || yd0.len() != n {
        return Err(IntegrationError::WrongDimension {
            expected: n,
            got: y0.len().min(yd0.len()),
        });
    }
    let positive = [
        settings.tolerance,
        settings.initial_step,
        settings.min_step,
        settings.max_step,
    ]
    .iter()
    .all(|x| *x > 0.0);
    if !positive {
        return Err(IntegrationError::BadSettings {
            reason: "tolerance, initial, minimum and maximum steps must be positive",
        });
    }
    let tables = Tables::new();
    let mut stats = IntegrationStats::default();
    let mut dense = DenseOutput {
        dimension: n,
        starts: Vec::new(),
        steps: Vec::new(),
        coefficients: Vec::new(),
        t_begin: t0,
        t_end,
    };
    let span = t_end - t0;
    if span == 0.0 {
        return Ok((dense, stats));
    }
    let direction = span.signum();

    let system_error = |t: f64| move |source| IntegrationError::System { t, source };

    let mut t = t0;
    let mut y = y0.to_vec();
    let mut yd = yd0.to_vec();
    let mut y_carry = vec![0.0; n];
    let mut yd_carry = vec![0.0; n];
    // terms = F0 followed by b1..b7: the layout `predict` reads.
    let mut terms = vec![0.0; 8 * n];
    let node = system.node(t).map_err(system_error(t))?;
    stats.node_evaluations += 1;
    system
        .acceleration(&node, &y, &yd, &mut terms[..n])
        .map_err(system_error(t))?;
    stats.force_evaluations += 1;
    check_finite(&terms[..n], t)?;

    let mut g = vec![0.0; 7 * n];
    let mut predicted = vec![0.0; 7 * n];
    let mut correction = vec![0.0; 7 * n];
    let mut have_prediction = false;
    let mut f_node = vec![0.0; n];
    let mut y_node = vec![0.0; n];
    let mut yd_node = vec![0.0; n];
    let mut nodes: Vec<S::Node> = Vec::with_capacity(8);

    let mut h = direction * settings.initial_step.min(settings.max_step);
    loop {
        let remaining = t_end - t;
        let last = h.abs() >= remaining.abs();
        if last {
            h = remaining;
        }

        nodes.clear();
        for fraction in &NODES[1..] {
            let tn = t + fraction * h;
            nodes.push(system.node(tn).map_err(system_error(tn))?);
            stats.node_evaluations += 1;
        }

        // Predictor-corrector passes over the seven nodes.
        let mut previous_change = f64::INFINITY;
        let mut change = f64::INFINITY;
        let mut f_scale = max_abs(&terms[..nc]);
        for pass in 0..CORRECTOR_MAX_PASSES {
            let mut b7_change: f64 = 0.0;
            for j in 1..8 {
                let s = NODES[j];
                predict(&y, &yd, &terms, n, s, h, &mut y_node, &mut yd_node);
                let tn = t + s * h;
                system
                    .acceleration(&nodes[j - 1], &y_node, &yd_node, &mut f_node)
                    .map_err(system_error(tn))?;
                stats.force_evaluations += 1;
                check_finite(&f_node, tn)?;
                f_scale = f_scale.max(max_abs(&f_node[..nc]));
                let inv_pj = 1.0 / tables.p[j][j];
                for i in 0..n {
                    let mut value = f_node[i] - terms[i];
                    for m in 1..j {
                        value -= g[(m - 1) * n + i] * tables.p[m][j];
                    }
                    let new_g = value * inv_pj;
                    let delta = new_g - g[(j - 1) * n + i];
                    g[(j - 1) * n + i] = new_g;
                    for k in 1..=j {
                        terms[k * n + i] += tables.c[j][k] * delta;
                    }
                    if j == 7 && i < nc {
                        b7_change = b7_change.max(delta.abs());
                    }
                }
            }
            previous_change = change;
            change = if f_scale > 0.0 {
                b7_change / f_scale
            } else {
                0.0
            };
            if change < CORRECTOR_CONVERGED || (pass >= 2 && change >= previous_change) {
                break;
            }
        }
        let converged = change < CORRECTOR_GOOD_ENOUGH || previous_change < CORRECTOR_GOOD_ENOUGH;

        let b7_size = max_abs(&terms[7 * n..7 * n + nc]);
        let error = if f_scale > 0.0 {
            b7_size / f_scale
        } else {
            0.0
        };
        let ratio = if error > 0.0 {
            (settings.tolerance / error).powf(1.0 / 7.0)
        } else {
            MAX_GROWTH
        };

        if !converged || ratio < REJECT_BELOW {
            let shrink = if converged {
                ratio.max(MIN_SHRINK)
            } else {
                0.25
            };
            let new_h = h * shrink;
            if new_h.abs() < settings.min_step {
                return Err(IntegrationError::StepTooSmall {
                    t,
                    min_step: settings.min_step,
                });
            }
            // The same polynomial in the shorter step's fraction.
            let mut q = 1.0;
            for k in 1..8 {
                q *= shrink;
                for value in &mut terms[k * n..(k + 1) * n] {
                    *value *= q;
                }
            }
            tables.g_from_b(&terms[n..], &mut g, n);
            have_prediction = false;
            stats.rejected_steps += 1;
            h = new_h;
            continue;
        }

        // Accept: the state at the step end, with compensated sums so that
        // round-off does not build up over many steps.
        dense.push(t, h, &y, &yd, &terms[..n], &terms[n..]);
        step_increments(&yd, &terms, n, h, &mut y_node, &mut yd_node);
        for i in 0..n {
            kahan_add(&mut y[i], &mut y_carry[i], y_node[i]);
            kahan_add(&mut yd[i], &mut yd_carry[i], yd_node[i]);
        }
        t = if last { t_end } else { t + h };
        stats.accepted_steps += 1;

        let node = system.node(t).map_err(system_error(t))?;
        stats.node_evaluations += 1;
        system
            .acceleration(&node, &y, &yd, &mut terms[..n])
            .map_err(system_error(t))?;
        stats.force_evaluations += 1;
        check_finite(&terms[..n], t)?;

        if last {
            return Ok((dense, stats));
        }
        if stats.accepted_steps >= settings.max_steps {
            return Err(IntegrationError::TooManySteps {
                t,
                max_steps: settings.max_steps,
            });
        }

        let next_h = {
            let proposed = h * ratio.min(MAX_GROWTH);
            direction * proposed.abs().min(settings.max_step)
        };
        let q = next_h / h;
        // Carry the polynomial over: F(1 + q s') re-expanded in s'.
        if have_prediction {
            for (c, (b, e)) in correction
                .iter_mut()
                .zip(terms[n..].iter().zip(predicted.iter()))
            {
                *c = b - e;
            }
        }
        carry_over(&terms[n..], &mut predicted, n, q);
        for (b, (e, c)) in terms[n..]
            .iter_mut()
            .zip(predicted.iter().zip(correction.iter()))
        {
            *b = e + c;
        }
        have_prediction = true;
        tables.g_from_b(&terms[n..], &mut g, n);
        h = next_h;
    }
}

/// e_j = q^j sum_{k >= j} C(k, j) b_k: the acceleration polynomial of the
/// step just taken, re-expanded about its end in the next step's fraction.
fn carry_over(b: &[f64], e: &mut [f64], n: usize, q: f64) {
    const BINOMIAL: [[f64; 8]; 8] = binomials();
    let mut qj = 1.0;
    for j in 1..8 {
        qj *= q;
        for i in 0..n {
            let mut sum = 0.0;
            for k in j..8 {
                sum += BINOMIAL[k][j] * b[(k - 1) * n + i];
            }
            e[(j - 1) * n + i] = qj * sum;
        }
    }
}

const fn binomials() -> [[f64; 8]; 8] {
    let mut table = [[0.0; 8]; 8];
    let mut k = 0;
    while k < 8 {
        table[k][0] = 1.0;
        let mut j = 1;
        while j <= k {
            table[k][j] = table[k - 1][j - 1] + table[k - 1][j];
            j += 1;
        }
        k += 1;
    }
    table
}

fn kahan_add(sum: &mut f64, carry: &mut f64, increment: f64) {
    let y = increment - *carry;
    let t = *sum + y;
    *carry = (t - *sum) - y;
    *sum = t;
}

fn max_abs(values: &[f64]) -> f64 {
    values.iter().fold(0.0, |m, v| m.max(v.abs()))
}

fn check_finite<E: std::error::Error + 'static>(
    values: &[f64],
    t: f64,
) -> Result<(), IntegrationError<E>> {
    if values.iter().all(|v| v.is_finite()) {
        Ok(())
    } else {
        Err(IntegrationError::NotFinite { t })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The hard-coded spacings against their definition, to round-off.
    const NODE_TOL: f64 = 1e-15;
    /// The harmonic oscillator's exact solution after many periods.
    const OSCILLATOR_TOL: f64 = 1e-12;
    /// Dense output between steps, same problem.
    const DENSE_TOL: f64 = 1e-12;

    #[derive(Debug, thiserror::Error)]
    #[error("never")]
    struct Never;

    /// y'' = -w^2 y - 2 z w y': a damped oscillator, velocity-dependent like
    /// the relativistic and non-gravitational terms.
    struct Oscillator {
        omega: f64,
        damping: f64,
    }

    impl SecondOrderSystem for Oscillator {
        type Node = ();
        type Error = Never;
        fn dimension(&self) -> usize {
            1
        }
        fn node(&mut self, _t: f64) -> Result<(), Never> {
            Ok(())
        }
        fn acceleration(
            &mut self,
            _: &(),
            y: &[f64],
            yd: &[f64],
            out: &mut [f64],
        ) -> Result<(), Never> {
            out[0] = -self.omega * self.omega * y[0] - 2.0 * self.damping * self.omega * yd[0];
            Ok(())
        }
    }

    /// Exact solution with y(0) = 1, y'(0) = 0, underdamped.
    fn oscillator_exact(omega: f64, zeta: f64, t: f64) -> (f64, f64) {
        let wd = omega * (1.0 - zeta * zeta).sqrt();
        let decay = (-zeta * omega * t).exp();
        let c = zeta * omega / wd;
        let y = decay * ((wd * t).cos() + c * (wd * t).sin());
        let yd = decay * (-(omega * omega) / wd) * (wd * t).sin();
        (y, yd)
    }

    fn legendre(n: usize, x: f64) -> (f64, f64) {
        // Value and derivative by the three-term recurrence.
        let (mut p0, mut p1) = (1.0, x);
        for k in 1..n {
            let k = k as f64;
            let p2 = ((2.0 * k + 1.0) * x * p1 - k * p0) / (k + 1.0);
            p0 = p1;
            p1 = p2;
        }
        let dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
        (p1, dp)
    }

    #[test]
    fn nodes_are_gauss_radau_spacings() {
        for h in &NODES[1..] {
            // Newton polish on P7 + P8 from the tabulated value.
            let mut x = 2.0 * h - 1.0;
            for _ in 0..5 {
                let (p7, d7) = legendre(7, x);
                let (p8, d8) = legendre(8, x);
                x -= (p7 + p8) / (d7 + d8);
            }
            assert!(((x + 1.0) / 2.0 - h).abs() < NODE_TOL, "node {h}");
        }
    }

    #[test]
    fn tables_reproduce_polynomials() {
        // b -> g -> Newton form evaluated at an s must equal the power form.
        let t = Tables::new();
        let b = [0.3, -1.2, 0.7, 2.0, -0.4, 0.05, 1.1];
        let mut g = [0.0; 7];
        t.g_from_b(&b, &mut g, 1);
        let s: f64 = 0.61;
        let power: f64 = (1..8).map(|k| b[k - 1] * s.powi(k as i32)).sum();
        let newton: f64 = (1..8)
            .map(|j| g[j - 1] * (0..j).map(|m| s - NODES[m]).product::<f64>())
            .sum();
        assert!((power - newton).abs() < 1e-13);
    }

    #[test]
    fn damped_oscillator_forward_and_backward() {
        let (omega, zeta) = (1.0, 0.05);
        let mut system = Oscillator {
            omega,
            damping: zeta,
        };
        let settings = RadauSettings::default();
        let t_end = 20.0 * std::f64::consts::TAU;
        let (dense, stats) = integrate(&mut system, 0.0, &[1.0], &[0.0], t_end, &settings).unwrap();
        let mut y = [0.0];
        let mut yd = [0.0];
        dense.evaluate(t_end, &mut y, &mut yd).unwrap();
        let (ye, yde) = oscillator_exact(omega, zeta, t_end);
        assert!((y[0] - ye).abs() < OSCILLATOR_TOL, "{} vs {ye}", y[0]);
        assert!((yd[0] - yde).abs() < OSCILLATOR_TOL);
        assert!(stats.rejected_steps <= stats.accepted_steps);

        // Dense output at points that fall between the steps.
        let mut worst: f64 = 0.0;
        for i in 0..=997 {
            let t = t_end * i as f64 / 997.0;
            dense.evaluate(t, &mut y, &mut yd).unwrap();
            let (ye, yde) = oscillator_exact(omega, zeta, t);
            worst = worst.max((y[0] - ye).abs()).max((yd[0] - yde).abs());
        }
        assert!(worst < DENSE_TOL, "dense output error {worst:e}");
        assert!(dense.evaluate(t_end + 1.0, &mut y, &mut yd).is_none());

        // Backwards from the end returns to the start.
        let (back, _) = integrate(&mut system, t_end, &[ye], &[yde], 0.0, &settings).unwrap();
        back.evaluate(0.0, &mut y, &mut yd).unwrap();
        assert!((y[0] - 1.0).abs() < 1e-11 && yd[0].abs() < 1e-11);
        back.evaluate(t_end / 3.0, &mut y, &mut yd).unwrap();
        let (ym, _) = oscillator_exact(omega, zeta, t_end / 3.0);
        assert!((y[0] - ym).abs() < 1e-11);
    }
}
