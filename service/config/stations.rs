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
            by_code: stations.into_iter().map(|s| (s.code.clone(), s)).collect(),
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

use std::path::Path;

use super::reader::{self, Source, TableReader};
use super::ConfigProblem;

/// Reads a station list file; every problem is reported with its line.
pub fn load_stations(path: &Path) -> Result<StationList, Vec<ConfigProblem>> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        vec![ConfigProblem {
            file: path.to_path_buf(),
            line: 0,
            key: String::new(),
            reason: format!("cannot read the station list: {e}"),
        }]
    })?;
    parse_stations(path, &text)
}

/// The station list shipped in `config/stations.toml` (invented sites),
/// compiled in so the batch commands find it from any working directory.
pub const SHIPPED_STATIONS_TOML: &str = include_str!("../../config/stations.toml");

/// The name the shipped list goes by in messages: it is no file on disk.
pub const SHIPPED_STATIONS_NAME: &str = "config/stations.toml (built in)";

/// The shipped station list, parsed (see [`SHIPPED_STATIONS_TOML`]).
pub fn shipped_stations() -> Result<StationList, Vec<ConfigProblem>> {
    parse_stations(Path::new(SHIPPED_STATIONS_NAME), SHIPPED_STATIONS_TOML)
}

/// Parses station-list text (`[[station]]` entries).
pub fn parse_stations(path: &Path, text: &str) -> Result<StationList, Vec<ConfigProblem>> {
    let src = Source::new(path, text);
    let mut stations = Vec::new();
    if let Some(doc) = reader::parse(&src, text) {
        let top = TableReader::new(&src, doc.as_table(), "", 1);
        let mut seen_codes = std::collections::BTreeMap::new();
        for t in top.tables("station") {
            let (code, station) = read_station(&t);
            if let Some(code) = code {
                if let Some(first) = seen_codes.insert(code.clone(), t.line()) {
                    t.problem(
                        "code",
                        format!("station '{code}' is already listed at line {first}"),
                    );
                } else if let Some(s) = station {
                    stations.push(s);
                }
            }
            t.finish();
        }
        top.finish();
    }
    if src.has_problems() {
        Err(src.into_problems())
    } else {
        Ok(StationList::new(stations))
    }
}

/// The station's code (when it has one, even if other keys are bad, so
/// duplicates are still found) and the station when every key is good.
fn read_station(t: &TableReader<'_, '_>) -> (Option<String>, Option<Station>) {
    let code = t.string("code", true);
    if let Some(c) = &code {
        if c.is_empty() || c.len() > 8 || !c.chars().all(|ch| ch.is_ascii_alphanumeric()) {
            t.problem(
                "code",
                format!("'{c}' is not a station code (1-8 letters or digits)"),
            );
        }
    }
    let name = t.string("name", false).unwrap_or_default();
    let longitude_deg = t.f64_where("longitude_deg", true, |x| {
        in_range(x, -180.0, 360.0, "east longitude in degrees")
    });
    let latitude_deg = t.f64_where("latitude_deg", true, |x| {
        in_range(x, -90.0, 90.0, "latitude in degrees")
    });
    let height_m = t.f64_where("height_m", true, |x| {
        in_range(x, -500.0, 10_000.0, "height above the ellipsoid in metres")
    });
    let sigma_arcsec = t.f64_where("sigma_arcsec", false, positive);
    let station = (|| {
        Some(Station {
            code: code.clone()?,
            name,
            longitude_deg: longitude_deg?,
            latitude_deg: latitude_deg?,
            height_m: height_m?,
            sigma_arcsec,
        })
    })();
    (code, station)
}

pub(super) fn in_range(x: f64, lo: f64, hi: f64, what: &str) -> Result<(), String> {
    if x.is_finite() && x >= lo && x <= hi {
        Ok(())
    } else {
        Err(format!("{x} is outside [{lo}, {hi}] ({what})"))
    }
}

pub(super) fn positive(x: f64) -> Result<(), String> {
    if x.is_finite() && x > 0.0 {
        Ok(())
    } else {
        Err(format!("{x} must be a positive number"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_a_valid_list() {
        let text = "[[station]]\ncode = \"ZQA\"\nname = \"Hill\"\nlongitude_deg = 17.32\nlatitude_deg = -23.11\nheight_m = 1820.0\nsigma_arcsec = 0.5\n";
        let list = parse_stations(Path::new("s.toml"), text).unwrap();
        let s = list.get("ZQA").unwrap();
        assert_eq!(s.latitude_deg, -23.11);
        assert_eq!(s.sigma_arcsec, Some(0.5));
    }

    #[test]
    fn the_shipped_list_is_built_in() {
        // config/stations.toml lists four invented sites, ZQA to ZQD.
        let list = shipped_stations().expect("the shipped list parses");
        let codes: Vec<&str> = list.iter().map(|s| s.code.as_str()).collect();
        assert_eq!(codes, ["ZQA", "ZQB", "ZQC", "ZQD"]);
        assert_eq!(list.get("ZQB").map(|s| s.sigma_arcsec), Some(Some(0.4)));
    }

    #[test]
    fn reports_every_problem_with_its_line() {
        let text = "[[station]]\ncode = \"ZQA\"\nlongitude_deg = 17.0\nlatitude_deg = 95.0\nheight_m = 10.0\ncolour = 3\n\n[[station]]\ncode = \"ZQA\"\nlongitude_deg = 1.0\nlatitude_deg = 1.0\nheight_m = 1.0\n";
        let problems = parse_stations(Path::new("s.toml"), text).unwrap_err();
        let summary: Vec<(usize, &str)> =
            problems.iter().map(|p| (p.line, p.key.as_str())).collect();
        assert!(
            summary.contains(&(4, "station[0].latitude_deg")),
            "{summary:?}"
        );
        assert!(summary.contains(&(6, "station[0].colour")), "{summary:?}");
        assert!(summary.contains(&(9, "station[1].code")), "{summary:?}");
        assert_eq!(problems.len(), 3, "{problems:?}");
    }
}
