//! Tail probabilities of the test statistics the model ladder uses, kept in
//! logarithms so that a 50-sigma detection does not underflow to "p = 0".
//!
//! The special functions are statrs's (regularised incomplete gamma and
//! beta, inverse complementary error function); below 1e-300, where they
//! underflow, the leading asymptotic terms take over (Abramowitz & Stegun,
//! Handbook of Mathematical Functions, 6.5.32 for the incomplete gamma and
//! 7.1.23 for erfc; memory).

use statrs::function::beta::beta_reg;
use statrs::function::erf::erfc_inv;
use statrs::function::gamma::{gamma_ur, ln_gamma};

/// Below this a tail probability is taken from its asymptotic form.
const SMALLEST_DIRECT: f64 = 1e-300;

/// ln P(X > x) for X ~ chi^2 with `k` degrees of freedom.
pub fn chi2_ln_sf(x: f64, k: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    let (a, y) = (0.5 * k, 0.5 * x);
    let q = gamma_ur(a, y);
    if q > SMALLEST_DIRECT {
        return q.ln();
    }
    // Q(a, y) ~ y^(a-1) e^-y / Gamma(a) (1 + (a-1)/y + (a-1)(a-2)/y^2).
    let series = 1.0 + (a - 1.0) / y + (a - 1.0) * (a - 2.0) / (y * y);
    (a - 1.0) * y.ln() - y - ln_gamma(a) + series.max(f64::MIN_POSITIVE).ln()
}

/// ln P(F > f) for F ~ F(d1, d2).
pub fn f_ln_sf(f: f64, d1: f64, d2: f64) -> f64 {
    if f <= 0.0 {
        return 0.0;
    }
    let p = beta_reg(0.5 * d2, 0.5 * d1, d2 / (d2 + d1 * f));
    if p > SMALLEST_DIRECT {
        return p.ln();
    }
    // So far out the denominator's chi^2 / d2 is close to its mean 1 for
    // the residual counts of a fit, and d1 F behaves like chi^2(d1).
    chi2_ln_sf(d1 * f, d1)
}

/// The two-sided Gaussian sigma with the same tail probability:
/// z with P(|Z| > z) = exp(ln_p), so p = 0.0027 gives 3.0.
pub fn sigma_of_ln_p(ln_p: f64) -> f64 {
    if ln_p >= 0.0 {
        return 0.0;
    }
    if ln_p > SMALLEST_DIRECT.ln() {
        return std::f64::consts::SQRT_2 * erfc_inv(ln_p.exp());
    }
    // erfc(x) ~ e^(-x^2) / (x sqrt(pi)) (1 - 1/(2 x^2)), solved for x by
    // fixed-point iteration (each pass gains several digits this far out).
    let mut x = (-ln_p).sqrt();
    for _ in 0..50 {
        let next =
            (-ln_p - (x * std::f64::consts::PI.sqrt()).ln() + (1.0 - 0.5 / (x * x)).ln()).sqrt();
        if (next - x).abs() < 1e-12 * x {
            x = next;
            break;
        }
        x = next;
    }
    std::f64::consts::SQRT_2 * x
}

/// Bonferroni: the chance that the smallest of `tries` p-values is this
/// small by luck is at most tries * p (capped at 1).
pub fn bonferroni_ln_p(ln_p: f64, tries: usize) -> f64 {
    (ln_p + (tries.max(1) as f64).ln()).min(0.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chi2_tails_match_tables() {
        // chi^2 0.95 quantiles: 3.841 (1 dof), 5.991 (2 dof), 7.815 (3 dof)
        // (Abramowitz & Stegun table 26.8; memory).
        for (x, k) in [(3.841_459, 1.0), (5.991_465, 2.0), (7.814_728, 3.0)] {
            let p = chi2_ln_sf(x, k).exp();
            assert!((p - 0.05).abs() < 1e-6, "{x} {k}: {p}");
        }
        // 2 dof: P = exp(-x/2) exactly (chi^2 with 2 dof is exponential).
        assert!((chi2_ln_sf(8.0, 2.0) - (-4.0)).abs() < 1e-12);
        assert!((chi2_ln_sf(2000.0, 2.0) - (-1000.0)).abs() < 1e-9);
    }

    #[test]
    fn asymptotic_tail_joins_the_direct_one() {
        // Just above the switch the two forms must agree closely.
        let k = 3.0;
        let x = 1360.0;
        let direct = gamma_ur(0.5 * k, 0.5 * x).ln();
        let (a, y) = (0.5 * k, 0.5 * x);
        let series = 1.0 + (a - 1.0) / y + (a - 1.0) * (a - 2.0) / (y * y);
        let asym = (a - 1.0) * y.ln() - y - ln_gamma(a) + series.ln();
        assert!((direct - asym).abs() < 1e-5, "{direct} {asym}");
    }

    #[test]
    fn f_tail_matches_tables() {
        // F(1, 10) 0.95 quantile 4.965; F(3, 100) 0.95 quantile 2.696
        // (Abramowitz & Stegun table 26.9; memory).
        assert!((f_ln_sf(4.964_6, 1.0, 10.0).exp() - 0.05).abs() < 1e-4);
        assert!((f_ln_sf(2.696_4, 3.0, 100.0).exp() - 0.05).abs() < 1e-4);
    }

    #[test]
    fn gaussian_sigma_of_tail_probability() {
        // Two-sided Gaussian tails: 0.3173 at 1 sigma, 0.0455 at 2, 0.0027
        // at 3, 5.733e-7 at 5 (standard normal table; common practice).
        for (p, z) in [
            (0.317_310_5, 1.0),
            (0.045_500_26, 2.0),
            (0.002_699_796, 3.0),
            (5.733_03e-7, 5.0),
        ] {
            let s = sigma_of_ln_p(f64::ln(p));
            assert!((s - z).abs() < 1e-5, "{p}: {s}");
        }
        // Continuity across the asymptotic switch near 37 sigma.
        let below = sigma_of_ln_p(SMALLEST_DIRECT.ln() + 1e-9);
        let above = sigma_of_ln_p(SMALLEST_DIRECT.ln() - 1e-9);
        assert!((below - above).abs() < 1e-3, "{below} {above}");
        // Monotone far out.
        assert!(sigma_of_ln_p(-5000.0) > sigma_of_ln_p(-1000.0));
    }

    #[test]
    fn bonferroni_scales_and_caps() {
        assert!((bonferroni_ln_p(f64::ln(0.001), 8) - f64::ln(0.008)).abs() < 1e-12);
        assert_eq!(bonferroni_ln_p(f64::ln(0.5), 8), 0.0);
    }
}
