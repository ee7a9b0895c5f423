//! The embedded default ephemeris: analytic theories sampled into Chebyshev
//! segments, so no file is needed.
//!
//! Sources, all barycentric ICRF in the end:
//! - Earth, and the Sun as Earth barycentric minus Earth heliocentric:
//!   ERFA's `epv00` (a short form of VSOP2000 fitted to DE405);
//! - Mercury..Neptune heliocentric: VSOP87A (see [`planets`]); for
//!   Mars..Neptune the planet stands in for its system barycentre, which
//!   is at most a few hundred km away (the satellites' share);
//! - the Moon geocentric: Meeus' truncated ELP-2000/82 (see [`moon`]).
//!
//! Full series cost tens of microseconds per planet, far too much for a
//! force model called millions of times, so [`EmbeddedEphemeris`] keeps
//! Chebyshev series per segment, each fitted from the theories the first
//! time a state inside it is asked for; a state then costs one short series
//! evaluation and velocities come from the derivative of the same series.
//! Filling on demand lets one table span the theories' two centuries: an
//! arc's fit pays for the arc, and the long integrations to the original
//! and future orbits, which cross decades in long steps, for a few segments
//! per step.

pub mod moon;
pub mod planets;

use nalgebra::{Matrix3, Vector3};
use thiserror::Error;

use self::planets::Planet;
use super::chebyshev::SegmentedSeries3;
use super::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use super::time::Epoch;

/// Days from J2000 of 1900 January 1.0 and 2100 January 1.0 (TDB): the
/// span over which `epv00` is documented (1900-2100 against DE405).
const THEORY_START_DAYS: f64 = -36_524.5;
const THEORY_END_DAYS: f64 = 36_524.5;

/// Segment length (days) and series degree per body. The shortest periods
/// in the barycentric motion set them: the Moon's 27-day orbit (also seen
/// in the Earth's barycentric motion as a 4700 km wobble), Mercury's
/// 88 days, the Sun's few-month terms from the inner planets. Each choice
/// keeps the Chebyshev error at the metre level or below (measured in the
/// tests and docs/science/embedded-ephemeris.md), a thousand times below
/// the theories' own errors, with as few samples of the costly series as
/// that allows.
fn segment_plan(body: Body) -> (f64, usize) {
    match body {
        Body::Moon | Body::Earth => (8.0, 14),
        Body::Mercury => (16.0, 14),
        // The Sun's own motion (terms from Venus and Mercury) is in every
        // barycentric planet, so even Neptune's table needs 32-day segments.
        Body::Sun | Body::Venus | Body::Mars => (32.0, 12),
        Body::Jupiter | Body::Saturn | Body::Uranus | Body::Neptune => (32.0, 12),
    }
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum EmbeddedEphemerisError {
    #[error("the embedded ephemeris span must run forward and be finite: {start} to {end}")]
    InvalidSpan { start: String, end: String },
    #[error(
        "the embedded ephemeris covers 1900-2100 only (the validated span of its \
         theories); asked for {start} to {end}: use a JPL ephemeris file instead"
    )]
    OutsideTheoryRange { start: String, end: String },
}

/// The analytic theories themselves, evaluated term by term. Slow (tens
/// of microseconds per planet); used to fill the tables and to check them.
#[derive(Debug, Clone)]
pub struct AnalyticTheories {
    vsop87_to_icrf: Matrix3<f64>,
}

impl Default for AnalyticTheories {
    fn default() -> Self {
        Self::new()
    }
}

impl AnalyticTheories {
    pub fn new() -> Self {
        Self {
            vsop87_to_icrf: planets::vsop87_to_icrf(),
        }
    }

    /// Barycentric and heliocentric Earth, ICRF, au and au/day.
    fn earth(t: Epoch) -> (StateVector, StateVector) {
        let (jd1, jd2) = t.tdb_jd_two_part();
        // The out-of-range warning is handled by the span check in
        // `EmbeddedEphemeris::new`.
        let (_outside_1900_2100, heliocentric, barycentric) =
            erfa::earth::position_velocity_00(jd1, jd2);
        let to_state =
            |pv: [[f64; 3]; 2]| StateVector::new(Vector3::from(pv[0]), Vector3::from(pv[1]));
        (to_state(barycentric), to_state(heliocentric))
    }

    /// Barycentric position of the Sun, ICRF, au.
    pub fn sun_position_au(&self, t: Epoch) -> Vector3<f64> {
        let (barycentric, heliocentric) = Self::earth(t);
        barycentric.position_au - heliocentric.position_au
    }

    /// Barycentric ICRF position of `body` in au, from the series.
    pub fn position_au(&self, body: Body, t: Epoch) -> Vector3<f64> {
        let planet = |p: Planet| {
            planets::heliocentric_icrf_au(p, t, &self.vsop87_to_icrf) + self.sun_position_au(t)
        };
        match body {
            Body::Sun => self.sun_position_au(t),
            Body::Earth => Self::earth(t).0.position_au,
            Body::Moon => Self::earth(t).0.position_au + moon::geocentric_position_au(t),
            Body::Mercury => planet(Planet::Mercury),
            Body::Venus => planet(Planet::Venus),
            Body::Mars => planet(Planet::Mars),
            Body::Jupiter => planet(Planet::Jupiter),
            Body::Saturn => planet(Planet::Saturn),
            Body::Uranus => planet(Planet::Uranus),
            Body::Neptune => planet(Planet::Neptune),
        }
    }

    /// Barycentric ICRF state of the Earth straight from `epv00`, which
    /// (unlike the other theories here) has its own analytic velocity.
    pub fn earth_state(&self, t: Epoch) -> StateVector {
        Self::earth(t).0
    }
}

/// The default ephemeris: every body tabulated as Chebyshev segments over
/// a fixed span, each segment fitted when first used.
#[derive(Debug, Clone)]
pub struct EmbeddedEphemeris {
    start: Epoch,
    end: Epoch,
    theories: AnalyticTheories,
    tables: Vec<SegmentedSeries3>,
}

impl EmbeddedEphemeris {
    /// A table over `[start, end]` (TDB), inside 1900-2100. Nothing is
    /// sampled yet: each segment costs its share of the theories' time
    /// (about a tenth of a second per year for all bodies) when first used.
    pub fn new(start: Epoch, end: Epoch) -> Result<Self, EmbeddedEphemerisError> {
        let (a, b) = (start.tdb_days_since_j2000(), end.tdb_days_since_j2000());
        if !(a.is_finite() && b.is_finite() && a < b) {
            return Err(EmbeddedEphemerisError::InvalidSpan {
                start: start.to_string(),
                end: end.to_string(),
            });
        }
        if a < THEORY_START_DAYS || b > THEORY_END_DAYS {
            return Err(EmbeddedEphemerisError::OutsideTheoryRange {
                start: start.to_string(),
                end: end.to_string(),
            });
        }
        let tables = Body::ALL
            .iter()
            .map(|&body| {
                let (segment_days, degree) = segment_plan(body);
                let count = ((b - a) / segment_days).ceil().max(1.0) as usize;
                SegmentedSeries3::new(a, segment_days, count, degree)
            })
            .collect();
        Ok(Self {
            start,
            end,
            theories: AnalyticTheories::new(),
            tables,
        })
    }

    /// The table over the theories' whole span, 1900-2100.
    pub fn full_span() -> Self {
        let (start, end) = (
            Epoch::from_tdb_days_since_j2000(THEORY_START_DAYS),
            Epoch::from_tdb_days_since_j2000(THEORY_END_DAYS),
        );
        match Self::new(start, end) {
            Ok(table) => table,
            // The constants are a valid span by construction.
            Err(e) => unreachable!("{e}"),
        }
    }

    /// Segments fitted so far, over all bodies: what the table has cost.
    pub fn fitted_segments(&self) -> usize {
        self.tables
            .iter()
            .map(SegmentedSeries3::fitted_segments)
            .sum()
    }

    pub fn start(&self) -> Epoch {
        self.start
    }

    pub fn end(&self) -> Epoch {
        self.end
    }
}

impl Ephemeris for EmbeddedEphemeris {
    fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
        let out_of_range = || EphemerisError::OutOfRange {
            body: body.name(),
            epoch: t.to_string(),
            start: self.start.to_string(),
            end: self.end.to_string(),
        };
        if !(t >= self.start && t <= self.end) {
            return Err(out_of_range());
        }
        let sample = |day: f64| {
            let p = self
                .theories
                .position_au(body, Epoch::from_tdb_days_since_j2000(day));
            [p.x, p.y, p.z]
        };
        let (p, v) = self.tables[body.index()]
            .evaluate(t.tdb_days_since_j2000(), sample)
            .ok_or_else(out_of_range)?;
        Ok(StateVector::new(Vector3::from(p), Vector3::from(v)))
    }
}

#[cfg(test)]
mod tests;
