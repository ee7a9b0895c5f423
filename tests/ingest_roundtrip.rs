//! Random valid observations written as ADES PSV and XML by the ingest
//! writers read back with identical text and values.

use perihelix::config::{Station, StationList};
use perihelix::ingest::write::{to_psv, to_xml};
use perihelix::ingest::{read_text, Field, Format, Observation};
use proptest::prelude::*;

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

fn decimal(int: std::ops::Range<i64>, places: usize) -> impl Strategy<Value = String> {
    (int, 0u64..10u64.pow(places as u32), 0..=places).prop_map(move |(i, f, keep)| {
        if keep == 0 {
            format!("{i}")
        } else {
            let frac = format!("{f:0places$}");
            format!("{i}.{}", &frac[..keep])
        }
    })
}

prop_compose! {
    fn json_line()(
        trk in "[a-z][a-z0-9]{0,7}",
        prov in proptest::option::of("20[3-9][0-9] [A-HJ-Y][A-HJ-Z][1-9]{0,2}"),
        stn in prop_oneof![Just("XQ1"), Just("XQ2")],
        (y, mo, d, h, mi, s) in (1990i32..2090, 1u8..=12, 1u8..=28, 0u8..24, 0u8..60, 0u8..60),
        frac in proptest::option::of("[0-9]{1,6}"),
        ra in decimal(0..360, 7),
        dec in decimal(-89..90, 7),
        rms in proptest::option::of((decimal(1..5, 3), decimal(1..5, 3))),
        corr in proptest::option::of(decimal(0..1, 4)),
        mag in proptest::option::of(decimal(10..25, 2)),
        remark in proptest::option::of("[A-Za-z][A-Za-z0-9 ,.]{0,30}[A-Za-z0-9]"),
    ) -> String {
        let frac = frac.map(|f| format!(".{f}")).unwrap_or_default();
        let mut s = format!(
            r#"{{"trk_sub":"{trk}","station":"{stn}","mode":"CCD","astrometric_catalog":"Gaia3","obs_time_utc":"{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}{frac}Z","ra_deg":{ra},"dec_deg":{dec}"#
        );
        if let Some(p) = prov { s.push_str(&format!(r#","prov_id":"{p}""#)); }
        if let Some((a, b)) = rms { s.push_str(&format!(r#","rms_ra_arcsec":{a},"rms_dec_arcsec":{b}"#)); }
        if let Some(c) = corr { s.push_str(&format!(r#","rms_corr":{c}"#)); }
        if let Some(m) = mag { s.push_str(&format!(r#","mag":{m},"band":"G""#)); }
        if let Some(r) = remark { s.push_str(&format!(r#","remarks":"{r}""#)); }
        s.push('}');
        s
    }
}

fn same(a: &Observation, b: &Observation) {
    assert_eq!(a.text, b.text);
    assert_eq!(a.time, b.time);
    assert_eq!(a.ra_deg.to_bits(), b.ra_deg.to_bits());
    assert_eq!(a.dec_deg.to_bits(), b.dec_deg.to_bits());
    assert_eq!(a.rms_ra_arcsec, b.rms_ra_arcsec);
    assert_eq!(a.rms_dec_arcsec, b.rms_dec_arcsec);
    assert_eq!(a.rms_corr, b.rms_corr);
    assert_eq!(a.mag, b.mag);
    assert_eq!(a.location, b.location);
}

proptest! {
    #[test]
    fn psv_and_xml_round_trip(lines in proptest::collection::vec(json_line(), 1..20)) {
        let text = lines.join("\n") + "\n";
        let read = read_text("gen.jsonl", &text, Format::JsonLines, &stations());
        prop_assert!(read.rejected.is_empty(), "{:?}", read.rejected);
        prop_assert_eq!(read.observations.len(), lines.len());
        for version in ["2017", "2022"] {
            let psv = to_psv(&read.observations, version).unwrap();
            let back = read_text("gen.psv", &psv, Format::AdesPsv, &stations());
            prop_assert!(back.rejected.is_empty(), "{:?}\n{}", back.rejected, psv);
            prop_assert_eq!(back.observations.len(), lines.len());
            for (a, b) in read.observations.iter().zip(&back.observations) {
                same(a, b);
            }
            let xml = to_xml(&read.observations, version);
            let back = read_text("gen.xml", &xml, Format::AdesXml, &stations());
            prop_assert!(back.rejected.is_empty(), "{:?}\n{}", back.rejected, xml);
            for (a, b) in read.observations.iter().zip(&back.observations) {
                same(a, b);
            }
        }
    }
}

#[test]
fn psv_writer_refuses_a_pipe() {
    let line = r#"{"trk_sub":"qx01","station":"XQ1","obs_time_utc":"2026-03-14T05:12:33Z","ra_deg":1,"dec_deg":2,"remarks":"a|b"}"#;
    let read = read_text("gen.jsonl", line, Format::JsonLines, &stations());
    let e = to_psv(&read.observations, "2022").unwrap_err();
    assert_eq!(e.field, Field::Remarks.ades_name());
}
