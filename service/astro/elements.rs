//! Cartesian state <-> heliocentric ecliptic J2000 cometary elements, with Jacobians.
//!
//! Cometary elements (q, e, i, node, argument of perihelion, perihelion
//! time) stay finite and smooth through e = 1, unlike (a, e, M). Every
//! formula here avoids dividing by 1 - e: the perihelion distance comes from
//! q = p / (1 + e), the time from perihelion from the universal Kepler
//! equation sqrt(mu) (t - tp) = q chi + e U3(chi, alpha), and the state at a
//! time from the perihelion state carried by [`kepler`].
//!
//! Angle conventions:
//! - node and argument of perihelion in [0, 2 pi), inclination in [0, pi];
//! - for an orbit exactly in the reference plane (i = 0 or pi) the node is
//!   undefined: it is set to 0 and the argument of perihelion is measured
//!   from the +x axis (the equinox) in the direction of motion, so it equals
//!   the longitude of perihelion for i = 0;
//! - for an exactly circular orbit (e = 0) the perihelion is put at the node.
//!
//! The frame conversion is the bare rotation about x by the J2000 obliquity
//! [`OBLIQUITY_J2000_ARCSEC`](super::constants::OBLIQUITY_J2000_ARCSEC); the ICRF-to-J2000 frame bias (about 23 mas)
//! is not applied, which is the usual convention for small-body elements.

use nalgebra::{Matrix3, Matrix6, Vector3};
use thiserror::Error;

use super::constants::{AU_KM, SECONDS_PER_DAY};
use super::ephemeris::StateVector;
use super::frames::icrf_to_ecliptic_matrix;
use super::kepler::{self, KeplerError, UniversalFunctions};
use super::time::Epoch;

/// Below this |y| the function atan(sqrt y)/sqrt y is summed as a series.
const ATANC_SERIES_LIMIT: f64 = 0.1;

/// The reference frame of every [`CometaryElements`] value.
pub const ELEMENTS_FRAME: &str = "heliocentric, ecliptic and mean equinox J2000";

/// Order of the elements in Jacobians and covariance matrices.
pub const ELEMENT_NAMES: [&str; 6] = ["q_au", "e", "i_rad", "node_rad", "peri_rad", "tp_tdb_days"];

#[derive(Debug, Error, Clone, PartialEq)]
pub enum ElementsError {
    #[error("state is not finite, or its position is at the origin")]
    InvalidState,
    #[error("state has zero angular momentum (rectilinear motion): no orbital plane")]
    Rectilinear,
    #[error("invalid elements: {field} = {value} ({why})")]
    InvalidElements {
        field: &'static str,
        value: f64,
        why: &'static str,
    },
    #[error("element Jacobian is singular here (circular or in-plane orbit)")]
    SingularJacobian,
    #[error(transparent)]
    Kepler(#[from] KeplerError),
}

/// Conic elements relative to the x-y plane and x axis of whatever frame the
/// vectors came in, in the units of the inputs (length, time). The
/// frame-neutral core of [`CometaryElements`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ConicElements {
    pub q: f64,
    pub e: f64,
    pub i_rad: f64,
    pub node_rad: f64,
    pub peri_rad: f64,
    /// t - tp at the state the elements came from (negative before
    /// perihelion).
    pub time_from_perihelion: f64,
}

impl ConicElements {
    /// Semi-latus rectum p = q (1 + e).
    pub fn semilatus_rectum(&self) -> f64 {
        self.q * (1.0 + self.e)
    }

    /// Reciprocal semi-major axis (1 - e)/q: positive bound, negative unbound.
    pub fn inverse_semi_major_axis(&self) -> f64 {
        (1.0 - self.e) / self.q
    }

    /// a = q / (1 - e) for a bound orbit.
    pub fn semi_major_axis(&self) -> Option<f64> {
        (self.e < 1.0).then(|| self.q / (1.0 - self.e))
    }
}

/// Conic elements together with where on the conic the state was.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Osculating {
    pub elements: ConicElements,
    pub true_anomaly_rad: f64,
}

fn wrap_two_pi(x: f64) -> f64 {
    let y = x.rem_euclid(std::f64::consts::TAU);
    // rem_euclid can return TAU itself for tiny negative inputs.
    if y >= std::f64::consts::TAU {
        0.0
    } else {
        y
    }
}

/// State -> conic elements, frame-neutral (Vallado, Fundamentals of
/// Astrodynamics and Applications, 4th ed., Algorithm 9, with q = p/(1+e)
/// and the perihelion time from universal variables).
pub fn conic_from_vectors(
    r: &Vector3<f64>,
    v: &Vector3<f64>,
    mu: f64,
) -> Result<Osculating, ElementsError> {
    let rn = r.norm();
    let finite = r.iter().chain(v.iter()).all(|x| x.is_finite());
    if !(finite && rn > 0.0 && mu.is_finite() && mu > 0.0) {
        return Err(ElementsError::InvalidState);
    }
    let h = r.cross(v);
    let hn = h.norm();
    if hn == 0.0 {
        return Err(ElementsError::Rectilinear);
    }
    let h_hat = h / hn;
    let n_xy = h.x.hypot(h.y);
    let i_rad = n_xy.atan2(h.z);
    let (node_rad, n_hat) = if n_xy > 0.0 {
        (
            wrap_two_pi(h.x.atan2(-h.y)),
            Vector3::new(-h.y, h.x, 0.0) / n_xy,
        )
    } else {
        (0.0, Vector3::x())
    };
    // In-plane direction 90 degrees ahead of the node.
    let m_hat = h_hat.cross(&n_hat);
    let e_vec = v.cross(&h) / mu - r / rn;
    let e = e_vec.norm();
    let (peri_rad, true_anomaly_rad) = if e > 0.0 {
        (
            wrap_two_pi(e_vec.dot(&m_hat).atan2(e_vec.dot(&n_hat))),
            // From the same e_vec as the argument of perihelion, so that the
            // two add up to the argument of latitude even when e is tiny.
            h_hat.dot(&e_vec.cross(r)).atan2(e_vec.dot(r)),
        )
    } else {
        (0.0, r.dot(&m_hat).atan2(r.dot(&n_hat)))
    };
    let q = hn * hn / mu / (1.0 + e);
    let alpha = (1.0 - e) / q;
    let chi = perihelion_anomaly(q, e, alpha, true_anomaly_rad);
    let u = UniversalFunctions::at(chi, alpha);
    let time_from_perihelion = (q * chi + e * u.u[3]) / mu.sqrt();
    Ok(Osculating {
        elements: ConicElements {
            q,
            e,
            i_rad,
            node_rad,
            peri_rad,
            time_from_perihelion,
        },
        true_anomaly_rad,
    })
}

/// Universal anomaly from perihelion to true anomaly nu.
///
/// With w = sqrt(q/(1+e)) tan(nu/2), chi = 2 w atanc(alpha w^2), where
/// atanc(y) = atan(sqrt y)/sqrt y (atanh for y < 0). This is the half-angle
/// relation tan(E/2) = sqrt((1-e)/(1+e)) tan(nu/2) (and its hyperbolic
/// twin) rewritten so that alpha -> 0 gives Barker's D = sqrt(2q) tan(nu/2).
/// Past quadrature on an ellipse the atan2 form of the same relation is used,
/// which stays finite at aphelion.
fn perihelion_anomaly(q: f64, e: f64, alpha: f64, nu: f64) -> f64 {
    let (s, c) = (0.5 * nu).sin_cos();
    if alpha > 0.0 && nu.abs() > std::f64::consts::FRAC_PI_2 {
        let ecc_anomaly = 2.0 * ((1.0 - e).sqrt() * s).atan2((1.0 + e).sqrt() * c);
        return ecc_anomaly / alpha.sqrt();
    }
    let w = (q / (1.0 + e)).sqrt() * s / c;
    2.0 * w * atanc(alpha * w * w)
}

/// atan(sqrt y)/sqrt y for y >= 0, atanh(sqrt(-y))/sqrt(-y) for y < 0.
fn atanc(y: f64) -> f64 {
    if y.abs() < ATANC_SERIES_LIMIT {
        // sum_k (-y)^k / (2k + 1)
        let mut term = 1.0f64;
        let mut sum = 1.0f64;
        let mut k = 1.0f64;
        while term.abs() > 1e-18 {
            term *= -y;
            sum += term / (2.0 * k + 1.0);
            k += 1.0;
        }
        sum
    } else if y > 0.0 {
        let x = y.sqrt();
        x.atan() / x
    } else {
        let x = (-y).sqrt();
        x.atanh() / x
    }
}

/// Unit vectors towards perihelion (P) and 90 degrees ahead of it in the
/// direction of motion (Q), in the reference frame of the elements.
fn perifocal_axes(i: f64, node: f64, peri: f64) -> (Vector3<f64>, Vector3<f64>) {
    let (si, ci) = i.sin_cos();
    let (sn, cn) = node.sin_cos();
    let (sw, cw) = peri.sin_cos();
    (
        Vector3::new(cn * cw - sn * sw * ci, sn * cw + cn * sw * ci, sw * si),
        Vector3::new(-cn * sw - sn * cw * ci, -sn * sw + cn * cw * ci, cw * si),
    )
}

fn check_conic(c: &ConicElements) -> Result<(), ElementsError> {
    let bad = |field, value, why| Err(ElementsError::InvalidElements { field, value, why });
    if !(c.q.is_finite() && c.q > 0.0) {
        return bad("q", c.q, "must be finite and positive");
    }
    if !(c.e.is_finite() && c.e >= 0.0) {
        return bad("e", c.e, "must be finite and non-negative");
    }
    for (field, value) in [
        ("i", c.i_rad),
        ("node", c.node_rad),
        ("peri", c.peri_rad),
        ("time_from_perihelion", c.time_from_perihelion),
    ] {
        if !value.is_finite() {
            return bad(field, value, "must be finite");
        }
    }
    Ok(())
}

/// The perihelion state of the conic: r = q P, v = sqrt(mu (1 + e)/q) Q.
fn perihelion_vectors(c: &ConicElements, mu: f64) -> (Vector3<f64>, Vector3<f64>) {
    let (p, qv) = perifocal_axes(c.i_rad, c.node_rad, c.peri_rad);
    let speed = (mu * (1.0 + c.e) / c.q).sqrt();
    (c.q * p, speed * qv)
}

/// Conic elements -> state at `time_from_perihelion`, frame-neutral: the
/// perihelion state carried by the universal-variable propagator, whose
/// Kepler equation from perihelion, q chi + e U3 = sqrt(mu) dt, has no
/// cancelling terms.
pub fn vectors_from_conic(
    c: &ConicElements,
    mu: f64,
) -> Result<(Vector3<f64>, Vector3<f64>), ElementsError> {
    check_conic(c)?;
    let (rp, vp) = perihelion_vectors(c, mu);
    let s = kepler::propagate_vectors(&rp, &vp, c.time_from_perihelion, mu)?;
    Ok((s.position, s.velocity))
}

/// d(state)/d(q, e, i, node, peri, tp) of [`vectors_from_conic`], analytic:
/// derivatives of the perihelion state carried through the two-body
/// transition matrix, and -d(state)/dt for tp.
pub fn conic_state_partials(c: &ConicElements, mu: f64) -> Result<Matrix6<f64>, ElementsError> {
    check_conic(c)?;
    let (p, qv) = perifocal_axes(c.i_rad, c.node_rad, c.peri_rad);
    let speed = (mu * (1.0 + c.e) / c.q).sqrt();
    let (rp, vp) = (c.q * p, speed * qv);
    let (sol, phi) = kepler::state_transition_matrix(&rp, &vp, c.time_from_perihelion, mu)?;
    let node_axis = Vector3::new(c.node_rad.cos(), c.node_rad.sin(), 0.0);
    let z = Vector3::z();
    // Derivatives of the perihelion state (r_p, v_p) for q, e, i, node, peri.
    let perihelion_columns: [(Vector3<f64>, Vector3<f64>); 5] = [
        (p, -0.5 * speed / c.q * qv),
        (Vector3::zeros(), 0.5 * speed / (1.0 + c.e) * qv),
        (node_axis.cross(&rp), node_axis.cross(&vp)),
        (z.cross(&rp), z.cross(&vp)),
        (c.q * qv, -speed * p),
    ];
    let mut jac = Matrix6::zeros();
    for (col, (dr, dv)) in perihelion_columns.iter().enumerate() {
        let d0 = nalgebra::Vector6::new(dr.x, dr.y, dr.z, dv.x, dv.y, dv.z);
        jac.set_column(col, &(phi * d0));
    }
    // Later perihelion = earlier point on the same conic.
    let r = sol.position;
    let acc = -mu * r / r.norm().powi(3);
    let v = sol.velocity;
    jac.set_column(
        5,
        &nalgebra::Vector6::new(-v.x, -v.y, -v.z, -acc.x, -acc.y, -acc.z),
    );
    Ok(jac)
}

/// The position and velocity blocks rotated alike.
fn rotate_state_matrix(rot: &Matrix3<f64>) -> Matrix6<f64> {
    let mut m = Matrix6::zeros();
    m.fixed_view_mut::<3, 3>(0, 0).copy_from(rot);
    m.fixed_view_mut::<3, 3>(3, 3).copy_from(rot);
    m
}

/// Whether an orbit is bound, and its size or excess speed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum OrbitShape {
    Bound { a_au: f64, period_days: f64 },
    Parabolic,
    Unbound { v_inf_km_s: f64 },
}

/// Heliocentric osculating cometary elements, ecliptic and equinox J2000
/// ([`ELEMENTS_FRAME`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CometaryElements {
    pub q_au: f64,
    pub e: f64,
    pub i_rad: f64,
    pub node_rad: f64,
    pub peri_rad: f64,
    /// Time of perihelion passage (TDB). For an ellipse the passage nearest
    /// the osculating epoch.
    pub tp: Epoch,
    /// Osculating epoch: the instant whose state these elements describe.
    pub epoch: Epoch,
    /// GM of the central mass the elements refer to.
    pub gm_au3_per_day2: f64,
}

impl CometaryElements {
    /// From a heliocentric ICRF state (au, au/day) at `epoch`.
    pub fn from_state(
        state: &StateVector,
        epoch: Epoch,
        gm_au3_per_day2: f64,
    ) -> Result<Self, ElementsError> {
        let rot = icrf_to_ecliptic_matrix();
        let osc = conic_from_vectors(
            &(rot * state.position_au),
            &(rot * state.velocity_au_per_day),
            gm_au3_per_day2,
        )?;
        Ok(Self::from_conic(&osc.elements, epoch, gm_au3_per_day2))
    }

    fn from_conic(c: &ConicElements, epoch: Epoch, gm_au3_per_day2: f64) -> Self {
        CometaryElements {
            q_au: c.q,
            e: c.e,
            i_rad: c.i_rad,
            node_rad: c.node_rad,
            peri_rad: c.peri_rad,
            tp: epoch.plus_days(-c.time_from_perihelion),
            epoch,
            gm_au3_per_day2,
        }
    }

    fn conic_at(&self, t: Epoch) -> ConicElements {
        ConicElements {
            q: self.q_au,
            e: self.e,
            i_rad: self.i_rad,
            node_rad: self.node_rad,
            peri_rad: self.peri_rad,
            time_from_perihelion: t.days_since(self.tp),
        }
    }

    /// Heliocentric ICRF state at the osculating epoch.
    pub fn to_state(&self) -> Result<StateVector, ElementsError> {
        self.state_at(self.epoch)
    }

    /// Heliocentric ICRF state at `t` on the same two-body conic.
    pub fn state_at(&self, t: Epoch) -> Result<StateVector, ElementsError> {
        let (r, v) = vectors_from_conic(&self.conic_at(t), self.gm_au3_per_day2)?;
        let back = icrf_to_ecliptic_matrix().transpose();
        Ok(StateVector::new(back * r, back * v))
    }

    /// The elements as a vector in [`ELEMENT_NAMES`] order (tp in TDB days
    /// since J2000), for covariance work.
    pub fn to_array(&self) -> [f64; 6] {
        [
            self.q_au,
            self.e,
            self.i_rad,
            self.node_rad,
            self.peri_rad,
            self.tp.tdb_days_since_j2000(),
        ]
    }

    /// d(ICRF state at the epoch)/d(elements), analytic; columns in
    /// [`ELEMENT_NAMES`] order, rows x, y, z (au), vx, vy, vz (au/day).
    pub fn state_partials(&self) -> Result<Matrix6<f64>, ElementsError> {
        let jac = conic_state_partials(&self.conic_at(self.epoch), self.gm_au3_per_day2)?;
        Ok(rotate_state_matrix(&icrf_to_ecliptic_matrix().transpose()) * jac)
    }

    /// Elements of a heliocentric ICRF state with the Jacobian
    /// d(elements)/d(state) (rows in [`ELEMENT_NAMES`] order), the inverse
    /// of [`Self::state_partials`]. A covariance C of the state maps to
    /// J C J^T. Singular for circular and exactly in-plane orbits, where
    /// the angles are undefined.
    pub fn from_state_with_jacobian(
        state: &StateVector,
        epoch: Epoch,
        gm_au3_per_day2: f64,
    ) -> Result<(Self, Matrix6<f64>), ElementsError> {
        let el = Self::from_state(state, epoch, gm_au3_per_day2)?;
        let jac = el
            .state_partials()?
            .try_inverse()
            .filter(|m| m.iter().all(|x| x.is_finite()))
            .ok_or(ElementsError::SingularJacobian)?;
        Ok((el, jac))
    }

    pub fn i_deg(&self) -> f64 {
        self.i_rad.to_degrees()
    }

    pub fn node_deg(&self) -> f64 {
        self.node_rad.to_degrees()
    }

    pub fn peri_deg(&self) -> f64 {
        self.peri_rad.to_degrees()
    }

    /// 1/a = (1 - e)/q in 1/au: continuous through the parabola, the
    /// quantity used to judge bound or unbound.
    pub fn inverse_semi_major_axis_per_au(&self) -> f64 {
        (1.0 - self.e) / self.q_au
    }

    pub fn shape(&self) -> OrbitShape {
        let alpha = self.inverse_semi_major_axis_per_au();
        if alpha > 0.0 {
            let a_au = 1.0 / alpha;
            let n = (self.gm_au3_per_day2 * alpha * alpha * alpha).sqrt();
            OrbitShape::Bound {
                a_au,
                period_days: std::f64::consts::TAU / n,
            }
        } else if alpha == 0.0 {
            OrbitShape::Parabolic
        } else {
            // v_inf^2 = -mu alpha = mu (e - 1)/q (vis-viva at r -> infinity).
            let v_au_day = (-self.gm_au3_per_day2 * alpha).sqrt();
            OrbitShape::Unbound {
                v_inf_km_s: v_au_day * AU_KM / SECONDS_PER_DAY,
            }
        }
    }

    /// Semi-major axis in au for a bound orbit.
    pub fn semi_major_axis_au(&self) -> Option<f64> {
        match self.shape() {
            OrbitShape::Bound { a_au, .. } => Some(a_au),
            _ => None,
        }
    }

    /// Hyperbolic excess speed in km/s for an unbound orbit.
    pub fn v_infinity_km_s(&self) -> Option<f64> {
        match self.shape() {
            OrbitShape::Unbound { v_inf_km_s } => Some(v_inf_km_s),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::constants::{gm, OBLIQUITY_J2000_ARCSEC};
    use std::f64::consts::{PI, TAU};

    /// Vallado prints p and a to 1e-3 km, e to 1e-6, angles to 1e-3 or
    /// 1e-2 deg; his p and a differ from an exact evaluation by up to
    /// 0.008 km (rounding inside the worked example), hence 0.01 km.
    const VALLADO_LENGTH_TOL_KM: f64 = 0.01;
    const VALLADO_E_TOL: f64 = 0.5e-6;
    const VALLADO_ANGLE_TOL_DEG: f64 = 0.005;
    /// Against rebound's own conversion (double precision throughout).
    const REBOUND_TOL: f64 = 1e-11;
    /// rebound derives T from a = 1/(2/r - v^2/GM), which loses digits as
    /// 1/|1 - e|; for 1 - e = 4e-7 that is about 1e-9 relative.
    const REBOUND_NEAR_PARABOLIC_TOL: f64 = 1e-8;
    const ROUND_TRIP_RELATIVE_TOL: f64 = 1e-12;
    const JACOBIAN_RELATIVE_TOL: f64 = 1e-6;

    fn angle_diff(a: f64, b: f64) -> f64 {
        let d = (a - b).rem_euclid(TAU);
        d.min(TAU - d)
    }

    #[test]
    fn vallado_state_to_elements_example() {
        // Vallado, Fundamentals of Astrodynamics and Applications, 4th ed.,
        // Example 2-5 (memory), Earth mu = 398600.4418 km^3/s^2, equatorial
        // frame (no ecliptic rotation).
        let mu = 398_600.441_8;
        let r = Vector3::new(6524.834, 6862.875, 6448.296);
        let v = Vector3::new(4.901327, 5.533756, -1.976341);
        let osc = conic_from_vectors(&r, &v, mu).unwrap();
        let c = osc.elements;
        assert!((c.semilatus_rectum() - 11_067.790).abs() < VALLADO_LENGTH_TOL_KM);
        assert!((c.semi_major_axis().unwrap() - 36_127.343).abs() < VALLADO_LENGTH_TOL_KM);
        assert!((c.e - 0.832853).abs() < VALLADO_E_TOL);
        assert!((c.i_rad.to_degrees() - 87.870).abs() < VALLADO_ANGLE_TOL_DEG);
        assert!((c.node_rad.to_degrees() - 227.898).abs() < VALLADO_ANGLE_TOL_DEG);
        assert!((c.peri_rad.to_degrees() - 53.38).abs() < VALLADO_ANGLE_TOL_DEG);
        assert!((osc.true_anomaly_rad.to_degrees() - 92.335).abs() < VALLADO_ANGLE_TOL_DEG);
        // rebound 5.2.2: sim.G = 398600.4418; sim.add(m=1.0);
        // sim.add(m=0.0, x=6524.834, y=6862.875, z=6448.296, vx=4.901327,
        // vy=5.533756, vz=-1.976341); o = sim.particles[1].orbit(primary=sim.particles[0])
        // -> a = 36127.337619678634, e = 0.8328533984875214,
        //    p = a (1 - e^2) = 11067.79834266181
        assert!((c.semi_major_axis().unwrap() / 36_127.337_619_678_634 - 1.0).abs() < REBOUND_TOL);
        assert!((c.e / 0.832_853_398_487_521_4 - 1.0).abs() < REBOUND_TOL);
        assert!((c.semilatus_rectum() / 11_067.798_342_661_81 - 1.0).abs() < REBOUND_TOL);
    }

    /// rebound 5.2.2, for each (r, v) below (au, au/day):
    /// sim = rebound.Simulation(); sim.G = 2.9591220828411956e-04;
    /// sim.add(m=1.0); sim.add(m=0.0, x=.., y=.., z=.., vx=.., vy=.., vz=..);
    /// o = sim.particles[1].orbit(primary=sim.particles[0]);
    /// (o.e, o.a*(1-o.e), o.inc, o.Omega, o.omega, o.f, o.T) with T the
    /// perihelion time relative to t = 0, i.e. T = -(t - tp).
    /// The last two: r = (0.4, -0.9, 0.3), v along (-0.3, -0.2, -0.9) at
    /// 0.9999999 and 1.0000001 times the escape speed (retrograde,
    /// near-parabolic).
    #[allow(clippy::type_complexity)]
    const REBOUND_CASES: [([f64; 3], [f64; 3], [f64; 7], f64); 5] = [
        (
            [1.2, -0.4, 0.3],
            [0.004, 0.015, -0.006],
            [
                0.2556813286469065,
                1.2356439621676003,
                0.41598155028039563,
                3.386571316716657,
                3.246038966445974,
                5.570910042108551,
                52.53774360070869,
            ],
            REBOUND_TOL,
        ),
        (
            [0.9, 0.5, -0.2],
            [-0.012, 0.02, 0.009],
            [
                1.2132725282117383,
                1.0394018701183914,
                0.4030789972799062,
                0.980083702781398,
                5.956653630664106,
                6.102041248954393,
                7.545941588061625,
            ],
            REBOUND_TOL,
        ),
        (
            [-2.5, 1.0, 0.7],
            [0.003, -0.004, -0.014],
            [
                1.0577088430901649,
                2.064128082746522,
                1.3720406824395108,
                5.955065412164281,
                3.9315868100503653,
                5.233623495524167,
                155.7531511100034,
            ],
            REBOUND_TOL,
        ),
        (
            [0.4, -0.9, 0.3],
            [
                -0.007418690574230016,
                -0.0049457937161533445,
                -0.022256071722690052,
            ],
            [
                0.9999996177037566,
                0.9839952320005843,
                1.9376267315298366,
                1.8717165611553224,
                3.2480588469945406,
                5.8592599368258185,
                17.535100861892943,
            ],
            REBOUND_NEAR_PARABOLIC_TOL,
        ),
        (
            [0.4, -0.9, 0.3],
            [
                -0.00741869205796828,
                -0.004945794705312188,
                -0.02225607617390484,
            ],
            [
                1.0000003822962893,
                0.9839952497993154,
                1.9376267315298366,
                1.8717165611553224,
                3.248058682457965,
                5.859260101362395,
                17.535091006101553,
            ],
            REBOUND_NEAR_PARABOLIC_TOL,
        ),
    ];

    #[test]
    fn conic_elements_match_rebound() {
        for (r, v, want, tol) in REBOUND_CASES {
            let osc = conic_from_vectors(&Vector3::from(r), &Vector3::from(v), gm::SUN).unwrap();
            let c = osc.elements;
            assert!((c.e - want[0]).abs() < tol, "e {} vs {}", c.e, want[0]);
            assert!(
                (c.q / want[1] - 1.0).abs() < tol,
                "q {} vs {}",
                c.q,
                want[1]
            );
            assert!(angle_diff(c.i_rad, want[2]) < tol);
            assert!(angle_diff(c.node_rad, want[3]) < tol);
            // omega and f individually carry rebound's a-based precision
            // loss near e = 1; their sum does not.
            assert!(angle_diff(c.peri_rad, want[4]) < tol * 10.0);
            assert!(angle_diff(osc.true_anomaly_rad, want[5]) < tol * 10.0);
            let tp = -c.time_from_perihelion;
            assert!((tp / want[6] - 1.0).abs() < tol, "T {tp} vs {}", want[6]);
        }
    }

    #[test]
    fn parabola_time_matches_barker() {
        // Barker's equation (Vallado, 4th ed., Algorithm 5, memory):
        // sqrt(mu) (t - tp) = q D + D^3/6 with D = sqrt(2q) tan(nu/2).
        let q = 0.7;
        for &nu in &[-2.8f64, -1.0, 0.3, 2.0, 3.0] {
            let c = ConicElements {
                q,
                e: 1.0,
                i_rad: 0.6,
                node_rad: 1.0,
                peri_rad: 2.0,
                time_from_perihelion: 0.0,
            };
            let d = (2.0 * q).sqrt() * (0.5 * nu).tan();
            let t_barker = (q * d + d * d * d / 6.0) / gm::SUN.sqrt();
            let c = ConicElements {
                time_from_perihelion: t_barker,
                ..c
            };
            let (r, v) = vectors_from_conic(&c, gm::SUN).unwrap();
            let back = conic_from_vectors(&r, &v, gm::SUN).unwrap();
            assert!(angle_diff(back.true_anomaly_rad, nu) < 1e-12, "nu {nu}");
            let rel = (back.elements.time_from_perihelion - t_barker).abs() / t_barker.abs();
            assert!(rel < ROUND_TRIP_RELATIVE_TOL, "nu {nu}: {rel:e}");
        }
    }

    fn rel(a: &Vector3<f64>, b: &Vector3<f64>) -> f64 {
        (a - b).norm() / b.norm()
    }

    #[test]
    fn state_elements_state_round_trips() {
        let eccentricities = [
            0.0,
            0.1,
            0.9,
            0.999,
            1.0 - 1e-8,
            1.0,
            1.0 + 1e-8,
            1.0001,
            1.2,
            3.0,
            10.0,
        ];
        let inclinations = [0.0, 0.3, 1.5, 2.4, PI];
        let mut worst_state = 0.0f64;
        let mut worst_elements = 0.0f64;
        for &e in &eccentricities {
            for &i_rad in &inclinations {
                for &dt in &[-150.0, -3.0, 0.0, 40.0, 700.0] {
                    let truth = CometaryElements {
                        q_au: 0.85,
                        e,
                        i_rad,
                        node_rad: 4.0,
                        peri_rad: 1.3,
                        tp: Epoch::from_tdb_days_since_j2000(9_000.0),
                        epoch: Epoch::from_tdb_days_since_j2000(9_000.0 + dt),
                        gm_au3_per_day2: gm::SUN,
                    };
                    let state = truth.to_state().unwrap();
                    let el = CometaryElements::from_state(&state, truth.epoch, gm::SUN).unwrap();
                    let back = el.to_state().unwrap();
                    let err = rel(&back.position_au, &state.position_au)
                        .max(rel(&back.velocity_au_per_day, &state.velocity_au_per_day));
                    worst_state = worst_state.max(err);
                    assert!(
                        err < ROUND_TRIP_RELATIVE_TOL,
                        "e {e} i {i_rad} dt {dt}: {err:e}"
                    );
                    // Elements themselves, where they are defined: a
                    // circular orbit has no perihelion, so only its state
                    // is compared. (The i = 0 and pi cases lie in the
                    // ecliptic, and rounding in the frame rotation leaves
                    // their node arbitrary; the state still round-trips.)
                    if e == 0.0 {
                        continue;
                    }
                    // An ellipse reports the passage nearest the epoch:
                    // compare modulo whole periods.
                    let mut shift = el.tp.days_since(truth.tp);
                    if let OrbitShape::Bound { period_days, .. } = truth.shape() {
                        shift -= (shift / period_days).round() * period_days;
                    }
                    let d_tp = shift.abs() / dt.abs().max(1.0);
                    let d = [
                        (el.q_au / truth.q_au - 1.0).abs(),
                        (el.e - truth.e).abs(),
                        d_tp,
                    ];
                    let d = d.iter().fold(0.0f64, |m, x| m.max(*x));
                    worst_elements = worst_elements.max(d);
                    assert!(
                        d < ROUND_TRIP_RELATIVE_TOL,
                        "elements e {e} i {i_rad} dt {dt}: {d:e}"
                    );
                    if e > 0.0 && i_rad > 0.0 && i_rad < PI {
                        assert!(angle_diff(el.i_rad, truth.i_rad) < ROUND_TRIP_RELATIVE_TOL);
                        assert!(angle_diff(el.node_rad, truth.node_rad) < ROUND_TRIP_RELATIVE_TOL);
                        assert!(angle_diff(el.peri_rad, truth.peri_rad) < ROUND_TRIP_RELATIVE_TOL);
                    }
                }
            }
        }
        eprintln!("elements round trip worst state {worst_state:e}, q/e/tp {worst_elements:e}");
    }

    #[test]
    fn in_plane_orbits_follow_the_node_convention() {
        // Orbits in the reference plane: node 0, argument of perihelion
        // from +x in the direction of motion (module docs).
        let mu = gm::SUN;
        let peri_dir = Vector3::new(0.6f64.cos(), 0.6f64.sin(), 0.0);
        let speed = (mu * 1.5 / 0.9).sqrt();
        for (vz_sign, i_want, peri_want) in [(1.0, 0.0, 0.6), (-1.0, PI, TAU - 0.6)] {
            let vel = speed * Vector3::z().cross(&peri_dir) * vz_sign;
            let osc = conic_from_vectors(&(0.9 * peri_dir), &vel, mu).unwrap();
            assert_eq!(osc.elements.node_rad, 0.0);
            assert!((osc.elements.i_rad - i_want).abs() < 1e-15);
            assert!(angle_diff(osc.elements.peri_rad, peri_want) < 1e-14);
            let (r, v) = vectors_from_conic(&osc.elements, mu).unwrap();
            assert!(rel(&r, &(0.9 * peri_dir)) < ROUND_TRIP_RELATIVE_TOL);
            assert!(rel(&v, &vel) < ROUND_TRIP_RELATIVE_TOL);
        }
    }

    #[test]
    fn shape_and_excess_speed() {
        let state = StateVector::new(
            Vector3::new(0.9, 0.5, -0.2),
            Vector3::new(-0.012, 0.02, 0.009),
        );
        let el = CometaryElements::from_state(&state, Epoch::J2000, gm::SUN).unwrap();
        // Vis-viva: v_inf^2 = v^2 - 2 mu / r (energy conservation).
        let v2 =
            state.velocity_au_per_day.norm_squared() - 2.0 * gm::SUN / state.position_au.norm();
        let want = v2.sqrt() * AU_KM / SECONDS_PER_DAY;
        assert!((el.v_infinity_km_s().unwrap() / want - 1.0).abs() < 1e-12);
        assert!(el.semi_major_axis_au().is_none());
        // The ellipse from the rebound cases: a = 1.6601007199259543 au
        // (rebound 5.2.2, call above REBOUND_CASES).
        let state = StateVector::new(
            Vector3::new(1.2, -0.4, 0.3),
            Vector3::new(0.004, 0.015, -0.006),
        );
        let el = CometaryElements::from_state(&state, Epoch::J2000, gm::SUN).unwrap();
        assert!(
            (el.semi_major_axis_au().unwrap() / 1.660_100_719_925_954_3 - 1.0).abs() < REBOUND_TOL
        );
        assert!(el.v_infinity_km_s().is_none());
        // One period later the state repeats.
        if let OrbitShape::Bound { period_days, .. } = el.shape() {
            let later = el.state_at(Epoch::J2000.plus_days(period_days)).unwrap();
            assert!(rel(&later.position_au, &state.position_au) < 1e-11);
        }
    }

    #[test]
    fn ecliptic_rotation_has_the_right_sense() {
        // An orbit in the ICRF equator, moving east, seen from the J2000
        // ecliptic: inclined by the obliquity, ascending node at longitude
        // 180 deg (the equator passes north of the ecliptic at the autumnal
        // equinox), from the geometry of the two planes.
        let r = Vector3::new(1.0, 0.0, 0.0);
        let v = Vector3::new(0.0, 0.017, 0.0);
        let el =
            CometaryElements::from_state(&StateVector::new(r, v), Epoch::J2000, gm::SUN).unwrap();
        let eps = (OBLIQUITY_J2000_ARCSEC / 3600.0).to_radians();
        assert!((el.i_rad - eps).abs() < 1e-15);
        assert!(angle_diff(el.node_rad, PI) < 1e-15);
        // And an orbit about the ecliptic pole, (0, -sin eps, cos eps) in
        // the ICRF, has zero ecliptic inclination.
        let pole = Vector3::new(0.0, -eps.sin(), eps.cos());
        let v = 0.017 * pole.cross(&r);
        let el =
            CometaryElements::from_state(&StateVector::new(r, v), Epoch::J2000, gm::SUN).unwrap();
        assert!(el.i_rad < 1e-15);
    }

    #[test]
    fn invalid_inputs_are_errors() {
        let r = Vector3::new(1.0, 0.0, 0.0);
        assert_eq!(
            conic_from_vectors(&r, &(0.01 * r), gm::SUN),
            Err(ElementsError::Rectilinear)
        );
        assert_eq!(
            conic_from_vectors(&Vector3::zeros(), &r, gm::SUN),
            Err(ElementsError::InvalidState)
        );
        let c = ConicElements {
            q: -1.0,
            e: 0.5,
            i_rad: 0.1,
            node_rad: 0.0,
            peri_rad: 0.0,
            time_from_perihelion: 0.0,
        };
        assert!(matches!(
            vectors_from_conic(&c, gm::SUN),
            Err(ElementsError::InvalidElements { field: "q", .. })
        ));
    }

    #[test]
    fn jacobian_matches_central_differences() {
        let mut worst = 0.0f64;
        for &e in &[0.3, 0.999, 1.0, 1.0 + 1e-8, 1.5, 10.0] {
            for &i_rad in &[0.4, 2.6] {
                let truth = CometaryElements {
                    q_au: 1.1,
                    e,
                    i_rad,
                    node_rad: 2.0,
                    peri_rad: 0.8,
                    tp: Epoch::from_tdb_days_since_j2000(100.0),
                    epoch: Epoch::from_tdb_days_since_j2000(130.0),
                    gm_au3_per_day2: gm::SUN,
                };
                let state = truth.to_state().unwrap();
                let (_, jac) =
                    CometaryElements::from_state_with_jacobian(&state, truth.epoch, gm::SUN)
                        .unwrap();
                let x0 = [state.position_au, state.velocity_au_per_day];
                let mut fd = Matrix6::zeros();
                for j in 0..6 {
                    // Step 1e-6 of |r| or |v|: truncation ~h^2 and rounding
                    // ~eps/h balance near there for these smooth maps.
                    let h = 1e-6 * x0[j / 3].norm();
                    let eval = |sign: f64| {
                        let mut x = x0;
                        x[j / 3][j % 3] += sign * h;
                        CometaryElements::from_state(
                            &StateVector::new(x[0], x[1]),
                            truth.epoch,
                            gm::SUN,
                        )
                        .unwrap()
                        .to_array()
                    };
                    let (p, m) = (eval(1.0), eval(-1.0));
                    for i in 0..6 {
                        let mut d = p[i] - m[i];
                        if (2..5).contains(&i) {
                            // angles: undo a wrap through 0 / 2 pi
                            d = (d + PI).rem_euclid(TAU) - PI;
                        }
                        fd[(i, j)] = d / (2.0 * h);
                    }
                }
                for i in 0..6 {
                    // Relative to the row's largest entry, so entries near
                    // zero are judged on the row's scale.
                    let scale = (0..6).fold(0.0f64, |m, j| m.max(jac[(i, j)].abs()));
                    for j in 0..6 {
                        let err = (jac[(i, j)] - fd[(i, j)]).abs() / scale;
                        worst = worst.max(err);
                        assert!(
                            err < JACOBIAN_RELATIVE_TOL,
                            "e {e} i {i_rad} d{}/dx{j}: {} vs {} ({err:e})",
                            ELEMENT_NAMES[i],
                            jac[(i, j)],
                            fd[(i, j)]
                        );
                    }
                }
            }
        }
        eprintln!("elements Jacobian worst relative difference {worst:e}");
    }
}
