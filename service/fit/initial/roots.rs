//! Real roots of a real polynomial.
//!
//! All roots at once as the eigenvalues of the companion matrix (the
//! matrix whose characteristic polynomial is the monic polynomial), so no
//! root can be missed the way a bracket scan misses a close pair. The
//! eigenvalues are only as good as the QR iteration on a non-symmetric
//! matrix, so each nearly real one is polished by Newton's method on the
//! polynomial itself. The variable is scaled first so that the roots are of
//! order one: the Gauss polynomial mixes coefficients of order 1 and of
//! order mu^2 ~ 1e-7 in au and days.

use nalgebra::{DMatrix, Schur};
use thiserror::Error;

#[derive(Debug, Error, Clone, PartialEq)]
pub enum RootError {
    #[error("the polynomial has no non-zero coefficient")]
    ZeroPolynomial,
    #[error("a coefficient is not finite")]
    NotFinite,
    #[error("the eigenvalue iteration of the companion matrix did not converge")]
    NoEigenvalues,
}

/// Imaginary part (relative to the modulus, in the scaled variable) below
/// which an eigenvalue is taken as a real root to polish. Eigenvalues of a
/// double root split into a pair about sqrt(eps) ~ 1e-8 apart; 1e-6 keeps
/// them.
const REAL_TOLERANCE: f64 = 1e-6;
const NEWTON_STEPS: usize = 60;
/// Polished roots closer than this (relative) are one root: Newton's
/// method stalls near sqrt(eps) on a double root.
const SAME_ROOT: f64 = 1e-7;

/// p(x) and p'(x) by Horner's scheme; coefficients highest power first.
pub fn evaluate(coefficients: &[f64], x: f64) -> (f64, f64) {
    let mut p = 0.0;
    let mut dp = 0.0;
    for c in coefficients {
        dp = dp * x + p;
        p = p * x + c;
    }
    (p, dp)
}

/// The distinct real roots of sum_k c_k x^(n-k) (highest power first), in
/// increasing order.
pub fn real_roots(coefficients: &[f64]) -> Result<Vec<f64>, RootError> {
    if coefficients.iter().any(|c| !c.is_finite()) {
        return Err(RootError::NotFinite);
    }
    let first = coefficients
        .iter()
        .position(|c| *c != 0.0)
        .ok_or(RootError::ZeroPolynomial)?;
    let c = &coefficients[first..];
    // Roots at zero: strip trailing zero coefficients.
    let nonzero_tail = c.iter().rposition(|c| *c != 0.0).unwrap_or(0);
    let zero_roots = c.len() - 1 - nonzero_tail;
    let c = &c[..=nonzero_tail];
    let mut roots = Vec::new();
    if zero_roots > 0 {
        roots.push(0.0);
    }
    let n = c.len() - 1;
    if n == 0 {
        return Ok(roots);
    }
    // Scale x = s y with s the geometric mean of the root moduli,
    // |c_n / c_0|^(1/n): the scaled coefficients are then balanced about 1.
    let s = (c[n] / c[0]).abs().powf(1.0 / n as f64);
    let monic: Vec<f64> = (1..=n).map(|k| c[k] / c[0] / s.powi(k as i32)).collect();
    let mut companion = DMatrix::zeros(n, n);
    for k in 0..n {
        companion[(0, k)] = -monic[k];
    }
    for k in 1..n {
        companion[(k, k - 1)] = 1.0;
    }
    let schur = Schur::try_new(companion, f64::EPSILON, 10_000).ok_or(RootError::NoEigenvalues)?;
    for z in schur.complex_eigenvalues().iter() {
        if z.im.abs() > REAL_TOLERANCE * z.norm().max(1.0) {
            continue;
        }
        if let Some(x) = polish(c, z.re * s) {
            if !roots
                .iter()
                .any(|r: &f64| (r - x).abs() <= SAME_ROOT * r.abs().max(x.abs()))
            {
                roots.push(x);
            }
        }
    }
    roots.sort_by(f64::total_cmp);
    Ok(roots)
}

/// Newton's method from an eigenvalue; `None` when it wanders off (the
/// eigenvalue was the real part of a genuinely complex pair).
fn polish(c: &[f64], start: f64) -> Option<f64> {
    let mut x = start;
    for _ in 0..NEWTON_STEPS {
        let (p, dp) = evaluate(c, x);
        if p == 0.0 {
            return Some(x);
        }
        if dp == 0.0 || !dp.is_finite() {
            break;
        }
        let step = p / dp;
        x -= step;
        if step.abs() <= 4.0 * f64::EPSILON * x.abs() {
            break;
        }
    }
    // Accept when |p(x)| is at the level of the rounding in evaluating it.
    let (p, _) = evaluate(c, x);
    let size: f64 = c
        .iter()
        .rev()
        .enumerate()
        .map(|(k, ck)| (ck * x.powi(k as i32)).abs())
        .sum();
    let moved = (x - start).abs() <= 1e-3 * start.abs().max(x.abs()).max(f64::MIN_POSITIVE);
    (x.is_finite() && p.abs() <= 1e-9 * size && moved).then_some(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Coefficients (highest first) of prod (x - r_k) times the quadratic
    /// factors x^2 + b x + c: the construction defines the roots.
    fn from_factors(real: &[f64], quadratics: &[(f64, f64)]) -> Vec<f64> {
        let mut p = vec![1.0];
        let mul = |p: &[f64], q: &[f64]| {
            let mut out = vec![0.0; p.len() + q.len() - 1];
            for (i, a) in p.iter().enumerate() {
                for (j, b) in q.iter().enumerate() {
                    out[i + j] += a * b;
                }
            }
            out
        };
        for r in real {
            p = mul(&p, &[1.0, -r]);
        }
        for (b, c) in quadratics {
            p = mul(&p, &[1.0, *b, *c]);
        }
        p
    }

    fn assert_roots(found: &[f64], expected: &[f64], tolerance: f64) {
        let mut expected = expected.to_vec();
        expected.sort_by(f64::total_cmp);
        assert_eq!(found.len(), expected.len(), "{found:?} vs {expected:?}");
        for (f, e) in found.iter().zip(&expected) {
            assert!(
                (f - e).abs() <= tolerance * e.abs().max(1.0),
                "{found:?} vs {expected:?}"
            );
        }
    }

    #[test]
    fn eight_real_roots() {
        let roots = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
        let found = real_roots(&from_factors(&roots, &[])).unwrap();
        assert_roots(&found, &roots, 1e-10);
    }

    #[test]
    fn complex_pairs_are_left_out() {
        // Two real roots and three complex pairs (discriminants < 0).
        let c = from_factors(&[3.0, -0.5], &[(0.0, 1.0), (1.0, 1.0), (-0.1, 4.0)]);
        assert_roots(&real_roots(&c).unwrap(), &[-0.5, 3.0], 1e-12);
    }

    #[test]
    fn roots_of_very_different_size() {
        // A Gauss-like spread: a root near the observer's distance scale
        // and tiny and large ones, with a complex pair between.
        let real = [1e-3, 0.97, 1.4, 250.0];
        let c = from_factors(&real, &[(0.3, 2.0), (-2.0, 5.0)]);
        assert_roots(&real_roots(&c).unwrap(), &real, 1e-9);
    }

    #[test]
    fn double_root_is_found_once() {
        let c = from_factors(&[1.0, 1.0, 2.0], &[]);
        // A double root is only determined to ~sqrt(eps) by any method.
        assert_roots(&real_roots(&c).unwrap(), &[1.0, 2.0], 1e-7);
    }

    #[test]
    fn gauss_form_with_gaps_in_the_powers() {
        // r^8 - 4 r^6 + 0.02 r^3 - 1e-6: checked by evaluating the
        // polynomial at each root (the definition of a root) and by the
        // sign changes of a fine scan over (0, 3) (Descartes: at most three
        // positive roots for three sign changes).
        let c = [1.0, 0.0, -4.0, 0.0, 0.0, 0.02, 0.0, 0.0, -1e-6];
        let found = real_roots(&c).unwrap();
        let positive: Vec<f64> = found.iter().copied().filter(|r| *r > 0.0).collect();
        let mut changes = 0;
        let mut previous = evaluate(&c, 1e-4).0;
        for k in 2..=300_000 {
            let value = evaluate(&c, k as f64 * 1e-5).0;
            if value.signum() != previous.signum() {
                changes += 1;
            }
            previous = value;
        }
        assert_eq!(positive.len(), changes, "{found:?}");
        for r in &found {
            let (p, dp) = evaluate(&c, *r);
            assert!(p.abs() <= 1e-12 * dp.abs().max(1.0), "p({r}) = {p}");
        }
    }

    #[test]
    fn zero_roots_and_bad_input() {
        assert_roots(
            &real_roots(&[2.0, -6.0, 0.0, 0.0]).unwrap(),
            &[0.0, 3.0],
            1e-14,
        );
        assert_eq!(real_roots(&[0.0, 0.0]), Err(RootError::ZeroPolynomial));
        assert_eq!(real_roots(&[1.0, f64::NAN]), Err(RootError::NotFinite));
        assert!(real_roots(&[5.0]).unwrap().is_empty());
    }
}
