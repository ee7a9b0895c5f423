//! Pure computation for orbits: time scales, frames, ephemerides, observers,
//! forces, the integrator and orbital elements.
//!
//! Nothing here does I/O beyond reading an ephemeris file, and nothing is
//! async: the batch commands and the daemon call the same functions.
//!
//! Conventions throughout: au, days (TDB) and au/day; angles in radians;
//! ICRF (equatorial, J2000-aligned) axes. Ephemerides answer barycentric
//! states; the force model and the elements work heliocentric.

pub mod chebyshev;
pub mod constants;
pub mod elements;
pub mod embedded;
pub mod ephemeris;
pub mod forces;
pub mod frames;
pub mod integrator;
pub mod kepler;
pub mod observer;
pub mod propagation;
pub mod spk;
pub mod time;
