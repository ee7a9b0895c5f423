//! The sled index: what the journal says, arranged for reading.
//!
//! Trees (keys big-endian or fixed-width text, so ranges scan in order):
//! - `obs`: object id / normalised UTC time / content key -> observation
//! - `content`: content key -> object id (re-ingest is idempotent)
//! - `objects`: object id -> [`ObjectState`]
//! - `solutions`: object id / sequence (u64 BE) -> the [`Span`] of the
//!   journal entry that holds the [`SolutionRecord`]. A record with its
//!   document and residuals is about 150 kB: sled keeps what it has read
//!   resident whatever its cache setting, so the documents stay in the
//!   journal and are read from there (the kernel's page cache keeps the
//!   recent ones)
//! - `summaries`: the same key -> the solution's [`SolutionSummary`]
//! - `overrides`: object id / journal seq (u64 BE) -> an analyst's decision
//! - `names`: designation text -> object id (lookup by any designation)
//! - `links`: journal seq (u64 BE) / index (u32 BE) -> designation group,
//!   every group that changed the linker, in order, so the linker is
//!   rebuilt exactly at open
//! - `alerts`: journal seq (u64 BE) / index (u32 BE) -> [`AlertRecord`],
//!   in the order raised
//! - `alert_ids`: alert id -> its `alerts` key
//! - `deliveries`: delivery id -> [`Delivery`] (one per alert and channel)
//! - `pending`: delivery id -> nothing, for the deliveries still to make
//! - `meta`: schema version and the journal position applied so far
//!
//! Each journal entry is applied in one sled transaction together with the
//! applied position, so after a crash the index is either before or after
//! an entry, never half-way, and replaying the journal's tail is enough.
//! sled makes nothing durable before `flush`, which is why the journal is
//! the truth.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use sled::transaction::{ConflictableTransactionError, TransactionError, Transactional};
use sled::Tree;

use crate::ingest::{DesignationKey, Linker, ObjectId};

use super::error::StoreError;
use super::journal::Span;
use crate::alerts::event::{Acknowledgement, AlertRecord, Delivery, DeliveryAttempt};

use super::records::{
    IndexedObservation, JournalEntry, JournalLine, ObjectState, ObservationEntry, OverrideAction,
    OverrideRecord, SolutionRecord, SolutionSummary,
};

/// The schema this program writes. Version 1: solution records (without
/// residuals) in `solutions`, residuals in a tree of their own, no
/// `summaries`; version 2 added `summaries`; version 3 keeps journal spans
/// in `solutions` and drops the residuals tree; version 4 adds the alert
/// trees. An older index is emptied and rebuilt from the journal at open,
/// which is what the journal is for.
pub const SCHEMA_VERSION: u32 = 4;

/// sled's cache; its default (1 GiB) would let the daemon grow far beyond
/// what an observatory machine should give it.
const CACHE_BYTES: u64 = 32 * 1024 * 1024;

/// How long an open waits for a lock this process may still be letting go.
const LOCK_PATIENCE: std::time::Duration = std::time::Duration::from_secs(3);

const META_SCHEMA: &[u8] = b"schema";
const META_APPLIED: &[u8] = b"applied";
/// Observations and solutions indexed so far, kept in the transaction of
/// every entry that adds one: sled can come back from a damaged log with a
/// page of a tree lost but a later page of `meta` kept, and then the
/// applied position says "done" for entries it no longer holds. The
/// counts catch that at open.
const META_COUNTS: &[u8] = b"counts";

pub struct Index {
    path: PathBuf,
    db: sled::Db,
    obs: Tree,
    content: Tree,
    objects: Tree,
    solutions: Tree,
    summaries: Tree,
    overrides: Tree,
    names: Tree,
    links: Tree,
    alerts: Tree,
    alert_ids: Tree,
    deliveries: Tree,
    pending: Tree,
    meta: Tree,
    /// The designation linker as of the applied position (the only
    /// writer is the one applying entries).
    linker: Mutex<Linker>,
}

/// What applying one observations entry did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ObservationsApplied {
    /// Observations stored, per object.
    pub added: BTreeMap<String, usize>,
    /// Observations already stored (same content), skipped.
    pub duplicates: usize,
    /// Objects merged by a designation link: (absorbed, kept).
    pub merged: Vec<(String, String)>,
}

fn obs_prefix(id: &str) -> Vec<u8> {
    let mut k = id.as_bytes().to_vec();
    k.push(b'/');
    k
}

fn obs_key(id: &str, time: &str, content: &[u8; 32]) -> Vec<u8> {
    let mut k = obs_prefix(id);
    k.extend_from_slice(time.as_bytes());
    k.push(b'/');
    k.extend_from_slice(content);
    k
}

fn solution_key(id: &str, seq: u64) -> Vec<u8> {
    let mut k = obs_prefix(id);
    k.extend_from_slice(&seq.to_be_bytes());
    k
}

fn encode<T: serde::Serialize>(v: &T) -> Result<Vec<u8>, StoreError> {
    serde_json::to_vec(v).map_err(|e| StoreError::Encode { why: e.to_string() })
}

fn decode<T: serde::de::DeserializeOwned>(what: &str, bytes: &[u8]) -> Result<T, StoreError> {
    serde_json::from_slice(bytes).map_err(|e| StoreError::Corrupt {
        what: format!("index record {what}"),
        why: e.to_string(),
    })
}

/// Bare designations an analyst types ("2026 ZA7") besides the spelt-out
/// keys ("provID:2026 ZA7"); a trkSub is unique only with its station.
fn lookup_names(key: &DesignationKey) -> Vec<String> {
    let mut names = vec![key.to_string()];
    match key {
        DesignationKey::PermId(t) | DesignationKey::ProvId(t) => names.push(t.clone()),
        DesignationKey::TrkSub { name, station } => names.push(format!("{name}@{station}")),
    }
    names
}

impl Index {
    /// Opens the index at `path`, creating it when new.
    pub fn open(path: &Path) -> Result<Self, StoreError> {
        // sled's flusher thread keeps the lock a moment after the last
        // handle in this process is dropped: a reopen waits that long
        // before calling the store locked by someone else.
        let deadline = std::time::Instant::now() + LOCK_PATIENCE;
        let db = loop {
            match Self::open_db(path) {
                Err(StoreError::Locked { .. }) if std::time::Instant::now() < deadline => {
                    std::thread::sleep(std::time::Duration::from_millis(50));
                }
                other => break other?,
            }
        };
        let tree = |name: &str| {
            db.open_tree(name).map_err(|e| StoreError::Index {
                path: path.to_path_buf(),
                why: e.to_string(),
            })
        };
        let index = Self {
            path: path.to_path_buf(),
            obs: tree("obs")?,
            content: tree("content")?,
            objects: tree("objects")?,
            solutions: tree("solutions")?,
            summaries: tree("summaries")?,
            overrides: tree("overrides")?,
            names: tree("names")?,
            links: tree("links")?,
            alerts: tree("alerts")?,
            alert_ids: tree("alert_ids")?,
            deliveries: tree("deliveries")?,
            pending: tree("pending")?,
            meta: tree("meta")?,
            db,
            linker: Mutex::new(Linker::default()),
        };
        index.check_schema()?;
        index.check_counts()?;
        index.load_linker()?;
        Ok(index)
    }

    fn open_db(path: &Path) -> Result<sled::Db, StoreError> {
        sled::Config::new()
            .path(path)
            .cache_capacity(CACHE_BYTES)
            .open()
            .map_err(|e| match e {
                // sled words its lock failure as an I/O error of its own.
                sled::Error::Io(io)
                    if io.kind() == std::io::ErrorKind::WouldBlock
                        || io.to_string().contains("could not acquire lock") =>
                {
                    StoreError::Locked {
                        path: path.to_path_buf(),
                    }
                }
                other => StoreError::Index {
                    path: path.to_path_buf(),
                    why: other.to_string(),
                },
            })
    }

    fn check_schema(&self) -> Result<(), StoreError> {
        match self.meta.get(META_SCHEMA)? {
            None => {
                self.meta
                    .insert(META_SCHEMA, &SCHEMA_VERSION.to_be_bytes())?;
                Ok(())
            }
            Some(v) => {
                let found = <[u8; 4]>::try_from(v.as_ref())
                    .map(u32::from_be_bytes)
                    .map_err(|_| StoreError::Index {
                        path: self.path.clone(),
                        why: "the schema version is unreadable".into(),
                    })?;
                if found > SCHEMA_VERSION {
                    return Err(StoreError::Schema {
                        path: self.path.clone(),
                        found,
                        known: SCHEMA_VERSION,
                    });
                }
                if found < SCHEMA_VERSION {
                    self.empty_for_replay(found)?;
                }
                self.meta
                    .insert(META_SCHEMA, &SCHEMA_VERSION.to_be_bytes())?;
                Ok(())
            }
        }
    }

    /// Migration from any older schema: every tree emptied and the applied
    /// position forgotten, so that the open that follows replays the whole
    /// journal into the new layout.
    fn empty_for_replay(&self, found: u32) -> Result<(), StoreError> {
        for tree in [
            &self.obs,
            &self.content,
            &self.objects,
            &self.solutions,
            &self.summaries,
            &self.overrides,
            &self.names,
            &self.links,
            &self.alerts,
            &self.alert_ids,
            &self.deliveries,
            &self.pending,
        ] {
            tree.clear()?;
        }
        self.db.drop_tree("residuals")?;
        self.meta.remove(META_APPLIED)?;
        self.meta.remove(META_COUNTS)?;
        tracing::info!(
            from = found,
            to = SCHEMA_VERSION,
            "index schema is older: it is rebuilt from the journal"
        );
        Ok(())
    }

    /// Compares what the index holds with what it counted; counts them
    /// first when an index written before the counts has none.
    fn check_counts(&self) -> Result<(), StoreError> {
        let found = (self.obs.len() as u64, self.solutions.len() as u64);
        match self
            .meta
            .get(META_COUNTS)?
            .as_deref()
            .and_then(decode_counts)
        {
            None => {
                self.meta.insert(META_COUNTS, &encode_counts(found))?;
                Ok(())
            }
            Some(counted) if counted == found => Ok(()),
            Some(counted) => Err(StoreError::Index {
                path: self.path.clone(),
                why: format!(
                    "it has lost entries: {} observations and {} solutions counted, {} and {} \
                     found",
                    counted.0, counted.1, found.0, found.1
                ),
            }),
        }
    }

    fn load_linker(&self) -> Result<(), StoreError> {
        let mut linker = Linker::default();
        for item in self.links.iter() {
            let (_, v) = item?;
            let texts: Vec<String> = decode("links", &v)?;
            let group: Vec<DesignationKey> = texts
                .iter()
                .map(|t| DesignationKey::parse(t))
                .collect::<Result<_, _>>()
                .map_err(|why| StoreError::Corrupt {
                    what: "index links".into(),
                    why,
                })?;
            linker.link_all(&group);
        }
        if let Ok(mut l) = self.linker.lock() {
            *l = linker;
        }
        Ok(())
    }

    /// The journal position applied so far: (byte offset after the last
    /// applied entry, its sequence number).
    pub fn applied(&self) -> Result<Option<(u64, u64)>, StoreError> {
        Ok(match self.meta.get(META_APPLIED)? {
            None => None,
            Some(v) if v.len() == 16 => {
                let mut a = [0u8; 8];
                let mut b = [0u8; 8];
                a.copy_from_slice(&v[..8]);
                b.copy_from_slice(&v[8..]);
                Some((u64::from_be_bytes(a), u64::from_be_bytes(b)))
            }
            Some(_) => {
                return Err(StoreError::Corrupt {
                    what: "index meta".into(),
                    why: "the applied position is unreadable".into(),
                })
            }
        })
    }

    fn applied_value(end_offset: u64, seq: u64) -> Vec<u8> {
        let mut v = end_offset.to_be_bytes().to_vec();
        v.extend_from_slice(&seq.to_be_bytes());
        v
    }

    /// sled's own flush: what is applied survives a crash of the process.
    pub fn flush(&self) -> Result<(), StoreError> {
        self.db.flush()?;
        Ok(())
    }

    /// Applies one journal entry (idempotently: an entry at or before the
    /// applied position changes nothing).
    pub fn apply(&self, line: &JournalLine, span: Span) -> Result<ObservationsApplied, StoreError> {
        if let Some((_, seq)) = self.applied()? {
            if line.seq <= seq {
                return Ok(ObservationsApplied::default());
            }
        }
        let applied = Self::applied_value(span.end(), line.seq);
        match &line.entry {
            JournalEntry::Observations { observations, .. } => {
                self.apply_observations(line.seq, observations, None, &applied)
            }
            JournalEntry::Override { record } => {
                self.apply_observations(line.seq, &[], Some(record), &applied)
            }
            JournalEntry::Solution { record } => {
                self.apply_solution(line.seq, record, span, &applied)?;
                Ok(ObservationsApplied::default())
            }
            JournalEntry::Delivery { attempt } => {
                self.apply_attempt(attempt, &applied)?;
                Ok(ObservationsApplied::default())
            }
            JournalEntry::Acknowledge { ack } => {
                self.apply_ack(ack, &applied)?;
                Ok(ObservationsApplied::default())
            }
        }
    }

    /// Applies new observations, or an analyst's override (which may link
    /// designations, and so merge objects, like observations can).
    fn apply_observations(
        &self,
        journal_seq: u64,
        observations: &[ObservationEntry],
        decision: Option<&OverrideRecord>,
        applied: &[u8],
    ) -> Result<ObservationsApplied, StoreError> {
        let mut linker = self
            .linker
            .lock()
            .map_err(|_| StoreError::Sled("the linker lock is poisoned".into()))?
            .clone();
        let absorbed_before = linker.absorbed().len();
        let mut outcome = ObservationsApplied::default();
        // New observations, each with its designations (duplicates of
        // stored ones, or repeated within the entry, are skipped).
        let mut fresh: Vec<(IndexedObservation, Vec<DesignationKey>, [u8; 32])> = Vec::new();
        let mut seen = BTreeSet::new();
        let mut groups: Vec<Vec<String>> = Vec::new();
        if let Some(OverrideRecord {
            action: OverrideAction::Link { designations },
            ..
        }) = decision
        {
            let keys: Vec<DesignationKey> = designations
                .iter()
                .map(|t| DesignationKey::parse(t))
                .collect::<Result<_, _>>()
                .map_err(|why| StoreError::Corrupt {
                    what: format!("journal entry {journal_seq}"),
                    why,
                })?;
            let before = (linker.absorbed().len(), linker.key_count());
            linker.link_all(&keys);
            if (linker.absorbed().len(), linker.key_count()) != before {
                groups.push(designations.clone());
            }
        }
        for entry in observations {
            let parsed = entry
                .content_bytes()
                .and_then(|c| entry.designation_keys().map(|k| (c, k)));
            let (content, keys) = match parsed {
                Ok(v) if !v.1.is_empty() => v,
                Ok(_) => {
                    return Err(StoreError::Corrupt {
                        what: format!("journal entry {journal_seq}"),
                        why: "an observation without a designation".into(),
                    })
                }
                Err(why) => {
                    return Err(StoreError::Corrupt {
                        what: format!("journal entry {journal_seq}"),
                        why,
                    })
                }
            };
            if !seen.insert(content) || self.content.contains_key(content)? {
                outcome.duplicates += 1;
                continue;
            }
            let before = (linker.absorbed().len(), linker.key_count());
            linker.link_all(&keys);
            if (linker.absorbed().len(), linker.key_count()) != before {
                groups.push(entry.designations.clone());
            }
            fresh.push((
                IndexedObservation {
                    journal_seq,
                    entry: entry.clone(),
                },
                keys,
                content,
            ));
        }
        let merges: Vec<(ObjectId, ObjectId)> = linker.absorbed()[absorbed_before..].to_vec();

        // Object states after this entry, starting from the stored ones.
        let mut states: BTreeMap<String, ObjectState> = BTreeMap::new();
        let state_of =
            |id: &ObjectId, states: &mut BTreeMap<String, ObjectState>| -> Result<(), StoreError> {
                if !states.contains_key(&id.0) {
                    let s = match self.objects.get(id.0.as_bytes())? {
                        Some(v) => decode("objects", &v)?,
                        None => ObjectState::new(id),
                    };
                    states.insert(id.0.clone(), s);
                }
                Ok(())
            };
        // Merged objects bring their observations under the kept id.
        // Merged objects bring their observations and their analysts'
        // decisions under the kept id.
        let mut moved: Vec<(Vec<u8>, Vec<u8>, sled::IVec)> = Vec::new();
        let mut moved_decisions: Vec<(Vec<u8>, Vec<u8>, sled::IVec)> = Vec::new();
        for (absorbed, kept) in &merges {
            state_of(absorbed, &mut states)?;
            state_of(kept, &mut states)?;
            for (tree, out) in [
                (&self.obs, &mut moved),
                (&self.overrides, &mut moved_decisions),
            ] {
                for item in tree.scan_prefix(obs_prefix(&absorbed.0)) {
                    let (k, v) = item?;
                    let tail = &k[absorbed.0.len()..];
                    let mut new_key = kept.0.as_bytes().to_vec();
                    new_key.extend_from_slice(tail);
                    out.push((k.to_vec(), new_key, v));
                }
            }
            let (a, k) = (absorbed.0.clone(), kept.0.clone());
            let absorbed_state = states.get(&a).cloned();
            if let (Some(ab), Some(ks)) = (absorbed_state, states.get_mut(&k)) {
                ks.observations += ab.observations;
                ks.last_obs_journal_seq = journal_seq.max(ab.last_obs_journal_seq);
                ks.first_obs_utc = min_opt(ks.first_obs_utc.take(), ab.first_obs_utc.clone());
                ks.last_obs_utc = max_opt(ks.last_obs_utc.take(), ab.last_obs_utc.clone());
            }
            if let Some(ab) = states.get_mut(&a) {
                ab.merged_into = Some(k.clone());
            }
            outcome.merged.push((a, k));
        }
        let mut rows = Vec::with_capacity(fresh.len());
        for (indexed, keys, content) in fresh {
            let Some(first) = keys.first() else { continue };
            let id = linker.object_of(first);
            state_of(&id, &mut states)?;
            if let Some(s) = states.get_mut(&id.0) {
                s.observations += 1;
                s.last_obs_journal_seq = journal_seq;
                let t = &indexed.entry.obs_time_utc;
                s.first_obs_utc = min_opt(s.first_obs_utc.take(), Some(t.clone()));
                s.last_obs_utc = max_opt(s.last_obs_utc.take(), Some(t.clone()));
            }
            *outcome.added.entry(id.0.clone()).or_default() += 1;
            let key = obs_key(&id.0, &indexed.entry.obs_time_utc, &content);
            rows.push((key, content, id, encode(&indexed)?));
        }
        // The decision belongs to the object its id leads to now.
        let mut decision_row = None;
        if let Some(d) = decision {
            let mut id = ObjectId(d.object_id.clone());
            for (absorbed, kept) in &merges {
                if *absorbed == id {
                    id = kept.clone();
                }
            }
            state_of(&id, &mut states)?;
            if let Some(s) = states.get_mut(&id.0) {
                s.last_override_journal_seq = journal_seq;
            }
            let mut stored = d.clone();
            stored.journal_seq = journal_seq;
            let mut key = obs_prefix(&id.0);
            key.extend_from_slice(&journal_seq.to_be_bytes());
            decision_row = Some((key, encode(&stored)?));
        }
        let mut names: Vec<(String, String)> = Vec::new();
        for (id, state) in states.iter_mut() {
            if state.merged_into.is_some() {
                continue;
            }
            let keys = linker.designations(&ObjectId(id.clone()));
            state.designations = keys.iter().map(ToString::to_string).collect();
            for k in &keys {
                for n in lookup_names(k) {
                    names.push((n, id.clone()));
                }
            }
        }
        let encoded_states: Vec<(String, Vec<u8>)> = states
            .iter()
            .map(|(id, s)| Ok((id.clone(), encode(s)?)))
            .collect::<Result<_, StoreError>>()?;
        let encoded_groups: Vec<Vec<u8>> = groups.iter().map(encode).collect::<Result<_, _>>()?;

        let result = (
            &self.obs,
            &self.content,
            &self.objects,
            &self.names,
            &self.links,
            &self.overrides,
            &self.meta,
        )
            .transaction(|(obs, content, objects, names_t, links, overrides, meta)| {
                if let Some((key, value)) = &decision_row {
                    overrides.insert(key.as_slice(), value.as_slice())?;
                }
                for (old, new, v) in &moved {
                    obs.insert(new.as_slice(), v.clone())?;
                    obs.remove(old.as_slice())?;
                }
                for (old, new, v) in &moved_decisions {
                    overrides.insert(new.as_slice(), v.clone())?;
                    overrides.remove(old.as_slice())?;
                }
                for (key, ck, id, value) in &rows {
                    obs.insert(key.as_slice(), value.as_slice())?;
                    content.insert(&ck[..], id.0.as_bytes())?;
                }
                for (id, value) in &encoded_states {
                    objects.insert(id.as_bytes(), value.as_slice())?;
                }
                for (name, id) in &names {
                    names_t.insert(name.as_bytes(), id.as_bytes())?;
                }
                for (i, g) in encoded_groups.iter().enumerate() {
                    let mut k = journal_seq.to_be_bytes().to_vec();
                    k.extend_from_slice(&(i as u32).to_be_bytes());
                    links.insert(k, g.as_slice())?;
                }
                count(meta, rows.len() as u64, 0)?;
                meta.insert(META_APPLIED, applied)?;
                Ok::<_, ConflictableTransactionError<()>>(())
            });
        tx_result(result)?;
        if let Ok(mut l) = self.linker.lock() {
            *l = linker;
        }
        Ok(outcome)
    }

    fn apply_solution(
        &self,
        journal_seq: u64,
        record: &SolutionRecord,
        span: Span,
        applied: &[u8],
    ) -> Result<(), StoreError> {
        let key = solution_key(&record.object_id, record.seq);
        let value = span.to_bytes();
        let summary = encode(&record.summary)?;
        let mut state: ObjectState = match self.objects.get(record.object_id.as_bytes())? {
            Some(v) => decode("objects", &v)?,
            None => ObjectState::new(&ObjectId(record.object_id.clone())),
        };
        if record.seq > state.solutions {
            state.solutions = record.seq;
            state.latest = Some(record.summary.clone());
            state.latest_inputs_journal_seq = record.inputs_journal_seq;
            if state.reference_epoch_tdb_days_j2000.is_none() && record.summary.converged {
                state.reference_epoch_tdb_days_j2000 = record.reference_epoch_tdb_days_j2000;
            }
        }
        let state = encode(&state)?;
        // The alerts it raised and their deliveries, in the same
        // transaction: a solution is never indexed without its alerts.
        let mut alerts = Vec::with_capacity(record.alerts.len());
        for (k, event) in record.alerts.iter().enumerate() {
            let mut akey = journal_seq.to_be_bytes().to_vec();
            akey.extend_from_slice(&(k as u32).to_be_bytes());
            let stored = AlertRecord {
                event: event.clone(),
                journal_seq,
                acknowledged: None,
            };
            let deliveries = event
                .channels
                .iter()
                .map(|c| {
                    let d = Delivery::new(event, *c);
                    Ok((d.id.clone(), encode(&d)?))
                })
                .collect::<Result<Vec<_>, StoreError>>()?;
            alerts.push((akey, event.id.clone(), encode(&stored)?, deliveries));
        }
        let trees = (
            &self.solutions,
            &self.summaries,
            &self.objects,
            &self.alerts,
            &self.alert_ids,
            &self.deliveries,
            &self.pending,
            &self.meta,
        );
        let result = trees.transaction(
            |(solutions, summaries, objects, alerts_t, ids, deliveries, pending, meta)| {
                // History is never overwritten: an entry already there
                // (a replay) is left as it is.
                if solutions.get(key.as_slice())?.is_none() {
                    solutions.insert(key.as_slice(), value.as_slice())?;
                    summaries.insert(key.as_slice(), summary.as_slice())?;
                    objects.insert(record.object_id.as_bytes(), state.as_slice())?;
                    for (akey, id, stored, list) in &alerts {
                        alerts_t.insert(akey.as_slice(), stored.as_slice())?;
                        ids.insert(id.as_bytes(), akey.as_slice())?;
                        for (did, d) in list {
                            deliveries.insert(did.as_bytes(), d.as_slice())?;
                            pending.insert(did.as_bytes(), &[] as &[u8])?;
                        }
                    }
                    count(meta, 0, 1)?;
                }
                meta.insert(META_APPLIED, applied)?;
                Ok::<_, ConflictableTransactionError<()>>(())
            },
        );
        tx_result(result)
    }

    fn apply_attempt(&self, attempt: &DeliveryAttempt, applied: &[u8]) -> Result<(), StoreError> {
        let id = attempt.delivery_id.as_bytes();
        let next = match self.deliveries.get(id)? {
            Some(v) => decode::<Delivery>("deliveries", &v)?.after(attempt),
            // An attempt for a delivery the index does not know: nothing to
            // update (the journal is the truth, and it has the attempt).
            None => return self.mark_applied(applied),
        };
        let value = encode(&next)?;
        let pending = next.is_pending();
        let trees = (&self.deliveries, &self.pending, &self.meta);
        tx_result(trees.transaction(|(deliveries, pending_t, meta)| {
            deliveries.insert(id, value.as_slice())?;
            if pending {
                pending_t.insert(id, &[] as &[u8])?;
            } else {
                pending_t.remove(id)?;
            }
            meta.insert(META_APPLIED, applied)?;
            Ok::<_, ConflictableTransactionError<()>>(())
        }))
    }

    fn apply_ack(&self, ack: &Acknowledgement, applied: &[u8]) -> Result<(), StoreError> {
        let Some(akey) = self.alert_ids.get(ack.alert_id.as_bytes())? else {
            return self.mark_applied(applied);
        };
        let Some(v) = self.alerts.get(&akey)? else {
            return self.mark_applied(applied);
        };
        let mut record: AlertRecord = decode("alerts", &v)?;
        if record.acknowledged.is_none() {
            record.acknowledged = Some(ack.clone());
        }
        let value = encode(&record)?;
        let trees = (&self.alerts, &self.meta);
        tx_result(trees.transaction(|(alerts, meta)| {
            alerts.insert(&akey, value.as_slice())?;
            meta.insert(META_APPLIED, applied)?;
            Ok::<_, ConflictableTransactionError<()>>(())
        }))
    }

    fn mark_applied(&self, applied: &[u8]) -> Result<(), StoreError> {
        self.meta.insert(META_APPLIED, applied)?;
        Ok(())
    }

    /// Alerts newest first, raised before the `before` key (an opaque
    /// cursor from a previous page), that `keep` accepts, at most `limit`;
    /// with the cursor of the next page.
    pub fn alerts(
        &self,
        before: Option<&[u8]>,
        limit: usize,
        keep: &dyn Fn(&AlertRecord) -> bool,
    ) -> Result<(Vec<AlertRecord>, Option<Vec<u8>>), StoreError> {
        let range = match before {
            Some(b) => self.alerts.range(..b.to_vec()),
            None => self.alerts.range::<Vec<u8>, _>(..),
        };
        let mut out = Vec::new();
        for item in range.rev() {
            let (k, v) = item?;
            let record: AlertRecord = decode("alerts", &v)?;
            if !keep(&record) {
                continue;
            }
            if out.len() == limit {
                return Ok((out, Some(k.to_vec())));
            }
            out.push(record);
        }
        Ok((out, None))
    }

    pub fn alert(&self, id: &str) -> Result<Option<AlertRecord>, StoreError> {
        let Some(akey) = self.alert_ids.get(id.as_bytes())? else {
            return Ok(None);
        };
        match self.alerts.get(akey)? {
            Some(v) => Ok(Some(decode("alerts", &v)?)),
            None => Ok(None),
        }
    }

    pub fn delivery(&self, id: &str) -> Result<Option<Delivery>, StoreError> {
        match self.deliveries.get(id.as_bytes())? {
            Some(v) => Ok(Some(decode("deliveries", &v)?)),
            None => Ok(None),
        }
    }

    /// The deliveries still to make, in id order.
    pub fn pending_deliveries(&self) -> Result<Vec<Delivery>, StoreError> {
        let mut out = Vec::new();
        for item in self.pending.iter() {
            let (k, _) = item?;
            if let Some(v) = self.deliveries.get(&k)? {
                out.push(decode("deliveries", &v)?);
            }
        }
        Ok(out)
    }

    /// Every delivery, for counts (few: one per alert and channel).
    pub fn all_deliveries(&self) -> Result<Vec<Delivery>, StoreError> {
        self.deliveries
            .iter()
            .map(|item| decode("deliveries", &item?.1))
            .collect()
    }

    /// Every object not merged into another, in id order.
    pub fn objects(&self) -> Result<Vec<ObjectState>, StoreError> {
        let mut out = Vec::new();
        for item in self.objects.iter() {
            let (_, v) = item?;
            let s: ObjectState = decode("objects", &v)?;
            if s.merged_into.is_none() {
                out.push(s);
            }
        }
        Ok(out)
    }

    /// An object by its id or any of its designations (a merged object's
    /// old id leads to the object it joined).
    pub fn object(&self, name: &str) -> Result<Option<ObjectState>, StoreError> {
        let id = match self.objects.get(name.as_bytes())? {
            Some(_) => name.to_string(),
            None => match self.names.get(name.as_bytes())? {
                Some(id) => String::from_utf8_lossy(&id).into_owned(),
                None => return Ok(None),
            },
        };
        let mut id = id;
        // Follow merges (a chain is at most as long as the merges made).
        for _ in 0..64 {
            let Some(v) = self.objects.get(id.as_bytes())? else {
                return Ok(None);
            };
            let s: ObjectState = decode("objects", &v)?;
            match s.merged_into {
                Some(next) => id = next,
                None => return Ok(Some(s)),
            }
        }
        Ok(None)
    }

    /// Observations of an object in time order after `after` (an opaque
    /// cursor from a previous page), at most `limit`; with the cursor of
    /// the next page.
    pub fn observations(
        &self,
        id: &str,
        after: Option<&[u8]>,
        limit: usize,
    ) -> Result<(Vec<IndexedObservation>, Option<Vec<u8>>), StoreError> {
        let prefix = obs_prefix(id);
        let mut end = prefix.clone();
        end.push(0xff);
        let start: Vec<u8> = match after {
            Some(a) if a.starts_with(&prefix) => {
                let mut s = a.to_vec();
                s.push(0);
                s
            }
            _ => prefix.clone(),
        };
        let mut out = Vec::new();
        let mut last = None;
        for item in self.obs.range(start..end) {
            let (k, v) = item?;
            if out.len() == limit {
                return Ok((out, last));
            }
            out.push(decode("obs", &v)?);
            last = Some(k.to_vec());
        }
        Ok((out, None))
    }

    /// Where an object's solutions are in the journal, newest first, with
    /// sequence numbers below `before` (all when None), at most `limit`.
    pub fn solution_spans(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<Span>, StoreError> {
        let start = solution_key(id, 0);
        let end = solution_key(id, before.unwrap_or(u64::MAX));
        self.solutions
            .range(start..end)
            .rev()
            .take(limit)
            .map(|item| span_value(&item?.1))
            .collect()
    }

    /// Where one solution is in the journal.
    pub fn solution_span(&self, id: &str, seq: u64) -> Result<Option<Span>, StoreError> {
        match self.solutions.get(solution_key(id, seq))? {
            Some(v) => Ok(Some(span_value(&v)?)),
            None => Ok(None),
        }
    }

    /// Summaries of an object's solutions, newest first, with sequence
    /// numbers below `before` (all when None), at most `limit`: what a
    /// history page needs, without decoding any document.
    pub fn summaries(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<SolutionSummary>, StoreError> {
        let start = solution_key(id, 0);
        let end = solution_key(id, before.unwrap_or(u64::MAX));
        let mut out = Vec::new();
        for item in self.summaries.range(start..end).rev().take(limit) {
            let (_, v) = item?;
            out.push(decode("summaries", &v)?);
        }
        Ok(out)
    }

    /// An object's overrides in the order they were made (those of
    /// objects merged into it were moved under its id by the merge; the
    /// key's journal sequence number keeps them in order).
    pub fn overrides(&self, id: &str) -> Result<Vec<OverrideRecord>, StoreError> {
        self.overrides
            .scan_prefix(obs_prefix(id))
            .map(|item| decode::<OverrideRecord>("overrides", &item?.1))
            .collect()
    }

    pub fn has_content(&self, content: &[u8; 32]) -> Result<bool, StoreError> {
        Ok(self.content.contains_key(content)?)
    }

    /// Counts over the whole index, for metrics and the rebuild check.
    pub fn counts(&self) -> (usize, usize, usize) {
        (self.objects.len(), self.obs.len(), self.solutions.len())
    }
}

fn encode_counts(c: (u64, u64)) -> [u8; 16] {
    let mut b = [0u8; 16];
    b[..8].copy_from_slice(&c.0.to_be_bytes());
    b[8..].copy_from_slice(&c.1.to_be_bytes());
    b
}

fn decode_counts(b: &[u8]) -> Option<(u64, u64)> {
    let obs = u64::from_be_bytes(b.get(..8)?.try_into().ok()?);
    let solutions = u64::from_be_bytes(b.get(8..16)?.try_into().ok()?);
    (b.len() == 16).then_some((obs, solutions))
}

/// Adds to the counts inside an entry's transaction.
fn count(
    meta: &sled::transaction::TransactionalTree,
    observations: u64,
    solutions: u64,
) -> Result<(), ConflictableTransactionError<()>> {
    if observations == 0 && solutions == 0 {
        return Ok(());
    }
    let (o, s) = meta
        .get(META_COUNTS)?
        .as_deref()
        .and_then(decode_counts)
        .unwrap_or((0, 0));
    meta.insert(
        META_COUNTS,
        &encode_counts((o + observations, s + solutions)),
    )?;
    Ok(())
}

fn span_value(v: &[u8]) -> Result<Span, StoreError> {
    Span::from_bytes(v).ok_or_else(|| StoreError::Corrupt {
        what: "index solutions".into(),
        why: "a journal span is unreadable".into(),
    })
}

fn tx_result(r: Result<(), TransactionError<()>>) -> Result<(), StoreError> {
    match r {
        Ok(()) => Ok(()),
        Err(TransactionError::Storage(e)) => Err(e.into()),
        Err(TransactionError::Abort(())) => Err(StoreError::Sled("transaction aborted".into())),
    }
}

fn min_opt(a: Option<String>, b: Option<String>) -> Option<String> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.min(b)),
        (a, b) => a.or(b),
    }
}

fn max_opt(a: Option<String>, b: Option<String>) -> Option<String> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.max(b)),
        (a, b) => a.or(b),
    }
}
