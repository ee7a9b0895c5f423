//! Systematic ranging: orbits through two lines of sight at trial
//! topocentric distances.
//!
//! For distances (rho1, rho2) at the first and last observation the body
//! is at R_i + rho_i L_i at the emission times t_i - rho_i / c, and the
//! two positions with the time between fix a two-body orbit (Lambert's
//! problem, both ways round). Each orbit is screened by the angle between
//! its two-body place and the observed line of sight on a spread sample of
//! observations. The grid is logarithmic in both distances; the best local
//! minima of the grid are refined by a simplex search in (ln rho1, ln rho2).
//! Nothing here needs the arc to be long: a single night's tracklet gives
//! the familiar valley of acceptable distances, and every minimum found in
//! it is kept.

use nalgebra::Vector3;

use crate::astro::constants::C_AU_PER_DAY;
use crate::astro::ephemeris::StateVector;
use crate::astro::kepler::propagate_vectors;
use crate::astro::time::Epoch;

use super::lambert::{lambert, Way};
use super::Sight;
use crate::fit::observe::ARCSEC_PER_RAD;

/// Most simplex steps per refined minimum.
const MAX_SIMPLEX_STEPS: usize = 600;

#[derive(Debug, Clone, PartialEq)]
pub struct RangingSettings {
    /// Distance range of the grid, au (geocentric-ish: topocentric).
    pub min_rho_au: f64,
    pub max_rho_au: f64,
    /// Grid points per distance (logarithmic spacing).
    pub steps: usize,
    /// Local minima of the grid refined and returned.
    pub keep: usize,
    /// The simplex search stops when its size in ln(rho) is below this.
    pub min_log_step: f64,
}

impl Default for RangingSettings {
    fn default() -> Self {
        Self {
            min_rho_au: 0.002,
            max_rho_au: 50.0,
            steps: 40,
            keep: 4,
            min_log_step: 1e-9,
        }
    }
}

/// One refined ranging orbit.
#[derive(Debug, Clone, PartialEq)]
pub struct RangingSolution {
    /// Emission time of the first observation.
    pub epoch: Epoch,
    /// Heliocentric ICRF state there.
    pub state: StateVector,
    pub rho_au: [f64; 2],
    pub way: Way,
    /// Two-body RMS on the screening sample, arcsec per coordinate.
    pub screen_rms_arcsec: f64,
}

/// The orbit for one pair of distances.
fn orbit(
    first: &Sight,
    last: &Sight,
    rho: [f64; 2],
    way: Way,
    mu: f64,
) -> Option<(Epoch, StateVector)> {
    let t1 = first.tdb.plus_days(-rho[0] / C_AU_PER_DAY);
    let t2 = last.tdb.plus_days(-rho[1] / C_AU_PER_DAY);
    let r1 = first.observer_au + rho[0] * first.los;
    let r2 = last.observer_au + rho[1] * last.los;
    let (v1, _) = lambert(&r1, &r2, t2.days_since(t1), mu, way).ok()?;
    Some((t1, StateVector::new(r1, v1)))
}

/// Two-body RMS (per coordinate, arcsec) of an orbit against sights, with
/// two light-time passes per sight.
pub fn screen_rms(epoch: Epoch, state: &StateVector, sights: &[Sight], mu: f64) -> Option<f64> {
    let mut sum = 0.0;
    for s in sights {
        let mut tau = 0.0;
        let mut rho = Vector3::zeros();
        for _ in 0..2 {
            let dt = s.tdb.plus_days(-tau).days_since(epoch);
            let at =
                propagate_vectors(&state.position_au, &state.velocity_au_per_day, dt, mu).ok()?;
            rho = at.position - s.observer_au;
            tau = rho.norm() / C_AU_PER_DAY;
        }
        let angle = rho.cross(&s.los).norm().atan2(rho.dot(&s.los));
        sum += angle * angle;
    }
    let rms = (sum / (2 * sights.len().max(1)) as f64).sqrt() * ARCSEC_PER_RAD;
    rms.is_finite().then_some(rms)
}

fn cost(
    first: &Sight,
    last: &Sight,
    log_rho: [f64; 2],
    way: Way,
    screen: &[Sight],
    mu: f64,
) -> f64 {
    orbit(first, last, log_rho.map(f64::exp), way, mu)
        .and_then(|(t, s)| screen_rms(t, &s, screen, mu))
        .unwrap_or(f64::INFINITY)
}

/// Ranging between `first` and `last`, screened on `screen`.
pub fn ranging(
    first: &Sight,
    last: &Sight,
    screen: &[Sight],
    settings: &RangingSettings,
    mu: f64,
) -> Vec<RangingSolution> {
    let n = settings.steps.max(2);
    let (lo, hi) = (settings.min_rho_au.ln(), settings.max_rho_au.ln());
    let h = (hi - lo) / (n - 1) as f64;
    let grid: Vec<f64> = (0..n).map(|k| lo + h * k as f64).collect();
    let mut minima: Vec<(f64, [f64; 2], Way)> = Vec::new();
    for way in [Way::Short, Way::Long] {
        let costs: Vec<Vec<f64>> = grid
            .iter()
            .map(|a| {
                grid.iter()
                    .map(|b| cost(first, last, [*a, *b], way, screen, mu))
                    .collect()
            })
            .collect();
        for i in 0..n {
            for j in 0..n {
                let c = costs[i][j];
                if !c.is_finite() {
                    continue;
                }
                let lowest = (i.saturating_sub(1)..=(i + 1).min(n - 1)).all(|a| {
                    (j.saturating_sub(1)..=(j + 1).min(n - 1))
                        .all(|b| (a, b) == (i, j) || costs[a][b] >= c)
                });
                if lowest {
                    minima.push((c, [grid[i], grid[j]], way));
                }
            }
        }
    }
    minima.sort_by(|a, b| a.0.total_cmp(&b.0));
    minima.truncate(settings.keep);
    minima
        .into_iter()
        .filter_map(|(_, start, way)| {
            let (best, rms) = simplex(first, last, start, h, way, screen, settings, mu);
            let rho = best.map(f64::exp);
            let (epoch, state) = orbit(first, last, rho, way, mu)?;
            Some(RangingSolution {
                epoch,
                state,
                rho_au: rho,
                way,
                screen_rms_arcsec: rms,
            })
        })
        .collect()
}

/// Nelder-Mead simplex search from a grid minimum (Nelder & Mead 1965,
/// Computer Journal 7, 308; standard coefficients 1, 2, 1/2, 1/2): the
/// acceptable distances lie along a narrow, curved valley, which a
/// simplex follows where a search along fixed directions stalls.
#[allow(clippy::too_many_arguments)]
fn simplex(
    first: &Sight,
    last: &Sight,
    start: [f64; 2],
    grid_step: f64,
    way: Way,
    screen: &[Sight],
    settings: &RangingSettings,
    mu: f64,
) -> ([f64; 2], f64) {
    let f = |x: [f64; 2]| cost(first, last, x, way, screen, mu);
    let h = 0.5 * grid_step;
    let mut pts = [start, [start[0] + h, start[1]], [start[0], start[1] + h]];
    let mut vals = pts.map(f);
    let lerp =
        |a: [f64; 2], b: [f64; 2], t: f64| [a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1])];
    for _ in 0..MAX_SIMPLEX_STEPS {
        let mut idx = [0, 1, 2];
        idx.sort_by(|i, j| vals[*i].total_cmp(&vals[*j]));
        pts = idx.map(|i| pts[i]);
        vals = idx.map(|i| vals[i]);
        let size = (1..3)
            .map(|k| {
                (pts[k][0] - pts[0][0])
                    .abs()
                    .max((pts[k][1] - pts[0][1]).abs())
            })
            .fold(0.0, f64::max);
        if size < settings.min_log_step {
            break;
        }
        let centroid = lerp(pts[0], pts[1], 0.5);
        let reflected = lerp(centroid, pts[2], -1.0);
        let fr = f(reflected);
        if fr < vals[0] {
            let expanded = lerp(centroid, pts[2], -2.0);
            let fe = f(expanded);
            (pts[2], vals[2]) = if fe < fr {
                (expanded, fe)
            } else {
                (reflected, fr)
            };
        } else if fr < vals[1] {
            (pts[2], vals[2]) = (reflected, fr);
        } else {
            let contracted = if fr < vals[2] {
                lerp(centroid, reflected, 0.5)
            } else {
                lerp(centroid, pts[2], 0.5)
            };
            let fc = f(contracted);
            if fc < vals[2].min(fr) {
                (pts[2], vals[2]) = (contracted, fc);
            } else {
                for k in 1..3 {
                    pts[k] = lerp(pts[0], pts[k], 0.5);
                    vals[k] = f(pts[k]);
                }
            }
        }
    }
    let best = (0..3)
        .min_by(|i, j| vals[*i].total_cmp(&vals[*j]))
        .unwrap_or(0);
    (pts[best], vals[best])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::constants::gm;
    use crate::astro::kepler::propagate;

    fn observer(t_days: f64) -> Vector3<f64> {
        let n = gm::SUN.sqrt();
        let u = 1.3 + n * t_days;
        Vector3::new(u.cos(), u.sin(), 0.0)
    }

    fn sight(truth: &StateVector, t: f64) -> Sight {
        let big_r = observer(t);
        let mut tau = 0.0;
        for _ in 0..10 {
            let (s, _) = propagate(truth, t - tau, gm::SUN).unwrap();
            tau = (s.position_au - big_r).norm() / C_AU_PER_DAY;
        }
        let (s, _) = propagate(truth, t - tau, gm::SUN).unwrap();
        let rho = s.position_au - big_r;
        Sight {
            index: 0,
            tdb: Epoch::from_tdb_days_since_j2000(t),
            observer_au: big_r,
            los: rho / rho.norm(),
        }
    }

    #[test]
    fn recovers_an_invented_orbit_from_four_nights() {
        // Invented bound orbit (state at t = 0); noise-free sights made from
        // it with the crate's Kepler solver: the construction is the check.
        let truth = StateVector::new(
            Vector3::new(0.9, 2.0, 0.3),
            Vector3::new(-0.010, 0.004, 0.001),
        );
        let times = [0.0, 0.04, 2.0, 2.05, 4.0, 6.0, 6.03];
        let sights: Vec<Sight> = times.iter().map(|t| sight(&truth, *t)).collect();
        let out = ranging(
            &sights[0],
            &sights[sights.len() - 1],
            &sights,
            &RangingSettings::default(),
            gm::SUN,
        );
        let best = out
            .iter()
            .min_by(|a, b| a.screen_rms_arcsec.total_cmp(&b.screen_rms_arcsec))
            .unwrap();
        let (at, _) = propagate(&truth, best.epoch.tdb_days_since_j2000(), gm::SUN).unwrap();
        let error = (best.state.position_au - at.position_au).norm();
        println!(
            "ranging: rms {:.2e} arcsec, position error {error:.2e} au, rho {:?}",
            best.screen_rms_arcsec, best.rho_au
        );
        assert!(best.screen_rms_arcsec < 1e-3);
        assert!(error < 1e-5, "{error}");
    }
}
