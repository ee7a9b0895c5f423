//! `perihelix export`: the journal file read directly (read-only, no
//! lock, so a running daemon is no obstacle), entry by entry, written out
//! as the format of [`super`] describes.

use std::collections::{HashMap, HashSet};
use std::fs::File;
use std::io::{BufRead, BufReader, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use serde::Deserialize;
use sha2::{Digest, Sha256};

use crate::ingest::{DesignationKey, Linker, ObjectId};
use crate::store::journal::{sync_dir, JOURNAL_FILE};
use crate::store::records::JournalLine;
use crate::store::{journal_dir, JournalEntry, ObservationEntry};

use super::{hex, read_line, Counts, End, Exported, Header, Line, TransferError, FORMAT};

/// What an export wrote.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ExportSummary {
    /// The journal read.
    pub journal: PathBuf,
    /// The journal's bytes read: its length when the export started, less
    /// a last line left out.
    pub journal_bytes: u64,
    pub exported: Exported,
    /// Journal entries written.
    pub entries: u64,
    pub counts: Counts,
    /// A last line that was not a whole entry (an append in progress, or
    /// a torn one the next daemon start cuts off) was left out.
    pub left_out_last_line: bool,
    /// Bytes written, the end line included.
    pub bytes: u64,
}

/// Exports the store under `database` (the whole store, or the one
/// object `object` names: an id or a designation) to `out`, which
/// `out_name` names in messages. Works while a daemon runs on the store.
pub fn export(
    database: &Path,
    object: Option<&str>,
    out: &mut dyn Write,
    out_name: &str,
) -> Result<ExportSummary, TransferError> {
    let snapshot = Snapshot::open(database)?;
    let target = object
        .map(|name| find_target(&snapshot, name))
        .transpose()?;
    let exported = match &target {
        None => Exported::Store,
        Some(t) => Exported::Object {
            object: t.id.0.clone(),
            designations: t.designations.clone(),
        },
    };
    let mut out = Hashed {
        inner: std::io::BufWriter::with_capacity(1 << 16, out),
        hash: Sha256::new(),
        bytes: 0,
    };
    let io = |e: std::io::Error| TransferError::io(out_name, e);
    let header = Header::new(exported.clone());
    serde_json::to_writer(&mut out, &header).map_err(|e| io(e.into()))?;
    out.write_all(b"\n").map_err(io)?;

    let mut lines = snapshot.lines()?;
    let mut selection = target.map(Selection::new);
    let mut counts = Counts::default();
    let mut entries = 0u64;
    let mut left_out = false;
    while lines.next()? {
        let mut line: JournalLine = match serde_json::from_slice(&lines.buf) {
            Ok(line) => line,
            // As the journal reads it: a damaged last line is an append
            // that never completed, which the next open cuts off.
            Err(_) if lines.at_end() => {
                left_out = true;
                lines.read -= lines.buf.len() as u64;
                break;
            }
            Err(e) => return Err(lines.damaged(format!("not a journal entry: {e}"))),
        };
        if line.seq != lines.number {
            return Err(lines.damaged(format!(
                "entry {} where entry {} was expected (the journal is numbered from 1 \
                 without gaps)",
                line.seq, lines.number
            )));
        }
        let copy = match &mut selection {
            None => true,
            Some(s) => match s.take(&mut line).map_err(|why| lines.damaged(why))? {
                Taken::No => continue,
                Taken::AsIs => true,
                Taken::Changed => false,
            },
        };
        counts.add(&line.entry);
        entries += 1;
        if copy {
            out.write_all(&lines.buf).map_err(io)?;
        } else {
            serde_json::to_writer(&mut out, &line).map_err(|e| io(e.into()))?;
            out.write_all(b"\n").map_err(io)?;
        }
    }
    left_out |= lines.incomplete;

    let end = End {
        end: FORMAT.to_string(),
        entries,
        counts,
        sha256: hex(&out.hash.clone().finalize()),
    };
    // The end line is not part of its own digest.
    let mut text = serde_json::to_vec(&end).map_err(|e| io(e.into()))?;
    text.push(b'\n');
    out.inner.write_all(&text).map_err(io)?;
    out.inner.flush().map_err(io)?;
    Ok(ExportSummary {
        journal: snapshot.path.clone(),
        journal_bytes: lines.read,
        exported,
        entries,
        counts,
        left_out_last_line: left_out,
        bytes: out.bytes + text.len() as u64,
    })
}

/// Exports into the file `path`: written beside it under a hidden
/// temporary name, synced, then renamed over it, so that the file under
/// its name is only ever a whole export (an earlier one stays until the
/// new one is complete).
pub fn export_to_file(
    database: &Path,
    object: Option<&str>,
    path: &Path,
) -> Result<ExportSummary, TransferError> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .ok_or_else(|| {
            TransferError::io(
                path.display(),
                std::io::Error::new(std::io::ErrorKind::InvalidInput, "not a file name"),
            )
        })?
        .to_string_lossy()
        .into_owned();
    let partial = dir.join(format!(".{name}.partial"));
    let written = (|| {
        let mut file =
            File::create(&partial).map_err(|e| TransferError::io(partial.display(), e))?;
        let summary = export(database, object, &mut file, &partial.display().to_string())?;
        file.sync_all()
            .map_err(|e| TransferError::io(partial.display(), e))?;
        std::fs::rename(&partial, path).map_err(|e| TransferError::io(path.display(), e))?;
        sync_dir(&dir).map_err(|e| TransferError::io(dir.display(), e))?;
        Ok(summary)
    })();
    if written.is_err() {
        let _ = std::fs::remove_file(&partial);
    }
    written
}

/// The output, with the digest of what went through it.
struct Hashed<'a> {
    inner: std::io::BufWriter<&'a mut dyn Write>,
    hash: Sha256,
    bytes: u64,
}

impl Write for Hashed<'_> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hash.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// The journal as it was when the export started: the file, and its
/// length then. Entries appended later are not read.
struct Snapshot {
    path: PathBuf,
    file: File,
    length: u64,
}

impl Snapshot {
    fn open(database: &Path) -> Result<Self, TransferError> {
        let path = journal_dir(database).join(JOURNAL_FILE);
        let file = match File::open(&path) {
            Ok(f) => f,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                return Err(TransferError::NoJournal { path })
            }
            Err(e) => return Err(TransferError::io(path.display(), e)),
        };
        let length = file
            .metadata()
            .map_err(|e| TransferError::io(path.display(), e))?
            .len();
        Ok(Self { path, file, length })
    }

    /// The lines from the start, up to the length.
    fn lines(&self) -> Result<JournalLines<'_>, TransferError> {
        (&self.file)
            .seek(SeekFrom::Start(0))
            .map_err(|e| TransferError::io(self.path.display(), e))?;
        Ok(JournalLines {
            reader: BufReader::with_capacity(1 << 16, (&self.file).take(self.length)),
            path: &self.path,
            number: 0,
            read: 0,
            buf: Vec::new(),
            incomplete: false,
        })
    }
}

/// The journal's lines, one at a time.
struct JournalLines<'a> {
    reader: BufReader<std::io::Take<&'a File>>,
    path: &'a Path,
    /// Lines read so far (the current line's number).
    number: u64,
    /// Bytes of the whole lines read so far.
    read: u64,
    /// The current line, its newline included.
    buf: Vec<u8>,
    /// The last line had no newline.
    incomplete: bool,
}

impl JournalLines<'_> {
    /// Reads the next whole line into `buf`; false at the end, and at a
    /// last line without its newline (an append in progress).
    fn next(&mut self) -> Result<bool, TransferError> {
        // The daemon wrote these lines: no limit of their own.
        match read_line(&mut self.reader, &mut self.buf, u64::MAX)
            .map_err(|e| TransferError::io(self.path.display(), e))?
        {
            Line::Complete => {
                self.number += 1;
                self.read += self.buf.len() as u64;
                Ok(true)
            }
            Line::Incomplete => {
                self.incomplete = true;
                Ok(false)
            }
            Line::End => Ok(false),
        }
    }

    /// Nothing follows the current line (within the snapshot).
    fn at_end(&mut self) -> bool {
        self.reader.fill_buf().is_ok_and(|b| b.is_empty())
    }

    fn damaged(&self, why: String) -> TransferError {
        TransferError::Journal {
            path: self.path.to_path_buf(),
            line: self.number,
            why,
        }
    }
}

/// The one object an export is of, found by replaying the designation
/// links over the whole journal (see the module documentation of
/// [`super`]).
struct Target {
    id: ObjectId,
    designations: Vec<String>,
    /// Its id and every id merged into it.
    ids: HashSet<String>,
    /// The links as of the end of the journal read.
    linker: Linker,
}

/// The part of a journal line the links are made of; everything else in
/// it is skipped without being kept.
#[derive(Deserialize)]
struct LinkView {
    kind: String,
    #[serde(default)]
    observations: Vec<ObservationView>,
    #[serde(default)]
    record: Option<RecordView>,
}

#[derive(Deserialize)]
struct ObservationView {
    content_key: String,
    designations: Vec<String>,
}

/// An override's (or a solution's) record: only a link's designations
/// matter.
#[derive(Deserialize)]
struct RecordView {
    #[serde(default)]
    action: Option<String>,
    #[serde(default)]
    designations: Vec<String>,
}

fn keys(texts: &[String]) -> Vec<DesignationKey> {
    texts
        .iter()
        .filter_map(|t| DesignationKey::parse(t).ok())
        .collect()
}

/// Replays the links as the index applies them (an observation repeated
/// within one batch is skipped, as the index skips it), then resolves
/// `name`. Lines that cannot be read are passed over here: the second
/// pass reports them with their line numbers.
fn find_target(snapshot: &Snapshot, name: &str) -> Result<Target, TransferError> {
    let mut linker = Linker::default();
    let mut lines = snapshot.lines()?;
    while lines.next()? {
        let Ok(view) = serde_json::from_slice::<LinkView>(&lines.buf) else {
            continue;
        };
        match view.kind.as_str() {
            "observations" => {
                let mut seen = HashSet::new();
                for o in &view.observations {
                    if seen.insert(o.content_key.as_str()) {
                        linker.link_all(&keys(&o.designations));
                    }
                }
            }
            "override" => {
                if let Some(r) = view.record.filter(|r| r.action.as_deref() == Some("link")) {
                    linker.link_all(&keys(&r.designations));
                }
            }
            _ => {}
        }
    }
    let id = resolve(&mut linker, name).ok_or_else(|| TransferError::NoObject {
        name: name.to_string(),
        path: snapshot.path.clone(),
    })?;
    let merged: HashMap<String, String> = linker
        .absorbed()
        .iter()
        .map(|(a, k)| (a.0.clone(), k.0.clone()))
        .collect();
    let mut ids: HashSet<String> = merged
        .keys()
        .filter(|a| final_id(&merged, a) == id.0)
        .cloned()
        .collect();
    ids.insert(id.0.clone());
    let designations = linker
        .designations(&id)
        .iter()
        .map(ToString::to_string)
        .collect();
    Ok(Target {
        id,
        designations,
        ids,
        linker,
    })
}

/// Where an id leads after every merge.
fn final_id(merged: &HashMap<String, String>, id: &str) -> String {
    let mut id = id.to_string();
    // A chain is at most as long as the merges made.
    for _ in 0..=merged.len() {
        match merged.get(&id) {
            Some(next) => id = next.clone(),
            None => break,
        }
    }
    id
}

/// The object `name` leads to, as the API resolves it: an object id (a
/// merged one leads to the object it joined), else a designation spelt
/// out (`provID:2026 ZA7`) or bare (`2026 ZA7`, or `NAME@STATION` for a
/// trkSub).
fn resolve(linker: &mut Linker, name: &str) -> Option<ObjectId> {
    let name = name.trim();
    let merged: HashMap<String, String> = linker
        .absorbed()
        .iter()
        .map(|(a, k)| (a.0.clone(), k.0.clone()))
        .collect();
    if merged.contains_key(name) {
        return Some(ObjectId(final_id(&merged, name)));
    }
    let id = ObjectId(name.to_string());
    if !linker.designations(&id).is_empty() {
        return Some(id);
    }
    let mut candidates = Vec::new();
    match DesignationKey::parse(name) {
        Ok(key) => candidates.push(key),
        Err(_) => {
            candidates.push(DesignationKey::PermId(name.to_string()));
            candidates.push(DesignationKey::ProvId(name.to_string()));
            if let Some((n, s)) = name.rsplit_once('@') {
                candidates.push(DesignationKey::TrkSub {
                    name: n.to_string(),
                    station: s.to_string(),
                });
            }
        }
    }
    for key in candidates {
        // The linker has no look-up that leaves it alone: a key it did
        // not know is added as an object of its own, which is how an
        // unknown one shows (harmless: no journal line names it).
        let known = linker.key_count();
        let id = linker.object_of(&key);
        if linker.key_count() == known {
            return Some(id);
        }
    }
    None
}

/// A one-object export's choice of entries and their new numbers.
struct Selection {
    target: Target,
    /// The alerts the object's solutions raised.
    alerts: HashSet<String>,
    /// The journal numbers of the entries kept so far, in order: entry
    /// number S becomes the count of kept entries numbered S or less.
    kept: Vec<u64>,
}

/// What became of one entry.
enum Taken {
    /// Not the object's.
    No,
    /// Kept, its line unchanged.
    AsIs,
    /// Kept with other numbers or fewer observations: encoded again.
    Changed,
}

impl Selection {
    fn new(target: Target) -> Self {
        Self {
            target,
            alerts: HashSet::new(),
            kept: Vec::new(),
        }
    }

    fn renumbered(&self, seq: u64) -> u64 {
        self.kept.partition_point(|&s| s <= seq) as u64
    }

    /// Whether the object's designations claim this observation now.
    fn owns(&mut self, o: &ObservationEntry) -> Result<bool, String> {
        let first = o
            .designations
            .first()
            .ok_or_else(|| "an observation without a designation".to_string())?;
        let key = DesignationKey::parse(first)?;
        Ok(self.target.linker.object_of(&key) == self.target.id)
    }

    /// Keeps the entry or not; a kept one is renumbered, its references
    /// mapped, a batch cut to the object's observations.
    fn take(&mut self, line: &mut JournalLine) -> Result<Taken, String> {
        let mut changed = false;
        let kept = match &mut line.entry {
            JournalEntry::Observations { observations, .. } => {
                let mut mine = Vec::with_capacity(observations.len());
                for o in observations.iter() {
                    mine.push(self.owns(o)?);
                }
                let before = observations.len();
                let mut flags = mine.into_iter();
                observations.retain(|_| flags.next().unwrap_or(false));
                changed |= observations.len() != before;
                !observations.is_empty()
            }
            JournalEntry::Solution { record } => {
                let mine = self.target.ids.contains(&record.object_id);
                if mine {
                    self.alerts
                        .extend(record.alerts.iter().map(|a| a.id.clone()));
                }
                mine
            }
            JournalEntry::Override { record } => self.target.ids.contains(&record.object_id),
            JournalEntry::Delivery { attempt } => attempt
                .delivery_id
                .rsplit_once('.')
                .is_some_and(|(alert, _)| self.alerts.contains(alert)),
            JournalEntry::Acknowledge { ack } => self.alerts.contains(&ack.alert_id),
        };
        if !kept {
            return Ok(Taken::No);
        }
        let old = line.seq;
        self.kept.push(old);
        line.seq = self.kept.len() as u64;
        changed |= line.seq != old;
        // References are to this entry or earlier ones, all in `kept`.
        let mut map = |seq: &mut u64| {
            let new = self.renumbered(*seq);
            changed |= new != *seq;
            *seq = new;
        };
        match &mut line.entry {
            JournalEntry::Solution { record } => {
                map(&mut record.inputs_journal_seq);
                for o in &mut record.overrides {
                    map(&mut o.journal_seq);
                }
            }
            JournalEntry::Override { record } => map(&mut record.journal_seq),
            _ => {}
        }
        Ok(if changed { Taken::Changed } else { Taken::AsIs })
    }
}
