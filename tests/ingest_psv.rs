//! ADES PSV reading: layouts as the ADES standard's own example files lay
//! them out (IAU-ADES/ADES-Master, tests/ and new_tests/: padding for
//! alignment, empty fields, several blocks, versions 2017 and 2022), with
//! invented designations and station codes, and one test per kind of bad
//! input asserting line, field and reason.

use perihelix::config::{Station, StationList};
use perihelix::ingest::{read_text, Format, ObsKind, ObserverLocation, Problem, Rejection};

fn stations() -> StationList {
    StationList::new(["XQ1", "XQ2"].map(|c| Station {
        code: c.into(),
        name: "Invented site".into(),
        longitude_deg: 10.0,
        latitude_deg: 45.0,
        height_m: 100.0,
        sigma_arcsec: None,
    }))
}

const TWO_BLOCKS_2017: &str = "\
# version=2017
# observatory
! mpcCode XQ1
! name Invented Hill Observatory
# submitter
! name A. Nobody
! institution Nowhere Institute
# telescope
! aperture 1.5
! design Reflector
! detector CCD
# observers
! name A. Nobody
# measurers
! name A. Nobody
# comment
! line An invented comment
permID |provID     |trkSub  |mode|stn |prog|obsTime                     |ra         |dec        |rmsRA|rmsDec|rmsCorr|astCat|mag  |rmsMag|band|photCat|logSNR|notes|remarks
       |2031 QA7   |  qx01  | CCD|XQ1 |  31|2026-03-14T05:12:33.1234567Z|215.65605  |-13.547872 |0.15 |0.13  | 0.21  |Gaia3 |21.9 |0.25  |   G|  Gaia3|0.775 |K    |invented remark
       |           |  qx01  | CCD|XQ1 |    |2026-03-14T05:42:33.25Z     |215.66605  |+13.5      |     |      |       |Gaia3 |     |      |    |       |      |     |
# observatory
! mpcCode XQ2
# submitter
! name B. Someone
# telescope
! aperture 0.4
! design Reflector
! detector CMOS
# measurers
! name B. Someone
trkSub |mode|stn |obsTime                |ra          |dec         |astCat
  qx01 | CMO|XQ2 |2026-03-15T01:00:00Z   |216.0       |-13.0       |Gaia3
";

#[test]
fn two_blocks_version_2017_with_padding_and_empty_fields() {
    let r = read_text("obs.psv", TWO_BLOCKS_2017, Format::AdesPsv, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations.len(), 3);
    let a = &r.observations[0];
    assert_eq!(a.source.line, 19);
    assert_eq!(a.prov_id(), Some("2031 QA7"));
    assert_eq!(a.trk_sub(), Some("qx01"));
    assert_eq!(a.perm_id(), None);
    assert_eq!(a.obs_time_text(), "2026-03-14T05:12:33.1234567Z");
    assert_eq!(a.time.nanos, 123_456_700);
    assert_eq!(a.ra_deg, 215.65605);
    assert_eq!(
        a.text.get(perihelix::ingest::Field::Dec),
        Some("-13.547872")
    );
    assert_eq!(a.rms_ra_arcsec, Some(0.15));
    assert_eq!(a.rms_corr, Some(0.21));
    assert_eq!(a.mag, Some(21.9));
    assert_eq!(a.band(), Some("G"));
    assert_eq!(a.remarks(), Some("invented remark"));
    assert_eq!(a.submitter(), Some("A. Nobody"));
    let b = &r.observations[1];
    assert_eq!(b.text.get(perihelix::ingest::Field::Dec), Some("+13.5"));
    assert_eq!((b.rms_ra_arcsec, b.mag, b.prov_id()), (None, None, None));
    let c = &r.observations[2];
    assert_eq!(c.station(), "XQ2");
    assert_eq!(c.submitter(), Some("B. Someone"));
    assert_eq!(
        c.context
            .as_ref()
            .and_then(|x| x.observatory_code.as_deref()),
        Some("XQ2")
    );
}

#[test]
fn version_2022_with_space_observer_and_leading_empty_field() {
    // Laid out like the ADES example with an explicit ICRF_KM position.
    let text = "\
# version=2022
# observatory
! mpcCode XS9
# submitter
! name A. Nobody
permID|trkSub|mode|stn|obsTime         |ra         |dec        |rmsRA  |rmsDec |astCat |pos1       |pos2       |pos3       |ctr |sys
|sp01|CCD|XS9|2026-11-30T17:12:11.500Z|115.9571762|21.25635598|0.00475|0.00517|Gaia3|53832875.92|136343238.9|12321.35851|399 |ICRF_KM
|sp01|CCD|XS9|2026-11-30T17:17:32.500Z|115.9568947|21.25638951|0.0037 |0.00496|Gaia3|53821950.61|136348263.4|12362.58654|399 |ICRF_KM
";
    let r = read_text("space.psv", text, Format::AdesPsv, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations.len(), 2);
    match r.observations[0].location {
        Some(ObserverLocation::Inertial { center, .. }) => assert_eq!(center.0, 399),
        other => panic!("{other:?}"),
    }
}

#[test]
fn leap_second_on_a_leap_second_day_is_accepted() {
    // 2016-12-31 ended with a leap second (IERS Bulletin C 52; memory).
    let text = "# version=2022\ntrkSub|mode|stn|obsTime|ra|dec|astCat\nqx01|CCD|XQ1|2016-12-31T23:59:60.5Z|10|10|Gaia3\n";
    let r = read_text("leap.psv", text, Format::AdesPsv, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations[0].time.second, 60);
}

const HEAD: &str = "# version=2022\n# observatory\n! mpcCode XQ1\n# submitter\n! name A. Nobody\n";
const KEYS: &str =
    "trkSub|mode|stn|obsTime|ra|dec|rmsRA|rmsDec|rmsCorr|rmsTime|astCat|sys|ctr|pos1|pos2|pos3\n";

/// One data line under HEAD + KEYS (so the data line is line 7).
fn line(fields: [&str; 16]) -> String {
    format!("{HEAD}{KEYS}{}\n", fields.join("|"))
}

fn good() -> [&'static str; 16] {
    [
        "qx01",
        "CCD",
        "XQ1",
        "2026-03-14T05:12:33Z",
        "215.6",
        "-13.5",
        "0.1",
        "0.1",
        "0.2",
        "",
        "Gaia3",
        "",
        "",
        "",
        "",
        "",
    ]
}

fn with(i: usize, v: &'static str) -> String {
    let mut f = good();
    f[i] = v;
    line(f)
}

fn only_rejection(text: &str) -> Rejection {
    let r = read_text("bad.psv", text, Format::AdesPsv, &stations());
    assert_eq!(r.rejected.len(), 1, "{:?}", r.rejected);
    r.rejected[0].clone()
}

fn check(text: &str, line: u32, field: Option<&str>, want: impl Fn(&Problem) -> bool) {
    let e = only_rejection(text);
    assert_eq!(e.line, line, "{e}");
    assert_eq!(e.field.as_deref(), field, "{e}");
    assert!(want(&e.problem), "{e}");
    assert_eq!(e.file, "bad.psv");
}

#[test]
fn the_good_line_is_good() {
    let r = read_text("bad.psv", &line(good()), Format::AdesPsv, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations.len(), 1);
}

#[test]
fn missing_version_line() {
    check(KEYS, 1, None, |p| matches!(p, Problem::BadVersion { .. }));
}

#[test]
fn wrong_version_line() {
    check(
        "# version=2019\n",
        1,
        None,
        |p| matches!(p, Problem::BadVersion { why } if why.contains("2019")),
    );
}

#[test]
fn duplicate_column() {
    let text = format!("{HEAD}trkSub|mode|stn|ra|obsTime|ra|dec|astCat\n");
    check(&text, 6, Some("ra"), |p| {
        matches!(p, Problem::DuplicateColumn { first_column: 17 })
    });
}

#[test]
fn more_fields_than_keywords() {
    let text = format!("{}|extra\n", line(good()).trim_end());
    check(&text, 7, None, |p| {
        matches!(
            p,
            Problem::FieldCount {
                found: 17,
                keywords: 16
            }
        )
    });
}

#[test]
fn truncated_last_line() {
    let text = format!("{HEAD}{KEYS}qx01|CCD|XQ1|2026-03-14T05:1");
    check(&text, 7, None, |p| matches!(p, Problem::Truncated));
}

#[test]
fn unparseable_time() {
    check(&with(3, "2026-03-14 05:12:33Z"), 7, Some("obsTime"), |p| {
        matches!(p, Problem::BadTime { .. })
    });
}

#[test]
fn leap_second_on_an_ordinary_day() {
    check(
        &with(3, "2026-03-14T23:59:60Z"),
        7,
        Some("obsTime"),
        |p| matches!(p, Problem::BadTime { why, .. } if why.contains("no leap second")),
    );
}

#[test]
fn ra_outside_range() {
    let e = only_rejection(&with(4, "360.0"));
    assert_eq!((e.line, e.field.as_deref()), (7, Some("ra")));
    assert_eq!(
        e.to_string(),
        "bad.psv:7: field 'ra': 360.0 is outside [0, 360)"
    );
}

#[test]
fn dec_outside_range() {
    let e = only_rejection(&with(5, "91.2"));
    assert_eq!(
        e.to_string(),
        "bad.psv:7: field 'dec': 91.2 is outside [-90, 90]"
    );
    // "qx01|CCD|XQ1|2026-03-14T05:12:33Z|215.6|" is 40 characters.
    assert_eq!(e.column, Some(41));
}

#[test]
fn zero_uncertainty() {
    check(&with(6, "0"), 7, Some("rmsRA"), |p| {
        matches!(p, Problem::NotPositive { .. })
    });
}

#[test]
fn negative_uncertainty() {
    check(
        &with(7, "-0.1"),
        7,
        Some("rmsDec"),
        |p| matches!(p, Problem::NotPositive { text } if text == "-0.1"),
    );
}

#[test]
fn negative_time_uncertainty() {
    check(&with(9, "-1"), 7, Some("rmsTime"), |p| {
        matches!(p, Problem::NotPositive { .. })
    });
}

#[test]
fn correlation_outside_range() {
    check(&with(8, "1.5"), 7, Some("rmsCorr"), |p| {
        matches!(
            p,
            Problem::OutOfRange {
                range: "[-1, 1]",
                ..
            }
        )
    });
}

#[test]
fn unknown_station() {
    check(
        &with(2, "XQ7"),
        7,
        Some("stn"),
        |p| matches!(p, Problem::UnknownStation { code } if code == "XQ7"),
    );
}

#[test]
fn unknown_station_with_own_position_is_accepted() {
    let mut f = good();
    f[2] = "XR1";
    f[11..16].copy_from_slice(&["WGS84", "399", "10.5", "45.25", "120"]);
    let r = read_text("bad.psv", &line(f), Format::AdesPsv, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
}

#[test]
fn missing_designation() {
    check(&with(0, ""), 7, None, |p| {
        matches!(p, Problem::MissingDesignation)
    });
}

#[test]
fn non_numeric_field() {
    check(
        &with(4, "12h30m"),
        7,
        Some("ra"),
        |p| matches!(p, Problem::NotANumber { text } if text == "12h30m"),
    );
}

#[test]
fn bad_sys_ctr_combination() {
    let mut f = good();
    f[11..16].copy_from_slice(&["WGS84", "10", "10.5", "45.25", "120"]);
    check(&line(f), 7, Some("ctr"), |p| {
        matches!(p, Problem::BadLocation { .. })
    });
}

#[test]
fn position_without_sys() {
    let mut f = good();
    f[13..16].copy_from_slice(&["10.5", "45.25", "120"]);
    check(&line(f), 7, Some("sys"), |p| {
        matches!(p, Problem::BadLocation { .. })
    });
}

#[test]
fn missing_time() {
    check(&with(3, ""), 7, Some("obsTime"), |p| {
        matches!(p, Problem::Missing)
    });
}

#[test]
fn unknown_column_rejects_its_block() {
    let text = format!("{HEAD}trkSub|mode|stn|obsTime|ra|dec|astCat|colour\nqx01|CCD|XQ1|2026-03-14T05:12:33Z|1|1|Gaia3|red\n");
    let r = read_text("bad.psv", &text, Format::AdesPsv, &stations());
    assert_eq!(r.rejected.len(), 2);
    assert_eq!(r.rejected[0].line, 6);
    assert_eq!(r.rejected[0].field.as_deref(), Some("colour"));
    assert_eq!(r.rejected[0].problem, Problem::UnknownColumn);
    assert_eq!(r.rejected[1].line, 7);
    assert_eq!(
        r.rejected[1].problem,
        Problem::BlockRejected { keyword_line: 6 }
    );
}

#[test]
fn offset_block_is_unsupported_not_misread() {
    let text = format!("{HEAD}trkSub|mode|stn|obsTime|obsCenter|deltaRA|deltaDec|astCat\nqx01|CCD|XQ1|2026-03-14T05:12:33Z|Jupiter|0.01|0.02|Gaia3\n");
    check(&text, 7, None, |p| {
        matches!(
            p,
            Problem::Unsupported {
                kind: ObsKind::Offset
            }
        )
    });
}

#[test]
fn radar_block_is_unsupported() {
    let text = "# version=2017\npermID |trx |rcv |obsTime                |doppler    |delay       |rmsDoppler|rmsDelay|com|frq  |ref\n9000001|XQ1 |XQ1 |2026-11-27T22:20:00.04Z|+613910.60 |            | 1.000    |        |  1|8510.|INV\n";
    check(text, 3, None, |p| {
        matches!(
            p,
            Problem::Unsupported {
                kind: ObsKind::Radar
            }
        )
    });
}

#[test]
fn occultation_mode_is_unsupported() {
    check(&with(1, "OCC"), 7, Some("mode"), |p| {
        matches!(
            p,
            Problem::Unsupported {
                kind: ObsKind::Occultation
            }
        )
    });
}

#[test]
fn member_outside_a_group() {
    let text = "# version=2022\n! name A. Nobody\n";
    check(text, 2, None, |p| matches!(p, Problem::BadHeader { .. }));
}

#[test]
fn good_lines_survive_beside_bad_ones() {
    let mut text = line(good());
    text.push_str("qx01|CCD|XQ1|2026-03-14T05:13:33Z|215.7|95|0.1|0.1|||Gaia3|||||\n");
    text.push_str("qx01|CCD|XQ1|2026-03-14T05:14:33Z|215.8|-13.4|0.1|0.1|||Gaia3|||||\n");
    let r = read_text("bad.psv", &text, Format::AdesPsv, &stations());
    assert_eq!(r.observations.len(), 2);
    assert_eq!(r.rejected.len(), 1);
    assert_eq!(r.rejected[0].line, 8);
    assert_eq!(r.observations[1].source.line, 9);
}
