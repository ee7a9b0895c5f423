//! The orbit through two positions in a given time (Lambert's problem), in
//! universal variables, no full revolution between the two positions.
//!
//! With the transfer angle theta, A = sin(theta) sqrt(r1 r2 / (1 - cos theta))
//! and z = alpha chi^2, the arc obeys
//! y(z) = r1 + r2 + A (z S(z) - 1) / sqrt(C(z)),
//! sqrt(mu) dt = (y / C)^(3/2) S + A sqrt(y),
//! f = 1 - y / r1, g = A sqrt(y / mu), gdot = 1 - y / r2
//! (Bate, Mueller & White, Fundamentals of Astrodynamics, section 5.3;
//! Curtis, Orbital Mechanics for Engineering Students, Algorithm 5.2).
//! The time is an increasing function of z on the valid part (y > 0) of
//! z < 4 pi^2, so the root is found by bisection on a bracket: no starting
//! guess, and ellipses, parabolas and hyperbolas alike.

use nalgebra::Vector3;
use thiserror::Error;

use crate::astro::kepler::Stumpff;

/// Which way round the body goes from the first position to the second.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Way {
    /// Transfer angle below pi, orbit normal along r1 x r2.
    Short,
    /// Transfer angle above pi, orbit normal along -(r1 x r2).
    Long,
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum LambertError {
    #[error("the positions are (anti)parallel: the orbit plane is undefined")]
    Collinear,
    #[error("the input is not finite, or the time of flight is not positive")]
    BadInput,
    #[error("no arc with less than one revolution takes that time")]
    NoSolution,
}

/// z = 4 pi^2 is one full revolution; the zero-revolution branch ends there.
const Z_REVOLUTION: f64 = 4.0 * std::f64::consts::PI * std::f64::consts::PI;
/// Below |sin theta| (relative) the plane is taken as undefined.
const COLLINEAR_SINE: f64 = 1e-10;
const BISECTIONS: usize = 200;

/// Velocities at both ends of the arc from `r1` to `r2` taking `dt`.
/// Units: any consistent set (mu in length^3 / time^2).
pub fn lambert(
    r1: &Vector3<f64>,
    r2: &Vector3<f64>,
    dt: f64,
    mu: f64,
    way: Way,
) -> Result<(Vector3<f64>, Vector3<f64>), LambertError> {
    let finite = r1.iter().chain(r2.iter()).all(|x| x.is_finite());
    if !(finite && dt.is_finite() && dt > 0.0 && mu > 0.0) {
        return Err(LambertError::BadInput);
    }
    let (n1, n2) = (r1.norm(), r2.norm());
    let cos_theta = (r1.dot(r2) / (n1 * n2)).clamp(-1.0, 1.0);
    let sin_short = r1.cross(r2).norm() / (n1 * n2);
    if sin_short < COLLINEAR_SINE {
        return Err(LambertError::Collinear);
    }
    let sin_theta = match way {
        Way::Short => sin_short,
        Way::Long => -sin_short,
    };
    let a = sin_theta * (n1 * n2 / (1.0 - cos_theta)).sqrt();
    let target = mu.sqrt() * dt;

    let y_of = |z: f64| -> f64 {
        let s = Stumpff::at(z);
        n1 + n2 + a * (z * s.c[3] - 1.0) / s.c[2].sqrt()
    };
    // Time minus target, -infinity where y < 0 (below the valid part).
    let excess = |z: f64| -> f64 {
        let s = Stumpff::at(z);
        let y = n1 + n2 + a * (z * s.c[3] - 1.0) / s.c[2].sqrt();
        if y.is_nan() || y < 0.0 {
            return f64::NEG_INFINITY;
        }
        (y / s.c[2]).powf(1.5) * s.c[3] + a * y.sqrt() - target
    };

    let mut hi = Z_REVOLUTION * (1.0 - 1e-12);
    if excess(hi).is_nan() || excess(hi) <= 0.0 {
        return Err(LambertError::NoSolution);
    }
    let mut lo = -4.0;
    // Hyperbolic arcs: extend the bracket downwards until the time is short
    // enough (the Stumpff functions overflow past |z| ~ 5e5).
    while excess(lo) > 0.0 {
        lo *= 2.0;
        if lo < -4.0e5 {
            return Err(LambertError::NoSolution);
        }
    }
    for _ in 0..BISECTIONS {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if excess(mid) > 0.0 {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let z = 0.5 * (lo + hi);
    let y = y_of(z);
    if y.is_nan() || y <= 0.0 {
        return Err(LambertError::NoSolution);
    }
    let f = 1.0 - y / n1;
    let g = a * (y / mu).sqrt();
    let gdot = 1.0 - y / n2;
    let v1 = (r2 - f * r1) / g;
    let v2 = (gdot * r2 - r1) / g;
    Ok((v1, v2))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::constants::gm;
    use crate::astro::kepler::propagate_vectors;

    /// Propagate a known state by dt with the crate's Kepler solver and ask
    /// Lambert for the velocity back: the construction is the reference.
    fn round_trip(r0: Vector3<f64>, v0: Vector3<f64>, dt: f64, way: Way) -> f64 {
        let mu = gm::SUN;
        let end = propagate_vectors(&r0, &v0, dt, mu).unwrap();
        let (v1, v2) = lambert(&r0, &end.position, dt, mu, way).unwrap();
        let e1 = (v1 - v0).norm() / v0.norm();
        let e2 = (v2 - end.velocity).norm() / end.velocity.norm();
        e1.max(e2)
    }

    #[test]
    fn ellipse_short_and_long_way() {
        // a ~ 2.2 au, period ~ 1190 d.
        let r0 = Vector3::new(1.5, 0.3, 0.1);
        let v0 = Vector3::new(-0.004, 0.015, 0.002);
        assert!(round_trip(r0, v0, 30.0, Way::Short) < 1e-10);
        // More than half a period: the long way round.
        assert!(round_trip(r0, v0, 800.0, Way::Long) < 1e-10);
    }

    #[test]
    fn hyperbola_retrograde() {
        // Speed twice the local circular one: strongly hyperbolic; z-axis
        // angular momentum negative (retrograde about the ecliptic-ish z).
        let r0 = Vector3::new(0.0, -1.0, -0.9);
        let v0 = Vector3::new(-0.0300, -0.0120, 0.0090);
        assert!(v0.norm_squared() * r0.norm() / gm::SUN > 2.0);
        assert!(r0.cross(&v0).z < 0.0);
        for dt in [1.0, 10.0, 120.0] {
            assert!(round_trip(r0, v0, dt, Way::Short) < 1e-10, "dt {dt}");
        }
    }

    #[test]
    fn near_parabola() {
        let r0 = Vector3::new(1.1, 0.2, -0.3);
        let escape = f64::sqrt(2.0 * gm::SUN / r0.norm());
        let dir = Vector3::new(0.2, 1.0, 0.4).normalize();
        let v0 = dir * escape * (1.0 + 1e-7);
        assert!(round_trip(r0, v0, 40.0, Way::Short) < 1e-9);
    }

    #[test]
    fn refuses_degenerate_input() {
        let r = Vector3::new(1.0, 0.0, 0.0);
        assert_eq!(
            lambert(&r, &(2.0 * r), 10.0, gm::SUN, Way::Short),
            Err(LambertError::Collinear)
        );
        let r2 = Vector3::new(0.0, 1.0, 0.0);
        assert_eq!(
            lambert(&r, &r2, -1.0, gm::SUN, Way::Short),
            Err(LambertError::BadInput)
        );
    }
}
