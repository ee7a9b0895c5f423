//! Star-catalogue bias corrections from a table the user supplies.
//!
//! Astrometry reduced against a star catalogue inherits that catalogue's
//! zonal errors: positions offset by tenths of an arcsecond over regions of
//! sky, drifting with the catalogue's proper-motion errors (Farnocchia et
//! al. 2015, Icarus 245, 94, describe the effect and its correction). The
//! project ships no table; an analyst who has one names it in the
//! configuration (`catalog_bias_file`) and every observation whose `astCat`
//! the table covers is corrected before it is fitted.
//!
//! The table is a CSV file of our own layout, one row per catalogue and sky
//! box, `#` starting a comment line:
//!
//! ```text
//! catalog,ra_min_deg,ra_max_deg,dec_min_deg,dec_max_deg,d_ra_cosdec_arcsec,d_dec_arcsec,pm_ra_cosdec_mas_per_yr,pm_dec_mas_per_yr,epoch_year
//! UCAC4,0,90,-30,0,0.120,-0.045,1.5,-0.8,2000.0
//! ```
//!
//! The bias at a time is `d + pm (year - epoch_year)`: catalogue minus
//! true position, so it is subtracted from the observation. A box with
//! `ra_min_deg > ra_max_deg` runs through RA 0; the first box that holds
//! the observation's place applies. Catalogue names match without regard
//! to case.

use std::collections::BTreeMap;
use std::path::Path;

use serde::Serialize;
use thiserror::Error;

use crate::fit::observe::AstrometricObservation;

const COLUMNS: [&str; 10] = [
    "catalog",
    "ra_min_deg",
    "ra_max_deg",
    "dec_min_deg",
    "dec_max_deg",
    "d_ra_cosdec_arcsec",
    "d_dec_arcsec",
    "pm_ra_cosdec_mas_per_yr",
    "pm_dec_mas_per_yr",
    "epoch_year",
];

/// Days in a Julian year, and J2000.0 as a Julian date (TDB): the year of
/// an observation is the Julian epoch 2000 + (JD - 2451545) / 365.25 (IAU
/// 1976 definition of the Julian epoch).
const JULIAN_YEAR_DAYS: f64 = 365.25;
const J2000_JD: f64 = 2_451_545.0;

#[derive(Debug, Error, Clone, PartialEq)]
pub enum BiasTableError {
    #[error("catalogue bias table {file}: {reason}")]
    Unreadable { file: String, reason: String },
    #[error("catalogue bias table {file}:{line}: field {field}: {reason}")]
    Field {
        file: String,
        line: usize,
        field: &'static str,
        reason: String,
    },
    #[error("catalogue bias table {file}:{line}: expected {expected} comma-separated fields, found {found}")]
    Width {
        file: String,
        line: usize,
        expected: usize,
        found: usize,
    },
}

/// One row: a catalogue's bias over a box of sky.
#[derive(Debug, Clone, PartialEq)]
struct BiasBox {
    ra_min_deg: f64,
    ra_max_deg: f64,
    dec_min_deg: f64,
    dec_max_deg: f64,
    d_ra_cosdec_arcsec: f64,
    d_dec_arcsec: f64,
    pm_ra_cosdec_mas_per_yr: f64,
    pm_dec_mas_per_yr: f64,
    epoch_year: f64,
}

impl BiasBox {
    fn holds(&self, ra_deg: f64, dec_deg: f64) -> bool {
        let in_ra = if self.ra_min_deg <= self.ra_max_deg {
            (self.ra_min_deg..=self.ra_max_deg).contains(&ra_deg)
        } else {
            ra_deg >= self.ra_min_deg || ra_deg <= self.ra_max_deg
        };
        in_ra && (self.dec_min_deg..=self.dec_max_deg).contains(&dec_deg)
    }

    /// (RA cos Dec, Dec) bias in arcsec at Julian epoch `year`.
    fn bias_arcsec(&self, year: f64) -> (f64, f64) {
        let years = year - self.epoch_year;
        (
            self.d_ra_cosdec_arcsec + self.pm_ra_cosdec_mas_per_yr * years / 1000.0,
            self.d_dec_arcsec + self.pm_dec_mas_per_yr * years / 1000.0,
        )
    }
}

/// A parsed table, keyed by catalogue name in upper case.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BiasTable {
    file: String,
    boxes: BTreeMap<String, Vec<BiasBox>>,
}

/// What the corrections did, for the solution document.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BiasSummary {
    pub table: String,
    pub corrected: usize,
    /// Catalogues of observations the table has no row for (left as they
    /// are), with their counts; "none" for observations without `astCat`.
    pub not_covered: BTreeMap<String, usize>,
}

impl BiasTable {
    pub fn from_file(path: &Path) -> Result<Self, BiasTableError> {
        let file = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|e| BiasTableError::Unreadable {
            file: file.clone(),
            reason: e.to_string(),
        })?;
        Self::parse(&file, &text)
    }

    pub fn parse(file: &str, text: &str) -> Result<Self, BiasTableError> {
        let mut boxes: BTreeMap<String, Vec<BiasBox>> = BTreeMap::new();
        for (i, raw) in text.lines().enumerate() {
            let line = i + 1;
            let content = raw.trim();
            if content.is_empty() || content.starts_with('#') || content.starts_with("catalog,") {
                continue;
            }
            let fields: Vec<&str> = content.split(',').map(str::trim).collect();
            if fields.len() != COLUMNS.len() {
                return Err(BiasTableError::Width {
                    file: file.to_string(),
                    line,
                    expected: COLUMNS.len(),
                    found: fields.len(),
                });
            }
            let error = |column: usize, reason: String| BiasTableError::Field {
                file: file.to_string(),
                line,
                field: COLUMNS[column],
                reason,
            };
            if fields[0].is_empty() {
                return Err(error(0, "empty catalogue name".into()));
            }
            let mut numbers = [0.0; 9];
            for (k, n) in numbers.iter_mut().enumerate() {
                let text = fields[k + 1];
                *n = text
                    .parse::<f64>()
                    .ok()
                    .filter(|v| v.is_finite())
                    .ok_or_else(|| error(k + 1, format!("{text:?} is not a number")))?;
            }
            let [ra_min, ra_max, dec_min, dec_max, d_ra, d_dec, pm_ra, pm_dec, epoch] = numbers;
            for (column, value) in [(1, ra_min), (2, ra_max)] {
                if !(0.0..=360.0).contains(&value) {
                    return Err(error(column, format!("{value} is outside 0..360")));
                }
            }
            for (column, value) in [(3, dec_min), (4, dec_max)] {
                if !(-90.0..=90.0).contains(&value) {
                    return Err(error(column, format!("{value} is outside -90..90")));
                }
            }
            if dec_min > dec_max {
                return Err(error(
                    3,
                    format!("{dec_min} is above dec_max_deg {dec_max}"),
                ));
            }
            // A catalogue bias beyond 10 arcsec is a mistake in the table
            // (the zonal errors of modern catalogues are below 1 arcsec:
            // Farnocchia et al. 2015).
            for (column, value) in [(5, d_ra), (6, d_dec)] {
                if value.abs() > 10.0 {
                    return Err(error(
                        column,
                        format!("{value} arcsec is not a plausible bias"),
                    ));
                }
            }
            boxes
                .entry(fields[0].to_uppercase())
                .or_default()
                .push(BiasBox {
                    ra_min_deg: ra_min,
                    ra_max_deg: ra_max,
                    dec_min_deg: dec_min,
                    dec_max_deg: dec_max,
                    d_ra_cosdec_arcsec: d_ra,
                    d_dec_arcsec: d_dec,
                    pm_ra_cosdec_mas_per_yr: pm_ra,
                    pm_dec_mas_per_yr: pm_dec,
                    epoch_year: epoch,
                });
        }
        Ok(Self {
            file: file.to_string(),
            boxes,
        })
    }

    /// The (RA cos Dec, Dec) bias in arcsec of an observation reduced
    /// against `catalog`, or None where the table does not cover it.
    pub fn bias_arcsec(&self, catalog: &str, o: &AstrometricObservation) -> Option<(f64, f64)> {
        let (ra_deg, dec_deg) = (o.ra_rad.to_degrees(), o.dec_rad.to_degrees());
        let entry = self
            .boxes
            .get(&catalog.to_uppercase())?
            .iter()
            .find(|b| b.holds(ra_deg.rem_euclid(360.0), dec_deg))?;
        let year = 2000.0 + (o.time.tdb().tdb_jd() - J2000_JD) / JULIAN_YEAR_DAYS;
        Some(entry.bias_arcsec(year))
    }

    /// Subtracts the bias from every covered observation; `catalogs` gives
    /// each observation's `astCat`, in the same order.
    pub fn correct(
        &self,
        observations: &mut [AstrometricObservation],
        catalogs: &[Option<&str>],
    ) -> BiasSummary {
        let mut corrected = 0;
        let mut not_covered: BTreeMap<String, usize> = BTreeMap::new();
        for (o, catalog) in observations.iter_mut().zip(catalogs) {
            let bias = catalog.and_then(|c| self.bias_arcsec(c, o));
            match bias {
                Some((d_ra_cosdec, d_dec)) => {
                    let to_rad = (1.0_f64 / 3600.0).to_radians();
                    o.ra_rad -= d_ra_cosdec * to_rad / o.dec_rad.cos();
                    o.dec_rad -= d_dec * to_rad;
                    corrected += 1;
                }
                None => {
                    *not_covered
                        .entry(catalog.unwrap_or("none").to_string())
                        .or_default() += 1;
                }
            }
        }
        BiasSummary {
            table: self.file.clone(),
            corrected,
            not_covered,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::observer::ObserverPosition;
    use crate::astro::time::{TimeScales, UtcTime};
    use nalgebra::Vector3;

    const TABLE: &str = "\
# an invented table
catalog,ra_min_deg,ra_max_deg,dec_min_deg,dec_max_deg,d_ra_cosdec_arcsec,d_dec_arcsec,pm_ra_cosdec_mas_per_yr,pm_dec_mas_per_yr,epoch_year
CatA,0,90,-30,30,0.20,-0.10,10.0,0.0,2000.0
CatA,350,10,30,60,0.05,0.05,0.0,0.0,2000.0
";

    fn observation(ra_deg: f64, dec_deg: f64) -> AstrometricObservation {
        // 2026-01-01 0h UTC: Julian epoch 2026.0 to 1e-5 yr (TDB - UTC
        // = 69.18 s; 2026.0 is JD 2461041.5).
        let utc = UtcTime::parse_iso8601("2026-01-01T00:00:00Z").unwrap();
        AstrometricObservation {
            time: TimeScales::builtin().resolve_utc(&utc, None).unwrap(),
            observer: ObserverPosition::GeocentricIcrf {
                position_km: Vector3::zeros(),
                velocity_km_s: None,
            },
            ra_rad: ra_deg.to_radians(),
            dec_rad: dec_deg.to_radians(),
            sigma_ra_arcsec: Some(0.3),
            sigma_dec_arcsec: Some(0.3),
            correlation: 0.0,
            sigma_time_s: None,
            station: "ZQA".into(),
        }
    }

    #[test]
    fn a_covered_observation_moves_by_the_bias_at_its_epoch() {
        let table = BiasTable::parse("t.csv", TABLE).unwrap();
        let mut obs = [observation(45.0, 20.0)];
        let summary = table.correct(&mut obs, &[Some("cata")]);
        assert_eq!(summary.corrected, 1);
        // 26 years at 10 mas/yr add 0.26 arcsec to 0.20 in RA cos Dec.
        let d_ra_cosdec = (45.0 - obs[0].ra_rad.to_degrees()) * 3600.0 * 20f64.to_radians().cos();
        let d_dec = (20.0 - obs[0].dec_rad.to_degrees()) * 3600.0;
        assert!((d_ra_cosdec - 0.46).abs() < 1e-6, "{d_ra_cosdec}");
        assert!((d_dec + 0.10).abs() < 1e-9, "{d_dec}");
    }

    #[test]
    fn boxes_wrap_through_ra_zero_and_others_are_left_alone() {
        let table = BiasTable::parse("t.csv", TABLE).unwrap();
        let mut obs = [
            observation(355.0, 40.0),
            observation(5.0, 40.0),
            observation(180.0, 40.0),
            observation(45.0, 20.0),
            observation(45.0, 20.0),
        ];
        let before = obs.clone();
        let summary = table.correct(
            &mut obs,
            &[Some("CatA"), Some("CatA"), Some("CatA"), Some("CatB"), None],
        );
        assert_eq!(summary.corrected, 2);
        assert_ne!(obs[0], before[0]);
        assert_ne!(obs[1], before[1]);
        assert_eq!(obs[2..], before[2..]);
        assert_eq!(summary.not_covered.get("CatA"), Some(&1));
        assert_eq!(summary.not_covered.get("CatB"), Some(&1));
        assert_eq!(summary.not_covered.get("none"), Some(&1));
    }

    #[test]
    fn a_bad_row_names_its_line_and_field() {
        let text = format!("{TABLE}CatC,0,90,-30,30,0.2,x,0,0,2000\n");
        let e = BiasTable::parse("t.csv", &text).unwrap_err();
        assert_eq!(
            e.to_string(),
            "catalogue bias table t.csv:5: field d_dec_arcsec: \"x\" is not a number"
        );
        let text = format!("{TABLE}CatC,0,90,-30\n");
        let e = BiasTable::parse("t.csv", &text).unwrap_err();
        assert!(e.to_string().contains("t.csv:5: expected 10"), "{e}");
        let text = format!("{TABLE}CatC,0,90,40,30,0.2,0.1,0,0,2000\n");
        let e = BiasTable::parse("t.csv", &text).unwrap_err();
        assert!(e.to_string().contains("field dec_min_deg"), "{e}");
    }
}
