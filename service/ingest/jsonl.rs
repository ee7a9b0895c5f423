//! The service's own JSON-lines format: one observation object per line,
//! plain-English field names with their units (see docs/observations.md).
//!
//! Numbers are read as raw JSON text, so the record keeps every digit as
//! written, exactly as the ADES readers do.

use std::borrow::Cow;
use std::sync::Arc;

use serde::Deserialize;
use serde_json::value::RawValue;

use crate::config::StationList;

use super::error::{Problem, Rejection};
use super::field::{Field, RecordText};
use super::record::{Observation, Source};
use super::validate::{build, Rules};

type Text<'a> = Option<Cow<'a, str>>;
type Num<'a> = Option<&'a RawValue>;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Line<'a> {
    #[serde(borrow)]
    perm_id: Text<'a>,
    #[serde(borrow)]
    prov_id: Text<'a>,
    #[serde(borrow)]
    trk_sub: Text<'a>,
    #[serde(borrow)]
    obs_sub_id: Text<'a>,
    #[serde(borrow)]
    obs_id: Text<'a>,
    #[serde(borrow)]
    mode: Text<'a>,
    #[serde(borrow)]
    station: Text<'a>,
    #[serde(borrow)]
    program_code: Text<'a>,
    #[serde(borrow)]
    obs_time_utc: Text<'a>,
    #[serde(borrow)]
    rms_time_s: Num<'a>,
    #[serde(borrow)]
    ra_deg: Num<'a>,
    #[serde(borrow)]
    dec_deg: Num<'a>,
    #[serde(borrow)]
    rms_ra_arcsec: Num<'a>,
    #[serde(borrow)]
    rms_dec_arcsec: Num<'a>,
    #[serde(borrow)]
    rms_corr: Num<'a>,
    #[serde(borrow)]
    astrometric_catalog: Text<'a>,
    #[serde(borrow)]
    mag: Num<'a>,
    #[serde(borrow)]
    rms_mag: Num<'a>,
    #[serde(borrow)]
    band: Text<'a>,
    #[serde(borrow)]
    photometric_catalog: Text<'a>,
    #[serde(borrow)]
    log_snr: Num<'a>,
    #[serde(borrow)]
    notes: Text<'a>,
    #[serde(borrow)]
    remarks: Text<'a>,
    #[serde(borrow)]
    observer: Option<Observer<'a>>,
}

/// An explicit observer position, one variant per ADES `sys`.
#[derive(Deserialize)]
#[serde(rename_all = "snake_case", deny_unknown_fields)]
enum Observer<'a> {
    Wgs84 {
        #[serde(borrow)]
        longitude_deg: &'a RawValue,
        #[serde(borrow)]
        latitude_deg: &'a RawValue,
        #[serde(borrow)]
        height_m: &'a RawValue,
    },
    Itrf {
        #[serde(borrow)]
        x_m: &'a RawValue,
        #[serde(borrow)]
        y_m: &'a RawValue,
        #[serde(borrow)]
        z_m: &'a RawValue,
    },
    IcrfKm {
        #[serde(borrow)]
        center_spice_id: &'a RawValue,
        #[serde(borrow)]
        x_km: &'a RawValue,
        #[serde(borrow)]
        y_km: &'a RawValue,
        #[serde(borrow)]
        z_km: &'a RawValue,
    },
    IcrfAu {
        #[serde(borrow)]
        center_spice_id: &'a RawValue,
        #[serde(borrow)]
        x_au: &'a RawValue,
        #[serde(borrow)]
        y_au: &'a RawValue,
        #[serde(borrow)]
        z_au: &'a RawValue,
    },
}

impl Observer<'_> {
    /// ADES sys, the ctr text, the three position texts, and the JSON
    /// names of ctr and pos1..3 for messages.
    fn parts(&self) -> (&'static str, &str, [&str; 3], [&'static str; 4]) {
        match self {
            Observer::Wgs84 {
                longitude_deg,
                latitude_deg,
                height_m,
            } => (
                "WGS84",
                "399",
                [longitude_deg.get(), latitude_deg.get(), height_m.get()],
                [
                    "observer.wgs84",
                    "observer.wgs84.longitude_deg",
                    "observer.wgs84.latitude_deg",
                    "observer.wgs84.height_m",
                ],
            ),
            Observer::Itrf { x_m, y_m, z_m } => (
                "ITRF",
                "399",
                [x_m.get(), y_m.get(), z_m.get()],
                [
                    "observer.itrf",
                    "observer.itrf.x_m",
                    "observer.itrf.y_m",
                    "observer.itrf.z_m",
                ],
            ),
            Observer::IcrfKm {
                center_spice_id,
                x_km,
                y_km,
                z_km,
            } => (
                "ICRF_KM",
                center_spice_id.get(),
                [x_km.get(), y_km.get(), z_km.get()],
                [
                    "observer.icrf_km.center_spice_id",
                    "observer.icrf_km.x_km",
                    "observer.icrf_km.y_km",
                    "observer.icrf_km.z_km",
                ],
            ),
            Observer::IcrfAu {
                center_spice_id,
                x_au,
                y_au,
                z_au,
            } => (
                "ICRF_AU",
                center_spice_id.get(),
                [x_au.get(), y_au.get(), z_au.get()],
                [
                    "observer.icrf_au.center_spice_id",
                    "observer.icrf_au.x_au",
                    "observer.icrf_au.y_au",
                    "observer.icrf_au.z_au",
                ],
            ),
        }
    }
}

fn record_text<'a>(l: &'a Line<'a>) -> (RecordText, Option<[&'static str; 4]>) {
    let mut t = RecordText::with_capacity(256);
    let texts: [(Field, &Text<'_>); 14] = [
        (Field::PermId, &l.perm_id),
        (Field::ProvId, &l.prov_id),
        (Field::TrkSub, &l.trk_sub),
        (Field::ObsSubId, &l.obs_sub_id),
        (Field::ObsId, &l.obs_id),
        (Field::Mode, &l.mode),
        (Field::Stn, &l.station),
        (Field::Prog, &l.program_code),
        (Field::ObsTime, &l.obs_time_utc),
        (Field::AstCat, &l.astrometric_catalog),
        (Field::Band, &l.band),
        (Field::PhotCat, &l.photometric_catalog),
        (Field::Notes, &l.notes),
        (Field::Remarks, &l.remarks),
    ];
    for (f, v) in texts {
        if let Some(s) = v {
            t.set(f, s);
        }
    }
    let nums: [(Field, Num<'_>); 9] = [
        (Field::RmsTime, l.rms_time_s),
        (Field::Ra, l.ra_deg),
        (Field::Dec, l.dec_deg),
        (Field::RmsRa, l.rms_ra_arcsec),
        (Field::RmsDec, l.rms_dec_arcsec),
        (Field::RmsCorr, l.rms_corr),
        (Field::Mag, l.mag),
        (Field::RmsMag, l.rms_mag),
        (Field::LogSnr, l.log_snr),
    ];
    for (f, v) in nums {
        if let Some(raw) = v {
            t.set(f, raw.get());
        }
    }
    let names = l.observer.as_ref().map(|o| {
        let (sys, ctr, pos, names) = o.parts();
        t.set(Field::Sys, sys);
        t.set(Field::Ctr, ctr);
        t.set(Field::Pos1, pos[0]);
        t.set(Field::Pos2, pos[1]);
        t.set(Field::Pos3, pos[2]);
        names
    });
    (t, names)
}

fn field_name(f: Field, observer: Option<[&'static str; 4]>) -> &'static str {
    match (f, observer) {
        (Field::Ctr | Field::Sys, Some(n)) => n[0],
        (Field::Pos1, Some(n)) => n[1],
        (Field::Pos2, Some(n)) => n[2],
        (Field::Pos3, Some(n)) => n[3],
        _ => f.json_name(),
    }
}

/// Reads a JSON-lines text, handing every observation or rejection to
/// `sink` in file order.
pub fn read_with<F>(file: &Arc<str>, text: &str, stations: &StationList, mut sink: F)
where
    F: FnMut(Result<Observation, Rejection>),
{
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    for (i, raw) in text.split_inclusive('\n').enumerate() {
        if let Some(result) = read_line(file, i as u32 + 1, raw, stations) {
            sink(result);
        }
    }
}

/// Reads line `number` (1-based), `raw` with its line end if it has one;
/// `None` for a blank line. Lines are independent of each other, so a
/// file can be read a line at a time.
pub fn read_line(
    file: &Arc<str>,
    number: u32,
    raw: &str,
    stations: &StationList,
) -> Option<Result<Observation, Rejection>> {
    let line = raw.trim_end_matches(['\n', '\r']);
    if line.trim_ascii().is_empty() {
        return None;
    }
    let reject = |column, field: Option<&str>, problem| Rejection {
        file: file.to_string(),
        line: number,
        column,
        field: field.map(str::to_string),
        problem,
    };
    let parsed: Line<'_> = match serde_json::from_str(line) {
        Ok(l) => l,
        Err(e) => {
            let problem = if e.is_eof() && !raw.ends_with('\n') {
                Problem::Truncated
            } else {
                Problem::Syntax { why: e.to_string() }
            };
            return Some(Err(reject(Some(e.column() as u32), None, problem)));
        }
    };
    let (t, observer) = record_text(&parsed);
    let source = Source {
        file: file.clone(),
        line: number,
    };
    let rules = Rules {
        ades_mandatory: false,
    };
    Some(match build(t, source, None, stations, rules) {
        Ok(o) => Ok(o),
        Err(p) => {
            let field = p.field.map(|f| field_name(f, observer));
            Err(reject(None, field, p.problem))
        }
    })
}
