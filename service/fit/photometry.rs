//! Photometry: the brightness laws of a small body fitted to its measured
//! magnitudes, so that activity (an outburst, or a comet-like fading law)
//! can raise an alert.
//!
//! - Total-magnitude law of an active body:
//!   m = M1 + 5 log10(Delta) + K1 log10(r), K1 = 2.5 n; an inert body has
//!   K1 = 5. The law has no phase term: total magnitudes of a coma are
//!   conventionally not phase-corrected (common practice).
//! - IAU (H, G) law of an inert body (Bowell et al. 1989, "Application of
//!   photometric models to asteroids", in Asteroids II, pp. 524-556;
//!   pages from memory):
//!   m = H + 5 log10(r Delta) - 2.5 log10[(1 - G) Phi1 + G Phi2],
//!   Phi_i = exp(-A_i tan(alpha/2)^B_i), A1 = 3.33, B1 = 0.63, A2 = 1.87,
//!   B2 = 1.22 (the two-parameter approximation of that paper, stated there
//!   for 0 <= alpha <= 120 deg; measurements beyond are refused).
//!
//! Both fits are weighted least squares in magnitudes, with weights
//! 1 / sigma^2 where sigma is the stated sigma (or a default when none is
//! stated) raised to a floor, since magnitudes quoted to 0.01 mag are never
//! that good for a moving, often diffuse, target.
//!
//! - The total law is linear in (M1, K1). With K1 fixed (few data, or all
//!   at nearly one r) only M1 is fitted.
//! - (H, G): with G fixed, H is linear. With G free the problem is solved by
//!   Gauss-Newton in magnitudes from the G = 0.15 solution. The linear flux
//!   form, 10^(-0.4 (m - 5 log10(r Delta))) = a1 Phi1 + a2 Phi2 with
//!   a1 = 10^(-0.4 H) (1 - G), a2 = 10^(-0.4 H) G, would avoid iterating but
//!   minimises flux residuals weighted by the observed flux, not the
//!   magnitude residuals whose errors are stated; its covariance is that of
//!   (a1, a2), and its residuals are not the ones the outlier rejection
//!   judges. The law is so nearly linear in G that Gauss-Newton converges in
//!   a few steps, so the magnitude form costs nothing.
//! - Outliers: after each fit, every measurement's normalised residual
//!   z = (O - C) / s, with s^2 = sigma^2 - a^T C a for a used measurement
//!   (the variance of its residual) and sigma^2 + a^T C a for a rejected one
//!   (the variance of its prediction); a is the measurement's row of
//!   partials and C the covariance of the fit. Rejected ones with |z| below
//!   the recovery threshold come back, then the worst used one above the
//!   rejection threshold is dropped (never leaving fewer than the minimum),
//!   and the fit is repeated until nothing changes. One at a time, because a
//!   single gross outlier inflates the residuals of good measurements on
//!   the same pass; the fits are cheap.
//! - Departures: measurements brighter than the final law by more than a
//!   threshold in z, used or not: the outburst candidates.
//! - Activity: a free K1 far from 5, both in value and in its sigma.
//!
//! Bands: each magnitude is converted to V with a fixed offset per ADES
//! band ([`v_offset_mag`]). A measurement without a band is taken as V and
//! flagged ([`MagnitudeResidual::band_assumed_v`]); one with a band not in
//! the table is refused ([`PhotometryError::UnknownBand`]), because guessing
//! would be wrong by up to ~1 mag, more than the scatter the fit is meant to
//! see. Callers that prefer to drop such measurements can test
//! [`v_offset_mag`] first.

use nalgebra::{Matrix2, Vector2};
use thiserror::Error;

/// Bowell et al. 1989 (Asteroids II) constants of Phi1 (memory; the same
/// values appear in many later descriptions of the (H, G) system).
const PHI1_A: f64 = 3.33;
const PHI1_B: f64 = 0.63;
/// Bowell et al. 1989 (Asteroids II) constants of Phi2 (memory).
const PHI2_A: f64 = 1.87;
const PHI2_B: f64 = 1.22;

/// The phase angle up to which Bowell et al. 1989 state the two-parameter
/// approximation (memory).
pub const HG_MAX_PHASE_RAD: f64 = 120.0 * std::f64::consts::PI / 180.0;

/// The slope parameter adopted for a body whose G is unknown (Bowell et al.
/// 1989; memory).
pub const DEFAULT_G: f64 = 0.15;

/// Below this span of log10 r (r equal to about 2 parts in a million) K1
/// is treated as undetermined: even 0.01 mag data would leave it uncertain
/// by thousands, which is no measurement.
const MIN_LOG10_R_SPAN: f64 = 1e-6;

/// Below this span of phase angle (rad) G is treated as undetermined.
const MIN_PHASE_SPAN_RAD: f64 = 1e-6;

/// Offset to add to a magnitude in an ADES band to get V, for the colours
/// of a typical asteroid. Values: the average band-to-V corrections in
/// common use for the magnitudes sent with small-body astrometry
/// (memory; common practice). A comet's coma is bluer or redder than a rock, with gas
/// bands in some filters, so these are approximate for active bodies.
pub fn v_offset_mag(band: &str) -> Option<f64> {
    let offset = match band {
        "V" => 0.0,
        // Johnson-Cousins B, R, I (memory; common practice).
        "B" => -0.8,
        "R" => 0.4,
        "I" => 0.8,
        // Unfiltered CCD, reported as clear (memory; common practice).
        "C" => 0.4,
        // Gaia G (memory).
        "G" => 0.28,
        // Sloan-like g, r, i, z, y (memory).
        "g" => -0.35,
        "r" => 0.14,
        "i" => 0.32,
        "z" => 0.26,
        "y" => 0.32,
        // Wide w (memory).
        "w" => -0.13,
        // Survey orange o and cyan c (memory).
        "o" => 0.33,
        "c" => -0.05,
        _ => return None,
    };
    Some(offset)
}

/// One brightness measurement with the geometry of its observation.
#[derive(Debug, Clone, PartialEq)]
pub struct MagnitudeMeasurement {
    /// Index of the observation this magnitude belongs to (the caller's).
    pub index: usize,
    pub mag: f64,
    /// ADES band letter; None is taken as V (and flagged).
    pub band: Option<String>,
    pub sigma_mag: Option<f64>,
    /// Heliocentric distance of the body.
    pub r_au: f64,
    /// Observer-body distance.
    pub delta_au: f64,
    /// Sun-body-observer angle.
    pub phase_rad: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct PhotometrySettings {
    /// Sigma of a measurement that states none.
    pub default_sigma_mag: f64,
    /// No measurement is weighted as better than this.
    pub sigma_floor_mag: f64,
    pub outlier_rejection: bool,
    /// Reject a used measurement when |z| exceeds this (see module notes).
    pub reject_sigma: f64,
    /// Recover a rejected measurement when |z| falls below this.
    pub recover_sigma: f64,
    /// Rejection never leaves fewer measurements in use than this (nor
    /// fewer than the free parameters + 1).
    pub min_used: usize,
    /// Fits (each after one change of the used set) before giving up on a
    /// fixed point; the result then says it did not settle.
    pub max_rejection_passes: usize,
    /// A measurement brighter than the law by more than this many sigma of
    /// its residual is a departure (outburst candidate).
    pub departure_sigma: f64,
    /// K1 of an inert body.
    pub inert_k1: f64,
    /// The activity flag needs |K1 - inert_k1| at least this ...
    pub k1_alert_min_difference: f64,
    /// ... and at least this many sigma of K1.
    pub k1_alert_sigma: f64,
    /// Gauss-Newton iterations of the (H, G) fit with G free.
    pub max_iterations: usize,
}

impl Default for PhotometrySettings {
    fn default() -> Self {
        Self {
            // Magnitudes sent with astrometry are rarely better than a few
            // tenths (common practice); 0.1 mag floor as in the design brief.
            default_sigma_mag: 0.3,
            sigma_floor_mag: 0.1,
            outlier_rejection: true,
            // 3 sigma, with hysteresis so that a measurement on the edge
            // does not come and go (common practice).
            reject_sigma: 3.0,
            recover_sigma: 2.5,
            min_used: 5,
            max_rejection_passes: 200,
            departure_sigma: 3.0,
            inert_k1: 5.0,
            // n differing from 2 by 1 (K1 = 2.5 n), and clearly measured.
            k1_alert_min_difference: 2.5,
            k1_alert_sigma: 3.0,
            max_iterations: 50,
        }
    }
}

/// How K1 is chosen in the total-magnitude fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum K1Choice {
    Free,
    /// Fit M1 only (few data, or a short span in r).
    Fixed(f64),
}

/// How G is chosen in the (H, G) fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum GChoice {
    Fixed(f64),
    /// Fit G; an error when the phase angles do not determine it.
    Free,
    /// Fit G when the phase angles of all measurements span at least
    /// `min_phase_span_rad` and there are enough of them, else fix it at
    /// `fallback`.
    Auto {
        min_phase_span_rad: f64,
        fallback: f64,
    },
}

impl GChoice {
    /// G free from a 10 deg span of phase angle, else 0.15. The span is a
    /// judgement (common practice: G needs the curve's shape, not one
    /// point of it).
    pub fn auto() -> Self {
        GChoice::Auto {
            min_phase_span_rad: 10f64.to_radians(),
            fallback: DEFAULT_G,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Error)]
pub enum PhotometryError {
    #[error("observation {index}: {reason}")]
    InvalidMeasurement { index: usize, reason: String },
    #[error(
        "observation {index}: band {band:?} has no known offset to V; convert it to V or leave the measurement out"
    )]
    UnknownBand { index: usize, band: String },
    #[error(
        "observation {index}: phase angle {phase_deg:.1} deg is beyond the 120 deg for which the (H, G) law is stated"
    )]
    PhaseBeyondLaw { index: usize, phase_deg: f64 },
    #[error("{have} usable measurements; this fit needs at least {need}")]
    TooFew { have: usize, need: usize },
    #[error(
        "K1 is undetermined: the heliocentric distances are all the same (log10 r spans {span_log10_r:e}); fix K1 instead"
    )]
    RadiusSpan { span_log10_r: f64 },
    #[error(
        "G is undetermined: the phase angles are all the same (they span {span_deg:e} deg); fix G instead"
    )]
    PhaseSpan { span_deg: f64 },
    #[error("the normal equations are singular: the measurements do not determine the parameters")]
    Singular,
    #[error("the (H, G) fit did not converge in {iterations} iterations")]
    NoConvergence { iterations: usize },
    #[error("settings: {0}")]
    InvalidSettings(&'static str),
}

/// A fitted (or given) brightness law.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum MagnitudeLaw {
    Total { m1: f64, k1: f64 },
    Hg { h: f64, g: f64 },
}

/// Phi1 of the (H, G) law (Bowell et al. 1989).
pub fn phi1(phase_rad: f64) -> f64 {
    (-PHI1_A * (0.5 * phase_rad).tan().powf(PHI1_B)).exp()
}

/// Phi2 of the (H, G) law (Bowell et al. 1989).
pub fn phi2(phase_rad: f64) -> f64 {
    (-PHI2_A * (0.5 * phase_rad).tan().powf(PHI2_B)).exp()
}

/// The (H, G) phase term, -2.5 log10[(1 - G) Phi1 + G Phi2]: the reduced
/// magnitude V(1, 1, alpha) minus H. NaN where the bracket is not positive
/// (G far below 0).
pub fn hg_phase_mag(g: f64, phase_rad: f64) -> f64 {
    -2.5 * hg_bracket(g, phase_rad).log10()
}

fn hg_bracket(g: f64, phase_rad: f64) -> f64 {
    let p1 = phi1(phase_rad);
    p1 + g * (phi2(phase_rad) - p1)
}

/// The magnitude the law gives at this geometry.
pub fn predict_mag(law: MagnitudeLaw, r_au: f64, delta_au: f64, phase_rad: f64) -> f64 {
    match law {
        MagnitudeLaw::Total { m1, k1 } => m1 + 5.0 * delta_au.log10() + k1 * r_au.log10(),
        MagnitudeLaw::Hg { h, g } => {
            h + 5.0 * (r_au * delta_au).log10() + hg_phase_mag(g, phase_rad)
        }
    }
}

/// A predicted magnitude and its sigma from the fit's covariance (no
/// measurement noise added).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prediction {
    pub mag: f64,
    pub sigma_mag: f64,
}

/// One measurement's place in a fit.
#[derive(Debug, Clone, PartialEq)]
pub struct MagnitudeResidual {
    pub index: usize,
    /// The measurement converted to V.
    pub v_mag: f64,
    /// The sigma the fit used (stated or default, raised to the floor).
    pub sigma_mag: f64,
    pub computed_mag: f64,
    /// O - C; negative is brighter than the law.
    pub residual_mag: f64,
    /// O - C over the sigma of the residual (see the module notes).
    pub normalised: f64,
    pub used: bool,
    /// No band was given and the magnitude was taken as V.
    pub band_assumed_v: bool,
}

/// A measurement brighter than the fitted law by more than the threshold.
#[derive(Debug, Clone, PartialEq)]
pub struct Departure {
    pub index: usize,
    pub brighter_by_mag: f64,
    /// -z: how many sigma of its residual it is brighter.
    pub significance_sigma: f64,
    /// Whether the fit kept it (usually not: it was rejected).
    pub used: bool,
}

/// What both fits report besides their parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct FitSummary {
    pub residuals: Vec<MagnitudeResidual>,
    pub used_count: usize,
    /// Sum over the used measurements of (O - C)^2 / sigma^2.
    pub chi2: f64,
    pub degrees_of_freedom: usize,
    /// sqrt(chi2 / dof): about 1 when the sigmas are right.
    pub normalised_rms: f64,
    pub departures: Vec<Departure>,
    pub rejection_passes: usize,
    /// False when rejection and recovery were still changing the used set
    /// after the allowed passes.
    pub rejection_settled: bool,
}

/// K1 far from the inert value.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ActivityFlag {
    pub k1_minus_inert: f64,
    pub significance_sigma: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct TotalMagnitudeFit {
    pub m1: f64,
    pub k1: f64,
    pub k1_fixed: bool,
    /// Formal covariance of (M1, K1), mag^2; the K1 row and column are zero
    /// when K1 is fixed. Scale by normalised_rms^2 to trust the scatter
    /// rather than the stated sigmas.
    pub covariance: Matrix2<f64>,
    /// Set when K1 is free and far from inert (see the settings).
    pub activity: Option<ActivityFlag>,
    pub summary: FitSummary,
}

#[derive(Debug, Clone, PartialEq)]
pub struct HgFit {
    pub h: f64,
    pub g: f64,
    pub g_fixed: bool,
    /// Formal covariance of (H, G); the G row and column are zero when G is
    /// fixed.
    pub covariance: Matrix2<f64>,
    pub summary: FitSummary,
}

impl TotalMagnitudeFit {
    pub fn law(&self) -> MagnitudeLaw {
        MagnitudeLaw::Total {
            m1: self.m1,
            k1: self.k1,
        }
    }

    pub fn predict(&self, r_au: f64, delta_au: f64) -> Prediction {
        let a = Vector2::new(1.0, r_au.log10());
        Prediction {
            mag: predict_mag(self.law(), r_au, delta_au, 0.0),
            sigma_mag: (a.dot(&(self.covariance * a))).max(0.0).sqrt(),
        }
    }
}

impl HgFit {
    pub fn law(&self) -> MagnitudeLaw {
        MagnitudeLaw::Hg {
            h: self.h,
            g: self.g,
        }
    }

    pub fn predict(&self, r_au: f64, delta_au: f64, phase_rad: f64) -> Prediction {
        let a = hg_partials(self.g, phase_rad);
        Prediction {
            mag: predict_mag(self.law(), r_au, delta_au, phase_rad),
            sigma_mag: (a.dot(&(self.covariance * a))).max(0.0).sqrt(),
        }
    }
}

/// A measurement checked and converted: V magnitude, weight, geometry.
#[derive(Debug, Clone)]
struct Prepared {
    index: usize,
    v_mag: f64,
    sigma_mag: f64,
    r_au: f64,
    delta_au: f64,
    phase_rad: f64,
    band_assumed_v: bool,
}

fn check_settings(s: &PhotometrySettings) -> Result<(), PhotometryError> {
    let positive = |x: f64| x.is_finite() && x > 0.0;
    if !positive(s.default_sigma_mag) {
        return Err(PhotometryError::InvalidSettings(
            "default_sigma_mag must be positive",
        ));
    }
    if !(s.sigma_floor_mag.is_finite() && s.sigma_floor_mag >= 0.0) {
        return Err(PhotometryError::InvalidSettings(
            "sigma_floor_mag must be zero or more",
        ));
    }
    if !positive(s.reject_sigma) || !positive(s.recover_sigma) || s.recover_sigma > s.reject_sigma {
        return Err(PhotometryError::InvalidSettings(
            "need 0 < recover_sigma <= reject_sigma",
        ));
    }
    if !positive(s.departure_sigma) || !positive(s.k1_alert_sigma) {
        return Err(PhotometryError::InvalidSettings(
            "departure_sigma and k1_alert_sigma must be positive",
        ));
    }
    if s.max_rejection_passes == 0 || s.max_iterations == 0 {
        return Err(PhotometryError::InvalidSettings(
            "max_rejection_passes and max_iterations must be at least 1",
        ));
    }
    Ok(())
}

fn prepare(
    data: &[MagnitudeMeasurement],
    settings: &PhotometrySettings,
) -> Result<Vec<Prepared>, PhotometryError> {
    data.iter()
        .map(|m| {
            let invalid = |reason: &str| PhotometryError::InvalidMeasurement {
                index: m.index,
                reason: reason.to_string(),
            };
            if !m.mag.is_finite() {
                return Err(invalid("magnitude is not a finite number"));
            }
            if !(m.r_au.is_finite() && m.r_au > 0.0) {
                return Err(invalid("heliocentric distance must be positive"));
            }
            if !(m.delta_au.is_finite() && m.delta_au > 0.0) {
                return Err(invalid("observer distance must be positive"));
            }
            if !(m.phase_rad.is_finite() && (0.0..=std::f64::consts::PI).contains(&m.phase_rad)) {
                return Err(invalid("phase angle must lie in [0, pi] rad"));
            }
            let stated = match m.sigma_mag {
                Some(s) if !(s.is_finite() && s > 0.0) => {
                    return Err(invalid("stated magnitude sigma must be positive"))
                }
                Some(s) => s,
                None => settings.default_sigma_mag,
            };
            let (offset, band_assumed_v) = match &m.band {
                None => (0.0, true),
                Some(band) => match v_offset_mag(band) {
                    Some(offset) => (offset, false),
                    None => {
                        return Err(PhotometryError::UnknownBand {
                            index: m.index,
                            band: band.clone(),
                        })
                    }
                },
            };
            Ok(Prepared {
                index: m.index,
                v_mag: m.mag + offset,
                sigma_mag: stated.max(settings.sigma_floor_mag),
                r_au: m.r_au,
                delta_au: m.delta_au,
                phase_rad: m.phase_rad,
                band_assumed_v,
            })
        })
        .collect()
}

/// A law as the fitting loop sees it: parameters p = (p0, p1), each
/// measurement's computed magnitude and partials at p.
trait Model {
    fn computed(&self, p: &Vector2<f64>, m: &Prepared) -> f64;
    fn partials(&self, p: &Vector2<f64>, m: &Prepared) -> Vector2<f64>;
    /// Whether p can be evaluated for every measurement.
    fn admissible(&self, _p: &Vector2<f64>, _data: &[Prepared]) -> bool {
        true
    }
}

/// (M1, K1).
struct TotalLaw;

impl Model for TotalLaw {
    fn computed(&self, p: &Vector2<f64>, m: &Prepared) -> f64 {
        predict_mag(
            MagnitudeLaw::Total { m1: p[0], k1: p[1] },
            m.r_au,
            m.delta_au,
            0.0,
        )
    }
    fn partials(&self, _p: &Vector2<f64>, m: &Prepared) -> Vector2<f64> {
        Vector2::new(1.0, m.r_au.log10())
    }
}

/// (H, G).
struct HgLaw;

impl Model for HgLaw {
    fn computed(&self, p: &Vector2<f64>, m: &Prepared) -> f64 {
        predict_mag(
            MagnitudeLaw::Hg { h: p[0], g: p[1] },
            m.r_au,
            m.delta_au,
            m.phase_rad,
        )
    }
    fn partials(&self, p: &Vector2<f64>, m: &Prepared) -> Vector2<f64> {
        hg_partials(p[1], m.phase_rad)
    }
    fn admissible(&self, p: &Vector2<f64>, data: &[Prepared]) -> bool {
        data.iter().all(|m| hg_bracket(p[1], m.phase_rad) > 0.0)
    }
}

/// d m / d(H, G) of the (H, G) law.
fn hg_partials(g: f64, phase_rad: f64) -> Vector2<f64> {
    let (p1, p2) = (phi1(phase_rad), phi2(phase_rad));
    let bracket = p1 + g * (p2 - p1);
    Vector2::new(1.0, -2.5 / std::f64::consts::LN_10 * (p2 - p1) / bracket)
}

/// A solution on one used set.
#[derive(Debug, Clone)]
struct Solution {
    p: Vector2<f64>,
    covariance: Matrix2<f64>,
}

fn chi2_of(model: &dyn Model, p: &Vector2<f64>, data: &[Prepared], used: &[bool]) -> f64 {
    data.iter()
        .zip(used)
        .filter(|(_, u)| **u)
        .map(|(m, _)| ((m.v_mag - model.computed(p, m)) / m.sigma_mag).powi(2))
        .sum()
}

/// Gauss-Newton over the free parameters from `start`, with step halving
/// when chi^2 rises or the law cannot be evaluated. For a law linear in its
/// free parameters the first step is exact and the second confirms it.
fn gauss_newton(
    model: &dyn Model,
    data: &[Prepared],
    used: &[bool],
    start: Vector2<f64>,
    free: [bool; 2],
    max_iterations: usize,
) -> Result<Solution, PhotometryError> {
    let mut p = start;
    let mut chi2 = chi2_of(model, &p, data, used);
    for _ in 0..max_iterations {
        let mut normal = Matrix2::zeros();
        let mut rhs = Vector2::zeros();
        for (m, _) in data.iter().zip(used).filter(|(_, u)| **u) {
            let w = m.sigma_mag.powi(-2);
            let a = model.partials(&p, m).component_mul(&mask(free));
            normal += w * a * a.transpose();
            rhs += w * a * (m.v_mag - model.computed(&p, m));
        }
        // A fixed parameter's row and column are zero: put 1 on its
        // diagonal so the matrix inverts, then zero its covariance again.
        let fixed = || (0..2).filter(|&k| !free[k]);
        for k in fixed() {
            normal[(k, k)] = 1.0;
        }
        let cholesky = normal.cholesky().ok_or(PhotometryError::Singular)?;
        let step = cholesky.solve(&rhs);
        let mut covariance = cholesky.inverse();
        for k in fixed() {
            covariance.row_mut(k).fill(0.0);
            covariance.column_mut(k).fill(0.0);
        }
        // The step in units of its own sigma: below 1e-8 chi^2 can fall by
        // no more than 1e-16.
        if step.dot(&(normal * step)).sqrt() < 1e-8 {
            return Ok(Solution { p, covariance });
        }
        let mut scale = 1.0;
        loop {
            let trial = p + scale * step;
            if model.admissible(&trial, data) {
                let trial_chi2 = chi2_of(model, &trial, data, used);
                if trial_chi2 <= chi2 * (1.0 + 1e-12) + 1e-300 {
                    p = trial;
                    chi2 = trial_chi2;
                    break;
                }
            }
            scale *= 0.5;
            if scale < 1e-10 {
                // No descent along the Gauss-Newton direction: at the
                // minimum to rounding.
                return Ok(Solution { p, covariance });
            }
        }
    }
    Err(PhotometryError::NoConvergence {
        iterations: max_iterations,
    })
}

fn mask(free: [bool; 2]) -> Vector2<f64> {
    Vector2::new(f64::from(u8::from(free[0])), f64::from(u8::from(free[1])))
}

/// O - C over the sigma of the residual (used) or of the prediction
/// (rejected); see the module notes.
fn normalised_residual(residual: f64, sigma: f64, leverage_variance: f64, used: bool) -> f64 {
    let variance = if used {
        sigma * sigma - leverage_variance
    } else {
        sigma * sigma + leverage_variance
    };
    // A used measurement the fit passes through exactly (leverage 1) has
    // no residual to judge.
    if variance <= 1e-12 * sigma * sigma {
        0.0
    } else {
        residual / variance.sqrt()
    }
}

fn residuals(
    model: &dyn Model,
    solution: &Solution,
    data: &[Prepared],
    used: &[bool],
) -> Vec<MagnitudeResidual> {
    data.iter()
        .zip(used)
        .map(|(m, &used)| {
            let computed = model.computed(&solution.p, m);
            let a = model.partials(&solution.p, m);
            let residual = m.v_mag - computed;
            MagnitudeResidual {
                index: m.index,
                v_mag: m.v_mag,
                sigma_mag: m.sigma_mag,
                computed_mag: computed,
                residual_mag: residual,
                normalised: normalised_residual(
                    residual,
                    m.sigma_mag,
                    a.dot(&(solution.covariance * a)),
                    used,
                ),
                used,
                band_assumed_v: m.band_assumed_v,
            }
        })
        .collect()
}

/// The rejection loop around one law (see the module notes).
fn fit_with_rejection(
    model: &dyn Model,
    data: &[Prepared],
    start: Vector2<f64>,
    free: [bool; 2],
    settings: &PhotometrySettings,
) -> Result<(Solution, FitSummary), PhotometryError> {
    let free_count = free.iter().filter(|f| **f).count();
    let need = free_count + 1;
    if data.len() < need {
        return Err(PhotometryError::TooFew {
            have: data.len(),
            need,
        });
    }
    let min_used = settings.min_used.max(need);
    let mut used = vec![true; data.len()];
    let mut passes = 0;
    let (solution, rows, settled) = loop {
        passes += 1;
        let solution = gauss_newton(model, data, &used, start, free, settings.max_iterations)?;
        let rows = residuals(model, &solution, data, &used);
        if !settings.outlier_rejection {
            break (solution, rows, true);
        }
        if passes >= settings.max_rejection_passes {
            break (solution, rows, false);
        }
        let mut changed = false;
        for (u, row) in used.iter_mut().zip(&rows) {
            if !*u && row.normalised.abs() < settings.recover_sigma {
                *u = true;
                changed = true;
            }
        }
        let used_count = used.iter().filter(|u| **u).count();
        let worst = rows
            .iter()
            .enumerate()
            .filter(|(_, row)| row.used && row.normalised.abs() > settings.reject_sigma)
            .max_by(|(_, a), (_, b)| a.normalised.abs().total_cmp(&b.normalised.abs()));
        if let Some((k, _)) = worst {
            if used_count > min_used {
                used[k] = false;
                changed = true;
            }
        }
        if !changed {
            break (solution, rows, true);
        }
    };
    let used_count = rows.iter().filter(|r| r.used).count();
    let chi2: f64 = rows
        .iter()
        .filter(|r| r.used)
        .map(|r| (r.residual_mag / r.sigma_mag).powi(2))
        .sum();
    let degrees_of_freedom = used_count - free_count;
    let departures = rows
        .iter()
        .filter(|r| r.residual_mag < 0.0 && -r.normalised > settings.departure_sigma)
        .map(|r| Departure {
            index: r.index,
            brighter_by_mag: -r.residual_mag,
            significance_sigma: -r.normalised,
            used: r.used,
        })
        .collect();
    let summary = FitSummary {
        used_count,
        chi2,
        degrees_of_freedom,
        normalised_rms: (chi2 / degrees_of_freedom as f64).sqrt(),
        departures,
        rejection_passes: passes,
        rejection_settled: settled,
        residuals: rows,
    };
    Ok((solution, summary))
}

fn span(values: impl Iterator<Item = f64>) -> f64 {
    let (lo, hi) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
        (lo.min(v), hi.max(v))
    });
    if hi >= lo {
        hi - lo
    } else {
        0.0
    }
}

/// Fit m = M1 + 5 log10(Delta) + K1 log10(r) to the measurements.
pub fn fit_total_magnitude(
    data: &[MagnitudeMeasurement],
    k1: K1Choice,
    settings: &PhotometrySettings,
) -> Result<TotalMagnitudeFit, PhotometryError> {
    check_settings(settings)?;
    let prepared = prepare(data, settings)?;
    let (start, free) = match k1 {
        K1Choice::Free => {
            // Checked on all measurements: rejection keeps at least
            // min_used of them, and a span that vanishes only after
            // rejection would show as Singular.
            let span_log10_r = span(prepared.iter().map(|m| m.r_au.log10()));
            if prepared.len() >= 2 && span_log10_r < MIN_LOG10_R_SPAN {
                return Err(PhotometryError::RadiusSpan { span_log10_r });
            }
            (Vector2::new(0.0, settings.inert_k1), [true, true])
        }
        K1Choice::Fixed(k1) => {
            if !k1.is_finite() {
                return Err(PhotometryError::InvalidSettings(
                    "a fixed K1 must be finite",
                ));
            }
            (Vector2::new(0.0, k1), [true, false])
        }
    };
    let (solution, summary) = fit_with_rejection(&TotalLaw, &prepared, start, free, settings)?;
    let k1_fixed = !free[1];
    let activity = if k1_fixed {
        None
    } else {
        let difference = solution.p[1] - settings.inert_k1;
        let sigma = solution.covariance[(1, 1)].sqrt();
        let significance = difference.abs() / sigma;
        (difference.abs() >= settings.k1_alert_min_difference
            && significance >= settings.k1_alert_sigma)
            .then_some(ActivityFlag {
                k1_minus_inert: difference,
                significance_sigma: significance,
            })
    };
    Ok(TotalMagnitudeFit {
        m1: solution.p[0],
        k1: solution.p[1],
        k1_fixed,
        covariance: solution.covariance,
        activity,
        summary,
    })
}

/// Fit H (and G, as chosen) of the IAU (H, G) law to the measurements.
pub fn fit_hg(
    data: &[MagnitudeMeasurement],
    g: GChoice,
    settings: &PhotometrySettings,
) -> Result<HgFit, PhotometryError> {
    check_settings(settings)?;
    let prepared = prepare(data, settings)?;
    if let Some(m) = prepared.iter().find(|m| m.phase_rad > HG_MAX_PHASE_RAD) {
        return Err(PhotometryError::PhaseBeyondLaw {
            index: m.index,
            phase_deg: m.phase_rad.to_degrees(),
        });
    }
    let phase_span_rad = span(prepared.iter().map(|m| m.phase_rad));
    let fixed_g = match g {
        GChoice::Fixed(g) => Some(g),
        GChoice::Free => {
            if prepared.len() >= 2 && phase_span_rad < MIN_PHASE_SPAN_RAD {
                return Err(PhotometryError::PhaseSpan {
                    span_deg: phase_span_rad.to_degrees(),
                });
            }
            None
        }
        GChoice::Auto {
            min_phase_span_rad,
            fallback,
        } => {
            let enough =
                prepared.len() >= 3 && phase_span_rad >= min_phase_span_rad.max(MIN_PHASE_SPAN_RAD);
            (!enough).then_some(fallback)
        }
    };
    if let Some(g) = fixed_g {
        if !g.is_finite() {
            return Err(PhotometryError::InvalidSettings("a fixed G must be finite"));
        }
        if !HgLaw.admissible(&Vector2::new(0.0, g), &prepared) {
            return Err(PhotometryError::InvalidSettings(
                "the fixed G makes (1 - G) Phi1 + G Phi2 non-positive at some phase angle",
            ));
        }
    }
    let (solution, summary) = match fixed_g {
        Some(g) => fit_with_rejection(
            &HgLaw,
            &prepared,
            Vector2::new(0.0, g),
            [true, false],
            settings,
        )?,
        None => {
            if prepared.len() < 3 {
                return Err(PhotometryError::TooFew {
                    have: prepared.len(),
                    need: 3,
                });
            }
            // Start from the fixed-G solution's H (without rejection: only
            // a starting point).
            let used = vec![true; prepared.len()];
            let start = gauss_newton(
                &HgLaw,
                &prepared,
                &used,
                Vector2::new(0.0, DEFAULT_G),
                [true, false],
                settings.max_iterations,
            )?;
            fit_with_rejection(&HgLaw, &prepared, start.p, [true, true], settings)?
        }
    };
    Ok(HgFit {
        h: solution.p[0],
        g: solution.p[1],
        g_fixed: fixed_g.is_some(),
        covariance: solution.covariance,
        summary,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// SplitMix64 (Steele, Lea & Flood 2014, OOPSLA; constants from memory)
    /// with Box-Muller normals: deterministic noise for invented data.
    struct Noise(u64);

    impl Noise {
        fn next_u64(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }
        /// Uniform in (0, 1].
        fn uniform(&mut self) -> f64 {
            ((self.next_u64() >> 11) as f64 + 1.0) / (1u64 << 53) as f64
        }
        fn normal(&mut self) -> f64 {
            let (u1, u2) = (self.uniform(), self.uniform());
            (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
        }
    }

    /// Invented geometry of an inbound-then-outbound body: r from 1.3 to
    /// 3.5 au, Delta and phase varying with it (not a real orbit; the laws
    /// only need the three numbers).
    fn geometry(n: usize) -> Vec<(f64, f64, f64)> {
        (0..n)
            .map(|k| {
                let t = k as f64 / (n - 1) as f64;
                let r_au = 1.3 + 2.2 * t;
                let delta_au = 0.6 + 1.9 * t + 0.3 * (7.0 * t).sin();
                let phase_rad = (2.0 + 36.0 * (0.5 + 0.5 * (5.0 * t).cos())).to_radians();
                (r_au, delta_au, phase_rad)
            })
            .collect()
    }

    fn measurements(
        law: MagnitudeLaw,
        n: usize,
        sigma_mag: f64,
        noise: Option<&mut Noise>,
    ) -> Vec<MagnitudeMeasurement> {
        let mut noise = noise;
        geometry(n)
            .into_iter()
            .enumerate()
            .map(|(index, (r_au, delta_au, phase_rad))| {
                let error = noise.as_deref_mut().map_or(0.0, |n| sigma_mag * n.normal());
                MagnitudeMeasurement {
                    index,
                    mag: predict_mag(law, r_au, delta_au, phase_rad) + error,
                    band: Some("V".to_string()),
                    sigma_mag: Some(sigma_mag),
                    r_au,
                    delta_au,
                    phase_rad,
                }
            })
            .collect()
    }

    fn deg(x: f64) -> f64 {
        x.to_radians()
    }

    #[test]
    fn phase_functions_match_the_published_formula() {
        // Source: Bowell et al. 1989 (Asteroids II) formula, Phi_i =
        // exp(-A_i tan(a/2)^B_i), A1 3.33, B1 0.63, A2 1.87, B2 1.22,
        // evaluated independently with Python 3.11.7 `math`:
        // (alpha deg, Phi1, Phi2, -2.5 log10 bracket at G 0.15, at G 0.25).
        let table = [
            (
                5.0,
                0.6293108307930525,
                0.9598317264254502,
                0.42050312604808304,
                0.36888990592807425,
            ),
            (
                10.0,
                0.487928776507841,
                0.908714397601527,
                0.6470291434795536,
                0.5671340928146271,
            ),
            (
                20.0,
                0.3276204716967532,
                0.7984467118246731,
                0.99962578498883,
                0.8783023550626226,
            ),
            (
                30.0,
                0.23398370463240767,
                0.6872689045514966,
                1.3000671872866052,
                1.1482223963171485,
            ),
            (
                60.0,
                0.09481113092754255,
                0.3841400143735018,
                2.1486476918950985,
                1.9422772325238586,
            ),
            (
                90.0,
                0.03579310506765532,
                0.15412366181513143,
                3.178249562605391,
                2.9614583849371723,
            ),
            (
                120.0,
                0.009032495165041853,
                0.025861891294796786,
                4.842896180767308,
                4.695292813783957,
            ),
        ];
        for (alpha_deg, p1, p2, m15, m25) in table {
            let a = deg(alpha_deg);
            assert!((phi1(a) - p1).abs() < 1e-13, "Phi1({alpha_deg})");
            assert!((phi2(a) - p2).abs() < 1e-13, "Phi2({alpha_deg})");
            assert!(
                (hg_phase_mag(0.15, a) - m15).abs() < 1e-12,
                "G 0.15 at {alpha_deg}"
            );
            assert!(
                (hg_phase_mag(0.25, a) - m25).abs() < 1e-12,
                "G 0.25 at {alpha_deg}"
            );
        }
        // Phi1(0) = Phi2(0) = 1, so H is the V magnitude at r = Delta = 1 au
        // and zero phase (definition of H, Bowell et al. 1989).
        assert_eq!(phi1(0.0), 1.0);
        assert_eq!(phi2(0.0), 1.0);
        assert!(
            (predict_mag(MagnitudeLaw::Hg { h: 14.2, g: 0.3 }, 1.0, 1.0, 0.0) - 14.2).abs() < 1e-14
        );
    }

    #[test]
    fn partial_in_g_matches_a_difference_quotient() {
        // Source: central difference of hg_phase_mag (the derivative is
        // what Gauss-Newton and the prediction sigma rely on).
        for alpha_deg in [3.0, 17.0, 45.0, 100.0] {
            let (a, g, h) = (deg(alpha_deg), 0.2, 1e-6);
            let numeric = (hg_phase_mag(g + h, a) - hg_phase_mag(g - h, a)) / (2.0 * h);
            assert!((hg_partials(g, a)[1] - numeric).abs() < 1e-8, "{alpha_deg}");
        }
    }

    #[test]
    fn noise_free_total_law_is_recovered() {
        // Source: invented law M1 11.7, K1 10 (n = 4); noise-free data give
        // it back to rounding.
        let law = MagnitudeLaw::Total { m1: 11.7, k1: 10.0 };
        let data = measurements(law, 25, 0.2, None);
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        assert!((fit.m1 - 11.7).abs() < 1e-9, "M1 {}", fit.m1);
        assert!((fit.k1 - 10.0).abs() < 1e-9, "K1 {}", fit.k1);
        assert!(!fit.k1_fixed);
        assert_eq!(fit.summary.used_count, 25);
        assert_eq!(fit.summary.degrees_of_freedom, 23);
        assert!(fit.summary.normalised_rms < 1e-8);
        assert!(fit.summary.departures.is_empty());
        // The covariance of a straight-line fit (Bevington & Robinson,
        // Data Reduction and Error Analysis, ch. 6; memory): with
        // S = sum w, Sx = sum w x, Sxx = sum w x^2, D = S Sxx - Sx^2,
        // var K1 = S / D, var M1 = Sxx / D, cov = -Sx / D.
        let w = 0.2f64.powi(-2);
        let xs: Vec<f64> = data.iter().map(|m| m.r_au.log10()).collect();
        let (s, sx, sxx) = (
            w * xs.len() as f64,
            w * xs.iter().sum::<f64>(),
            w * xs.iter().map(|x| x * x).sum::<f64>(),
        );
        let d = s * sxx - sx * sx;
        assert!((fit.covariance[(1, 1)] - s / d).abs() < 1e-9 * s / d);
        assert!((fit.covariance[(0, 0)] - sxx / d).abs() < 1e-9 * sxx / d);
        assert!((fit.covariance[(0, 1)] + sx / d).abs() < 1e-9 * sx / d);
        // K1 of 10 +- ~0.5 is far from inert: flagged.
        let flag = fit.activity.expect("K1 = 10 is active");
        assert!((flag.k1_minus_inert - 5.0).abs() < 1e-9);
        // The prediction is the law (same formula, no fit noise) and at
        // r = 1 au its sigma is that of M1 alone.
        let p = fit.predict(1.0, 0.8);
        assert!((p.mag - predict_mag(law, 1.0, 0.8, 0.0)).abs() < 1e-9);
        assert!((p.sigma_mag - fit.covariance[(0, 0)].sqrt()).abs() < 1e-12);
    }

    #[test]
    fn fixed_k1_fits_m1_only() {
        // Source: invented law M1 9.4, K1 8; K1 held at its true value.
        let law = MagnitudeLaw::Total { m1: 9.4, k1: 8.0 };
        let data = measurements(law, 4, 0.3, None);
        let fit = fit_total_magnitude(&data, K1Choice::Fixed(8.0), &PhotometrySettings::default())
            .unwrap();
        assert!((fit.m1 - 9.4).abs() < 1e-9);
        assert_eq!(fit.k1, 8.0);
        assert!(fit.k1_fixed && fit.activity.is_none());
        // One free parameter: var M1 = sigma^2 / n (weighted mean).
        assert!((fit.covariance[(0, 0)] - 0.09 / 4.0).abs() < 1e-12);
        assert_eq!(fit.covariance[(1, 1)], 0.0);
        assert_eq!(fit.summary.degrees_of_freedom, 3);
    }

    #[test]
    fn noisy_total_law_is_recovered_within_its_sigma() {
        // Source: invented law M1 12.3, K1 7.5 plus N(0, 0.2 mag) noise from
        // the seeded generator above.
        let law = MagnitudeLaw::Total { m1: 12.3, k1: 7.5 };
        let data = measurements(law, 60, 0.2, Some(&mut Noise(20260101)));
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        let (s_m1, s_k1) = (fit.covariance[(0, 0)].sqrt(), fit.covariance[(1, 1)].sqrt());
        assert!(
            (fit.m1 - 12.3).abs() < 4.0 * s_m1,
            "M1 {} +- {s_m1}",
            fit.m1
        );
        assert!((fit.k1 - 7.5).abs() < 4.0 * s_k1, "K1 {} +- {s_k1}", fit.k1);
        // sqrt(chi^2 / dof) with ~58 dof has a spread of ~0.09: 0.7..1.3
        // is beyond 3 of it.
        let nrms = fit.summary.normalised_rms;
        assert!((0.7..1.3).contains(&nrms), "normalised RMS {nrms}");
    }

    #[test]
    fn an_outburst_is_flagged_and_rejected() {
        // Source: invented law M1 10.0, K1 10, noise N(0, 0.1 mag); one
        // measurement made 1.5 mag brighter (15 sigma).
        let law = MagnitudeLaw::Total { m1: 10.0, k1: 10.0 };
        let mut data = measurements(law, 30, 0.1, Some(&mut Noise(7)));
        data[17].mag -= 1.5;
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        assert!(fit.summary.rejection_settled);
        assert!(!fit.summary.residuals[17].used, "the outburst is rejected");
        assert_eq!(fit.summary.used_count, 29);
        assert_eq!(fit.summary.departures.len(), 1);
        let departure = &fit.summary.departures[0];
        assert_eq!(departure.index, 17);
        assert!(!departure.used);
        assert!(
            (departure.brighter_by_mag - 1.5).abs() < 0.4,
            "{}",
            departure.brighter_by_mag
        );
        assert!(departure.significance_sigma > 10.0);
        let (s_m1, s_k1) = (fit.covariance[(0, 0)].sqrt(), fit.covariance[(1, 1)].sqrt());
        assert!((fit.m1 - 10.0).abs() < 4.0 * s_m1);
        assert!((fit.k1 - 10.0).abs() < 4.0 * s_k1);

        // Without rejection the outburst is still a departure, but it drags
        // the fit: the RMS is far above 1.
        let settings = PhotometrySettings {
            outlier_rejection: false,
            ..PhotometrySettings::default()
        };
        let kept = fit_total_magnitude(&data, K1Choice::Free, &settings).unwrap();
        assert_eq!(kept.summary.used_count, 30);
        assert!(kept
            .summary
            .departures
            .iter()
            .any(|d| d.index == 17 && d.used));
        assert!(kept.summary.normalised_rms > 2.0);

        // A faint outlier is rejected but is no departure.
        let mut faint = measurements(law, 30, 0.1, Some(&mut Noise(7)));
        faint[5].mag += 1.5;
        let fit =
            fit_total_magnitude(&faint, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        assert!(!fit.summary.residuals[5].used);
        assert!(fit.summary.departures.is_empty());
    }

    #[test]
    fn rejection_keeps_the_minimum_count() {
        // Source: invented law; 5 measurements, one 3 mag off. With
        // min_used 5 nothing may go; with 4 the outlier goes.
        let law = MagnitudeLaw::Total { m1: 10.0, k1: 5.0 };
        let mut data = measurements(law, 5, 0.1, None);
        data[2].mag += 3.0;
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        assert_eq!(fit.summary.used_count, 5);
        let settings = PhotometrySettings {
            min_used: 4,
            ..PhotometrySettings::default()
        };
        let fit = fit_total_magnitude(&data, K1Choice::Free, &settings).unwrap();
        assert_eq!(fit.summary.used_count, 4);
        assert!(!fit.summary.residuals[2].used);
        assert!((fit.k1 - 5.0).abs() < 1e-9);
    }

    #[test]
    fn an_inert_k1_raises_no_activity_flag() {
        // Source: invented law with K1 = 5, the inert value (SCIENCE.md).
        let law = MagnitudeLaw::Total { m1: 15.0, k1: 5.0 };
        let data = measurements(law, 40, 0.15, Some(&mut Noise(99)));
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        assert!(fit.activity.is_none(), "K1 {}", fit.k1);
    }

    #[test]
    fn degenerate_and_short_inputs_are_refused() {
        // Source: the definitions; all r equal leaves K1 undetermined.
        let law = MagnitudeLaw::Total { m1: 10.0, k1: 10.0 };
        let mut data = measurements(law, 6, 0.2, None);
        for m in &mut data {
            m.r_au = 2.0;
            m.mag = predict_mag(law, m.r_au, m.delta_au, 0.0);
        }
        let error =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap_err();
        assert!(
            matches!(error, PhotometryError::RadiusSpan { .. }),
            "{error}"
        );
        assert!(error.to_string().contains("K1 is undetermined"));
        // The same data do fix M1 once K1 is given.
        let fit = fit_total_magnitude(&data, K1Choice::Fixed(10.0), &PhotometrySettings::default())
            .unwrap();
        assert!((fit.m1 - 10.0).abs() < 1e-9);

        let two = measurements(law, 2, 0.2, None);
        assert_eq!(
            fit_total_magnitude(&two, K1Choice::Free, &PhotometrySettings::default()).unwrap_err(),
            PhotometryError::TooFew { have: 2, need: 3 }
        );
        assert_eq!(
            fit_total_magnitude(
                &two[..1],
                K1Choice::Fixed(10.0),
                &PhotometrySettings::default()
            )
            .unwrap_err(),
            PhotometryError::TooFew { have: 1, need: 2 }
        );

        let mut bad = measurements(law, 5, 0.2, None);
        bad[3].delta_au = 0.0;
        assert!(matches!(
            fit_total_magnitude(&bad, K1Choice::Free, &PhotometrySettings::default()),
            Err(PhotometryError::InvalidMeasurement { index: 3, .. })
        ));
        let mut bad = measurements(law, 5, 0.2, None);
        bad[1].sigma_mag = Some(-0.1);
        assert!(matches!(
            fit_total_magnitude(&bad, K1Choice::Free, &PhotometrySettings::default()),
            Err(PhotometryError::InvalidMeasurement { index: 1, .. })
        ));
        let settings = PhotometrySettings {
            recover_sigma: 4.0,
            ..PhotometrySettings::default()
        };
        assert!(matches!(
            fit_total_magnitude(&data, K1Choice::Fixed(10.0), &settings),
            Err(PhotometryError::InvalidSettings(_))
        ));
    }

    #[test]
    fn bands_sigmas_and_defaults() {
        // Source: the offset table (memory; common practice): R + 0.4 = V.
        let law = MagnitudeLaw::Total { m1: 10.0, k1: 10.0 };
        let mut data = measurements(law, 8, 0.2, None);
        data[0].band = Some("R".to_string());
        data[0].mag -= 0.4;
        data[1].band = None;
        data[2].sigma_mag = None;
        data[3].sigma_mag = Some(0.01);
        let fit =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap();
        let rows = &fit.summary.residuals;
        assert!(
            (rows[0].v_mag - predict_mag(law, data[0].r_au, data[0].delta_au, 0.0)).abs() < 1e-12
        );
        assert!(!rows[0].band_assumed_v && rows[1].band_assumed_v);
        assert_eq!(rows[2].sigma_mag, 0.3, "default sigma");
        assert_eq!(rows[3].sigma_mag, 0.1, "sigma floor");
        assert!((fit.k1 - 10.0).abs() < 1e-9);

        data[4].band = Some("Q".to_string());
        let error =
            fit_total_magnitude(&data, K1Choice::Free, &PhotometrySettings::default()).unwrap_err();
        assert_eq!(
            error,
            PhotometryError::UnknownBand {
                index: 4,
                band: "Q".to_string()
            }
        );
        // ADES bands are case sensitive: g and G are different filters.
        assert_ne!(v_offset_mag("g"), v_offset_mag("G"));
    }

    #[test]
    fn noise_free_hg_is_recovered() {
        // Source: invented law H 15.3, G 0.32; phases 2..38 deg.
        let law = MagnitudeLaw::Hg { h: 15.3, g: 0.32 };
        let data = measurements(law, 30, 0.1, None);
        let fit = fit_hg(&data, GChoice::Free, &PhotometrySettings::default()).unwrap();
        assert!((fit.h - 15.3).abs() < 1e-8, "H {}", fit.h);
        assert!((fit.g - 0.32).abs() < 1e-8, "G {}", fit.g);
        assert!(!fit.g_fixed);
        assert!(fit.summary.normalised_rms < 1e-7);
        // Auto with a 36 deg span fits G too.
        let auto = fit_hg(&data, GChoice::auto(), &PhotometrySettings::default()).unwrap();
        assert!(!auto.g_fixed && (auto.g - 0.32).abs() < 1e-8);
        // The prediction sigma at zero phase and unit distances is H's.
        let p = fit.predict(1.0, 1.0, 0.0);
        assert!((p.mag - 15.3).abs() < 1e-8);
        assert!((p.sigma_mag - fit.covariance[(0, 0)].sqrt()).abs() < 1e-12);
    }

    #[test]
    fn hg_with_g_fixed() {
        // Source: invented law H 17.0 with G 0.15 (Bowell et al. 1989's
        // adopted default; memory), recovered with G held there.
        let law = MagnitudeLaw::Hg {
            h: 17.0,
            g: DEFAULT_G,
        };
        let data = measurements(law, 6, 0.2, None);
        let fit = fit_hg(
            &data,
            GChoice::Fixed(DEFAULT_G),
            &PhotometrySettings::default(),
        )
        .unwrap();
        assert!((fit.h - 17.0).abs() < 1e-9);
        assert!(fit.g_fixed && fit.g == DEFAULT_G);
        assert!((fit.covariance[(0, 0)] - 0.04 / 6.0).abs() < 1e-12);
    }

    #[test]
    fn noisy_hg_is_recovered_within_its_sigma() {
        // Source: invented law H 14.1, G 0.05 plus N(0, 0.1 mag) noise.
        let law = MagnitudeLaw::Hg { h: 14.1, g: 0.05 };
        let data = measurements(law, 80, 0.1, Some(&mut Noise(31337)));
        let fit = fit_hg(&data, GChoice::Free, &PhotometrySettings::default()).unwrap();
        let (s_h, s_g) = (fit.covariance[(0, 0)].sqrt(), fit.covariance[(1, 1)].sqrt());
        assert!((fit.h - 14.1).abs() < 4.0 * s_h, "H {} +- {s_h}", fit.h);
        assert!((fit.g - 0.05).abs() < 4.0 * s_g, "G {} +- {s_g}", fit.g);
        assert!(s_g > 0.0 && s_g < 0.2);
        let nrms = fit.summary.normalised_rms;
        assert!((0.7..1.3).contains(&nrms), "normalised RMS {nrms}");
    }

    #[test]
    fn hg_outburst_is_flagged() {
        // Source: invented law H 16.0, G 0.15; two measurements 1 mag
        // brighter (10 sigma).
        let law = MagnitudeLaw::Hg { h: 16.0, g: 0.15 };
        let mut data = measurements(law, 30, 0.1, Some(&mut Noise(5)));
        data[10].mag -= 1.0;
        data[11].mag -= 1.0;
        let fit = fit_hg(&data, GChoice::Fixed(0.15), &PhotometrySettings::default()).unwrap();
        let flagged: Vec<usize> = fit.summary.departures.iter().map(|d| d.index).collect();
        assert_eq!(flagged, vec![10, 11]);
        assert_eq!(fit.summary.used_count, 28);
        assert!((fit.h - 16.0).abs() < 4.0 * fit.covariance[(0, 0)].sqrt());
    }

    #[test]
    fn hg_degenerate_phase_coverage() {
        // Source: the definitions; one phase angle cannot separate G from H.
        let law = MagnitudeLaw::Hg { h: 15.0, g: 0.15 };
        let mut data = measurements(law, 10, 0.1, None);
        for m in &mut data {
            m.phase_rad = deg(12.0);
            m.mag = predict_mag(law, m.r_au, m.delta_au, m.phase_rad);
        }
        let error = fit_hg(&data, GChoice::Free, &PhotometrySettings::default()).unwrap_err();
        assert!(
            matches!(error, PhotometryError::PhaseSpan { .. }),
            "{error}"
        );
        assert_eq!(
            fit_hg(
                &measurements(law, 2, 0.1, None),
                GChoice::Free,
                &PhotometrySettings::default()
            )
            .unwrap_err(),
            PhotometryError::TooFew { have: 2, need: 3 }
        );
        assert_eq!(
            fit_hg(&[], GChoice::Fixed(0.15), &PhotometrySettings::default()).unwrap_err(),
            PhotometryError::TooFew { have: 0, need: 2 }
        );
        let auto = fit_hg(&data, GChoice::auto(), &PhotometrySettings::default()).unwrap();
        assert!(auto.g_fixed && auto.g == DEFAULT_G);
        assert!((auto.h - 15.0).abs() < 1e-9);

        let mut wide = measurements(law, 10, 0.1, None);
        wide[4].phase_rad = deg(130.0);
        assert!(matches!(
            fit_hg(&wide, GChoice::Fixed(0.15), &PhotometrySettings::default()),
            Err(PhotometryError::PhaseBeyondLaw { index: 4, .. })
        ));
    }
}
