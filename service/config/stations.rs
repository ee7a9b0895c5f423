//! The station list: where each observing site is on the WGS84 ellipsoid.

use std::collections::BTreeMap;

use serde::Serialize;

/// One observing site, as listed in `stations.toml`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Station {
    /// The code as it appears in the observations' `stn` field.
    pub code: String,
    pub name: String,
    /// East-positive geodetic longitude, degrees.
    pub longitude_deg: f64,
    /// WGS84 geodetic latitude, degrees.
    pub latitude_deg: f64,
    /// Height above the WGS84 ellipsoid, metres.
    pub height_m: f64,
    /// Default astrometric uncertainty for observations that carry none.
    pub sigma_arcsec: Option<f64>,
}

/// Stations keyed by code.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct StationList {
    by_code: BTreeMap<String, Station>,
}

impl StationList {
    /// Builds the list; a later entry with the same code replaces an earlier
    /// one (the loader reports such duplicates as errors before this point).
    pub fn new(stations: impl IntoIterator<Item = Station>) -> Self {
        Self {
            by_code: stations
                .into_iter()
                .map(|s| (s.code.clone(), s))
                .collect(),
        }
    }

    pub fn get(&self, code: &str) -> Option<&Station> {
        self.by_code.get(code)
    }

    pub fn contains(&self, code: &str) -> bool {
        self.by_code.contains_key(code)
    }

    pub fn iter(&self) -> impl Iterator<Item = &Station> {
        self.by_code.values()
    }

    pub fn len(&self) -> usize {
        self.by_code.len()
    }

    pub fn is_empty(&self) -> bool {
        self.by_code.is_empty()
    }
}
