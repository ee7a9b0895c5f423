//! One typed configuration, loaded and validated at start.

mod stations;

pub use stations::{Station, StationList};
