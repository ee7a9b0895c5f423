//! ADES XML reading, laid out like the ADES standard's example files
//! (IAU-ADES/ADES-Master tests/input/*.xml), invented designations and
//! stations; one test per kind of bad input asserting line, field, reason.

use perihelix::config::{Station, StationList};
use perihelix::ingest::{read_text, Format, ObsKind, Problem, Rejection};

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

const GOOD: &str = r#"<?xml version='1.0' encoding='UTF-8'?>
<ades version="2022">
  <obsBlock>
    <obsContext>
      <observatory>
        <mpcCode>XQ1</mpcCode>
        <name>Invented Hill</name>
      </observatory>
      <submitter>
        <name>A. Nobody</name>
      </submitter>
      <telescope>
        <design>Reflector</design>
        <aperture>2.2</aperture>
        <detector>CCD</detector>
      </telescope>
    </obsContext>
    <obsData>
      <optical>
        <provID>2031 QA7</provID>
        <mode>CCD</mode>
        <stn>XQ1</stn>
        <obsTime>2026-06-15T13:44:30.18Z</obsTime>
        <ra>325.589699</ra>
        <dec>+0.560433</dec>
        <rmsRA>0.033</rmsRA>
        <rmsDec>0.033</rmsDec>
        <astCat>Gaia3</astCat>
        <mag>22.458</mag>
        <rmsMag>0.069</rmsMag>
        <band>G</band>
        <photCat>Gaia3</photCat>
        <seeing>1.3</seeing>
        <remarks>invented</remarks>
      </optical>
      <optical>
        <provID>2031 QA7</provID>
        <mode>CCD</mode>
        <stn>XQ1</stn>
        <obsTime>2026-06-15T13:51:56.52Z</obsTime>
        <ra>325.591585</ra>
        <dec>+0.563396</dec>
        <astCat>Gaia3</astCat>
      </optical>
    </obsData>
  </obsBlock>
  <obsBlock>
    <obsContext>
      <observatory><mpcCode>XQ2</mpcCode></observatory>
      <submitter><name>B. Someone</name></submitter>
    </obsContext>
    <obsData>
      <optical>
        <trkSub>qx01</trkSub>
        <mode>CMO</mode>
        <stn>XQ2</stn>
        <obsTime>2026-06-16T01:00:00Z</obsTime>
        <ra>326.0</ra>
        <dec>1.0</dec>
        <astCat>Gaia3</astCat>
      </optical>
    </obsData>
  </obsBlock>
</ades>
"#;

#[test]
fn two_blocks_read_with_lines_and_context() {
    let r = read_text("obs.xml", GOOD, Format::AdesXml, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations.len(), 3);
    assert_eq!(r.observations[0].source.line, 19);
    assert_eq!(r.observations[0].prov_id(), Some("2031 QA7"));
    assert_eq!(r.observations[0].mag, Some(22.458));
    assert_eq!(r.observations[1].source.line, 36);
    assert_eq!(r.observations[2].submitter(), Some("B. Someone"));
    assert_eq!(r.observations[2].obs_time_text(), "2026-06-16T01:00:00Z");
}

#[test]
fn version_2017_is_read() {
    let text = GOOD.replace("version=\"2022\"", "version=\"2017\"");
    let r = read_text("obs.xml", &text, Format::AdesXml, &stations());
    assert_eq!((r.observations.len(), r.rejected.len()), (3, 0));
}

/// A file with one optical record made of the given elements; the record
/// starts at line 4 and its n-th element is on line 4 + n.
fn one(elements: &[(&str, &str)]) -> String {
    let mut s = String::from(
        "<?xml version=\"1.0\"?>\n<ades version=\"2022\">\n<obsBlock><obsData>\n<optical>\n",
    );
    for (k, v) in elements {
        s.push_str(&format!("  <{k}>{v}</{k}>\n"));
    }
    s.push_str("</optical>\n</obsData></obsBlock>\n</ades>\n");
    s
}

const BASE: [(&str, &str); 10] = [
    ("trkSub", "qx01"),
    ("mode", "CCD"),
    ("stn", "XQ1"),
    ("obsTime", "2026-03-14T05:12:33Z"),
    ("ra", "215.6"),
    ("dec", "-13.5"),
    ("rmsRA", "0.1"),
    ("rmsDec", "0.1"),
    ("rmsCorr", "0.2"),
    ("astCat", "Gaia3"),
];

fn replaced(name: &str, value: &'static str) -> String {
    let mut e = BASE.to_vec();
    for (k, v) in e.iter_mut() {
        if *k == name {
            *v = value;
        }
    }
    one(&e)
}

fn only_rejection(text: &str) -> Rejection {
    let r = read_text("bad.xml", text, Format::AdesXml, &stations());
    assert_eq!(r.rejected.len(), 1, "{:?}", r.rejected);
    r.rejected[0].clone()
}

fn check(text: &str, line: u32, field: Option<&str>, want: impl Fn(&Problem) -> bool) {
    let e = only_rejection(text);
    assert_eq!(e.line, line, "{e}");
    assert_eq!(e.field.as_deref(), field, "{e}");
    assert!(want(&e.problem), "{e}");
}

#[test]
fn base_record_is_good() {
    let r = read_text("bad.xml", &one(&BASE), Format::AdesXml, &stations());
    assert_eq!(
        (r.observations.len(), r.rejected.len()),
        (1, 0),
        "{:?}",
        r.rejected
    );
    assert_eq!(r.observations[0].source.line, 4);
}

#[test]
fn missing_version() {
    let text = one(&BASE).replace(" version=\"2022\"", "");
    check(&text, 2, None, |p| matches!(p, Problem::BadVersion { .. }));
}

#[test]
fn wrong_version() {
    let text = one(&BASE).replace("2022", "2019");
    check(
        &text,
        2,
        None,
        |p| matches!(p, Problem::BadVersion { why } if why.contains("2019")),
    );
}

#[test]
fn truncated_file() {
    let text = one(&BASE);
    // 10 elements put </optical> on line 15; cutting the last 30 of the
    // closing 41 characters leaves the file ending right after it.
    check(&text[..text.len() - 30], 15, None, |p| {
        matches!(p, Problem::Truncated)
    });
}

#[test]
fn malformed_xml() {
    let text = one(&BASE).replace("<ra>215.6</ra>", "<ra>215.6</dec>");
    check(&text, 9, None, |p| matches!(p, Problem::Syntax { .. }));
}

#[test]
fn wrong_root() {
    check("<obs version=\"2022\"/>", 1, None, |p| {
        matches!(p, Problem::BadHeader { .. })
    });
}

#[test]
fn duplicate_element() {
    let mut e = BASE.to_vec();
    e.push(("ra", "215.7"));
    check(&one(&e), 15, Some("ra"), |p| {
        matches!(p, Problem::DuplicateColumn { .. })
    });
}

#[test]
fn unknown_element() {
    let mut e = BASE.to_vec();
    e.push(("colour", "red"));
    check(&one(&e), 15, Some("colour"), |p| {
        matches!(p, Problem::UnknownColumn)
    });
}

#[test]
fn unparseable_time() {
    check(&replaced("obsTime", "yesterday"), 8, Some("obsTime"), |p| {
        matches!(p, Problem::BadTime { .. })
    });
}

#[test]
fn ra_outside_range() {
    check(&replaced("ra", "-1"), 9, Some("ra"), |p| {
        matches!(
            p,
            Problem::OutOfRange {
                range: "[0, 360)",
                ..
            }
        )
    });
}

#[test]
fn dec_outside_range() {
    let e = only_rejection(&replaced("dec", "91.2"));
    assert_eq!(
        e.to_string(),
        "bad.xml:10: field 'dec': 91.2 is outside [-90, 90]"
    );
    assert_eq!(e.column, Some(3));
}

#[test]
fn zero_uncertainty() {
    check(&replaced("rmsRA", "0.0"), 11, Some("rmsRA"), |p| {
        matches!(p, Problem::NotPositive { .. })
    });
}

#[test]
fn correlation_outside_range() {
    check(&replaced("rmsCorr", "-1.01"), 13, Some("rmsCorr"), |p| {
        matches!(p, Problem::OutOfRange { .. })
    });
}

#[test]
fn unknown_station() {
    check(&replaced("stn", "XQ9"), 7, Some("stn"), |p| {
        matches!(p, Problem::UnknownStation { .. })
    });
}

#[test]
fn missing_designation() {
    let e: Vec<_> = BASE
        .iter()
        .copied()
        .filter(|(k, _)| *k != "trkSub")
        .collect();
    check(&one(&e), 4, None, |p| {
        matches!(p, Problem::MissingDesignation)
    });
}

#[test]
fn non_numeric_field() {
    check(&replaced("dec", "minus ten"), 10, Some("dec"), |p| {
        matches!(p, Problem::NotANumber { .. })
    });
}

#[test]
fn bad_sys_ctr_combination() {
    let mut e = BASE.to_vec();
    e.extend([
        ("sys", "ITRF"),
        ("ctr", "301"),
        ("pos1", "1"),
        ("pos2", "2"),
        ("pos3", "3"),
    ]);
    check(&one(&e), 16, Some("ctr"), |p| {
        matches!(p, Problem::BadLocation { .. })
    });
}

#[test]
fn unsupported_sys() {
    let mut e = BASE.to_vec();
    e.extend([
        ("sys", "IAU"),
        ("ctr", "499"),
        ("pos1", "1"),
        ("pos2", "2"),
        ("pos3", "3"),
    ]);
    check(&one(&e), 15, Some("sys"), |p| {
        matches!(p, Problem::BadLocation { .. })
    });
}

#[test]
fn missing_ast_cat() {
    let e: Vec<_> = BASE
        .iter()
        .copied()
        .filter(|(k, _)| *k != "astCat")
        .collect();
    check(&one(&e), 4, Some("astCat"), |p| {
        matches!(p, Problem::Missing)
    });
}

#[test]
fn offset_and_radar_records_are_unsupported() {
    let text = "<ades version=\"2022\">\n<obsBlock><obsData>\n<offset><trkSub>qx01</trkSub></offset>\n</obsData></obsBlock>\n<radar><permID>9000001</permID></radar>\n</ades>\n";
    let r = read_text("bad.xml", text, Format::AdesXml, &stations());
    assert_eq!(r.rejected.len(), 2);
    assert_eq!(r.rejected[0].line, 3);
    assert_eq!(
        r.rejected[0].problem,
        Problem::Unsupported {
            kind: ObsKind::Offset
        }
    );
    assert_eq!(r.rejected[1].line, 5);
    assert_eq!(
        r.rejected[1].problem,
        Problem::Unsupported {
            kind: ObsKind::Radar
        }
    );
}

#[test]
fn offset_field_inside_optical_is_unsupported() {
    let mut e = BASE.to_vec();
    e.push(("deltaRA", "0.01"));
    check(&one(&e), 15, Some("deltaRA"), |p| {
        matches!(
            p,
            Problem::Unsupported {
                kind: ObsKind::Offset
            }
        )
    });
}
