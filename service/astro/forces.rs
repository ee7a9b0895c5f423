//! Accelerations on the small body and their partial derivatives.
//!
//! The equations of motion are heliocentric, for a massless body, ICRF
//! axes, au and days:
//!
//! a = a_sun + a_planets + a_GR + a_NG
//!
//! - a_sun = -mu_s r / |r|^3;
//! - a_planets = sum_p mu_p [ (r_p - r)/|r_p - r|^3 - r_p/|r_p|^3 ] (direct
//!   and indirect terms; the indirect term is the Sun's own acceleration
//!   towards the planet, which the heliocentric frame must subtract);
//! - a_GR, the Sun's first post-Newtonian term with PPN beta = gamma = 1 in
//!   its single-body form (IERS Conventions 2010, ch. 10, eq. 10.12):
//!   mu_s / (c^2 |r|^3) [ (4 mu_s/|r| - |v|^2) r + 4 (r.v) v ];
//! - a_NG = g(r) (A1 r_hat + A2 t_hat + A3 n_hat) (Marsden, Sekanina &
//!   Yeomans 1973, AJ 78, 211).
//!
//! With [`Origin::Barycentre`] the state is barycentric instead: the same
//! terms evaluated at the heliocentric place r - r_sun, without the
//! indirect term (the barycentre does not accelerate). Far from the Sun the
//! indirect term dominates the heliocentric acceleration and oscillates
//! with the inner planets' periods, which holds an integrator to steps of
//! days; the barycentric acceleration is smooth there, which is what the
//! decades-long integrations to the original and future orbits need.
//! Beyond the planets ([`ForceModel::far_field`]) the Sun and the inner
//! planets act as one mass at their common centre, which follows from the
//! outer planets alone (the barycentre is fixed): no inner body has to be
//! looked up, and nothing left varies faster than Jupiter's orbit.
//!
//! Everything the ephemeris contributes at one epoch is gathered once into a
//! [`PerturberPositions`], so an integrator that evaluates the acceleration
//! several times at the same epoch (a predictor-corrector does) asks the
//! ephemeris only once per epoch.
//!
//! The partial derivatives with respect to position, velocity and the free
//! A_i are analytic; docs/science/dynamics.md writes them out.

use nalgebra::{Matrix3, Vector3};
use thiserror::Error;

use super::constants::{gm, C_AU_PER_DAY};
use super::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use super::time::Epoch;

/// Water-ice sublimation law constants (Marsden, Sekanina & Yeomans 1973,
/// AJ 78, 211): g(r) = alpha (r/r0)^-m (1 + (r/r0)^n)^-k.
pub mod water_ice {
    /// Normalisation, chosen in the paper so that g(1 au) = 1.
    pub const ALPHA: f64 = 0.111_262_042_6;
    /// Scale distance in au.
    pub const R0_AU: f64 = 2.808;
    pub const M: f64 = 2.15;
    pub const N: f64 = 5.093;
    pub const K: f64 = 4.6142;
}

/// Most perturbers a model can hold: every body the ephemeris offers but the
/// Sun.
pub const MAX_PERTURBERS: usize = Body::PERTURBERS.len();

/// How the non-gravitational acceleration scales with heliocentric distance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DistanceLaw {
    /// The water-ice law with the published constants ([`water_ice`]).
    WaterIce,
    /// The water-ice functional form with a user-set scale distance r0 (for
    /// bodies driven by a more or less volatile ice). The normalisation is
    /// recomputed so that g(1 au) = 1 still holds, which keeps A_i comparable
    /// across laws.
    WaterIceScaled { r0_au: f64 },
    /// g(r) = (1 au / r)^2: radiation-like scaling, used for bodies whose
    /// activity is not water-driven and for the Yarkovsky drift.
    InverseSquare,
}

impl DistanceLaw {
    /// g(r), dimensionless.
    pub fn g(self, r_au: f64) -> f64 {
        self.g_and_log_slope(r_au).0
    }

    /// g(r) and d ln g / dr (1/au): the slope is what the partials need, and
    /// the logarithmic form is the natural one for products of powers.
    pub fn g_and_log_slope(self, r_au: f64) -> (f64, f64) {
        match self {
            DistanceLaw::InverseSquare => (1.0 / (r_au * r_au), -2.0 / r_au),
            DistanceLaw::WaterIce => sublimation_form(water_ice::ALPHA, water_ice::R0_AU, r_au),
            DistanceLaw::WaterIceScaled { r0_au } => {
                let alpha = 1.0 / sublimation_form(1.0, r0_au, 1.0).0;
                sublimation_form(alpha, r0_au, r_au)
            }
        }
    }

    fn validate(self) -> Result<(), ForceModelError> {
        match self {
            DistanceLaw::WaterIceScaled { r0_au } if !(r0_au.is_finite() && r0_au > 0.0) => {
                Err(ForceModelError::BadScaleDistance { r0_au })
            }
            _ => Ok(()),
        }
    }
}

/// alpha (r/r0)^-m (1 + (r/r0)^n)^-k and its logarithmic slope.
fn sublimation_form(alpha: f64, r0_au: f64, r_au: f64) -> (f64, f64) {
    use water_ice::{K, M, N};
    let u = r_au / r0_au;
    let un = u.powf(N);
    let g = alpha * u.powf(-M) * (1.0 + un).powf(-K);
    let slope = (-M - K * N * un / (1.0 + un)) / r_au;
    (g, slope)
}

/// Which of A1, A2, A3 are estimated. Each free one adds a column to the
/// sensitivity matrix, in the order A1, A2, A3.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct FreeParameters {
    free: [bool; 3],
}

impl FreeParameters {
    pub const NONE: FreeParameters = FreeParameters { free: [false; 3] };
    pub const ALL: FreeParameters = FreeParameters { free: [true; 3] };

    pub fn new(a1: bool, a2: bool, a3: bool) -> Self {
        Self { free: [a1, a2, a3] }
    }

    pub fn is_free(self, component: usize) -> bool {
        self.free.get(component).copied().unwrap_or(false)
    }

    pub fn count(self) -> usize {
        self.free.iter().filter(|f| **f).count()
    }

    /// The free components as indices 0 (A1), 1 (A2), 2 (A3), ascending.
    pub fn indices(self) -> impl Iterator<Item = usize> {
        (0..3).filter(move |i| self.free[*i])
    }
}

/// The non-gravitational term: its distance law, the A_i and which of them
/// are free.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NonGravModel {
    pub law: DistanceLaw,
    /// A1 (radial), A2 (transverse), A3 (normal) in au/day^2.
    pub a_au_per_day2: [f64; 3],
    /// Time offset DT in days (Yeomans & Chodas 1989, AJ 98, 1083): g is
    /// evaluated at the heliocentric distance the body had at t - DT. The
    /// force model takes that distance from [`PerturberPositions`]; the
    /// propagation supplies it (see `propagation`).
    pub dt_days: f64,
    pub free: FreeParameters,
}

impl NonGravModel {
    pub fn new(law: DistanceLaw, a_au_per_day2: [f64; 3], free: FreeParameters) -> Self {
        Self {
            law,
            a_au_per_day2,
            dt_days: 0.0,
            free,
        }
    }

    pub fn with_time_offset(mut self, dt_days: f64) -> Self {
        self.dt_days = dt_days;
        self
    }
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum ForceModelError {
    #[error("the Sun is the central body and cannot also be a perturber")]
    SunAsPerturber,
    #[error("{body} is listed twice among the perturbers")]
    DuplicatePerturber { body: &'static str },
    #[error("the water-ice scale distance r0 must be a positive number of au, got {r0_au}")]
    BadScaleDistance { r0_au: f64 },
    #[error("non-gravitational parameter A{index} = {value} au/day^2 is not finite")]
    BadParameter { index: usize, value: f64 },
    #[error("the time offset DT = {dt_days} days is not finite")]
    BadTimeOffset { dt_days: f64 },
    #[error("the central GM must be a positive number of au^3/day^2, got {gm}")]
    BadCentralGm { gm: f64 },
}

/// The origin of the state the equations of motion integrate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Origin {
    /// The Sun's centre (the fit's frame).
    #[default]
    Sun,
    /// The Solar System barycentre.
    Barycentre,
}

/// Which forces act on the small body.
#[derive(Debug, Clone, PartialEq)]
pub struct ForceModel {
    perturbers: Vec<Body>,
    relativity: bool,
    nongrav: Option<NonGravModel>,
    /// GM of the central term: the Sun's, unless a body is integrated that
    /// itself has mass (a planet's mass joins the central term).
    central_gm: f64,
    origin: Origin,
    /// The far-field form: the central mass is the Sun with the inner
    /// planets, at their centre of mass (only made by [`Self::far_field`]).
    inner_merged: bool,
}

impl ForceModel {
    /// Validated model: no Sun among the perturbers, no body twice, finite
    /// non-gravitational parameters.
    pub fn new(
        perturbers: &[Body],
        relativity: bool,
        nongrav: Option<NonGravModel>,
    ) -> Result<Self, ForceModelError> {
        for (i, body) in perturbers.iter().enumerate() {
            if *body == Body::Sun {
                return Err(ForceModelError::SunAsPerturber);
            }
            if perturbers[..i].contains(body) {
                return Err(ForceModelError::DuplicatePerturber { body: body.name() });
            }
        }
        if let Some(ng) = &nongrav {
            ng.law.validate()?;
            for (i, value) in ng.a_au_per_day2.iter().enumerate() {
                if !value.is_finite() {
                    return Err(ForceModelError::BadParameter {
                        index: i + 1,
                        value: *value,
                    });
                }
            }
            if !ng.dt_days.is_finite() {
                return Err(ForceModelError::BadTimeOffset {
                    dt_days: ng.dt_days,
                });
            }
        }
        Ok(Self {
            perturbers: perturbers.to_vec(),
            relativity,
            nongrav,
            central_gm: gm::SUN,
            origin: Origin::Sun,
            inner_merged: false,
        })
    }

    /// The Sun alone, Newtonian.
    pub fn two_body() -> Self {
        Self {
            perturbers: Vec::new(),
            relativity: false,
            nongrav: None,
            central_gm: gm::SUN,
            origin: Origin::Sun,
            inner_merged: false,
        }
    }

    /// Sun, every planet system and the Moon, and the Sun's relativistic term.
    pub fn gravity() -> Self {
        Self {
            perturbers: Body::PERTURBERS.to_vec(),
            relativity: true,
            nongrav: None,
            central_gm: gm::SUN,
            origin: Origin::Sun,
            inner_merged: false,
        }
    }

    /// This model with a non-gravitational term added (validated).
    pub fn with_nongrav(self, nongrav: NonGravModel) -> Result<Self, ForceModelError> {
        let (central_gm, origin, inner_merged) = (self.central_gm, self.origin, self.inner_merged);
        Ok(Self {
            central_gm,
            origin,
            inner_merged,
            ..Self::new(&self.perturbers, self.relativity, Some(nongrav))?
        })
    }

    /// This model with GM `gm_au3_per_day2` in the central term instead of
    /// the Sun's alone: for integrating a body with a mass of its own, whose
    /// heliocentric motion feels the Sun's GM plus its own. The relativistic
    /// term keeps the Sun's GM.
    pub fn with_central_gm(self, gm_au3_per_day2: f64) -> Result<Self, ForceModelError> {
        if !(gm_au3_per_day2.is_finite() && gm_au3_per_day2 > 0.0) {
            return Err(ForceModelError::BadCentralGm {
                gm: gm_au3_per_day2,
            });
        }
        Ok(Self {
            central_gm: gm_au3_per_day2,
            ..self
        })
    }

    /// GM of the central term, au^3/day^2.
    pub fn central_gm(&self) -> f64 {
        self.central_gm
    }

    /// This model without its non-gravitational term.
    pub fn without_nongrav(&self) -> Self {
        Self {
            perturbers: self.perturbers.clone(),
            relativity: self.relativity,
            nongrav: None,
            central_gm: self.central_gm,
            origin: self.origin,
            inner_merged: self.inner_merged,
        }
    }

    /// This model integrating a state with origin `origin`.
    pub fn with_origin(self, origin: Origin) -> Self {
        Self { origin, ..self }
    }

    /// This model's far-field form for a body beyond the planets, in
    /// barycentric coordinates: the Sun and the inner bodies among the
    /// perturbers (Mercury to Mars and the Moon) become one central mass
    /// at their common centre, `-sum_outer GM_p b_p / GM_inner` with b_p
    /// the outer planets' barycentric places. Their neglected quadrupole
    /// is about GM_earth (1 au)^2 / r^4 against GM_sun / r^2, 3e-9 of the
    /// acceleration at 30 au.
    pub fn far_field(&self) -> Self {
        let inner = |b: &Body| {
            matches!(
                b,
                Body::Mercury | Body::Venus | Body::Earth | Body::Moon | Body::Mars
            )
        };
        let merged: f64 = self
            .perturbers
            .iter()
            .filter(|b| inner(b))
            .map(|b| b.gm())
            .sum();
        Self {
            perturbers: self
                .perturbers
                .iter()
                .copied()
                .filter(|b| !inner(b))
                .collect(),
            relativity: self.relativity,
            nongrav: self.nongrav,
            central_gm: self.central_gm + merged,
            origin: Origin::Barycentre,
            inner_merged: true,
        }
    }

    pub fn origin(&self) -> Origin {
        self.origin
    }

    pub fn perturbers(&self) -> &[Body] {
        &self.perturbers
    }

    pub fn relativity(&self) -> bool {
        self.relativity
    }

    pub fn nongrav(&self) -> Option<&NonGravModel> {
        self.nongrav.as_ref()
    }

    /// Number of estimated A_i: the number of sensitivity columns.
    pub fn free_parameter_count(&self) -> usize {
        self.nongrav.map_or(0, |ng| ng.free.count())
    }

    /// The non-gravitational time offset DT in days (0 without the term).
    pub fn time_offset_days(&self) -> f64 {
        self.nongrav.map_or(0.0, |ng| ng.dt_days)
    }

    /// Everything the ephemeris contributes at `t`: one heliocentric
    /// position per perturber.
    pub fn perturber_positions(
        &self,
        ephemeris: &dyn Ephemeris,
        t: Epoch,
    ) -> Result<PerturberPositions, EphemerisError> {
        let mut out = PerturberPositions::empty();
        if self.inner_merged {
            let mut outer = Vec::with_capacity(self.perturbers.len());
            let (mut moment, mut moment_rate) = (Vector3::zeros(), Vector3::zeros());
            for body in &self.perturbers {
                let b = ephemeris.state(*body, t)?;
                moment += b.position_au * body.gm();
                moment_rate += b.velocity_au_per_day * body.gm();
                outer.push((body.gm(), b.position_au));
            }
            let centre =
                StateVector::new(-moment / self.central_gm, -moment_rate / self.central_gm);
            for (gm_p, b) in outer {
                out.push(gm_p, b - centre.position_au);
            }
            out.sun = Some(centre);
            return Ok(out);
        }
        if self.origin == Origin::Barycentre {
            out.sun = Some(ephemeris.state(Body::Sun, t)?);
        }
        for body in &self.perturbers {
            let position = ephemeris.heliocentric_state(*body, t)?.position_au;
            out.push(body.gm(), position);
        }
        Ok(out)
    }

    /// The acceleration alone (au/day^2).
    pub fn acceleration(
        &self,
        at: &PerturberPositions,
        r: &Vector3<f64>,
        v: &Vector3<f64>,
    ) -> Vector3<f64> {
        let (r, v) = &at.heliocentric(r, v);
        let mut a = central(self.central_gm, r);
        for (gm_p, r_p) in at.iter() {
            a += planet_direct(gm_p, r_p, r) - at.indirect(gm_p, r_p);
        }
        if self.relativity {
            a += relativity(r, v);
        }
        if let Some(ng) = &self.nongrav {
            let frame = OrbitFrame::new(r, v);
            let g = ng.law.g(at.nongrav_distance(r));
            let [a1, a2, a3] = ng.a_au_per_day2;
            a += (frame.radial * a1 + frame.transverse * a2 + frame.normal * a3) * g;
        }
        a
    }

    /// The acceleration and its partial derivatives with respect to
    /// position, velocity and each free A_i.
    pub fn acceleration_with_partials(
        &self,
        at: &PerturberPositions,
        r: &Vector3<f64>,
        v: &Vector3<f64>,
    ) -> (Vector3<f64>, AccelerationPartials) {
        // The origin's shift depends on time alone: the partials with
        // respect to the state are the same in either origin.
        let (r, v) = &at.heliocentric(r, v);
        let mut partials = AccelerationPartials::zero();
        let mut a = central(self.central_gm, r);
        partials.d_position += point_mass_gradient(self.central_gm, r);
        for (gm_p, r_p) in at.iter() {
            a += planet_direct(gm_p, r_p, r) - at.indirect(gm_p, r_p);
            // The indirect term does not depend on the small body.
            partials.d_position += planet_direct_gradient(gm_p, r_p, r);
        }
        if self.relativity {
            a += relativity(r, v);
            let (dr, dv) = relativity_gradients(r, v);
            partials.d_position += dr;
            partials.d_velocity += dv;
        }
        if let Some(ng) = &self.nongrav {
            let (a_ng, dr, dv, columns) = nongrav_with_partials(ng, at, r, v);
            a += a_ng;
            partials.d_position += dr;
            partials.d_velocity += dv;
            partials.d_parameters = columns;
            if let Some(lagged) = at.lagged_distance_au {
                // a_NG = g(r_lag) D, so d a / d r_lag = D g (d ln g / dr).
                let (_, log_slope) = ng.law.g_and_log_slope(lagged);
                partials.d_lagged_distance = a_ng * log_slope;
            }
        }
        (a, partials)
    }
}

/// Partial derivatives of the acceleration.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AccelerationPartials {
    /// d a / d r (1/day^2).
    pub d_position: Matrix3<f64>,
    /// d a / d v (1/day).
    pub d_velocity: Matrix3<f64>,
    /// d a / d A_i for the free A_i in the order A1, A2, A3 (dimensionless:
    /// g(r) times a unit vector). Only the first `parameter_count` are used.
    pub d_parameters: ParameterColumns,
    /// d a / d |r(t - DT)| (1/day^2) when the non-gravitational law uses a
    /// lagged distance (zero otherwise): the caller chains it with the
    /// dependence of that distance on whatever it estimates.
    pub d_lagged_distance: Vector3<f64>,
}

impl AccelerationPartials {
    fn zero() -> Self {
        Self {
            d_position: Matrix3::zeros(),
            d_velocity: Matrix3::zeros(),
            d_parameters: ParameterColumns::default(),
            d_lagged_distance: Vector3::zeros(),
        }
    }
}

/// Up to three columns d a / d A_i, one per free A_i.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ParameterColumns {
    columns: [Vector3<f64>; 3],
    count: usize,
}

impl ParameterColumns {
    pub fn as_slice(&self) -> &[Vector3<f64>] {
        &self.columns[..self.count]
    }
}

/// Heliocentric perturber positions (and GMs) at one epoch, plus the
/// heliocentric distance that the non-gravitational law should use when a
/// time offset DT is set.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PerturberPositions {
    gm: [f64; MAX_PERTURBERS],
    position_au: [Vector3<f64>; MAX_PERTURBERS],
    count: usize,
    lagged_distance_au: Option<f64>,
    /// The Sun's barycentric state when the integrated state is
    /// barycentric ([`Origin::Barycentre`]).
    sun: Option<StateVector>,
}

impl PerturberPositions {
    /// No perturbers (the two-body problem).
    pub fn empty() -> Self {
        Self {
            gm: [0.0; MAX_PERTURBERS],
            position_au: [Vector3::zeros(); MAX_PERTURBERS],
            count: 0,
            lagged_distance_au: None,
            sun: None,
        }
    }

    /// Adds one perturber; ignored past [`MAX_PERTURBERS`] (a validated
    /// [`ForceModel`] never has more).
    fn push(&mut self, gm: f64, position_au: Vector3<f64>) {
        if self.count < MAX_PERTURBERS {
            self.gm[self.count] = gm;
            self.position_au[self.count] = position_au;
            self.count += 1;
        }
    }

    /// The distance |r(t - DT)| for the non-gravitational law. Without it
    /// the law uses the current distance. The partials with respect to r
    /// then leave g out; its dependence on the lagged distance is reported
    /// separately ([`AccelerationPartials::d_lagged_distance`]).
    pub fn with_lagged_distance(mut self, r_au: f64) -> Self {
        self.lagged_distance_au = Some(r_au);
        self
    }

    fn iter(&self) -> impl Iterator<Item = (f64, &Vector3<f64>)> {
        self.gm[..self.count]
            .iter()
            .copied()
            .zip(self.position_au[..self.count].iter())
    }

    /// The small body's heliocentric position and velocity from the
    /// integrated state.
    fn heliocentric(&self, r: &Vector3<f64>, v: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
        match &self.sun {
            Some(sun) => (r - sun.position_au, v - sun.velocity_au_per_day),
            None => (*r, *v),
        }
    }

    /// The Sun's acceleration towards a perturber at heliocentric `r_p`:
    /// what a heliocentric state must subtract, and a barycentric one not.
    fn indirect(&self, gm_p: f64, r_p: &Vector3<f64>) -> Vector3<f64> {
        match self.sun {
            Some(_) => Vector3::zeros(),
            None => r_p * (gm_p / r_p.norm().powi(3)),
        }
    }

    fn nongrav_distance(&self, r: &Vector3<f64>) -> f64 {
        self.lagged_distance_au.unwrap_or_else(|| r.norm())
    }
}

fn central(mu: f64, r: &Vector3<f64>) -> Vector3<f64> {
    r * (-mu / r.norm().powi(3))
}

/// Gradient of -mu d/|d|^3 with respect to d:
/// -mu (I/|d|^3 - 3 d d^T/|d|^5).
fn point_mass_gradient(mu: f64, d: &Vector3<f64>) -> Matrix3<f64> {
    let d2 = d.norm_squared();
    let inv3 = 1.0 / (d2 * d2.sqrt());
    let inv5 = inv3 / d2;
    (Matrix3::identity() * inv3 - d * d.transpose() * (3.0 * inv5)) * (-mu)
}

fn planet_direct(gm_p: f64, r_p: &Vector3<f64>, r: &Vector3<f64>) -> Vector3<f64> {
    let d = r_p - r;
    d * (gm_p / d.norm().powi(3))
}

/// d/dr of mu_p (r_p - r)/|r_p - r|^3: with d = r_p - r, dd/dr = -I, so this
/// is the point-mass gradient at d.
fn planet_direct_gradient(gm_p: f64, r_p: &Vector3<f64>, r: &Vector3<f64>) -> Matrix3<f64> {
    point_mass_gradient(gm_p, &(r_p - r))
}

fn relativity(r: &Vector3<f64>, v: &Vector3<f64>) -> Vector3<f64> {
    let mu = gm::SUN;
    let rn = r.norm();
    let k = mu / (C_AU_PER_DAY * C_AU_PER_DAY * rn.powi(3));
    (r * (4.0 * mu / rn - v.norm_squared()) + v * (4.0 * r.dot(v))) * k
}

/// Partials of a_GR = K [ (4 mu r^-4 - v^2 r^-3) r + 4 (r.v) r^-3 v ],
/// K = mu / c^2, with d r^-n / dr = -n r^-(n+2) r^T.
fn relativity_gradients(r: &Vector3<f64>, v: &Vector3<f64>) -> (Matrix3<f64>, Matrix3<f64>) {
    let mu = gm::SUN;
    let k = mu / (C_AU_PER_DAY * C_AU_PER_DAY);
    let rn = r.norm();
    let r3 = 1.0 / rn.powi(3);
    let r4 = r3 / rn;
    let r5 = r4 / rn;
    let r6 = r5 / rn;
    let v2 = v.norm_squared();
    let rv = r.dot(v);
    let scalar = 4.0 * mu * r4 - v2 * r3;
    let d_scalar_dr = r.transpose() * (-16.0 * mu * r6 + 3.0 * v2 * r5);
    let d_rv_r3_dr = v.transpose() * r3 - r.transpose() * (3.0 * rv * r5);
    let d_position = (Matrix3::identity() * scalar + r * d_scalar_dr + v * d_rv_r3_dr * 4.0) * k;
    let d_velocity = (r * v.transpose() * (-2.0 * r3)
        + (v * r.transpose() + Matrix3::identity() * rv) * (4.0 * r3))
        * k;
    (d_position, d_velocity)
}

/// The radial, transverse and normal unit vectors of the osculating orbit.
struct OrbitFrame {
    radial: Vector3<f64>,
    transverse: Vector3<f64>,
    normal: Vector3<f64>,
}

impl OrbitFrame {
    fn new(r: &Vector3<f64>, v: &Vector3<f64>) -> Self {
        let radial = r / r.norm();
        let h = r.cross(v);
        let normal = h / h.norm();
        let transverse = normal.cross(&radial);
        Self {
            radial,
            transverse,
            normal,
        }
    }
}

/// [u]x, the matrix of u x (.).
fn cross_matrix(u: &Vector3<f64>) -> Matrix3<f64> {
    Matrix3::new(0.0, -u.z, u.y, u.z, 0.0, -u.x, -u.y, u.x, 0.0)
}

/// a_NG = g (A1 r_hat + A2 t_hat + A3 n_hat) and its partials.
///
/// With h = r x v: d r_hat/dr = (I - r_hat r_hat^T)/|r|; dh/dr = -[v]x,
/// dh/dv = [r]x; d n_hat/dh = (I - n_hat n_hat^T)/|h|; t_hat = n_hat x r_hat
/// so d t_hat = [n_hat]x d r_hat - [r_hat]x d n_hat; dg/dr = g (d ln g/dr)
/// r_hat^T (zero when g is evaluated at a lagged distance).
fn nongrav_with_partials(
    ng: &NonGravModel,
    at: &PerturberPositions,
    r: &Vector3<f64>,
    v: &Vector3<f64>,
) -> (Vector3<f64>, Matrix3<f64>, Matrix3<f64>, ParameterColumns) {
    let frame = OrbitFrame::new(r, v);
    let rn = r.norm();
    let h = r.cross(v);
    let hn = h.norm();
    let (g, log_slope) = ng.law.g_and_log_slope(at.nongrav_distance(r));
    let [a1, a2, a3] = ng.a_au_per_day2;

    let direction = frame.radial * a1 + frame.transverse * a2 + frame.normal * a3;

    let project_r = (Matrix3::identity() - frame.radial * frame.radial.transpose()) / rn;
    let project_h = (Matrix3::identity() - frame.normal * frame.normal.transpose()) / hn;
    let dn_dr = project_h * (-cross_matrix(v));
    let dn_dv = project_h * cross_matrix(r);
    let n_cross = cross_matrix(&frame.normal);
    let r_cross = cross_matrix(&frame.radial);
    let dt_dr = n_cross * project_r - r_cross * dn_dr;
    let dt_dv = -r_cross * dn_dv;

    let mut d_position = (project_r * a1 + dt_dr * a2 + dn_dr * a3) * g;
    if at.lagged_distance_au.is_none() {
        d_position += direction * frame.radial.transpose() * (g * log_slope);
    }
    let d_velocity = (dt_dv * a2 + dn_dv * a3) * g;

    let units = [frame.radial, frame.transverse, frame.normal];
    let mut columns = ParameterColumns::default();
    for i in ng.free.indices() {
        columns.columns[columns.count] = units[i] * g;
        columns.count += 1;
    }
    (direction * g, d_position, d_velocity, columns)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// g(1 au) = 1 holds to the 10 digits the paper gives alpha with.
    const G_AT_1AU_TOL: f64 = 1e-8;
    /// g(r0) = alpha 2^-k to the 5 significant digits quoted.
    const G_AT_R0_TOL: f64 = 5e-8;
    /// Central differences with steps of 1e-6 relative: truncation ~1e-12,
    /// rounding ~1e-10 relative to the largest entry.
    const GRADIENT_REL_TOL: f64 = 1e-6;

    #[test]
    fn water_ice_law_at_one_au_and_at_r0() {
        // g(1 au) = 1: Marsden, Sekanina & Yeomans 1973, AJ 78, 211 (the
        // normalisation of the law).
        let g1 = DistanceLaw::WaterIce.g(1.0);
        assert!((g1 - 1.0).abs() < G_AT_1AU_TOL, "g(1 au) = {g1}");
        // g(r0) = alpha 2^-k = 0.0045429, from the same constants
        // (../shared/SCIENCE.md).
        let g0 = DistanceLaw::WaterIce.g(water_ice::R0_AU);
        assert!((g0 - 0.004_542_9).abs() < G_AT_R0_TOL, "g(r0) = {g0}");
    }

    #[test]
    fn scaled_water_ice_law_is_normalised_at_one_au() {
        let law = DistanceLaw::WaterIceScaled { r0_au: 10.0 };
        assert!((law.g(1.0) - 1.0).abs() < 1e-14);
        // At the published r0 the recomputed alpha reproduces the paper's.
        let same = DistanceLaw::WaterIceScaled {
            r0_au: water_ice::R0_AU,
        };
        assert!((same.g(2.0) - DistanceLaw::WaterIce.g(2.0)).abs() < 1e-8);
    }

    #[test]
    fn inverse_square_law() {
        assert_eq!(DistanceLaw::InverseSquare.g(2.0), 0.25);
    }

    #[test]
    fn log_slopes_match_differences() {
        for law in [
            DistanceLaw::WaterIce,
            DistanceLaw::WaterIceScaled { r0_au: 5.0 },
            DistanceLaw::InverseSquare,
        ] {
            for r in [0.3, 1.0, 2.808, 7.0] {
                let h = 1e-6 * r;
                let numeric = (law.g(r + h).ln() - law.g(r - h).ln()) / (2.0 * h);
                let (_, slope) = law.g_and_log_slope(r);
                assert!((numeric - slope).abs() < 1e-7 * slope.abs().max(1.0));
            }
        }
    }

    #[test]
    fn model_validation() {
        assert_eq!(
            ForceModel::new(&[Body::Sun], false, None),
            Err(ForceModelError::SunAsPerturber)
        );
        assert!(matches!(
            ForceModel::new(&[Body::Earth, Body::Earth], false, None),
            Err(ForceModelError::DuplicatePerturber { .. })
        ));
        let bad = NonGravModel::new(
            DistanceLaw::WaterIceScaled { r0_au: -1.0 },
            [0.0; 3],
            FreeParameters::NONE,
        );
        assert!(matches!(
            ForceModel::two_body().with_nongrav(bad),
            Err(ForceModelError::BadScaleDistance { .. })
        ));
    }

    fn sample_positions() -> PerturberPositions {
        let mut at = PerturberPositions::empty();
        // Deliberately heavy and close perturbers so their terms show.
        at.push(gm::JUPITER_SYSTEM * 100.0, Vector3::new(1.5, -0.8, 0.3));
        at.push(gm::EARTH * 1e4, Vector3::new(-0.7, 0.7, 0.01));
        at
    }

    fn sample_model(dt_days: f64) -> ForceModel {
        let ng = NonGravModel::new(
            DistanceLaw::WaterIce,
            [3e-6, -2e-6, 1e-6],
            FreeParameters::new(true, false, true),
        )
        .with_time_offset(dt_days);
        ForceModel::new(&[Body::Jupiter, Body::Earth], true, Some(ng)).unwrap()
    }

    fn assert_close(analytic: &Matrix3<f64>, numeric: &Matrix3<f64>, what: &str) {
        let scale = numeric.abs().max().max(1e-300);
        let err = (analytic - numeric).abs().max() / scale;
        assert!(
            err < GRADIENT_REL_TOL,
            "{what}: relative error {err:e}\n{analytic}\n{numeric}"
        );
    }

    #[test]
    fn partials_match_central_differences() {
        let model = sample_model(0.0);
        let at = sample_positions();
        let r = Vector3::new(0.9, 0.4, -0.2);
        let v = Vector3::new(-0.004, 0.016, 0.003);
        let (a, partials) = model.acceleration_with_partials(&at, &r, &v);
        assert_eq!(a, model.acceleration(&at, &r, &v));

        let mut num_r = Matrix3::zeros();
        let mut num_v = Matrix3::zeros();
        for j in 0..3 {
            let hr = 1e-6 * r.norm();
            let mut e = Vector3::zeros();
            e[j] = hr;
            let col = (model.acceleration(&at, &(r + e), &v)
                - model.acceleration(&at, &(r - e), &v))
                / (2.0 * hr);
            num_r.set_column(j, &col);
            let hv = 1e-6 * v.norm();
            let mut e = Vector3::zeros();
            e[j] = hv;
            let col = (model.acceleration(&at, &r, &(v + e))
                - model.acceleration(&at, &r, &(v - e)))
                / (2.0 * hv);
            num_v.set_column(j, &col);
        }
        assert_close(&partials.d_position, &num_r, "d a / d r");
        assert_close(&partials.d_velocity, &num_v, "d a / d v");

        // A1 and A3 free: the acceleration is linear in them.
        let cols = partials.d_parameters.as_slice();
        assert_eq!(cols.len(), 2);
        for (col, index) in cols.iter().zip([0usize, 2]) {
            let mut ng = *model.nongrav().unwrap();
            let h = 1e-7;
            ng.a_au_per_day2[index] += h;
            let plus = model
                .clone()
                .with_nongrav(ng)
                .unwrap()
                .acceleration(&at, &r, &v);
            ng.a_au_per_day2[index] -= 2.0 * h;
            let minus = model
                .clone()
                .with_nongrav(ng)
                .unwrap()
                .acceleration(&at, &r, &v);
            let numeric = (plus - minus) / (2.0 * h);
            assert!((col - numeric).norm() < 1e-8 * numeric.norm());
        }
    }

    #[test]
    fn nongrav_and_relativity_partials_alone() {
        // Each small term checked on its own, so that the large central
        // gradient cannot hide an error in them.
        let r = Vector3::new(-1.3, 0.2, 0.5);
        let v = Vector3::new(0.002, -0.012, 0.006);
        let at = PerturberPositions::empty();
        let model = sample_model(0.0);
        let ng = model.nongrav().unwrap();
        let (_, dr, dv, _) = nongrav_with_partials(ng, &at, &r, &v);
        let (gr_dr, gr_dv) = relativity_gradients(&r, &v);
        let mut num = [Matrix3::zeros(); 4];
        for j in 0..3 {
            let mut e = Vector3::zeros();
            e[j] = 1e-6;
            let ngr = |r: &Vector3<f64>, v: &Vector3<f64>| nongrav_with_partials(ng, &at, r, v).0;
            num[0].set_column(j, &((ngr(&(r + e), &v) - ngr(&(r - e), &v)) / 2e-6));
            let ev = e * 1e-2;
            num[1].set_column(j, &((ngr(&r, &(v + ev)) - ngr(&r, &(v - ev))) / 2e-8));
            num[2].set_column(
                j,
                &((relativity(&(r + e), &v) - relativity(&(r - e), &v)) / 2e-6),
            );
            num[3].set_column(
                j,
                &((relativity(&r, &(v + ev)) - relativity(&r, &(v - ev))) / 2e-8),
            );
        }
        assert_close(&dr, &num[0], "NG d/dr");
        assert_close(&dv, &num[1], "NG d/dv");
        assert_close(&gr_dr, &num[2], "GR d/dr");
        assert_close(&gr_dv, &num[3], "GR d/dv");
    }

    #[test]
    fn lagged_distance_drives_the_law() {
        let model = sample_model(20.0);
        let r = Vector3::new(2.0, 0.0, 0.0);
        let v = Vector3::new(0.0, 0.01, 0.0);
        let at = PerturberPositions::empty().with_lagged_distance(1.0);
        let without_ng = model.without_nongrav();
        let a_ng = model.acceleration(&at, &r, &v) - without_ng.acceleration(&at, &r, &v);
        // g(1 au) = 1, so the radial component is A1 itself.
        assert!((a_ng.x - 3e-6).abs() < 1e-13);
        assert!((a_ng.y + 2e-6).abs() < 1e-13);
    }
}
