//! How well one night's observations would tell two models apart.
//!
//! Two models predict places a and b with covariances C_a and C_b; a
//! tracklet measures the place with noise S. The discrimination is
//!
//!   D^2 = d^T (C_a + C_b + S)^-1 d,   d = a - b,
//!
//! the Mahalanobis distance of the split against everything that blurs
//! it (the idea of Box & Hill 1967, Technometrics 9, 57: observe where
//! the rival models' predictions differ most relative to their
//! uncertainty). D is the separation in sigmas a night there would show.
//!
//! More nights of the same geometry shrink only the measurement term, S/N,
//! not the models' own uncertainty; so the nights needed for 3 sigma are
//! the least N with d^T (C_a + C_b + S/N)^-1 d >= 9, and when even N -> oo
//! falls short, no number of such nights is enough: the models' ellipses
//! overlap there, and the answer is to wait for them to move apart.

use nalgebra::{DMatrix, DVector, Matrix2, Vector2};

/// The sigma level taken as settled (common practice).
pub const SETTLED_SIGMA: f64 = 3.0;

/// The most nights counted; beyond this the answer is "not practical".
pub const MOST_NIGHTS: u32 = 100;

/// d^T (C_a + C_b + S)^-1 d; None when the sum is singular.
pub fn discrimination2(
    d_arcsec: &Vector2<f64>,
    c_a: &Matrix2<f64>,
    c_b: &Matrix2<f64>,
    s: &Matrix2<f64>,
) -> Option<f64> {
    let inverse = (c_a + c_b + s).try_inverse()?;
    Some((d_arcsec.transpose() * inverse * d_arcsec)[(0, 0)])
}

/// The least number of nights like this one, each adding a tracklet with
/// noise `s`, that reach [`SETTLED_SIGMA`]; None when no number up to
/// [`MOST_NIGHTS`] does.
pub fn nights_to_settle(
    d_arcsec: &Vector2<f64>,
    c_a: &Matrix2<f64>,
    c_b: &Matrix2<f64>,
    s: &Matrix2<f64>,
) -> Option<u32> {
    let target = SETTLED_SIGMA * SETTLED_SIGMA;
    let enough = |n: u32| {
        discrimination2(d_arcsec, c_a, c_b, &(s / f64::from(n))).is_some_and(|d2| d2 >= target)
    };
    // D^2 grows with N, so a bisection finds the least N.
    if !enough(MOST_NIGHTS) {
        return None;
    }
    let (mut low, mut high) = (0u32, MOST_NIGHTS);
    while high - low > 1 {
        let mid = (low + high) / 2;
        if enough(mid) {
            high = mid;
        } else {
            low = mid;
        }
    }
    Some(high)
}

/// For nested models (the richer one adds terms A to the other), the
/// test statistic of those terms after one more tracklet: the richer
/// fit's covariance updated by the tracklet (the linear Kalman update
/// C' = C - G (Sigma + S)^-1 G^T restricted to A, with G = cov(A, place)
/// and Sigma the place's covariance under the richer model), then
/// a^T C'_AA^-1 a. It is the criterion for discriminating nested models
/// (Atkinson & Fedorov 1975, Biometrika 62, 57: the expected lack of fit
/// of the simpler model): where the terms are poorly known, the place
/// split d and the richer model's ellipse grow together and D^2 stays
/// flat, while this still says which night teaches most about A.
pub fn terms_statistic_after(
    a: &DVector<f64>,
    c_aa: &DMatrix<f64>,
    g: &DMatrix<f64>,
    sigma: &Matrix2<f64>,
    s: &Matrix2<f64>,
) -> Option<f64> {
    let inverse = (sigma + s).try_inverse()?;
    let inverse = DMatrix::from_fn(2, 2, |i, j| inverse[(i, j)]);
    let updated = c_aa - g * inverse * g.transpose();
    let information = updated.try_inverse()?;
    Some((a.transpose() * information * a)[(0, 0)])
}

/// The noise of one night's tracklet: `observations` measurements of
/// `sigma_arcsec` each, round and independent.
pub fn tracklet_noise(sigma_arcsec: f64, observations: usize) -> Matrix2<f64> {
    Matrix2::identity() * (sigma_arcsec * sigma_arcsec / observations.max(1) as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Round covariances make D^2 = |d|^2 / (total variance): the cases
    /// below are that arithmetic.
    #[test]
    fn round_uncertainties_give_distance_over_total_sigma() {
        let d = Vector2::new(3.0, 4.0); // 5 arcsec apart
        let c = Matrix2::identity() * 4.0; // 2 arcsec each
        let s = tracklet_noise(2.0, 4); // 1 arcsec
        let d2 = discrimination2(&d, &c, &c, &s).unwrap();
        assert!((d2 - 25.0 / 9.0).abs() < 1e-12, "{d2}");
        // The models alone carry variance 8, so even endless nights give
        // 25/8 = 3.1 < 9: no number of nights settles it here.
        assert_eq!(nights_to_settle(&d, &c, &c, &s), None);
    }

    #[test]
    fn nights_shrink_only_the_measurement_term() {
        // Models known to 0.1 arcsec, 1 arcsec tracklets, 1.5 arcsec
        // apart: N nights give 2.25 / (0.02 + 1/N) >= 9 first at N = 5
        // (1 / 0.23 = 4.35).
        let d = Vector2::new(1.5, 0.0);
        let c = Matrix2::identity() * 0.01;
        let s = Matrix2::identity();
        assert_eq!(nights_to_settle(&d, &c, &c, &s), Some(5));
        // Far apart: one night is enough.
        let far = Vector2::new(0.0, 10.0);
        assert_eq!(nights_to_settle(&far, &c, &c, &s), Some(1));
    }

    #[test]
    fn a_tracklet_that_measures_the_term_halves_its_variance() {
        // The place's RA offset is the term itself (unit slope), known to
        // sigma 1; a tracklet with noise 1 along it: two equal measurements
        // halve the variance (inverse-variance weighting, textbook), so
        // a = 1 goes from 1 to 2 in a^T C^-1 a. Dec carries nothing.
        let a = DVector::from_element(1, 1.0);
        let c = DMatrix::from_element(1, 1, 1.0);
        let g = DMatrix::from_row_slice(1, 2, &[1.0, 0.0]);
        let sigma = Matrix2::new(1.0, 0.0, 0.0, 4.0);
        let s = Matrix2::identity();
        let after = terms_statistic_after(&a, &c, &g, &sigma, &s).unwrap();
        assert!((after - 2.0).abs() < 1e-12, "{after}");
        // A place that does not depend on the term teaches nothing.
        let none = DMatrix::from_row_slice(1, 2, &[0.0, 0.0]);
        let after = terms_statistic_after(&a, &c, &none, &sigma, &s).unwrap();
        assert!((after - 1.0).abs() < 1e-12, "{after}");
    }

    #[test]
    fn the_split_counts_along_the_narrow_axis() {
        // An ellipse long in RA and narrow in Dec: a split along Dec is
        // worth far more sigmas than the same split along RA.
        let c = Matrix2::new(1.0, 0.0, 0.0, 0.01);
        let z = Matrix2::zeros();
        let along_ra = discrimination2(&Vector2::new(0.5, 0.0), &c, &z, &z).unwrap();
        let along_dec = discrimination2(&Vector2::new(0.0, 0.5), &c, &z, &z).unwrap();
        assert!((along_ra - 0.25).abs() < 1e-12);
        assert!((along_dec - 25.0).abs() < 1e-9);
    }
}
