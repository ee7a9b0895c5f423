//! Whole path: files in, objects linked across designations and files,
//! exact duplicates kept once, summary rendered and serialised.

use perihelix::config::{Station, StationList};
use perihelix::ingest::{ingest_files, read_file, DesignationKey, ObjectId};

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

const NIGHT1: &str =
    "# version=2022\n# observatory\n! mpcCode XQ1\n# submitter\n! name A. Nobody\n\
trkSub|mode|stn|obsTime|ra|dec|astCat\n\
qx01|CCD|XQ1|2026-03-14T05:12:33Z|215.6|-13.5|Gaia3\n\
qx01|CCD|XQ1|2026-03-14T05:42:33Z|215.7|-13.4|Gaia3\n\
qx01|CCD|XQ2|2026-03-14T05:42:33Z|215.7|-13.4|Gaia3\n\
bad|CCD|XQ1|2026-03-14T05:42:33Z|215.7|-93.4|Gaia3\n";

// The second file names the same tracklet with its provisional designation,
// and repeats one measurement with the numbers written differently.
const NIGHT2: &str = r#"{"trk_sub": "qx01", "prov_id": "2031 QA7", "station": "XQ1", "obs_time_utc": "2026-03-14T05:42:33.000Z", "ra_deg": 215.70, "dec_deg": -13.40}
{"prov_id": "2031 QA7", "station": "XQ2", "obs_time_utc": "2026-03-16T01:00:00Z", "ra_deg": 216.0, "dec_deg": -13.0}
"#;

#[test]
fn designations_link_across_files_and_duplicates_drop() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("night1.psv");
    let b = dir.path().join("night2.jsonl");
    std::fs::write(&a, NIGHT1).unwrap();
    std::fs::write(&b, NIGHT2).unwrap();
    let out = ingest_files(&[&a, &b], &stations(), &[]);
    let s = &out.summary;
    assert_eq!(s.observations_read, 5);
    assert_eq!(s.duplicates_dropped, 1);
    assert_eq!(s.observations_kept, 4);
    assert_eq!(s.rejected.len(), 1);
    assert_eq!(s.rejected[0].line, 10);
    // qx01@XQ1 and 2031 QA7 are one object; qx01@XQ2 is another.
    assert_eq!(out.objects.len(), 2);
    let founder = DesignationKey::TrkSub {
        name: "qx01".into(),
        station: "XQ1".into(),
    };
    let id = ObjectId::from_key(&founder);
    let obj = out.objects.iter().find(|o| o.id == id).unwrap();
    assert_eq!(obj.observations.len(), 3);
    assert_eq!(obj.designations.len(), 2);
    let sum = s.objects.iter().find(|o| o.object_id == id).unwrap();
    assert_eq!(sum.first_obs_time_utc, "2026-03-14T05:12:33Z");
    assert_eq!(sum.last_obs_time_utc, "2026-03-16T01:00:00Z");
    assert_eq!(sum.per_station.get("XQ2"), Some(&1));
    let text = s.to_string();
    assert!(
        text.contains("night1.psv:10: field 'dec': -93.4 is outside [-90, 90]"),
        "{text}"
    );
    let json = serde_json::to_value(s).unwrap();
    assert_eq!(json["duplicates_dropped"], 1);
    assert_eq!(json["rejected"][0]["problem"]["reason"], "out_of_range");
    assert_eq!(json["rejected"][0]["field"], "dec");
}

#[test]
fn configured_links_join_trksubs_of_two_stations_and_fix_the_id() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("night1.psv");
    std::fs::write(&a, NIGHT1).unwrap();
    let links = vec![vec![
        DesignationKey::parse("provID:2031 QA7").unwrap(),
        DesignationKey::parse("trkSub:qx01@XQ1").unwrap(),
        DesignationKey::parse("trkSub:qx01@XQ2").unwrap(),
    ]];
    let out = read_file(&a, &stations(), &links);
    assert_eq!(out.objects.len(), 1);
    assert_eq!(
        out.objects[0].id,
        ObjectId::from_key(&DesignationKey::ProvId("2031 QA7".into()))
    );
    assert_eq!(out.objects[0].observations.len(), 3);
}

#[test]
fn unreadable_and_unknown_files_are_reported() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("nothing.psv");
    let odd = dir.path().join("odd.txt");
    std::fs::write(&odd, "hello\n").unwrap();
    let out = ingest_files(&[&missing, &odd], &stations(), &[]);
    let r = &out.summary.rejected;
    assert_eq!(r.len(), 2);
    assert!(matches!(
        r[0].problem,
        perihelix::ingest::Problem::Io { .. }
    ));
    assert!(matches!(
        r[1].problem,
        perihelix::ingest::Problem::Syntax { .. }
    ));
}
