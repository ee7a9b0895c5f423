use super::*;
use crate::config::{load_stations, StationList};
use crate::ingest::read_path;

fn stations() -> StationList {
    load_stations(&Path::new(env!("CARGO_MANIFEST_DIR")).join("config/stations.toml")).unwrap()
}

fn fixture_entries() -> Vec<ObservationEntry> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv");
    let read = read_path(&path, &stations());
    assert!(read.rejected.is_empty());
    read.observations.iter().map(ObservationEntry::of).collect()
}

fn origin(name: &str) -> Origin {
    Origin {
        name: name.into(),
        archived_as: format!("2026-12-03/{name}"),
        received_utc: "2026-12-03T10:00:00Z".into(),
    }
}

fn record(id: &str, seq: u64, inputs: u64) -> SolutionRecord {
    SolutionRecord {
        object_id: id.into(),
        seq,
        summary: SolutionSummary::failed(
            seq,
            "2026-12-03T10:00:00Z",
            Trigger::NewObservations,
            0,
            "test".into(),
        ),
        inputs_journal_seq: inputs,
        duration_s: 0.0,
        software_version: "test".into(),
        identity: Default::default(),
        document: None,
        reference_epoch_tdb_days_j2000: None,
        new_batch: None,
        overrides: Vec::new(),
        alerts: Vec::new(),
        alert_states: Default::default(),
        plan: None,
        plan_problem: None,
    }
}

/// A store under `path` with the fixture's observations and one solution;
/// the object's id.
fn with_one_solution(path: &Path) -> (SledStore, String) {
    let store = SledStore::open(path).unwrap();
    store
        .add_observations(origin("a.psv"), fixture_entries())
        .unwrap();
    let id = store.objects().unwrap()[0].id.clone();
    store
        .add_solution(record(&id, 1, store.journal_seq()))
        .unwrap();
    (store, id)
}

#[test]
fn observations_are_stored_once_and_found_by_designation() {
    let dir = tempfile::tempdir().unwrap();
    let store = SledStore::open(dir.path()).unwrap();
    let entries = fixture_entries();
    let n = entries.len();
    let (first_half, second_half) = entries.split_at(n / 2);
    let a = store
        .add_observations(origin("a.psv"), first_half.to_vec())
        .unwrap();
    assert_eq!(a.added.values().sum::<usize>(), n / 2);
    // The whole file again: only the second half is new.
    let b = store
        .add_observations(origin("b.psv"), entries.clone())
        .unwrap();
    assert_eq!(b.duplicates, n / 2);
    assert_eq!(b.added.values().sum::<usize>(), n - n / 2);
    let objects = store.objects().unwrap();
    assert_eq!(objects.len(), 1);
    let o = &objects[0];
    assert_eq!(o.observations as usize, n);
    assert!(o.needs_refit());
    // By any designation, bare or spelt out.
    let designation = second_half[0].designations[0].clone();
    assert_eq!(store.object(&designation).unwrap().unwrap().id, o.id);
    // Pages in time order, with no observation twice or missed.
    let mut seen = Vec::new();
    let mut cursor = None;
    loop {
        let (page, next) = store.observations(&o.id, cursor.as_deref(), 100).unwrap();
        seen.extend(page.into_iter().map(|p| p.entry.obs_time_utc));
        match next {
            Some(c) => cursor = Some(c),
            None => break,
        }
    }
    assert_eq!(seen.len(), n);
    assert!(seen.windows(2).all(|w| w[0] <= w[1]));
    let _ = first_half;
}

#[test]
fn solutions_keep_their_sequence_and_survive_reopen_and_rebuild() {
    let dir = tempfile::tempdir().unwrap();
    let id = {
        let store = SledStore::open(dir.path()).unwrap();
        store
            .add_observations(origin("a.psv"), fixture_entries())
            .unwrap();
        let id = store.objects().unwrap()[0].id.clone();
        let seq = store.journal_seq();
        store.add_solution(record(&id, 1, seq)).unwrap();
        // A gap is refused: history has no holes.
        assert!(store.add_solution(record(&id, 3, seq)).is_err());
        store.add_solution(record(&id, 2, seq)).unwrap();
        assert!(!store.object(&id).unwrap().unwrap().needs_refit());
        id
    };
    let store = SledStore::open(dir.path()).unwrap();
    let counts = store.counts();
    assert_eq!(store.solutions(&id, None, 10).unwrap().len(), 2);
    assert_eq!(
        store.solutions(&id, None, 10).unwrap()[0].seq,
        2,
        "newest first"
    );
    assert_eq!(store.solutions(&id, Some(2), 10).unwrap()[0].seq, 1);
    // The summaries tree says what the records say, without the documents.
    let summaries = store.summaries(&id, None, 10).unwrap();
    let records: Vec<SolutionSummary> = store
        .solutions(&id, None, 10)
        .unwrap()
        .into_iter()
        .map(|r| r.summary)
        .collect();
    assert_eq!(summaries, records);
    let bytes = store.solution_bytes(&id, 2).unwrap().unwrap();
    let parsed: SolutionRecord = serde_json::from_slice(&bytes).unwrap();
    assert_eq!(parsed.seq, 2);
    drop(store);
    // Without its index, the journal alone gives the same store.
    std::fs::remove_dir_all(index_dir(dir.path())).unwrap();
    let (store, entries) = SledStore::rebuild(dir.path()).unwrap();
    assert_eq!(entries, 3);
    assert_eq!(store.counts(), counts);
    assert_eq!(store.solution(&id, 2).unwrap().unwrap().seq, 2);
}

#[test]
fn the_index_catches_up_with_the_journal_at_open() {
    let dir = tempfile::tempdir().unwrap();
    // A journal entry whose apply never happened (a crash between the
    // two): written straight to the journal.
    {
        let mut j = Journal::open(&journal_dir(dir.path()), None).unwrap();
        j.append(vec![JournalEntry::Observations {
            origin: origin("a.psv"),
            observations: fixture_entries(),
        }])
        .unwrap();
    }
    let store = SledStore::open(dir.path()).unwrap();
    assert_eq!(store.objects().unwrap().len(), 1);
    assert_eq!(store.journal_seq(), 1);
}

#[test]
fn a_second_opener_is_told_the_store_is_in_use() {
    let dir = tempfile::tempdir().unwrap();
    let _first = SledStore::open(dir.path()).unwrap();
    match SledStore::open(dir.path()) {
        Err(e @ StoreError::Locked { .. }) => assert!(e.to_string().contains("in use")),
        Err(e) => panic!("unexpected error {e}"),
        Ok(_) => panic!("opened twice"),
    }
}

#[test]
fn stored_observations_validate_again() {
    let entries = fixture_entries();
    let o = entries[0].record.observation(&stations()).unwrap();
    assert_eq!(ObservationEntry::of(&o), entries[0]);
}

/// History pages are cut by "before sequence number N": solutions stored
/// while a client pages through never shift the pages it has not read, so
/// the pages together hold every solution of the first look exactly once.
#[test]
fn pages_stay_put_while_solutions_arrive() {
    let dir = tempfile::tempdir().unwrap();
    let store = SledStore::open(dir.path()).unwrap();
    store
        .add_observations(origin("a.psv"), fixture_entries())
        .unwrap();
    let id = store.objects().unwrap()[0].id.clone();
    let seq = store.journal_seq();
    for n in 1..=25 {
        store.add_solution(record(&id, n, seq)).unwrap();
    }
    let mut seen = Vec::new();
    let mut before = None;
    let mut next_new = 26;
    loop {
        let page = store.summaries(&id, before, 7).unwrap();
        seen.extend(page.iter().map(|s| s.seq));
        // Two new solutions between every two pages.
        for _ in 0..2 {
            store.add_solution(record(&id, next_new, seq)).unwrap();
            next_new += 1;
        }
        match page.last() {
            Some(last) if page.len() == 7 => before = Some(last.seq),
            _ => break,
        }
    }
    assert_eq!(seen, (1..=25).rev().collect::<Vec<u64>>());
}

/// Two objects joined by an analyst's link: the absorbed one's decisions
/// go with its observations to the kept one, in the order they were made.
#[test]
fn a_merge_brings_the_decisions_along() {
    let dir = tempfile::tempdir().unwrap();
    let store = SledStore::open(dir.path()).unwrap();
    let entries = fixture_entries();
    let renamed = |e: &ObservationEntry, designation: &str| {
        let mut e = e.clone();
        e.designations = vec![designation.to_string()];
        e
    };
    store
        .add_observations(
            origin("a.psv"),
            vec![renamed(&entries[0], "provID:2026 ZA1")],
        )
        .unwrap();
    store
        .add_observations(
            origin("b.psv"),
            vec![renamed(&entries[1], "provID:2026 ZA2")],
        )
        .unwrap();
    let (older, younger) = (
        store.object("2026 ZA1").unwrap().unwrap().id,
        store.object("2026 ZA2").unwrap().unwrap().id,
    );
    let decision = |id: &str, action| OverrideRecord {
        object_id: id.to_string(),
        action,
        by: "test".into(),
        reason: "test".into(),
        at_utc: "2026-12-03T12:00:00Z".into(),
        journal_seq: 0,
    };
    store
        .add_override(decision(
            &younger,
            OverrideAction::ExcludeObservation {
                content_key: entries[1].content_key.clone(),
            },
        ))
        .unwrap();
    store
        .add_override(decision(
            &older,
            OverrideAction::Link {
                designations: vec!["provID:2026 ZA1".into(), "provID:2026 ZA2".into()],
            },
        ))
        .unwrap();
    assert_eq!(store.object("2026 ZA2").unwrap().unwrap().id, older);
    let kept = store.overrides(&older).unwrap();
    assert_eq!(kept.len(), 2);
    assert!(kept[0].journal_seq < kept[1].journal_seq);
    assert!(matches!(
        kept[0].action,
        OverrideAction::ExcludeObservation { .. }
    ));
    assert!(store.overrides(&younger).unwrap().is_empty());
}

/// A record's document lives in the journal: the record is read back
/// whole, served without its residuals, and the residuals apart.
#[test]
fn documents_are_read_from_the_journal_and_residuals_apart() {
    let dir = tempfile::tempdir().unwrap();
    let store = SledStore::open(dir.path()).unwrap();
    store
        .add_observations(origin("a.psv"), fixture_entries())
        .unwrap();
    let id = store.objects().unwrap()[0].id.clone();
    let mut r = record(&id, 1, store.journal_seq());
    r.document = Some(serde_json::json!({
        "recommended": "gravity",
        "residuals": [{"ra_cos_dec_arcsec": 0.25, "dec_arcsec": -0.5}],
        "gravity_residuals": [{"ra_cos_dec_arcsec": 1.25, "dec_arcsec": -1.5}],
    }));
    store.add_solution(r.clone()).unwrap();
    assert_eq!(store.solution(&id, 1).unwrap(), Some(r));
    let served: serde_json::Value =
        serde_json::from_slice(&store.solution_bytes(&id, 1).unwrap().unwrap()).unwrap();
    assert_eq!(served["document"]["recommended"], "gravity");
    assert!(served["document"].get("residuals").is_none());
    assert!(served["document"].get("gravity_residuals").is_none());
    let residuals = store.residuals(&id, 1).unwrap().unwrap();
    assert_eq!(residuals["residuals"][0]["dec_arcsec"], -0.5);
    assert_eq!(residuals["gravity_residuals"][0]["dec_arcsec"], -1.5);
    assert!(store.solution(&id, 2).unwrap().is_none());
    assert!(store.residuals(&id, 2).unwrap().is_none());
}

/// An index written by an older schema is emptied and rebuilt from the
/// journal at open, into the layout of this one.
#[test]
fn an_older_index_is_rebuilt_from_the_journal() {
    let dir = tempfile::tempdir().unwrap();
    let (id, counts) = {
        let (store, id) = with_one_solution(dir.path());
        store.flush().unwrap();
        (id, store.counts())
    };
    {
        // What schema 2 left: its version and a residuals tree.
        let db = sled::open(index_dir(dir.path())).unwrap();
        let meta = db.open_tree("meta").unwrap();
        meta.insert("schema", &2u32.to_be_bytes()).unwrap();
        db.open_tree("residuals").unwrap().insert("x", "y").unwrap();
        db.flush().unwrap();
    }
    let store = SledStore::open(dir.path()).unwrap();
    assert_eq!(store.counts(), counts);
    assert_eq!(store.solution(&id, 1).unwrap().unwrap().seq, 1);
    drop(store);
    let db = sled::open(index_dir(dir.path())).unwrap();
    assert!(!db.tree_names().iter().any(|n| n.as_ref() == b"residuals"));
    let schema = db
        .open_tree("meta")
        .unwrap()
        .get("schema")
        .unwrap()
        .unwrap();
    assert_eq!(schema.as_ref(), &SCHEMA_VERSION.to_be_bytes());
}

/// A refit asked for is journaled like a decision: the object is due
/// until a solution has seen it, across a reopen (a stop of the daemon).
#[test]
fn a_refit_asked_for_keeps_the_object_due_until_a_fit_saw_it() {
    let dir = tempfile::tempdir().unwrap();
    let id = {
        let (store, id) = with_one_solution(dir.path());
        assert_eq!(store.object(&id).unwrap().unwrap().due(), None);
        store
            .add_override(OverrideRecord {
                object_id: id.clone(),
                action: OverrideAction::Refit,
                by: "test".into(),
                reason: "test".into(),
                at_utc: "2026-12-03T12:00:00Z".into(),
                journal_seq: 0,
            })
            .unwrap();
        id
    };
    let store = SledStore::open(dir.path()).unwrap();
    assert_eq!(
        store.object(&id).unwrap().unwrap().due(),
        Some(Trigger::Override)
    );
    assert_eq!(
        OverrideState::of(&store.overrides(&id).unwrap()),
        OverrideState::default()
    );
    store
        .add_solution(record(&id, 2, store.journal_seq()))
        .unwrap();
    assert_eq!(store.object(&id).unwrap().unwrap().due(), None);
}

/// An index that lost entries its applied position says it holds (what a
/// damaged sled log can leave) is refused with the remedy, and a rebuild
/// from the journal brings everything back.
#[test]
fn an_index_that_lost_entries_is_refused_and_rebuilt() {
    let dir = tempfile::tempdir().unwrap();
    let counts = {
        let (store, _) = with_one_solution(dir.path());
        store.flush().unwrap();
        store.counts()
    };
    {
        // Three observations gone from the index, the rest as it was.
        let db = sled::open(index_dir(dir.path())).unwrap();
        let obs = db.open_tree("obs").unwrap();
        let lost: Vec<_> = obs.iter().keys().take(3).map(|k| k.unwrap()).collect();
        for k in lost {
            obs.remove(k).unwrap();
        }
        db.flush().unwrap();
    }
    match SledStore::open(dir.path()) {
        Err(e @ StoreError::Index { .. }) => {
            let text = e.to_string();
            assert!(text.contains("lost entries"), "{text}");
            assert!(text.contains("perihelix rebuild"), "{text}");
        }
        Err(e) => panic!("unexpected error {e}"),
        Ok(_) => panic!("an index missing entries was opened"),
    }
    let (store, _) = SledStore::rebuild(dir.path()).unwrap();
    assert_eq!(store.counts(), counts);
}
