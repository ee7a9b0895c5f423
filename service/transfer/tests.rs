use std::io::Write;
use std::path::Path;

use super::*;
use crate::alerts::event::{
    Acknowledgement, AlertEvent, AttemptOutcome, Channel, DeliveryAttempt, Edge, RuleKind,
};
use crate::ingest::{DesignationKey, ObjectId};
use crate::store::journal::JOURNAL_FILE;
use crate::store::records::JournalLine;
use crate::store::{
    journal_dir, ObservationEntry, Origin, OverrideAction, OverrideRecord, SledStore,
    SolutionRecord, SolutionSummary, Store, StoredObservation, Trigger,
};

const A: &str = "provID:2026 ZA1";
const B: &str = "provID:2026 ZA2";
/// A tracklet name that is linked to A later: its object merges into A's.
const C: &str = "trkSub:zq01@ZQA";

fn id_of(designation: &str) -> String {
    ObjectId::from_key(&DesignationKey::parse(designation).unwrap()).0
}

fn origin(name: &str) -> Origin {
    Origin {
        name: name.into(),
        archived_as: format!("2026-12-03/{name}"),
        received_utc: "2026-12-03T10:00:00Z".into(),
    }
}

/// Observation `n` (its content key and time follow from `n`).
fn observation(n: u32, designations: &[&str]) -> ObservationEntry {
    ObservationEntry {
        content_key: format!("{n:064x}"),
        designations: designations.iter().map(|d| d.to_string()).collect(),
        obs_time_utc: format!("2026-12-01T00:{:02}:00.000000000Z", n % 60),
        station: "ZQA".into(),
        record: StoredObservation {
            fields: [
                ("stn".to_string(), "ZQA".to_string()),
                ("ra".to_string(), format!("{}.125", 100 + n)),
            ]
            .into(),
            file: "a.psv".into(),
            line: n,
            submitter: None,
            observatory_code: None,
        },
    }
}

fn alert(object_id: &str, seq: u64, rule: RuleKind) -> AlertEvent {
    AlertEvent {
        id: AlertEvent::id_for(object_id, seq, rule.name()),
        object_id: object_id.into(),
        designation: "2026 ZA1".into(),
        solution_seq: seq,
        previous_seq: seq.checked_sub(1).filter(|s| *s > 0),
        rule,
        rule_key: rule.name().into(),
        edge: Edge::Raised,
        raised_utc: "2026-12-03T10:00:00Z".into(),
        value_before: None,
        value_after: Some(0.1 + 0.2),
        threshold: Some(3.0),
        unit: "sigma".into(),
        subject: "subject".into(),
        text: "text".into(),
        details: serde_json::json!({"x": 1.0 / 3.0}),
        channels: vec![Channel::Email],
    }
}

fn solution(
    store: &SledStore,
    object_id: &str,
    alerts: Vec<AlertEvent>,
    overrides: Vec<OverrideRecord>,
) -> SolutionRecord {
    let seq = store
        .object(object_id)
        .unwrap()
        .map_or(1, |o| o.solutions + 1);
    let inputs = crate::store::all_observations(store, object_id)
        .unwrap()
        .iter()
        .map(|o| o.journal_seq)
        .chain(overrides.iter().map(|o| o.journal_seq))
        .max()
        .unwrap_or(0);
    SolutionRecord {
        object_id: object_id.into(),
        seq,
        summary: SolutionSummary::failed(
            seq,
            "2026-12-03T10:00:00Z",
            Trigger::NewObservations,
            2,
            "test".into(),
        ),
        inputs_journal_seq: inputs,
        duration_s: 1.0 / 7.0,
        software_version: "test".into(),
        identity: Default::default(),
        // Numbers that only survive a round trip copied exactly.
        document: Some(serde_json::json!({"e": 1.000_000_000_000_000_2, "q": 0.1 + 0.7})),
        reference_epoch_tdb_days_j2000: None,
        new_batch: None,
        overrides,
        alerts,
        alert_states: Default::default(),
        plan: None,
        plan_problem: None,
    }
}

/// A store of three objects, one of them (C) merged into A by a later
/// observation that carries both designations, with solutions, alerts,
/// an override, delivery attempts and an acknowledgement interleaved.
fn fixture(database: &Path) {
    let (a, b, c) = (id_of(A), id_of(B), id_of(C));
    let store = SledStore::open(database).unwrap();
    // 1: a mixed batch.
    store
        .add_observations(
            origin("a.psv"),
            vec![
                observation(1, &[A]),
                observation(2, &[B]),
                observation(3, &[A]),
            ],
        )
        .unwrap();
    // 2: A's first solution, with an alert.
    let s = solution(&store, &a, vec![alert(&a, 1, RuleKind::Unbound)], vec![]);
    store.add_solution(s).unwrap();
    // 3: an analyst's decision about A.
    store
        .add_override(OverrideRecord {
            object_id: a.clone(),
            action: OverrideAction::ExcludeObservation {
                content_key: format!("{:064x}", 1),
            },
            by: "test analyst".into(),
            reason: "trailed".into(),
            at_utc: "2026-12-03T11:00:00Z".into(),
            journal_seq: 0,
        })
        .unwrap();
    // 4: its delivery; 5: B's solution with an alert.
    store
        .record_attempt(DeliveryAttempt {
            delivery_id: format!("{a}.1.unbound.email"),
            attempt: 1,
            at_utc: "2026-12-03T11:00:01Z".into(),
            outcome: AttemptOutcome::Delivered,
        })
        .unwrap();
    let s = solution(&store, &b, vec![alert(&b, 1, RuleKind::FitFailed)], vec![]);
    store.add_solution(s).unwrap();
    // 6: C alone; 7: C's solution; 8: the batch that links C to A.
    store
        .add_observations(origin("c.psv"), vec![observation(4, &[C])])
        .unwrap();
    let s = solution(&store, &c, vec![], vec![]);
    store.add_solution(s).unwrap();
    store
        .add_observations(
            origin("link.psv"),
            vec![observation(5, &[C, A]), observation(6, &[B])],
        )
        .unwrap();
    // 9: A's alert acknowledged; 10: B's delivery; 11: A's second solution.
    store
        .acknowledge(Acknowledgement {
            alert_id: format!("{a}.1.unbound"),
            by: "test analyst".into(),
            at_utc: "2026-12-03T12:00:00Z".into(),
        })
        .unwrap();
    store
        .record_attempt(DeliveryAttempt {
            delivery_id: format!("{b}.1.fit_failed.email"),
            attempt: 1,
            at_utc: "2026-12-03T12:00:01Z".into(),
            outcome: AttemptOutcome::Delivered,
        })
        .unwrap();
    let overrides = store.overrides(&a).unwrap();
    assert_eq!(overrides[0].journal_seq, 3);
    let s = solution(&store, &a, vec![], overrides);
    assert_eq!(s.inputs_journal_seq, 8);
    store.add_solution(s).unwrap();
    store.flush().unwrap();
    assert_eq!(store.journal_seq(), 11);
}

fn export_bytes(database: &Path, object: Option<&str>) -> (Vec<u8>, ExportSummary) {
    let mut out = Vec::new();
    let summary = export(database, object, &mut out, "memory").unwrap();
    (out, summary)
}

fn import_bytes(database: &Path, bytes: &[u8]) -> Result<ImportSummary, TransferError> {
    import(database, &mut &bytes[..], "test.jsonl")
}

fn lines(bytes: &[u8]) -> Vec<serde_json::Value> {
    bytes
        .split(|b| *b == b'\n')
        .filter(|l| !l.is_empty())
        .map(|l| serde_json::from_slice(l).unwrap())
        .collect()
}

fn journal_bytes(database: &Path) -> Vec<u8> {
    std::fs::read(journal_dir(database).join(JOURNAL_FILE)).unwrap()
}

#[test]
fn a_whole_store_round_trips_byte_for_byte() {
    let dir = tempfile::tempdir().unwrap();
    let (one, two) = (dir.path().join("one"), dir.path().join("two"));
    fixture(&one);
    let (first, summary) = export_bytes(&one, None);
    assert_eq!(summary.entries, 11);
    assert_eq!(summary.exported, Exported::Store);
    assert!(!summary.left_out_last_line);
    assert_eq!(summary.bytes, first.len() as u64);
    assert_eq!(
        summary.counts,
        Counts {
            observation_batches: 3,
            observations: 6,
            solutions: 4,
            alerts: 2,
            overrides: 1,
            delivery_attempts: 2,
            acknowledgements: 1,
        }
    );
    // Header, the journal's lines as they are, the end line.
    let journal = journal_bytes(&one);
    let header_end = first.iter().position(|b| *b == b'\n').unwrap() + 1;
    assert_eq!(&first[header_end..header_end + journal.len()], &journal[..]);
    let all = lines(&first);
    assert_eq!(all[0]["format"], FORMAT);
    assert_eq!(all[0]["format_version"], FORMAT_VERSION);
    assert_eq!(all[0]["scope"], "store");
    assert_eq!(all[12]["end"], FORMAT);
    assert_eq!(all[12]["entries"], 11);

    let imported = import_bytes(&two, &first).unwrap();
    assert_eq!(imported.checked.entries, 11);
    assert_eq!(
        (imported.objects, imported.observations, imported.solutions),
        (3, 6, 4)
    );
    assert_eq!(journal_bytes(&two), journal);
    let (again, _) = export_bytes(&two, None);
    assert_eq!(again, first);

    // The imported store is the original, as the daemon sees it.
    let (s1, s2) = (
        SledStore::open(&one).unwrap(),
        SledStore::open(&two).unwrap(),
    );
    assert_eq!(s1.objects().unwrap(), s2.objects().unwrap());
    assert_eq!(s1.deliveries().unwrap(), s2.deliveries().unwrap());
    let everything = |s: &SledStore| s.alerts(None, 100, &|_| true).unwrap().0;
    assert_eq!(everything(&s1), everything(&s2));
    let a = id_of(A);
    assert_eq!(
        s1.solutions(&a, None, 10).unwrap(),
        s2.solutions(&a, None, 10).unwrap()
    );
    assert_eq!(s2.journal_seq(), 11);
}

#[test]
fn one_object_round_trips_renumbered() {
    let dir = tempfile::tempdir().unwrap();
    let (one, two) = (dir.path().join("one"), dir.path().join("two"));
    fixture(&one);
    let (a, b, c) = (id_of(A), id_of(B), id_of(C));
    let (first, summary) = export_bytes(&one, Some("2026 ZA1"));
    match &summary.exported {
        Exported::Object {
            object,
            designations,
        } => {
            assert_eq!(object, &a);
            assert_eq!(designations, &[A.to_string(), C.to_string()]);
        }
        other => panic!("{other:?}"),
    }
    // Its entries: the mixed batch cut to A's two observations, A's first
    // solution, the decision, its delivery, C's batch and solution (C was
    // merged into A), the linking batch cut to its A observation, the
    // acknowledgement and A's second solution; nothing of B's.
    let all = lines(&first);
    let entries = &all[1..all.len() - 1];
    let kinds: Vec<&str> = entries
        .iter()
        .map(|e| e["kind"].as_str().unwrap())
        .collect();
    assert_eq!(
        kinds,
        [
            "observations",
            "solution",
            "override",
            "delivery",
            "observations",
            "solution",
            "observations",
            "acknowledge",
            "solution"
        ]
    );
    let seqs: Vec<u64> = entries.iter().map(|e| e["seq"].as_u64().unwrap()).collect();
    assert_eq!(seqs, (1..=9).collect::<Vec<_>>());
    assert_eq!(entries[0]["observations"].as_array().unwrap().len(), 2);
    assert_eq!(entries[5]["record"]["object_id"], c.as_str());
    assert_eq!(entries[6]["observations"].as_array().unwrap().len(), 1);
    assert!(!String::from_utf8_lossy(&first).contains(&b));
    // References follow the numbering: the decision was entry 3 and stays
    // 3; the last fit saw up to entry 8, now 7 (the linking batch).
    let last = &entries[8]["record"];
    assert_eq!(last["overrides"][0]["journal_seq"], 3);
    assert_eq!(last["inputs_journal_seq"], 7);
    assert_eq!(entries[5]["record"]["inputs_journal_seq"], 5);
    // Numbers are copied exactly, even in lines encoded again.
    assert_eq!(last["duration_s"].as_f64(), Some(1.0 / 7.0));

    // The same object by its id, and by the id merged into it.
    assert_eq!(export_bytes(&one, Some(&a)).0, first);
    assert_eq!(export_bytes(&one, Some(&c)).0, first);
    assert_eq!(export_bytes(&one, Some(A)).0, first);
    assert_eq!(export_bytes(&one, Some("zq01@ZQA")).0, first);

    import_bytes(&two, &first).unwrap();
    let (again, _) = export_bytes(&two, Some("2026 ZA1"));
    assert_eq!(again, first);
    // The imported object is in the same state: nothing due, the same
    // decisions and solutions.
    let (s1, s2) = (
        SledStore::open(&one).unwrap(),
        SledStore::open(&two).unwrap(),
    );
    let (o1, o2) = (
        s1.object(&a).unwrap().unwrap(),
        s2.object(&a).unwrap().unwrap(),
    );
    assert_eq!(o1.due(), o2.due());
    assert_eq!(o1.observations, o2.observations);
    assert_eq!(o1.solutions, o2.solutions);
    assert_eq!(o1.designations, o2.designations);
    assert_eq!(s2.overrides(&a).unwrap().len(), 1);
    assert_eq!(
        s2.alert(&format!("{a}.1.unbound"))
            .unwrap()
            .unwrap()
            .acknowledged
            .map(|k| k.by),
        Some("test analyst".into())
    );
    assert!(s2.object(&b).unwrap().is_none());
}

#[test]
fn an_unknown_object_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    fixture(dir.path());
    for name in ["2026 ZZ9", "obj-0000000000000000", "provID:2026 ZZ9"] {
        match export(dir.path(), Some(name), &mut Vec::new(), "memory") {
            Err(TransferError::NoObject { name: n, path }) => {
                assert_eq!(n, name);
                assert!(
                    path.ends_with("journal/journal.jsonl"),
                    "{}",
                    path.display()
                );
            }
            other => panic!("{other:?}"),
        }
    }
    let empty = tempfile::tempdir().unwrap();
    assert!(matches!(
        export(empty.path(), None, &mut Vec::new(), "memory"),
        Err(TransferError::NoJournal { .. })
    ));
}

#[test]
fn an_append_in_progress_is_left_out_and_damage_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    fixture(dir.path());
    let (whole, _) = export_bytes(dir.path(), None);
    let path = journal_dir(dir.path()).join(JOURNAL_FILE);
    let good = std::fs::read(&path).unwrap();
    // Half an entry at the end, as a running daemon's append looks for a
    // moment (or a crash leaves it): left out, the rest exported.
    let mut f = std::fs::OpenOptions::new()
        .append(true)
        .open(&path)
        .unwrap();
    f.write_all(br#"{"seq":12,"kind":"observ"#).unwrap();
    drop(f);
    let (out, summary) = export_bytes(dir.path(), None);
    assert_eq!(out, whole);
    assert!(summary.left_out_last_line);
    assert_eq!(summary.journal_bytes, good.len() as u64);
    let (_, summary) = export_bytes(dir.path(), Some("2026 ZA1"));
    assert!(summary.left_out_last_line);
    // A whole last line that is not an entry is a torn append too.
    let mut torn = good.clone();
    torn.extend_from_slice(b"{\"seq\":12,\"ki\n");
    std::fs::write(&path, &torn).unwrap();
    let (out, summary) = export_bytes(dir.path(), None);
    assert_eq!(out, whole);
    assert!(summary.left_out_last_line);
    assert_eq!(summary.journal_bytes, good.len() as u64);
    // Damage before the end is refused with its line.
    let text = String::from_utf8(good.clone()).unwrap();
    let mut damaged: Vec<String> = text.lines().map(String::from).collect();
    damaged[3].replace_range(2..6, "####");
    std::fs::write(&path, damaged.join("\n") + "\n").unwrap();
    match export(dir.path(), None, &mut Vec::new(), "memory") {
        Err(TransferError::Journal { line, .. }) => assert_eq!(line, 4),
        other => panic!("{other:?}"),
    }
    // So is a gap in the numbering.
    let mut gap: Vec<&str> = text.lines().collect();
    gap.remove(4);
    std::fs::write(&path, gap.join("\n") + "\n").unwrap();
    match export(dir.path(), None, &mut Vec::new(), "memory") {
        Err(e @ TransferError::Journal { line: 5, .. }) => {
            assert!(e.to_string().contains("entry 6 where entry 5"), "{e}")
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn import_refuses_a_store_that_is_not_empty() {
    let dir = tempfile::tempdir().unwrap();
    let one = dir.path().join("one");
    fixture(&one);
    let (bytes, _) = export_bytes(&one, None);
    let journal = journal_bytes(&one);
    match import_bytes(&one, &bytes) {
        Err(e @ TransferError::NotEmpty { .. }) => {
            let text = e.to_string();
            assert!(text.contains(&one.display().to_string()), "{text}");
            assert!(text.contains("not empty"), "{text}");
        }
        other => panic!("{other:?}"),
    }
    assert_eq!(journal_bytes(&one), journal);
    // A journal without an index is not empty either.
    let two = dir.path().join("two");
    std::fs::create_dir_all(journal_dir(&two)).unwrap();
    std::fs::write(journal_dir(&two).join(JOURNAL_FILE), &journal).unwrap();
    match import_bytes(&two, &bytes) {
        Err(e @ TransferError::NotEmpty { .. }) => {
            assert!(e.to_string().contains("journal.jsonl"), "{e}")
        }
        other => panic!("{other:?}"),
    }
    assert!(
        !crate::store::index_dir(&two).exists(),
        "the index it made is removed"
    );
    // An empty journal (a daemon started and stopped) is an empty store.
    std::fs::write(journal_dir(&two).join(JOURNAL_FILE), b"").unwrap();
    import_bytes(&two, &bytes).unwrap();
    assert_eq!(journal_bytes(&two), journal);
    // A store a daemon has open is refused as in use.
    let open = SledStore::open(&dir.path().join("three")).unwrap();
    match import_bytes(&dir.path().join("three"), &bytes) {
        Err(TransferError::Store(crate::store::StoreError::Locked { .. })) => {}
        other => panic!("{other:?}"),
    }
    drop(open);
}

/// Imports `bytes` into a new store; the error's text, and the store left
/// as it was (nothing under it).
fn refused(bytes: &[u8]) -> (u64, String) {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("db");
    let e = import_bytes(&db, bytes).expect_err("refused");
    assert!(!db.exists(), "{} is left behind after: {e}", db.display());
    // The same checks without a store.
    let c = check(&mut &bytes[..], "test.jsonl").expect_err("refused");
    assert_eq!(c.to_string(), e.to_string());
    match e {
        TransferError::Input {
            line,
            ref source_name,
            ..
        } => {
            assert_eq!(source_name, "test.jsonl");
            (line, e.to_string())
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn bad_imports_are_refused_with_their_line() {
    let dir = tempfile::tempdir().unwrap();
    fixture(dir.path());
    let (good, _) = export_bytes(dir.path(), None);
    assert_eq!(check(&mut &good[..], "good").unwrap().entries, 11);
    let text = String::from_utf8(good.clone()).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 13);
    let join = |ls: &[&str]| ls.join("\n") + "\n";

    // Cut short: without the end line, or inside a line.
    let (line, why) = refused(join(&lines[..12]).as_bytes());
    assert_eq!(line, 13, "{why}");
    assert!(why.contains("without its end line"), "{why}");
    let (line, why) = refused(&good[..good.len() - text.lines().last().unwrap().len() - 40]);
    assert_eq!(line, 12, "{why}");
    assert!(why.contains("cut short"), "{why}");
    let (line, _) = refused(b"");
    assert_eq!(line, 1);

    // A garbled line: not JSON, or JSON that is not an entry.
    let mut garbled = lines.clone();
    let broken = lines[5].replacen("\"kind\"", "\"kind", 1);
    garbled[5] = &broken;
    let (line, why) = refused(join(&garbled).as_bytes());
    assert_eq!(line, 6, "{why}");
    let mut wrong = lines.clone();
    let unknown = lines[5].replacen("\"kind\":\"", "\"kind\":\"x", 1);
    wrong[5] = &unknown;
    let (line, why) = refused(join(&wrong).as_bytes());
    assert_eq!(line, 6, "{why}");
    assert!(why.contains("not a journal entry"), "{why}");
    // A changed value that still parses: the digest.
    let mut changed = lines.clone();
    let edited = lines[3].replacen("trailed", "blurred", 1);
    assert_ne!(edited, lines[3]);
    changed[3] = &edited;
    let (line, why) = refused(join(&changed).as_bytes());
    assert_eq!(line, 13, "{why}");
    assert!(why.contains("SHA-256"), "{why}");
    // Entries out of order, a line after the end, an unknown line.
    let mut swapped = lines.clone();
    swapped.swap(3, 4);
    let (line, why) = refused(join(&swapped).as_bytes());
    assert_eq!(line, 4, "{why}");
    let mut after = lines.clone();
    after.push(lines[12]);
    let (line, _) = refused(join(&after).as_bytes());
    assert_eq!(line, 14);
    let mut other = lines.clone();
    other.insert(3, "{\"hello\":1}");
    let (line, why) = refused(join(&other).as_bytes());
    assert_eq!(line, 4, "{why}");

    // Headers it does not know.
    let newer = lines[0].replacen(
        &format!("\"format_version\":{FORMAT_VERSION}"),
        "\"format_version\":99",
        1,
    );
    let mut h = lines.clone();
    h[0] = &newer;
    let (line, why) = refused(join(&h).as_bytes());
    assert_eq!(line, 1);
    assert!(why.contains("format version 99"), "{why}");
    let (line, why) = refused(&journal_bytes(dir.path()));
    assert_eq!(line, 1);
    assert!(why.contains("a journal file is not an export"), "{why}");

    // A solution numbered out of turn for its object.
    let mut skipped = lines.clone();
    let s = lines[2].replacen("\"seq\":1,\"summary\"", "\"seq\":2,\"summary\"", 1);
    assert_ne!(s, lines[2]);
    skipped[2] = &s;
    let (line, why) = refused(join(&skipped).as_bytes());
    assert_eq!(line, 3, "{why}");
    assert!(why.contains("numbered from 1 without gaps"), "{why}");
}

#[test]
fn lines_are_read_whole_or_reported() {
    let mut buf = Vec::new();
    let mut input: &[u8] = b"ab\ncd";
    assert_eq!(read_line(&mut input, &mut buf, 10).unwrap(), Line::Complete);
    assert_eq!(buf, b"ab\n");
    assert_eq!(
        read_line(&mut input, &mut buf, 10).unwrap(),
        Line::Incomplete
    );
    assert_eq!(buf, b"cd");
    assert_eq!(read_line(&mut input, &mut buf, 10).unwrap(), Line::End);
    let mut long: &[u8] = b"0123456789abc\n";
    let e = read_line(&mut long, &mut buf, 10).unwrap_err();
    assert_eq!(e.kind(), std::io::ErrorKind::InvalidData);
}

#[test]
fn the_journal_line_form_is_what_the_export_assumes() {
    // Entries are recognised by "seq" and copied as the journal holds
    // them; the journal writes seq first.
    let line = JournalLine {
        seq: 7,
        entry: crate::store::JournalEntry::Acknowledge {
            ack: Acknowledgement {
                alert_id: "x".into(),
                by: "y".into(),
                at_utc: "z".into(),
            },
        },
    };
    let text = serde_json::to_string(&line).unwrap();
    assert!(
        text.starts_with("{\"seq\":7,\"kind\":\"acknowledge\""),
        "{text}"
    );
}

#[test]
fn export_to_a_file_replaces_it_whole() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("db");
    fixture(&db);
    let path = dir.path().join("backup.jsonl");
    std::fs::write(&path, b"an older backup").unwrap();
    let summary = export_to_file(&db, None, &path).unwrap();
    let bytes = std::fs::read(&path).unwrap();
    assert_eq!(bytes.len() as u64, summary.bytes);
    assert_eq!(bytes, export_bytes(&db, None).0);
    // A failed export leaves the earlier file and no partial one.
    let before = std::fs::read(&path).unwrap();
    assert!(export_to_file(&db, Some("2026 ZZ9"), &path).is_err());
    assert_eq!(std::fs::read(&path).unwrap(), before);
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(!names.iter().any(|n| n.contains("partial")), "{names:?}");
}

#[test]
fn exports_taken_while_entries_are_appended_are_whole_prefixes() {
    let dir = tempfile::tempdir().unwrap();
    fixture(dir.path());
    let store = std::sync::Arc::new(SledStore::open(dir.path()).unwrap());
    let writer = {
        let store = store.clone();
        std::thread::spawn(move || {
            for n in 0..300u32 {
                let batch = (0..20)
                    .map(|k| observation(1000 + n * 20 + k, &[A]))
                    .collect();
                store
                    .add_observations(origin(&format!("more-{n}.psv")), batch)
                    .unwrap();
            }
        })
    };
    let mut previous = 0;
    let mut exports = 0;
    while !writer.is_finished() || exports == 0 {
        let (bytes, summary) = export_bytes(dir.path(), None);
        // Each one a whole export of a prefix of the journal, never less
        // than the one before.
        let checked = check(&mut &bytes[..], "live").unwrap();
        assert_eq!(checked.entries, summary.entries);
        assert!(summary.entries >= previous.max(11));
        previous = summary.entries;
        let (one, _) = export_bytes(dir.path(), Some("2026 ZA1"));
        check(&mut &one[..], "live, one object").unwrap();
        exports += 1;
    }
    writer.join().unwrap();
    let (last, summary) = export_bytes(dir.path(), None);
    assert_eq!(summary.entries, 311);
    assert!(!summary.left_out_last_line);
    let copy = tempfile::tempdir().unwrap();
    import_bytes(copy.path(), &last).unwrap();
    assert_eq!(export_bytes(copy.path(), None).0, last);
    println!("{exports} exports while 300 entries were appended");
}
