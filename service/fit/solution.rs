//! What an analyst reads off a fitted orbit: elements with sigmas at any
//! epoch, the excess speed, the original and future barycentric 1/a, and a
//! trend test on the residuals.
//!
//! Covariances travel with the state: from the fit's epoch to another one
//! through Phi = [STM, S] (S the A_i sensitivities), C' = Phi C Phi^T with
//! the A_i rows kept, and to elements through the Jacobian of the
//! state-to-elements conversion.

use nalgebra::{DMatrix, Matrix6, RowDVector, Vector2};
use thiserror::Error;

use crate::astro::constants::gm;
use crate::astro::elements::{CometaryElements, ElementsError};
use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::forces::{DistanceLaw, Origin};
use crate::astro::propagation::{PropagationError, PropagationSettings, Trajectory};
use crate::astro::time::Epoch;

use super::lsq::OrbitFit;
use super::observe::AstrometricObservation;
use super::stats::chi2_ln_sf;

/// Barycentric distance beyond which 1/a counts as "original" or "future"
/// (Marsden, Sekanina & Everhart 1978, AJ 83, 64; memory).
pub const ORIGINAL_FUTURE_DISTANCE_AU: f64 = 250.0;

/// Barycentric distance beyond which the original and future integrations
/// switch to the far-field forces ([`crate::astro::forces::ForceModel::far_field`]):
/// outside Neptune's orbit, where the inner planets' neglected quadrupole
/// is 3e-9 of the acceleration.
const FAR_FIELD_AU: f64 = 30.0;

/// Longest look back or ahead for the original and future 1/a, days.
const ORIGINAL_FUTURE_HORIZON_DAYS: f64 = 200.0 * 365.25;

#[derive(Debug, Error)]
pub enum SolutionError {
    #[error("the fit has no covariance (singular normal matrix)")]
    NoCovariance,
    #[error("propagation: {0}")]
    Propagation(#[from] PropagationError),
    #[error("elements: {0}")]
    Elements(#[from] ElementsError),
    #[error("ephemeris: {0}")]
    Ephemeris(#[from] EphemerisError),
}

/// A value with its 1-sigma uncertainty.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Estimate {
    pub value: f64,
    pub sigma: f64,
}

/// Heliocentric ecliptic-J2000 osculating elements with sigmas.
#[derive(Debug, Clone, PartialEq)]
pub struct ElementEstimates {
    pub epoch: Epoch,
    pub q_au: Estimate,
    pub e: Estimate,
    pub i_deg: Estimate,
    pub node_deg: Estimate,
    pub peri_deg: Estimate,
    /// Perihelion time, TDB days since J2000.
    pub tp_tdb_days: Estimate,
    /// Heliocentric 1/a = (1 - e)/q, 1/au.
    pub inverse_a_per_au: Estimate,
    /// (e - 1) / sigma(e): how far from a parabola, in sigmas.
    pub e_minus_one_sigmas: f64,
    /// Hyperbolic excess speed, for unbound orbits.
    pub v_inf_km_s: Option<Estimate>,
    /// The 6 x 6 element covariance in (q, e, i, node, peri, tp) order,
    /// angles in radians, tp in days.
    pub covariance: Matrix6<f64>,
}

/// The fit's state and parameter covariance carried to `epoch`.
pub fn parameters_at(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    epoch: Epoch,
    propagation: &PropagationSettings,
) -> Result<(StateVector, DMatrix<f64>), SolutionError> {
    let covariance = fit.covariance.as_ref().ok_or(SolutionError::NoCovariance)?;
    if epoch == fit.epoch {
        return Ok((fit.state, covariance.clone()));
    }
    let settings = PropagationSettings {
        partials: true,
        ..*propagation
    };
    let (start, end) = if epoch < fit.epoch {
        (epoch, fit.epoch)
    } else {
        (fit.epoch, epoch)
    };
    let trajectory = Trajectory::integrate(
        ephemeris, &fit.model, fit.epoch, &fit.state, start, end, &settings,
    )?;
    let p = trajectory.state_with_partials(epoch)?;
    let phi = transition(&p.stm, &p.sensitivity, covariance.nrows());
    Ok((p.state, &phi * covariance * phi.transpose()))
}

/// The (6 + k)-square map of the parameters from one epoch to another: the
/// state rows from [STM, S], the A_i rows the identity.
fn transition(
    stm: &Matrix6<f64>,
    sensitivity: &nalgebra::Matrix6xX<f64>,
    n: usize,
) -> DMatrix<f64> {
    let mut phi = DMatrix::identity(n, n);
    phi.view_mut((0, 0), (6, 6)).copy_from(stm);
    let k = sensitivity.ncols().min(n - 6);
    if k > 0 {
        phi.view_mut((0, 6), (6, k))
            .copy_from(&sensitivity.columns(0, k));
    }
    phi
}

/// Elements and their sigmas from a heliocentric state and the covariance
/// of the fitted parameters (whose first six are the state).
pub fn elements_with_sigmas(
    state: &StateVector,
    covariance: &DMatrix<f64>,
    epoch: Epoch,
) -> Result<ElementEstimates, SolutionError> {
    let (el, jac) = CometaryElements::from_state_with_jacobian(state, epoch, gm::SUN)?;
    let c6: Matrix6<f64> = covariance.fixed_view::<6, 6>(0, 0).into_owned();
    let ce = jac * c6 * jac.transpose();
    let sig = |i: usize| ce[(i, i)].max(0.0).sqrt();
    let est = |value: f64, sigma: f64| Estimate { value, sigma };
    // 1/a = (1 - e)/q: gradient (-(1 - e)/q^2, -1/q) over (q, e).
    let g = [-(1.0 - el.e) / (el.q_au * el.q_au), -1.0 / el.q_au];
    let var_inv_a =
        g[0] * g[0] * ce[(0, 0)] + 2.0 * g[0] * g[1] * ce[(0, 1)] + g[1] * g[1] * ce[(1, 1)];
    let v_inf_km_s = el.v_infinity_km_s().map(|v| {
        // v^2 = -mu / a, so dv = -(mu / (2 v)) d(1/a) in consistent units;
        // relative: dv / v = -d(1/a) / (2 (1/a)).
        let inv_a = el.inverse_semi_major_axis_per_au();
        est(v, (v * var_inv_a.sqrt() / (2.0 * inv_a.abs())).abs())
    });
    Ok(ElementEstimates {
        epoch,
        q_au: est(el.q_au, sig(0)),
        e: est(el.e, sig(1)),
        i_deg: est(el.i_deg(), sig(2).to_degrees()),
        node_deg: est(el.node_deg(), sig(3).to_degrees()),
        peri_deg: est(el.peri_deg(), sig(4).to_degrees()),
        tp_tdb_days: est(el.tp.tdb_days_since_j2000(), sig(5)),
        inverse_a_per_au: est(
            el.inverse_semi_major_axis_per_au(),
            var_inv_a.max(0.0).sqrt(),
        ),
        e_minus_one_sigmas: (el.e - 1.0) / sig(1),
        v_inf_km_s,
        covariance: ce,
    })
}

/// Barycentric 1/a far from the planets, before or after the apparition.
#[derive(Debug, Clone, PartialEq)]
pub struct DistantInverseA {
    /// 1/a with the total solar-system GM, 1/au.
    pub inverse_a_per_au: Estimate,
    pub at: Epoch,
    /// Barycentric distance where it was taken; below
    /// [`ORIGINAL_FUTURE_DISTANCE_AU`] when the ephemeris or the horizon
    /// ended first.
    pub distance_au: f64,
}

/// Which way to go for the distant 1/a.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    Original,
    Future,
}

/// The original (or future) barycentric 1/a: the orbit integrated with the
/// full model until it is [`ORIGINAL_FUTURE_DISTANCE_AU`] from the
/// barycentre, in stretches that double in length so that an ephemeris
/// that ends part-way still leaves the farthest point reached. None for an
/// orbit whose aphelion lies inside that distance: it never leaves the
/// planetary region, and only its osculating elements mean anything.
///
/// The integration runs in barycentric coordinates (the same forces, see
/// [`Origin::Barycentre`]): far out the heliocentric acceleration is
/// dominated by the Sun's own wobble, which would hold the integrator to
/// steps of days for decades. The shift of origin depends on time alone,
/// so the state transition matrix is the same in either frame. Stretches
/// that start beyond [`FAR_FIELD_AU`] use the far-field forces.
pub fn distant_inverse_a(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    direction: Direction,
    propagation: &PropagationSettings,
) -> Result<Option<DistantInverseA>, SolutionError> {
    let covariance = fit.covariance.as_ref().ok_or(SolutionError::NoCovariance)?;
    // A radial push on the inverse-square law is, far from the planets, a
    // change of the Sun's GM: the aphelion that decides whether the body
    // ever leaves is the one under GM - A1. A short arc can fit an A1
    // several times the Sun's pull (undetermined, but converged); under
    // it the body never leaves, and integrating two centuries of a bound
    // orbit to find that out took most of a minute.
    let gm_far = match fit.model.nongrav() {
        Some(ng) if ng.law == DistanceLaw::InverseSquare => gm::SUN - ng.a_au_per_day2[0],
        _ => gm::SUN,
    };
    if gm_far > 0.0 {
        let el = CometaryElements::from_state(&fit.state, fit.epoch, gm_far)?;
        if let Some(a) = el.semi_major_axis_au() {
            if a * (1.0 + el.e) < ORIGINAL_FUTURE_DISTANCE_AU {
                return Ok(None);
            }
        }
    }
    let sign = match direction {
        Direction::Original => -1.0,
        Direction::Future => 1.0,
    };
    let settings = PropagationSettings {
        partials: true,
        ..*propagation
    };
    let n = covariance.nrows();
    let near = fit.model.clone().with_origin(Origin::Barycentre);
    let far = fit.model.far_field();
    let sun = ephemeris.state(Body::Sun, fit.epoch)?;
    let mut phi = DMatrix::identity(n, n);
    let mut state = StateVector::new(
        fit.state.position_au + sun.position_au,
        fit.state.velocity_au_per_day + sun.velocity_au_per_day,
    );
    let mut epoch = fit.epoch;
    let mut stretch = 365.25;
    let mut travelled = 0.0;
    let mut last: Option<(Epoch, StateVector, DMatrix<f64>)> = None;
    while travelled < ORIGINAL_FUTURE_HORIZON_DAYS {
        let next = epoch.plus_days(sign * stretch);
        let (start, end) = if sign < 0.0 {
            (next, epoch)
        } else {
            (epoch, next)
        };
        let model = if state.position_au.norm() > FAR_FIELD_AU {
            &far
        } else {
            &near
        };
        let Ok(trajectory) =
            Trajectory::integrate(ephemeris, model, epoch, &state, start, end, &settings)
        else {
            break;
        };
        let p = trajectory.state_with_partials(next)?;
        phi = transition(&p.stm, &p.sensitivity, n) * phi;
        state = p.state;
        epoch = next;
        travelled += stretch;
        stretch *= 2.0;
        last = Some((epoch, state, phi.clone()));
        if state.position_au.norm() >= ORIGINAL_FUTURE_DISTANCE_AU {
            break;
        }
    }
    let Some((at, barycentric, phi)) = last else {
        return Ok(None);
    };
    let r = barycentric.position_au;
    let v = barycentric.velocity_au_per_day;
    let mu = gm::SOLAR_SYSTEM_TOTAL;
    let rn = r.norm();
    let value = 2.0 / rn - v.norm_squared() / mu;
    // d(1/a)/dr = -2 r / r^3, d(1/a)/dv = -2 v / mu; the Sun's place does
    // not depend on the fitted parameters.
    let mut g = RowDVector::zeros(6);
    for i in 0..3 {
        g[i] = -2.0 * r[i] / (rn * rn * rn);
        g[i + 3] = -2.0 * v[i] / mu;
    }
    let gp = g * phi.rows(0, 6);
    let variance = (&gp * covariance * gp.transpose())[(0, 0)];
    Ok(Some(DistantInverseA {
        inverse_a_per_au: Estimate {
            value,
            sigma: variance.max(0.0).sqrt(),
        },
        at,
        distance_au: rn,
    }))
}

/// Linear trend of the per-night mean residuals against time.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendTest {
    pub nights: usize,
    /// Slopes in (RA cos Dec, Dec), arcsec per day, with sigmas.
    pub slope_arcsec_per_day: [Estimate; 2],
    /// chi^2 of the two slopes against zero (2 dof) and its p-value.
    pub chi2: f64,
    pub p_value: f64,
}

/// Nights are runs of used observations with gaps under half a day; each
/// night's residuals are averaged with their weights, and a weighted line
/// is fitted through the night means of each coordinate. Within a night a
/// run of one sign is normal (the errors of one night are correlated);
/// a slope over the nights is not. None with fewer than three nights.
pub fn trend_test(fit: &OrbitFit, observations: &[AstrometricObservation]) -> Option<TrendTest> {
    let mut used: Vec<usize> = (0..observations.len())
        .filter(|i| fit.residuals[*i].used)
        .collect();
    used.sort_by(|a, b| {
        observations[*a]
            .time
            .tdb()
            .partial_cmp(&observations[*b].time.tdb())
            .unwrap_or(std::cmp::Ordering::Equal)
    });
    // (time, mean, variance of the mean) per coordinate and night.
    let mut nights: Vec<(f64, Vector2<f64>, Vector2<f64>)> = Vec::new();
    let mut group: Vec<usize> = Vec::new();
    let flush = |group: &mut Vec<usize>, nights: &mut Vec<(f64, Vector2<f64>, Vector2<f64>)>| {
        if group.is_empty() {
            return;
        }
        let mut t = 0.0;
        let mut wsum = Vector2::zeros();
        let mut wres = Vector2::zeros();
        for i in group.iter() {
            let r = &fit.residuals[*i];
            let w = Vector2::new(
                1.0 / r.covariance_arcsec2[(0, 0)],
                1.0 / r.covariance_arcsec2[(1, 1)],
            );
            wsum += w;
            wres += w.component_mul(&r.residual_arcsec);
            t += observations[*i].time.tdb().tdb_days_since_j2000();
        }
        let mean = wres.component_div(&wsum);
        nights.push((t / group.len() as f64, mean, wsum.map(|w| 1.0 / w)));
        group.clear();
    };
    for &i in &used {
        if let Some(&prev) = group.last() {
            let gap = observations[i]
                .time
                .tdb()
                .days_since(observations[prev].time.tdb());
            if gap > 0.5 {
                flush(&mut group, &mut nights);
            }
        }
        group.push(i);
    }
    flush(&mut group, &mut nights);
    if nights.len() < 3 {
        return None;
    }
    let mut slopes = [Estimate {
        value: 0.0,
        sigma: 0.0,
    }; 2];
    let mut chi2 = 0.0;
    for (c, slope) in slopes.iter_mut().enumerate() {
        // Weighted straight line y = a + b t (Bevington & Robinson, Data
        // Reduction and Error Analysis, ch. 6; memory).
        let (mut s, mut st, mut stt, mut sy, mut sty) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (t, mean, var) in &nights {
            let w = 1.0 / var[c];
            s += w;
            st += w * t;
            stt += w * t * t;
            sy += w * mean[c];
            sty += w * t * mean[c];
        }
        let delta = s * stt - st * st;
        let b = (s * sty - st * sy) / delta;
        let sigma = (s / delta).sqrt();
        *slope = Estimate { value: b, sigma };
        chi2 += (b / sigma).powi(2);
    }
    Some(TrendTest {
        nights: nights.len(),
        slope_arcsec_per_day: slopes,
        chi2,
        p_value: chi2_ln_sf(chi2, 2.0).exp(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::forces::{ForceModel, FreeParameters, NonGravModel};
    use crate::fit::lsq::Termination;
    use crate::fit::test_support::WobblingSun;
    use nalgebra::DVector;

    /// An inbound hyperbola (q = 1.1 au, e = 3.2, 150 days before
    /// perihelion; invented) with a radial inverse-square push `a1`.
    fn inbound(a1: f64) -> OrbitFit {
        let epoch = Epoch::from_tdb_jd(2_461_426.5, 0.0);
        let state = CometaryElements {
            q_au: 1.1,
            e: 3.2,
            i_rad: 1.1,
            node_rad: 3.7,
            peri_rad: 2.06,
            tp: epoch.plus_days(150.0),
            epoch,
            gm_au3_per_day2: gm::SUN,
        }
        .to_state()
        .expect("a valid conic");
        let model = ForceModel::gravity()
            .with_nongrav(NonGravModel::new(
                DistanceLaw::InverseSquare,
                [a1, 0.0, 0.0],
                FreeParameters::new(true, false, false),
            ))
            .expect("a valid model");
        let mut parameters: Vec<f64> = state
            .position_au
            .iter()
            .chain(state.velocity_au_per_day.iter())
            .copied()
            .collect();
        parameters.push(a1);
        OrbitFit {
            epoch,
            state,
            nongrav_au_per_day2: vec![(0, a1)],
            model,
            parameters: DVector::from_vec(parameters),
            covariance: Some(DMatrix::identity(7, 7) * 1e-16),
            chi2: 0.0,
            dof: 1,
            rms_arcsec: 0.0,
            normalised_rms: 1.0,
            residuals: Vec::new(),
            iterations: 0,
            outlier_passes: 0,
            termination: Termination::Converged,
        }
    }

    /// A short arc can fit A1 = -3.7 GM (a pull several times the Sun's,
    /// as the demo's first week did): under GM - A1 the orbit is bound
    /// inside 250 au, so there is no original 1/a. Known at once: the slow
    /// way, integrating the bound orbit for two centuries, would end with
    /// the farthest point reached (Some, below 250 au), not None.
    #[test]
    fn a_fitted_pull_stronger_than_the_suns_has_no_distant_inverse_a() {
        let settings = PropagationSettings::default();
        // v^2 = 2.5 GM at 4 au here (vis-viva with 1/a = -2), so any pull
        // past GM_eff = 5 GM binds it; A1 = -7 GM (GM_eff = 8 GM) gives
        // a = 5.3 au, aphelion under 11 au (vis-viva, hand arithmetic).
        let pulled = inbound(-7.0 * gm::SUN);
        let none = distant_inverse_a(&WobblingSun, &pulled, Direction::Original, &settings)
            .expect("no failure");
        assert!(none.is_none(), "{none:?}");
        let free = distant_inverse_a(&WobblingSun, &inbound(0.0), Direction::Original, &settings)
            .expect("no failure")
            .expect("an unbound orbit leaves");
        assert!(free.inverse_a_per_au.value < 0.0);
    }
}
