//! Gauss's method: the orbit through three lines of sight.
//!
//! The body is at r_i = R_i + rho_i L_i (R_i the heliocentric observer, L_i
//! the unit line of sight). The middle position is a combination of the
//! outer ones, r2 = c1 r1 + c3 r3, with c1 = g3 / (f1 g3 - f3 g1) and
//! c3 = -g1 / (f1 g3 - f3 g1) from the Lagrange coefficients of the arcs
//! t2 -> t1 and t2 -> t3. Dotting that relation with L2 x L3, L1 x L3 and
//! L1 x L2 gives each rho_i linearly in c1 and c3 (with
//! D0 = L1 . (L2 x L3) and D_ij = R_i . p_j):
//!
//! rho1 = (-c1 D11 + D21 - c3 D31) / (c1 D0)
//! rho2 = (-c1 D12 + D22 - c3 D32) / D0
//! rho3 = (-c1 D13 + D23 - c3 D33) / (c3 D0)
//!
//! Start: f and g to second order in tau, c1 ~ (tau3/tau)(1 + mu (tau^2 - tau3^2)/(6 r2^3)),
//! c3 ~ -(tau1/tau)(1 + mu (tau^2 - tau1^2)/(6 r2^3)), so rho2 = A + mu B / r2^3
//! and, with r2^2 = rho2^2 + 2 rho2 (R2 . L2) + R2^2, the distance polynomial
//! r2^8 - (A^2 + 2 A E + R2^2) r2^6 - 2 mu B (A + E) r2^3 - mu^2 B^2 = 0,
//! E = R2 . L2. Every positive real root with positive distances is a
//! candidate. Each is then iterated with exact universal-variable f and g
//! of the current (r2, v2), the observation times corrected for light time
//! t_i - rho_i / c at each pass (Curtis, Orbital Mechanics for Engineering
//! Students, Algorithms 5.5 and 5.6; Vallado, Fundamentals of Astrodynamics
//! and Applications, Algorithm 52). The new f, g are averaged with the
//! previous ones, as Curtis does, which damps the oscillation of the fixed
//! point on long arcs.

use nalgebra::Vector3;

use crate::astro::constants::C_AU_PER_DAY;
use crate::astro::ephemeris::StateVector;
use crate::astro::kepler::propagate_vectors;
use crate::astro::time::Epoch;

use super::roots::real_roots;
use super::Sight;

/// Lines of sight closer to coplanar than this (|D0|, a triple product of
/// unit vectors) give no usable distances.
pub const MIN_TRIPLE_PRODUCT: f64 = 1e-14;
const MAX_ITERATIONS: usize = 400;
/// Relative change of the distances at which the iteration has converged.
const RHO_TOLERANCE: f64 = 1e-12;

/// One converged solution.
#[derive(Debug, Clone, PartialEq)]
pub struct GaussSolution {
    /// The emission time of the middle observation (TDB).
    pub epoch: Epoch,
    /// Heliocentric ICRF state there, au and au/day.
    pub state: StateVector,
    /// The root of the distance polynomial it started from, au.
    pub root_r2_au: f64,
    /// Topocentric distances at the three emission times, au.
    pub rho_au: [f64; 3],
    pub iterations: usize,
}

/// What became of the roots of one triple.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct GaussOutcome {
    pub solutions: Vec<GaussSolution>,
    /// Positive real roots of the distance polynomial.
    pub roots: usize,
    /// Roots refused: a negative distance, or an iteration that failed.
    pub refused: usize,
    pub coplanar: bool,
}

struct Geometry {
    l: [Vector3<f64>; 3],
    r: [Vector3<f64>; 3],
    /// d[i][j] = R_i . p_j
    d: [[f64; 3]; 3],
    d0: f64,
    t: [Epoch; 3],
}

impl Geometry {
    fn distances(&self, c1: f64, c3: f64) -> [f64; 3] {
        let d = &self.d;
        [
            (-c1 * d[0][0] + d[1][0] - c3 * d[2][0]) / (c1 * self.d0),
            (-c1 * d[0][1] + d[1][1] - c3 * d[2][1]) / self.d0,
            (-c1 * d[0][2] + d[1][2] - c3 * d[2][2]) / (c3 * self.d0),
        ]
    }

    fn positions(&self, rho: &[f64; 3]) -> [Vector3<f64>; 3] {
        [0, 1, 2].map(|i| self.r[i] + rho[i] * self.l[i])
    }

    /// Emission times minus the middle one, days.
    fn spans(&self, rho: &[f64; 3]) -> (f64, f64) {
        let te = [0, 1, 2].map(|i| self.t[i].plus_days(-rho[i] / C_AU_PER_DAY));
        (te[0].days_since(te[1]), te[2].days_since(te[1]))
    }
}

/// Gauss's method on three sights, every admissible root iterated.
pub fn gauss(sights: [&Sight; 3], mu: f64) -> GaussOutcome {
    let l = sights.map(|s| s.los);
    let r = sights.map(|s| s.observer_au);
    let p = [l[1].cross(&l[2]), l[0].cross(&l[2]), l[0].cross(&l[1])];
    let d0 = l[0].dot(&p[0]);
    let mut outcome = GaussOutcome::default();
    // NaN lines of sight fall here too.
    if d0.is_nan() || d0.abs() <= MIN_TRIPLE_PRODUCT {
        outcome.coplanar = true;
        return outcome;
    }
    let d = [0, 1, 2].map(|i| [0, 1, 2].map(|j| r[i].dot(&p[j])));
    let geometry = Geometry {
        l,
        r,
        d,
        d0,
        t: sights.map(|s| s.tdb),
    };
    let tau1 = sights[0].tdb.days_since(sights[1].tdb);
    let tau3 = sights[2].tdb.days_since(sights[1].tdb);
    let tau = tau3 - tau1;
    // c_i = a_i + mu b_i / r2^3 from the second-order f and g.
    let (a1, b1) = (tau3 / tau, tau3 * (tau * tau - tau3 * tau3) / (6.0 * tau));
    let (a3, b3) = (-tau1 / tau, -tau1 * (tau * tau - tau1 * tau1) / (6.0 * tau));
    let big_a = (-a1 * d[0][1] + d[1][1] - a3 * d[2][1]) / d0;
    let big_b = -(b1 * d[0][1] + b3 * d[2][1]) / d0;
    let e = r[1].dot(&l[1]);
    let poly = [
        1.0,
        0.0,
        -(big_a * big_a + 2.0 * big_a * e + r[1].norm_squared()),
        0.0,
        0.0,
        -2.0 * mu * big_b * (big_a + e),
        0.0,
        0.0,
        -mu * mu * big_b * big_b,
    ];
    let Ok(roots) = real_roots(&poly) else {
        return outcome;
    };
    for r2 in roots.into_iter().filter(|x| *x > 0.0) {
        outcome.roots += 1;
        let u = mu / r2.powi(3);
        let c1 = a1 + b1 * u;
        let c3 = a3 + b3 * u;
        let rho = geometry.distances(c1, c3);
        if rho.iter().any(|x| x.is_nan() || *x <= 0.0) {
            outcome.refused += 1;
            continue;
        }
        match iterate(&geometry, rho, r2, mu) {
            Some(mut s) => {
                s.root_r2_au = r2;
                outcome.solutions.push(s);
            }
            None => outcome.refused += 1,
        }
    }
    outcome
}

/// The fixed-point iteration from the polynomial's distances.
fn iterate(g: &Geometry, mut rho: [f64; 3], r2_root: f64, mu: f64) -> Option<GaussSolution> {
    // Second-order f, g of the start.
    let (mut tau1, mut tau3) = g.spans(&rho);
    let u = mu / r2_root.powi(3);
    let mut f1 = 1.0 - 0.5 * u * tau1 * tau1;
    let mut g1 = tau1 - u * tau1.powi(3) / 6.0;
    let mut f3 = 1.0 - 0.5 * u * tau3 * tau3;
    let mut g3 = tau3 - u * tau3.powi(3) / 6.0;
    for iteration in 1..=MAX_ITERATIONS {
        let pos = g.positions(&rho);
        let det = f1 * g3 - f3 * g1;
        if det.is_nan() || det == 0.0 {
            return None;
        }
        let v2 = (f1 * pos[2] - f3 * pos[0]) / det;
        (tau1, tau3) = g.spans(&rho);
        let arc1 = propagate_vectors(&pos[1], &v2, tau1, mu).ok()?.lagrange;
        let arc3 = propagate_vectors(&pos[1], &v2, tau3, mu).ok()?.lagrange;
        f1 = 0.5 * (f1 + arc1.f);
        g1 = 0.5 * (g1 + arc1.g);
        f3 = 0.5 * (f3 + arc3.f);
        g3 = 0.5 * (g3 + arc3.g);
        let det = f1 * g3 - f3 * g1;
        let c1 = g3 / det;
        let c3 = -g1 / det;
        let next = g.distances(c1, c3);
        if next.iter().any(|x| !(x.is_finite() && *x > 0.0)) {
            return None;
        }
        let change = (0..3)
            .map(|i| (next[i] - rho[i]).abs() / next[i])
            .fold(0.0, f64::max);
        rho = next;
        if change < RHO_TOLERANCE {
            // The final velocity from the exact coefficients of the final
            // distances (not the averaged ones).
            let pos = g.positions(&rho);
            let (tau1, tau3) = g.spans(&rho);
            let v_guess = (f1 * pos[2] - f3 * pos[0]) / (f1 * g3 - f3 * g1);
            let a1 = propagate_vectors(&pos[1], &v_guess, tau1, mu)
                .ok()?
                .lagrange;
            let a3 = propagate_vectors(&pos[1], &v_guess, tau3, mu)
                .ok()?
                .lagrange;
            let v2 = (a1.f * pos[2] - a3.f * pos[0]) / (a1.f * a3.g - a3.f * a1.g);
            let state = StateVector::new(pos[1], v2);
            if !state.velocity_au_per_day.iter().all(|x| x.is_finite()) {
                return None;
            }
            return Some(GaussSolution {
                epoch: g.t[1].plus_days(-rho[1] / C_AU_PER_DAY),
                state,
                root_r2_au: r2_root,
                rho_au: rho,
                iterations: iteration,
            });
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::constants::gm;
    use crate::astro::kepler::propagate;

    /// An Earth-like observer on a circle of 1 au in the xy plane.
    fn observer(t_days: f64) -> Vector3<f64> {
        let n = gm::SUN.sqrt();
        let u = 0.4 + n * t_days;
        Vector3::new(u.cos(), u.sin(), 0.0)
    }

    /// Noise-free sights of a two-body orbit, light time solved exactly:
    /// the line of sight at t points to the body at t - |r(t - tau) - R(t)| / c.
    fn sight(truth: &StateVector, t0: f64, t: f64) -> Sight {
        let big_r = observer(t);
        let mut tau = 0.0;
        for _ in 0..10 {
            let (s, _) = propagate(truth, t - tau - t0, gm::SUN).unwrap();
            tau = (s.position_au - big_r).norm() / C_AU_PER_DAY;
        }
        let (s, _) = propagate(truth, t - tau - t0, gm::SUN).unwrap();
        let rho = s.position_au - big_r;
        Sight {
            index: 0,
            tdb: Epoch::from_tdb_days_since_j2000(t),
            observer_au: big_r,
            los: rho / rho.norm(),
        }
    }

    /// Runs Gauss on three sights of `truth` (state at t0) and returns the
    /// best recovered state's relative error against truth at the solution
    /// epoch, with the number of solutions.
    fn recover(truth: &StateVector, t0: f64, times: [f64; 3]) -> (f64, usize, usize) {
        let sights = times.map(|t| sight(truth, t0, t));
        let out = gauss([&sights[0], &sights[1], &sights[2]], gm::SUN);
        assert!(!out.solutions.is_empty(), "{out:?}");
        let mut best = f64::INFINITY;
        let mut iterations = 0;
        for s in &out.solutions {
            let dt = s.epoch.tdb_days_since_j2000() - t0;
            let (at, _) = propagate(truth, dt, gm::SUN).unwrap();
            let e = ((s.state.position_au - at.position_au).norm() / at.position_au.norm()).max(
                (s.state.velocity_au_per_day - at.velocity_au_per_day).norm()
                    / at.velocity_au_per_day.norm(),
            );
            if e < best {
                best = e;
                iterations = s.iterations;
            }
        }
        (best, out.solutions.len(), iterations)
    }

    // Each truth below is invented; the sights are made from it with the
    // crate's Kepler solver, so the recovered state must equal it to the
    // iteration's tolerance (the construction is the reference).

    #[test]
    fn bound_prograde() {
        let truth = StateVector::new(
            Vector3::new(-1.8, 1.1, 0.4),
            Vector3::new(-0.006, -0.009, 0.002),
        );
        let (e, n, it) = recover(&truth, 100.0, [95.0, 100.0, 106.0]);
        println!("bound: error {e:.2e}, {n} solutions, {it} iterations");
        assert!(e < 1e-8, "{e}");
    }

    #[test]
    fn hyperbolic_retrograde_near_the_observer() {
        // e ~ 2 speed, retrograde about z, passing 0.3 au from the observer.
        let big_r = observer(50.0);
        let truth = StateVector::new(
            big_r * 1.2 + Vector3::new(0.0, 0.0, 0.25),
            Vector3::new(0.020, -0.025, -0.010),
        );
        assert!(truth.position_au.cross(&truth.velocity_au_per_day).z < 0.0);
        let v2r = truth.velocity_au_per_day.norm_squared() * truth.position_au.norm() / gm::SUN;
        assert!(v2r > 2.0, "not hyperbolic: {v2r}");
        let (e, n, it) = recover(&truth, 50.0, [47.0, 50.0, 54.0]);
        println!("hyperbolic: error {e:.2e}, {n} solutions, {it} iterations");
        assert!(e < 1e-8, "{e}");
    }

    #[test]
    fn near_parabolic_long_spacing() {
        let r = Vector3::new(0.6, -2.2, 1.0);
        let dir = Vector3::new(0.3, 0.5, -0.2).normalize();
        let v = dir * f64::sqrt(2.0 * gm::SUN / r.norm()) * (1.0 - 1e-6);
        let truth = StateVector::new(r, v);
        let (e, n, it) = recover(&truth, 0.0, [-30.0, 0.0, 40.0]);
        println!("near-parabolic: error {e:.2e}, {n} solutions, {it} iterations");
        assert!(e < 1e-8, "{e}");
    }

    #[test]
    fn coplanar_sights_are_refused() {
        let s = |t: f64, dir: Vector3<f64>| Sight {
            index: 0,
            tdb: Epoch::from_tdb_days_since_j2000(t),
            observer_au: Vector3::new(1.0, 0.0, 0.0),
            los: dir.normalize(),
        };
        let a = s(0.0, Vector3::new(0.0, 1.0, 0.0));
        let b = s(1.0, Vector3::new(0.1, 1.0, 0.0));
        let c = s(2.0, Vector3::new(0.2, 1.0, 0.0));
        assert!(gauss([&a, &b, &c], gm::SUN).coplanar);
    }
}
