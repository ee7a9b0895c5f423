//! From validated observation records to what the fitter needs: the time
//! in every scale and the observer's place.
//!
//! An observation with its own position (ADES `sys`/`pos1..3`) is taken
//! from the record; every other one from its station in the station list.
//! A record that cannot be placed gives an error naming its file and line,
//! and the caller decides whether to fit without it.

use nalgebra::Vector3;
use thiserror::Error;

use crate::astro::observer::{GeodeticSite, ObserverError, ObserverPosition};
use crate::astro::time::{TimeError, TimeScales, UtcTime};
use crate::config::StationList;
use crate::ingest::{InertialPosition, Observation, ObserverLocation, SpiceId};

use crate::fit::observe::AstrometricObservation;

/// Why one record cannot enter a fit.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum InputError {
    #[error("{file}:{line}: station {station} is not in the station list")]
    UnknownStation {
        file: String,
        line: u32,
        station: String,
    },
    #[error("{file}:{line}: station {station}: {reason}")]
    Site {
        file: String,
        line: u32,
        station: String,
        reason: String,
    },
    #[error("{file}:{line}: obsTime: {reason}")]
    Time {
        file: String,
        line: u32,
        reason: String,
    },
    #[error(
        "{file}:{line}: ctr: observer positions centred on body {center} are not supported \
         (only the Earth, 399)"
    )]
    UnsupportedCentre {
        file: String,
        line: u32,
        center: i32,
    },
}

/// Why a station code gives no observer place.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum StationError {
    #[error("station {station} is not in the station list")]
    Unknown { station: String },
    #[error("station {station}: {reason}")]
    Site { station: String, reason: String },
}

/// The observer place of a station in the list: its WGS84 site.
pub fn station_position(
    stations: &StationList,
    code: &str,
) -> Result<ObserverPosition, StationError> {
    let s = stations.get(code).ok_or_else(|| StationError::Unknown {
        station: code.to_string(),
    })?;
    GeodeticSite::new(s.longitude_deg, s.latitude_deg, s.height_m)
        .map(ObserverPosition::Geodetic)
        .map_err(|e| StationError::Site {
            station: code.to_string(),
            reason: e.to_string(),
        })
}

/// Converts one record.
pub fn astrometric(
    observation: &Observation,
    stations: &StationList,
    scales: &TimeScales,
) -> Result<AstrometricObservation, InputError> {
    let file = || observation.source.file.to_string();
    let line = observation.source.line;
    let t = &observation.time;
    let utc = UtcTime::from_calendar_nanos(
        i64::from(t.year),
        u32::from(t.month),
        u32::from(t.day),
        u32::from(t.hour),
        u32::from(t.minute),
        u32::from(t.second),
        t.nanos,
    )
    .and_then(|utc| scales.resolve_utc(&utc, None))
    .map_err(|e: TimeError| InputError::Time {
        file: file(),
        line,
        reason: e.to_string(),
    })?;
    let station = observation.station();
    let site_error = |e: ObserverError| InputError::Site {
        file: file(),
        line,
        station: station.to_string(),
        reason: e.to_string(),
    };
    let observer = match observation.location {
        Some(ObserverLocation::Geodetic {
            longitude_deg,
            latitude_deg,
            height_m,
        }) => ObserverPosition::Geodetic(
            GeodeticSite::new(longitude_deg, latitude_deg, height_m).map_err(site_error)?,
        ),
        Some(ObserverLocation::EarthFixed { x_m, y_m, z_m }) => ObserverPosition::EarthFixed {
            itrs_km: Vector3::new(x_m, y_m, z_m) / 1000.0,
        },
        Some(ObserverLocation::Inertial { center, position }) => {
            if center != SpiceId::EARTH {
                return Err(InputError::UnsupportedCentre {
                    file: file(),
                    line,
                    center: center.0,
                });
            }
            match position {
                InertialPosition::Km { x_km, y_km, z_km } => ObserverPosition::GeocentricIcrf {
                    position_km: Vector3::new(x_km, y_km, z_km),
                    velocity_km_s: None,
                },
                InertialPosition::Au { x_au, y_au, z_au } => {
                    ObserverPosition::geocentric_icrf_au(Vector3::new(x_au, y_au, z_au), None)
                }
            }
        }
        None => station_position(stations, station).map_err(|e| match e {
            StationError::Unknown { station } => InputError::UnknownStation {
                file: file(),
                line,
                station,
            },
            StationError::Site { station, reason } => InputError::Site {
                file: file(),
                line,
                station,
                reason,
            },
        })?,
    };
    Ok(AstrometricObservation {
        time: utc,
        observer,
        ra_rad: observation.ra_deg.to_radians(),
        dec_rad: observation.dec_deg.to_radians(),
        sigma_ra_arcsec: observation.rms_ra_arcsec,
        sigma_dec_arcsec: observation.rms_dec_arcsec,
        correlation: observation.rms_corr.unwrap_or(0.0),
        sigma_time_s: observation.rms_time_s,
        station: station.to_string(),
    })
}

/// Converts every record that can be placed; the others come back with
/// their reasons, in input order.
pub fn astrometric_all(
    observations: &[Observation],
    stations: &StationList,
    scales: &TimeScales,
) -> (Vec<(usize, AstrometricObservation)>, Vec<InputError>) {
    let mut kept = Vec::with_capacity(observations.len());
    let mut refused = Vec::new();
    for (i, o) in observations.iter().enumerate() {
        match astrometric(o, stations, scales) {
            Ok(a) => kept.push((i, a)),
            Err(e) => refused.push(e),
        }
    }
    (kept, refused)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Station;
    use crate::ingest::{read_text, Format};

    fn stations() -> StationList {
        StationList::new([Station {
            code: "ZQA".into(),
            name: "invented".into(),
            longitude_deg: 17.32,
            latitude_deg: -23.11,
            height_m: 1820.0,
            sigma_arcsec: None,
        }])
    }

    const PSV: &str = "# version=2022\n\
provID  |mode|stn|obsTime                 |ra          |dec         |rmsRA|rmsDec|astCat\n\
2026 ZA7|CCD |ZQA|2026-02-09T02:18:34.808Z|167.98315238| 19.70800638| 0.45|  0.47|Gaia3\n\
2026 ZA7|CCD |ZQA|2016-12-31T23:59:60.500Z|167.98315238| 19.70800638| 0.45|  0.47|Gaia3\n";

    #[test]
    fn station_records_are_placed_and_leap_seconds_kept() {
        let read = read_text("a.psv", PSV, Format::AdesPsv, &stations());
        assert!(read.rejected.is_empty(), "{:?}", read.rejected);
        let (kept, refused) =
            astrometric_all(&read.observations, &stations(), TimeScales::builtin());
        assert!(refused.is_empty());
        assert_eq!(kept.len(), 2);
        let (_, first) = &kept[0];
        assert!((first.ra_rad.to_degrees() - 167.98315238).abs() < 1e-12);
        assert_eq!(first.sigma_ra_arcsec, Some(0.45));
        // 2016-12-31T23:59:60.5 UTC is 0.5 s before 2017-01-01T00:00:00 UTC
        // = TAI - 37 s (IERS Bulletin C 52; memory): TAI 00:00:36.5,
        // TT = TAI + 32.184 s (IAU 1991) = 2017-01-01T00:01:08.684, and
        // 2017-01-01T00:00 TT is J2000 + 6209.5 days.
        let leap = kept[1].1.time.tt();
        let seconds_past_midnight = (leap.days_since_j2000() - 6209.5) * 86_400.0;
        assert!(
            (seconds_past_midnight - 68.684).abs() < 1e-6,
            "{seconds_past_midnight}"
        );
    }

    #[test]
    fn unknown_station_names_file_and_line() {
        let read = read_text("a.psv", PSV, Format::AdesPsv, &stations());
        let err = astrometric(
            &read.observations[0],
            &StationList::default(),
            TimeScales::builtin(),
        )
        .unwrap_err();
        assert_eq!(
            err.to_string(),
            "a.psv:3: station ZQA is not in the station list"
        );
    }
}
