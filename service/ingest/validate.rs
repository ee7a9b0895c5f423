//! From a record's text to a validated [`Observation`].
//!
//! The checks are the same for every format; only the names a reader gives
//! the fields in its messages differ. The first problem found rejects the
//! record.

use std::sync::Arc;

use crate::config::StationList;

use super::error::{FieldProblem, ObsKind, Problem};
use super::field::{Field, RecordText};
use super::record::{
    BlockContext, InertialPosition, Observation, ObserverLocation, Source, SpiceId,
};
use super::time::parse_utc;

/// What a format demands beyond the fields the fit needs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rules {
    /// ADES makes `mode` and `astCat` mandatory; the JSON-lines format does not.
    pub ades_mandatory: bool,
}

/// ADES optical `mode` values (ADES field-value list; memory).
const OPTICAL_MODES: [&str; 10] = [
    "CCD", "CMO", "VID", "PHO", "ENC", "PMT", "MIC", "MER", "TDI", "UNK",
];

/// Accepts plain decimal numbers only: an optional sign, then a digit or a
/// point; this keeps out `inf`, `NaN` and the like that `f64::from_str`
/// would accept.
pub fn parse_number(text: &str) -> Option<f64> {
    let b = text.as_bytes();
    let first = match b.first() {
        Some(b'+' | b'-') => b.get(1),
        other => other,
    };
    match first {
        Some(c) if c.is_ascii_digit() || *c == b'.' => {}
        _ => return None,
    }
    let v: f64 = text.parse().ok()?;
    v.is_finite().then_some(v)
}

fn number(t: &RecordText, f: Field) -> Result<Option<(f64, &str)>, FieldProblem> {
    match t.get(f) {
        None => Ok(None),
        Some(s) => parse_number(s).map(|v| Some((v, s))).ok_or_else(|| {
            FieldProblem::new(
                f,
                Problem::NotANumber {
                    text: s.to_string(),
                },
            )
        }),
    }
}

fn required_number(t: &RecordText, f: Field) -> Result<(f64, &str), FieldProblem> {
    number(t, f)?.ok_or_else(|| FieldProblem::new(f, Problem::Missing))
}

fn positive(t: &RecordText, f: Field) -> Result<Option<f64>, FieldProblem> {
    match number(t, f)? {
        Some((v, s)) if v <= 0.0 => Err(FieldProblem::new(
            f,
            Problem::NotPositive {
                text: s.to_string(),
            },
        )),
        other => Ok(other.map(|(v, _)| v)),
    }
}

fn out_of_range(f: Field, text: &str, range: &'static str) -> FieldProblem {
    FieldProblem::new(
        f,
        Problem::OutOfRange {
            text: text.to_string(),
            range,
        },
    )
}

/// Classifies a record by its `mode`: `Ok(())` for optical astrometry.
fn check_mode(t: &RecordText, rules: Rules) -> Result<(), FieldProblem> {
    match t.get(Field::Mode) {
        None if rules.ades_mandatory => Err(FieldProblem::new(Field::Mode, Problem::Missing)),
        None => Ok(()),
        Some(m) if OPTICAL_MODES.contains(&m) => Ok(()),
        // ADES marks occultation-derived positions with mode OCC (memory).
        Some("OCC") => Err(FieldProblem::new(
            Field::Mode,
            Problem::Unsupported {
                kind: ObsKind::Occultation,
            },
        )),
        Some(m) => Err(FieldProblem::new(
            Field::Mode,
            Problem::BadValue {
                text: m.to_string(),
                why: "not an ADES optical mode".into(),
            },
        )),
    }
}

fn location(t: &RecordText) -> Result<Option<ObserverLocation>, FieldProblem> {
    let any = [
        Field::Sys,
        Field::Ctr,
        Field::Pos1,
        Field::Pos2,
        Field::Pos3,
    ]
    .iter()
    .any(|&f| t.has(f));
    if !any {
        return Ok(None);
    }
    let sys = t.get(Field::Sys).ok_or_else(|| {
        FieldProblem::new(
            Field::Sys,
            Problem::BadLocation {
                why: "ctr/pos1..3 given without sys".into(),
            },
        )
    })?;
    let ctr_text = t
        .get(Field::Ctr)
        .ok_or_else(|| FieldProblem::new(Field::Ctr, Problem::Missing))?;
    let ctr: i32 = ctr_text.parse().map_err(|_| {
        FieldProblem::new(
            Field::Ctr,
            Problem::BadValue {
                text: ctr_text.to_string(),
                why: "not a SPICE body id".into(),
            },
        )
    })?;
    let p1 = required_number(t, Field::Pos1)?;
    let p2 = required_number(t, Field::Pos2)?;
    let p3 = required_number(t, Field::Pos3)?;
    let earth_only = |frame: &str| -> Result<(), FieldProblem> {
        if ctr == SpiceId::EARTH.0 {
            Ok(())
        } else {
            Err(FieldProblem::new(
                Field::Ctr,
                Problem::BadLocation {
                    why: format!("sys {frame} is Earth-fixed, so ctr must be 399, not {ctr}"),
                },
            ))
        }
    };
    match sys {
        "WGS84" => {
            earth_only(sys)?;
            if !(-180.0..=360.0).contains(&p1.0) {
                return Err(out_of_range(Field::Pos1, p1.1, "[-180, 360]"));
            }
            if !(-90.0..=90.0).contains(&p2.0) {
                return Err(out_of_range(Field::Pos2, p2.1, "[-90, 90]"));
            }
            Ok(Some(ObserverLocation::Geodetic {
                longitude_deg: p1.0,
                latitude_deg: p2.0,
                height_m: p3.0,
            }))
        }
        "ITRF" => {
            earth_only(sys)?;
            Ok(Some(ObserverLocation::EarthFixed {
                x_m: p1.0,
                y_m: p2.0,
                z_m: p3.0,
            }))
        }
        "ICRF_KM" | "ICRF_AU" => {
            // Solar-system barycentre, planet-system barycentres, the Sun,
            // the Moon and the planets themselves (NAIF id conventions).
            let known = (0..=10).contains(&ctr)
                || ctr == 301
                || (ctr % 100 == 99 && (199..=999).contains(&ctr));
            if !known {
                return Err(FieldProblem::new(
                    Field::Ctr,
                    Problem::BadLocation {
                        why: format!("ctr {ctr} is not a supported centre body"),
                    },
                ));
            }
            let position = if sys == "ICRF_KM" {
                InertialPosition::Km {
                    x_km: p1.0,
                    y_km: p2.0,
                    z_km: p3.0,
                }
            } else {
                InertialPosition::Au {
                    x_au: p1.0,
                    y_au: p2.0,
                    z_au: p3.0,
                }
            };
            Ok(Some(ObserverLocation::Inertial {
                center: SpiceId(ctr),
                position,
            }))
        }
        "IAU" => Err(FieldProblem::new(
            Field::Sys,
            Problem::BadLocation {
                why: "sys IAU (body-fixed frame of another body) is not supported".into(),
            },
        )),
        other => Err(FieldProblem::new(
            Field::Sys,
            Problem::BadValue {
                text: other.to_string(),
                why: "expected WGS84, ITRF, ICRF_KM or ICRF_AU".into(),
            },
        )),
    }
}

/// Validates one record. Unknown stations are rejected unless the record
/// carries its own observer position.
pub fn build(
    text: RecordText,
    source: Source,
    context: Option<Arc<BlockContext>>,
    stations: &StationList,
    rules: Rules,
) -> Result<Observation, FieldProblem> {
    let t = &text;
    check_mode(t, rules)?;
    if ![Field::TrkSub, Field::ProvId, Field::PermId]
        .iter()
        .any(|&f| t.has(f))
    {
        return Err(FieldProblem::record(Problem::MissingDesignation));
    }
    let stn = t
        .get(Field::Stn)
        .ok_or_else(|| FieldProblem::new(Field::Stn, Problem::Missing))?;
    let time_text = t
        .get(Field::ObsTime)
        .ok_or_else(|| FieldProblem::new(Field::ObsTime, Problem::Missing))?;
    let time = parse_utc(time_text).map_err(|why| {
        FieldProblem::new(
            Field::ObsTime,
            Problem::BadTime {
                text: time_text.to_string(),
                why,
            },
        )
    })?;
    let (ra_deg, ra_text) = required_number(t, Field::Ra)?;
    if !(0.0..360.0).contains(&ra_deg) {
        return Err(out_of_range(Field::Ra, ra_text, "[0, 360)"));
    }
    let (dec_deg, dec_text) = required_number(t, Field::Dec)?;
    if !(-90.0..=90.0).contains(&dec_deg) {
        return Err(out_of_range(Field::Dec, dec_text, "[-90, 90]"));
    }
    let rms_ra_arcsec = positive(t, Field::RmsRa)?;
    let rms_dec_arcsec = positive(t, Field::RmsDec)?;
    let rms_corr = match number(t, Field::RmsCorr)? {
        Some((v, s)) if !(-1.0..=1.0).contains(&v) => {
            return Err(out_of_range(Field::RmsCorr, s, "[-1, 1]"))
        }
        other => other.map(|(v, _)| v),
    };
    let rms_time_s = positive(t, Field::RmsTime)?;
    if rules.ades_mandatory && !t.has(Field::AstCat) {
        return Err(FieldProblem::new(Field::AstCat, Problem::Missing));
    }
    let mag = number(t, Field::Mag)?.map(|(v, _)| v);
    let rms_mag = positive(t, Field::RmsMag)?;
    let location = location(t)?;
    if location.is_none() && !stations.contains(stn) {
        return Err(FieldProblem::new(
            Field::Stn,
            Problem::UnknownStation {
                code: stn.to_string(),
            },
        ));
    }
    Ok(Observation {
        time,
        ra_deg,
        dec_deg,
        rms_ra_arcsec,
        rms_dec_arcsec,
        rms_corr,
        rms_time_s,
        mag,
        rms_mag,
        location,
        text,
        source,
        context,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Station;

    fn stations() -> StationList {
        StationList::new([Station {
            code: "XQ1".into(),
            name: "Invented Hill".into(),
            longitude_deg: 10.0,
            latitude_deg: 45.0,
            height_m: 100.0,
            sigma_arcsec: None,
        }])
    }

    fn good() -> RecordText {
        let mut t = RecordText::default();
        for (f, s) in [
            (Field::TrkSub, "qx01"),
            (Field::Mode, "CCD"),
            (Field::Stn, "XQ1"),
            (Field::ObsTime, "2026-03-14T05:12:33.25Z"),
            (Field::Ra, "215.65605"),
            (Field::Dec, "-13.547872"),
            (Field::AstCat, "Gaia3"),
        ] {
            t.set(f, s);
        }
        t
    }

    fn run(t: RecordText) -> Result<Observation, FieldProblem> {
        let src = Source {
            file: "t".into(),
            line: 1,
        };
        build(
            t,
            src,
            None,
            &stations(),
            Rules {
                ades_mandatory: true,
            },
        )
    }

    #[test]
    fn numbers_are_plain_decimals() {
        assert_eq!(parse_number("+40.61177"), Some(40.61177));
        assert_eq!(parse_number(".5"), Some(0.5));
        assert_eq!(parse_number("1e3"), Some(1000.0));
        for bad in ["inf", "NaN", "-inf", "", "+", "1,5", "x1"] {
            assert_eq!(parse_number(bad), None, "{bad}");
        }
    }

    #[test]
    fn good_record_builds() {
        let o = run(good()).unwrap();
        assert_eq!(o.ra_deg, 215.65605);
        assert_eq!(o.station(), "XQ1");
        assert_eq!(o.location, None);
    }

    #[test]
    fn location_combinations() {
        let mut t = good();
        t.set(Field::Stn, "Q01");
        t.set(Field::Sys, "ICRF_KM");
        t.set(Field::Ctr, "399");
        t.set(Field::Pos1, "6500.5");
        t.set(Field::Pos2, "-20.25");
        t.set(Field::Pos3, "100");
        let o = run(t.clone()).unwrap();
        assert_eq!(
            o.location,
            Some(ObserverLocation::Inertial {
                center: SpiceId::EARTH,
                position: InertialPosition::Km {
                    x_km: 6500.5,
                    y_km: -20.25,
                    z_km: 100.0
                }
            })
        );
        let mut w = t.clone();
        w.set(Field::Sys, "WGS84");
        w.set(Field::Ctr, "10");
        let e = run(w).unwrap_err();
        assert_eq!(e.field, Some(Field::Ctr));
        assert!(matches!(e.problem, Problem::BadLocation { .. }));
        let mut p = t.clone();
        p.set(Field::Pos3, "");
        assert_eq!(
            run(p).unwrap_err(),
            FieldProblem::new(Field::Pos3, Problem::Missing)
        );
        let mut s = t;
        s.set(Field::Sys, "");
        assert_eq!(run(s).unwrap_err().field, Some(Field::Sys));
    }
}
