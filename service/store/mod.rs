//! The store: an fsync'd journal that is the truth, and a sled index
//! rebuilt from it.
//!
//! - [`journal`]: append-only JSON lines, fsync before acknowledging.
//! - [`index`]: sled trees arranged for reading, each journal entry applied
//!   in one transaction together with the applied position.
//! - [`records`]: the entries and values.
//!
//! Only [`Store::add_observations`] (the ingest path) writes observations
//! and only [`Store::add_solution`] (the worker) writes solutions. Both
//! append to the journal first, then apply to the index; the journal's
//! tail beyond the index's applied position is replayed at open. The
//! daemon's stages see the store through the [`Store`] trait, so that a
//! shared backend for many machines can be added beside this one.
//!
//! On disk, under the configured database directory: `journal/journal.jsonl`
//! and `index/` (sled).

pub mod error;
pub mod index;
pub mod journal;
pub mod records;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

pub use error::StoreError;
pub use index::{ObservationsApplied, SCHEMA_VERSION};
pub use records::{
    content_key_bytes, BatchCheck, IndexedObservation, JournalEntry, ObjectState, ObservationEntry,
    Origin, OverrideAction, OverrideRecord, OverrideState, PlaceShift, SolutionRecord,
    SolutionSummary, StoredObservation, TermPoint, Trigger,
};

use crate::alerts::event::{Acknowledgement, AlertRecord, Delivery, DeliveryAttempt};
use index::Index;
use journal::{Journal, JournalReader, Span};

/// What the daemon's stages need of a store.
pub trait Store: Send + Sync {
    /// Journals a batch of observations (fsync), then indexes it.
    fn add_observations(
        &self,
        origin: Origin,
        observations: Vec<ObservationEntry>,
    ) -> Result<ObservationsApplied, StoreError>;
    /// Journals a solution record (fsync), then indexes it. The sequence
    /// number must be the object's next.
    fn add_solution(&self, record: SolutionRecord) -> Result<(), StoreError>;
    /// Whether an observation with this content key is stored.
    fn has_observation(&self, content_key: &[u8; 32]) -> Result<bool, StoreError>;
    fn objects(&self) -> Result<Vec<ObjectState>, StoreError>;
    fn object(&self, name: &str) -> Result<Option<ObjectState>, StoreError>;
    fn observations(
        &self,
        id: &str,
        after: Option<&[u8]>,
        limit: usize,
    ) -> Result<(Vec<IndexedObservation>, Option<Vec<u8>>), StoreError>;
    fn solutions(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<SolutionRecord>, StoreError>;
    /// One solution record whole, its document's residuals included.
    fn solution(&self, id: &str, seq: u64) -> Result<Option<SolutionRecord>, StoreError>;
    /// Summaries only, newest first, below `before`, at most `limit`.
    fn summaries(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<SolutionSummary>, StoreError>;
    /// One solution record as JSON, without its document's residuals
    /// (which [`Store::residuals`] gives).
    fn solution_bytes(&self, id: &str, seq: u64) -> Result<Option<Vec<u8>>, StoreError>;
    /// Journals an analyst's decision (fsync), then indexes it.
    fn add_override(&self, record: OverrideRecord) -> Result<ObservationsApplied, StoreError>;
    /// An object's decisions in the order they were made.
    fn overrides(&self, id: &str) -> Result<Vec<OverrideRecord>, StoreError>;
    /// The residual lists of a solution's document, by key (see
    /// [`RESIDUAL_KEYS`]; none for a failed fit).
    fn residuals(
        &self,
        id: &str,
        seq: u64,
    ) -> Result<Option<serde_json::Map<String, serde_json::Value>>, StoreError>;
    /// Journals one delivery attempt (fsync), then indexes it.
    fn record_attempt(&self, attempt: DeliveryAttempt) -> Result<(), StoreError>;
    /// Journals an acknowledgement (fsync), then indexes it.
    fn acknowledge(&self, ack: Acknowledgement) -> Result<(), StoreError>;
    /// Alerts newest first, before an opaque cursor, that `keep` accepts,
    /// at most `limit`; with the next page's cursor.
    fn alerts(
        &self,
        before: Option<&[u8]>,
        limit: usize,
        keep: &dyn Fn(&AlertRecord) -> bool,
    ) -> Result<(Vec<AlertRecord>, Option<Vec<u8>>), StoreError>;
    fn alert(&self, id: &str) -> Result<Option<AlertRecord>, StoreError>;
    fn delivery(&self, id: &str) -> Result<Option<Delivery>, StoreError>;
    /// The deliveries still to make.
    fn pending_deliveries(&self) -> Result<Vec<Delivery>, StoreError>;
    /// Every delivery.
    fn deliveries(&self) -> Result<Vec<Delivery>, StoreError>;
    /// The last journal sequence number.
    fn journal_seq(&self) -> u64;
    /// Makes what is indexed survive a crash of the process.
    fn flush(&self) -> Result<(), StoreError>;
}

/// Observations are read in pages of this many when all are needed.
const PAGE: usize = 10_000;

/// Every observation of an object, in time order.
pub fn all_observations(
    store: &dyn Store,
    id: &str,
) -> Result<Vec<IndexedObservation>, StoreError> {
    let mut out = Vec::new();
    let mut cursor: Option<Vec<u8>> = None;
    loop {
        let (page, next) = store.observations(id, cursor.as_deref(), PAGE)?;
        out.extend(page);
        match next {
            Some(c) => cursor = Some(c),
            None => return Ok(out),
        }
    }
}

/// The journal and the sled index in one directory.
pub struct SledStore {
    journal: Mutex<Journal>,
    /// Positioned reads of solution records, beside the appender.
    reader: JournalReader,
    index: Index,
}

pub fn journal_dir(database: &Path) -> PathBuf {
    database.join("journal")
}

pub fn index_dir(database: &Path) -> PathBuf {
    database.join("index")
}

impl SledStore {
    /// Opens the store under `database`, replaying the journal's tail into
    /// the index.
    pub fn open(database: &Path) -> Result<Self, StoreError> {
        let index = Index::open(&index_dir(database))?;
        let applied = index.applied()?;
        let journal = Journal::open(&journal_dir(database), applied)?;
        let store = Self {
            journal: Mutex::new(journal),
            reader: JournalReader::open(&journal_dir(database))?,
            index,
        };
        let replayed = store.replay(applied.map_or(0, |a| a.0))?;
        if replayed > 0 {
            tracing::info!(
                entries = replayed,
                "replayed the journal's tail into the index"
            );
            store.index.flush()?;
        }
        Ok(store)
    }

    /// Builds a new index from the whole journal, after moving the old
    /// index (if any) aside to `index.replaced-<unix time>`; returns the
    /// number of entries applied. Refused while a daemon holds the store,
    /// and (before anything is moved) when the journal is damaged.
    pub fn rebuild(database: &Path) -> Result<(Self, usize), StoreError> {
        let dir = index_dir(database);
        // A daemon running on this store holds the index's lock: refuse
        // rather than move its index away under it and read a journal it
        // is appending to. An index that cannot be opened for any other
        // reason is what a rebuild is for.
        if dir.exists() {
            if let Err(e @ StoreError::Locked { .. }) = Index::open(&dir) {
                return Err(e);
            }
        }
        // The journal is read whole before anything is moved: nothing can
        // be rebuilt from a damaged one, and the index it would have
        // replaced stays where it is.
        let journal = Journal::open(&journal_dir(database), None)?;
        if dir.exists() {
            let stamp = std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_secs());
            // Never over an earlier one: a second rebuild within the same
            // second gets the next free suffix.
            let aside = (0u32..)
                .map(|n| match n {
                    0 => database.join(format!("index.replaced-{stamp}")),
                    n => database.join(format!("index.replaced-{stamp}-{n}")),
                })
                .find(|p| !p.exists())
                .unwrap_or_else(|| database.join("index.replaced"));
            std::fs::rename(&dir, &aside).map_err(|e| StoreError::io(&dir, e))?;
            tracing::info!(old = %aside.display(), "moved the old index aside");
        }
        let index = Index::open(&dir)?;
        let store = Self {
            journal: Mutex::new(journal),
            reader: JournalReader::open(&journal_dir(database))?,
            index,
        };
        let n = store.replay(0)?;
        store.index.flush()?;
        Ok((store, n))
    }

    fn replay(&self, from: u64) -> Result<usize, StoreError> {
        let journal = self.lock()?;
        let mut n = 0;
        for item in journal.read_from(from)? {
            let e = item.map_err(|p| StoreError::Corrupt {
                what: journal.path().display().to_string(),
                why: format!("{p:?} while replaying"),
            })?;
            self.index.apply(&e.line, e.span)?;
            n += 1;
        }
        Ok(n)
    }

    fn lock(&self) -> Result<std::sync::MutexGuard<'_, Journal>, StoreError> {
        self.journal
            .lock()
            .map_err(|_| StoreError::Sled("the journal lock is poisoned".into()))
    }

    /// Appends and applies under the journal lock, so the index applies
    /// entries in journal order.
    fn append_and_apply(&self, entry: JournalEntry) -> Result<ObservationsApplied, StoreError> {
        let mut journal = self.lock()?;
        let written = journal.append(vec![entry])?;
        let mut outcome = ObservationsApplied::default();
        for e in &written {
            outcome = self.index.apply(&e.line, e.span)?;
        }
        Ok(outcome)
    }

    /// The solution record journaled at `span`.
    fn read_solution(&self, span: Span) -> Result<SolutionRecord, StoreError> {
        match self.reader.read(span)?.entry {
            JournalEntry::Solution { record } => Ok(*record),
            _ => Err(StoreError::Corrupt {
                what: format!("journal bytes {}..{}", span.start, span.end()),
                why: "the index points at an entry that is not a solution".into(),
            }),
        }
    }

    pub fn counts(&self) -> (usize, usize, usize) {
        self.index.counts()
    }
}

impl Store for SledStore {
    fn add_observations(
        &self,
        origin: Origin,
        observations: Vec<ObservationEntry>,
    ) -> Result<ObservationsApplied, StoreError> {
        self.append_and_apply(JournalEntry::Observations {
            origin,
            observations,
        })
    }

    fn add_solution(&self, record: SolutionRecord) -> Result<(), StoreError> {
        let expected = self
            .index
            .object(&record.object_id)?
            .map_or(1, |o| o.solutions + 1);
        if record.seq != expected {
            return Err(StoreError::Corrupt {
                what: format!("solution {} of {}", record.seq, record.object_id),
                why: format!("the next sequence number is {expected}"),
            });
        }
        self.append_and_apply(JournalEntry::Solution {
            record: Box::new(record),
        })?;
        Ok(())
    }

    fn has_observation(&self, content_key: &[u8; 32]) -> Result<bool, StoreError> {
        self.index.has_content(content_key)
    }

    fn objects(&self) -> Result<Vec<ObjectState>, StoreError> {
        self.index.objects()
    }

    fn object(&self, name: &str) -> Result<Option<ObjectState>, StoreError> {
        self.index.object(name)
    }

    fn observations(
        &self,
        id: &str,
        after: Option<&[u8]>,
        limit: usize,
    ) -> Result<(Vec<IndexedObservation>, Option<Vec<u8>>), StoreError> {
        self.index.observations(id, after, limit)
    }

    fn solutions(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<SolutionRecord>, StoreError> {
        self.index
            .solution_spans(id, before, limit)?
            .into_iter()
            .map(|span| self.read_solution(span))
            .collect()
    }

    fn solution(&self, id: &str, seq: u64) -> Result<Option<SolutionRecord>, StoreError> {
        self.index
            .solution_span(id, seq)?
            .map(|span| self.read_solution(span))
            .transpose()
    }

    fn summaries(
        &self,
        id: &str,
        before: Option<u64>,
        limit: usize,
    ) -> Result<Vec<SolutionSummary>, StoreError> {
        self.index.summaries(id, before, limit)
    }

    fn solution_bytes(&self, id: &str, seq: u64) -> Result<Option<Vec<u8>>, StoreError> {
        let Some(span) = self.index.solution_span(id, seq)? else {
            return Ok(None);
        };
        let line = self.reader.read_bytes(span)?;
        without_residuals(&line)
            .map(Some)
            .map_err(|e| self.reader.corrupt(span, &e.to_string()))
    }

    fn residuals(
        &self,
        id: &str,
        seq: u64,
    ) -> Result<Option<serde_json::Map<String, serde_json::Value>>, StoreError> {
        Ok(self.solution(id, seq)?.map(|mut record| {
            let document = record.document.as_mut().and_then(|d| d.as_object_mut());
            document
                .map(|o| {
                    RESIDUAL_KEYS
                        .iter()
                        .filter_map(|k| Some((k.to_string(), o.remove(*k)?)))
                        .collect()
                })
                .unwrap_or_default()
        }))
    }

    fn add_override(&self, record: OverrideRecord) -> Result<ObservationsApplied, StoreError> {
        self.append_and_apply(JournalEntry::Override { record })
    }

    fn overrides(&self, id: &str) -> Result<Vec<OverrideRecord>, StoreError> {
        self.index.overrides(id)
    }

    fn record_attempt(&self, attempt: DeliveryAttempt) -> Result<(), StoreError> {
        self.append_and_apply(JournalEntry::Delivery { attempt })?;
        self.index.flush()
    }

    fn acknowledge(&self, ack: Acknowledgement) -> Result<(), StoreError> {
        self.append_and_apply(JournalEntry::Acknowledge { ack })?;
        self.index.flush()
    }

    fn alerts(
        &self,
        before: Option<&[u8]>,
        limit: usize,
        keep: &dyn Fn(&AlertRecord) -> bool,
    ) -> Result<(Vec<AlertRecord>, Option<Vec<u8>>), StoreError> {
        self.index.alerts(before, limit, keep)
    }

    fn alert(&self, id: &str) -> Result<Option<AlertRecord>, StoreError> {
        self.index.alert(id)
    }

    fn delivery(&self, id: &str) -> Result<Option<Delivery>, StoreError> {
        self.index.delivery(id)
    }

    fn pending_deliveries(&self) -> Result<Vec<Delivery>, StoreError> {
        self.index.pending_deliveries()
    }

    fn deliveries(&self) -> Result<Vec<Delivery>, StoreError> {
        self.index.all_deliveries()
    }

    fn journal_seq(&self) -> u64 {
        self.lock().map_or(0, |j| j.last_seq())
    }

    fn flush(&self) -> Result<(), StoreError> {
        self.index.flush()
    }
}

/// The document's per-observation lists: the recommended model's
/// residuals and, beside them, gravity alone's. Served on their own route,
/// not with the record, whose size they would multiply.
pub const RESIDUAL_KEYS: [&str; 2] = ["residuals", "gravity_residuals"];

/// A solution's journal line as the record's JSON without its document's
/// residuals. Only the record's and the document's top levels are taken
/// apart; every value below is copied as the journal holds it, which is
/// several times cheaper than decoding the record and encoding it again.
fn without_residuals(line: &[u8]) -> Result<Vec<u8>, serde_json::Error> {
    use serde_json::value::RawValue;
    use std::borrow::Cow;
    type Fields<'a> = BTreeMap<Cow<'a, str>, &'a RawValue>;
    #[derive(serde::Deserialize)]
    struct Line<'a> {
        #[serde(borrow)]
        record: Fields<'a>,
    }
    let mut record = serde_json::from_slice::<Line>(line)?.record;
    let document;
    if let Some(raw) = record.get("document").copied() {
        if raw.get() != "null" {
            let mut fields: Fields = serde_json::from_str(raw.get())?;
            for key in RESIDUAL_KEYS {
                fields.remove(key);
            }
            document = serde_json::value::to_raw_value(&fields)?;
            record.insert(Cow::Borrowed("document"), &document);
        }
    }
    serde_json::to_vec(&record)
}

#[cfg(test)]
mod tests;
