//! Seeded random draws for Monte Carlo work: standard normal deviates and
//! vectors from a multivariate normal distribution.
//!
//! - Uniforms: splitmix64 (Steele, Lea & Flood 2014, "Fast splittable
//!   pseudorandom number generators", OOPSLA), 53 bits per draw. The same
//!   generator makes the noise of the whole-path tests, so a result can be
//!   reproduced from its seed without a dependency.
//! - Normals: the Box-Muller transform (Box & Muller 1958, Ann. Math.
//!   Stat. 29, 610), both deviates of each pair used.
//! - Correlated vectors: x = mean + L z with L L^T = C. The factor is taken
//!   from the correlation matrix D^-1 C D^-1 (D the standard deviations),
//!   so that parameters of very different sizes (au next to au/day^2) do
//!   not spoil the Cholesky factorisation; a covariance that is positive
//!   semi-definite only (or loses definiteness by round-off) falls back to
//!   its symmetric eigen-decomposition with negative eigenvalues set to 0.

use nalgebra::{DMatrix, DVector};
use thiserror::Error;

/// Standard normal deviates from a seed.
#[derive(Debug, Clone)]
pub struct Gaussian {
    state: u64,
    spare: Option<f64>,
}

impl Gaussian {
    pub fn new(seed: u64) -> Self {
        Self {
            state: seed,
            spare: None,
        }
    }

    /// A uniform deviate in (0, 1): never 0, so its logarithm is finite.
    pub fn uniform(&mut self) -> f64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// One standard normal deviate.
    pub fn next_normal(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let (u1, u2) = (self.uniform(), self.uniform());
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (std::f64::consts::TAU * u2).sin_cos();
        self.spare = Some(r * s);
        r * c
    }
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum SamplingError {
    #[error("the covariance is {rows} x {cols}; {mean} x {mean} was expected")]
    Shape {
        rows: usize,
        cols: usize,
        mean: usize,
    },
    #[error("covariance entry ({row}, {col}) is not finite, or a variance is negative")]
    NotFinite { row: usize, col: usize },
}

/// N(mean, covariance), ready to draw from.
#[derive(Debug, Clone)]
pub struct MultivariateNormal {
    mean: DVector<f64>,
    /// L with L L^T = covariance.
    factor: DMatrix<f64>,
}

impl MultivariateNormal {
    pub fn new(mean: DVector<f64>, covariance: &DMatrix<f64>) -> Result<Self, SamplingError> {
        let n = mean.len();
        let (rows, cols) = covariance.shape();
        if rows != n || cols != n {
            return Err(SamplingError::Shape {
                rows,
                cols,
                mean: n,
            });
        }
        for row in 0..n {
            for col in 0..n {
                let c = covariance[(row, col)];
                if !c.is_finite() || (row == col && c < 0.0) {
                    return Err(SamplingError::NotFinite { row, col });
                }
            }
        }
        let sd = DVector::from_iterator(n, (0..n).map(|i| covariance[(i, i)].sqrt()));
        // A parameter with no spread draws its mean: its row of L is 0.
        let inv_sd = sd.map(|s| if s > 0.0 { 1.0 / s } else { 0.0 });
        let scale_in = DMatrix::from_diagonal(&inv_sd);
        let correlation = &scale_in * covariance * &scale_in;
        let factor_r = match correlation.clone().cholesky() {
            Some(ch) => ch.l(),
            None => {
                let eigen = correlation.symmetric_eigen();
                let root = eigen.eigenvalues.map(|l| l.max(0.0).sqrt());
                eigen.eigenvectors * DMatrix::from_diagonal(&root)
            }
        };
        Ok(Self {
            mean,
            factor: DMatrix::from_diagonal(&sd) * factor_r,
        })
    }

    pub fn dimension(&self) -> usize {
        self.mean.len()
    }

    pub fn draw(&self, rng: &mut Gaussian) -> DVector<f64> {
        let z = DVector::from_iterator(
            self.mean.len(),
            (0..self.mean.len()).map(|_| rng.next_normal()),
        );
        &self.mean + &self.factor * z
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Draws for the moment checks.
    const DRAWS: usize = 20_000;
    /// Standard error of a sample variance is sigma^2 sqrt(2 / N), 1% at
    /// N = 20 000 (normal theory, e.g. Kendall & Stuart, The Advanced
    /// Theory of Statistics, vol. 1, sampling variance of m2; memory); the
    /// tolerance is 5 such errors.
    const MOMENT_TOLERANCE: f64 = 0.05;

    #[test]
    fn deviates_have_unit_variance_and_are_reproducible() {
        let mut a = Gaussian::new(7);
        let xs: Vec<f64> = (0..DRAWS).map(|_| a.next_normal()).collect();
        let mean = xs.iter().sum::<f64>() / DRAWS as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (DRAWS - 1) as f64;
        // Mean: standard error 1/sqrt(N) = 0.007; 5 of them.
        assert!(mean.abs() < 0.035, "{mean}");
        assert!((var - 1.0).abs() < MOMENT_TOLERANCE, "{var}");
        let mut b = Gaussian::new(7);
        assert_eq!(b.next_normal(), xs[0]);
        assert_eq!(b.next_normal(), xs[1]);
    }

    #[test]
    fn correlated_draws_reproduce_a_badly_scaled_covariance() {
        // au-sized next to 1e-8-sized parameters, correlation 0.8.
        let (s1, s2, rho) = (1e-6, 2e-10, 0.8);
        let c = DMatrix::from_row_slice(2, 2, &[s1 * s1, rho * s1 * s2, rho * s1 * s2, s2 * s2]);
        let mvn = MultivariateNormal::new(DVector::from_vec(vec![1.0, 1e-8]), &c).unwrap();
        let mut rng = Gaussian::new(11);
        let draws: Vec<DVector<f64>> = (0..DRAWS).map(|_| mvn.draw(&mut rng)).collect();
        let mean = draws.iter().fold(DVector::zeros(2), |a, d| a + d) / DRAWS as f64;
        let mut cov = DMatrix::zeros(2, 2);
        for d in &draws {
            let e = d - &mean;
            cov += &e * e.transpose();
        }
        cov /= (DRAWS - 1) as f64;
        assert!((cov[(0, 0)] / c[(0, 0)] - 1.0).abs() < MOMENT_TOLERANCE);
        assert!((cov[(1, 1)] / c[(1, 1)] - 1.0).abs() < MOMENT_TOLERANCE);
        let r = cov[(0, 1)] / (cov[(0, 0)] * cov[(1, 1)]).sqrt();
        // Standard error of r: (1 - rho^2) / sqrt(N) = 0.0025 (Fisher;
        // memory); 5 of them.
        assert!((r - rho).abs() < 0.0125, "{r}");
    }

    #[test]
    fn a_singular_covariance_still_draws() {
        // Perfectly correlated: rank one, no Cholesky factor.
        let c = DMatrix::from_row_slice(2, 2, &[1.0, 2.0, 2.0, 4.0]);
        let mvn = MultivariateNormal::new(DVector::zeros(2), &c).unwrap();
        let mut rng = Gaussian::new(3);
        for _ in 0..10 {
            let d = mvn.draw(&mut rng);
            // Every draw on the line y = 2 x.
            assert!(
                (d[1] - 2.0 * d[0]).abs() < 1e-12 * (1.0 + d[0].abs()),
                "{d}"
            );
        }
        let bad = DMatrix::from_row_slice(2, 2, &[1.0, 0.0, 0.0, -1.0]);
        assert!(MultivariateNormal::new(DVector::zeros(2), &bad).is_err());
    }
}
