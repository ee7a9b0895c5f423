//! Where the Sun, planets and Moon are: one trait, several sources.
//!
//! Every source answers barycentric ICRF states in au and au/day at a TDB
//! epoch. Mars..Neptune are the planet-system barycentres, which is what
//! the perturbation model wants together with the system GM values.

use nalgebra::Vector3;
use thiserror::Error;

use super::constants::gm;
use super::time::Epoch;

/// Position and velocity, ICRF axes, au and au/day.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StateVector {
    pub position_au: Vector3<f64>,
    pub velocity_au_per_day: Vector3<f64>,
}

impl StateVector {
    pub fn new(position_au: Vector3<f64>, velocity_au_per_day: Vector3<f64>) -> Self {
        Self {
            position_au,
            velocity_au_per_day,
        }
    }

    /// `self - other`, component by component: the state of `self` relative
    /// to `other`.
    pub fn relative_to(&self, other: &StateVector) -> StateVector {
        StateVector {
            position_au: self.position_au - other.position_au,
            velocity_au_per_day: self.velocity_au_per_day - other.velocity_au_per_day,
        }
    }
}

/// The bodies an ephemeris must provide.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Body {
    Sun,
    Mercury,
    Venus,
    Earth,
    Moon,
    /// Mars system barycentre.
    Mars,
    /// Jupiter system barycentre.
    Jupiter,
    /// Saturn system barycentre.
    Saturn,
    /// Uranus system barycentre.
    Uranus,
    /// Neptune system barycentre.
    Neptune,
}

impl Body {
    /// Every body, the Sun first.
    pub const ALL: [Body; 10] = [
        Body::Sun,
        Body::Mercury,
        Body::Venus,
        Body::Earth,
        Body::Moon,
        Body::Mars,
        Body::Jupiter,
        Body::Saturn,
        Body::Uranus,
        Body::Neptune,
    ];

    /// This body's position in [`Body::ALL`]: the slot of per-body tables.
    pub fn index(self) -> usize {
        match self {
            Body::Sun => 0,
            Body::Mercury => 1,
            Body::Venus => 2,
            Body::Earth => 3,
            Body::Moon => 4,
            Body::Mars => 5,
            Body::Jupiter => 6,
            Body::Saturn => 7,
            Body::Uranus => 8,
            Body::Neptune => 9,
        }
    }

    /// The bodies whose attraction perturbs a small body, in the order the
    /// force model sums them.
    pub const PERTURBERS: [Body; 9] = [
        Body::Mercury,
        Body::Venus,
        Body::Earth,
        Body::Moon,
        Body::Mars,
        Body::Jupiter,
        Body::Saturn,
        Body::Uranus,
        Body::Neptune,
    ];

    /// GM in au^3/day^2 (DE440, see [`gm`]).
    pub fn gm(self) -> f64 {
        match self {
            Body::Sun => gm::SUN,
            Body::Mercury => gm::MERCURY,
            Body::Venus => gm::VENUS,
            Body::Earth => gm::EARTH,
            Body::Moon => gm::MOON,
            Body::Mars => gm::MARS_SYSTEM,
            Body::Jupiter => gm::JUPITER_SYSTEM,
            Body::Saturn => gm::SATURN_SYSTEM,
            Body::Uranus => gm::URANUS_SYSTEM,
            Body::Neptune => gm::NEPTUNE_SYSTEM,
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Body::Sun => "Sun",
            Body::Mercury => "Mercury",
            Body::Venus => "Venus",
            Body::Earth => "Earth",
            Body::Moon => "Moon",
            Body::Mars => "Mars barycentre",
            Body::Jupiter => "Jupiter barycentre",
            Body::Saturn => "Saturn barycentre",
            Body::Uranus => "Uranus barycentre",
            Body::Neptune => "Neptune barycentre",
        }
    }
}

#[derive(Debug, Error, Clone, PartialEq)]
pub enum EphemerisError {
    #[error("{body} is not covered at TDB {epoch}: the ephemeris spans {start} to {end}")]
    OutOfRange {
        body: &'static str,
        epoch: String,
        start: String,
        end: String,
    },
    #[error("{body} is not provided by this ephemeris")]
    MissingBody { body: &'static str },
}

/// A source of barycentric states of the Sun, planets and Moon.
pub trait Ephemeris: Send + Sync {
    /// Barycentric ICRF state of `body` at the TDB epoch `t`.
    fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError>;

    /// State of `body` relative to the Sun.
    fn heliocentric_state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
        let sun = self.state(Body::Sun, t)?;
        Ok(self.state(body, t)?.relative_to(&sun))
    }
}
