//! Observation input: ADES PSV and XML, the service's own JSON lines,
//! validation, designation linking and de-duplication.
//!
//! Every reader returns the same [`Observation`] record; every rejected
//! line comes back as a [`Rejection`] naming file, line, field and reason.

mod columns;
mod error;
mod field;
pub mod jsonl;
pub mod psv;
mod record;
pub mod stream;
mod time;
mod validate;
pub mod write;
pub mod xml;

pub use error::{group_rejections, ObsKind, Problem, Rejection, RejectionGroup, GROUP_LINES_SHOWN};
pub use field::{Field, RecordText, FIELD_COUNT};
pub use identity::{ContentKey, DesignationKey, Linker, ObjectId};
pub use record::{BlockContext, InertialPosition, Observation, ObserverLocation, Source, SpiceId};
pub use summary::{FileSummary, IngestSummary, ObjectSummary};
pub use time::{parse_utc, UtcTime};
pub use validate::parse_number;

mod identity;
mod summary;

use std::collections::{BTreeMap, HashSet};
use std::path::Path;
use std::sync::Arc;

use crate::config::StationList;

/// The observation formats the service reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    AdesPsv,
    AdesXml,
    JsonLines,
}

impl Format {
    pub fn name(self) -> &'static str {
        match self {
            Format::AdesPsv => "ADES PSV",
            Format::AdesXml => "ADES XML",
            Format::JsonLines => "JSON lines",
        }
    }

    /// Picks the format by extension (`.psv`, `.xml`, `.jsonl`/`.json`),
    /// else by the first non-blank character (`#`, `<`, `{`).
    pub fn detect(path: &Path, text: &str) -> Option<Format> {
        Format::detect_by(path, first_char(text))
    }

    /// [`Format::detect`] from the extension and the first non-blank
    /// character alone (all a reader that streams the file has seen).
    pub fn detect_by(path: &Path, first: Option<char>) -> Option<Format> {
        match path.extension().and_then(|e| e.to_str()) {
            Some("psv") => return Some(Format::AdesPsv),
            Some("xml") => return Some(Format::AdesXml),
            Some("jsonl" | "json") => return Some(Format::JsonLines),
            _ => {}
        }
        match first {
            Some('#') => Some(Format::AdesPsv),
            Some('<') => Some(Format::AdesXml),
            Some('{') => Some(Format::JsonLines),
            _ => None,
        }
    }
}

/// The first character of a text that is neither a byte-order mark nor
/// white space.
pub fn first_char(text: &str) -> Option<char> {
    text.trim_start_matches('\u{feff}')
        .trim_start()
        .chars()
        .next()
}

/// Why a file's format could not be told.
const UNKNOWN_FORMAT: &str =
    "cannot tell the format: expected .psv, .xml or .jsonl, or a file starting with '#', '<' or '{'";

/// One file read and validated: its good observations and its bad lines.
#[derive(Debug, Clone)]
pub struct FileRead {
    pub file: Arc<str>,
    pub format: Option<Format>,
    pub observations: Vec<Observation>,
    pub rejected: Vec<Rejection>,
}

/// Reads a text in a known format, streaming each result to `sink`.
pub fn read_text_with<F>(
    file: &Arc<str>,
    text: &str,
    format: Format,
    stations: &StationList,
    sink: F,
) where
    F: FnMut(Result<Observation, Rejection>),
{
    match format {
        Format::AdesPsv => {
            psv::read_with(file, text, stations, sink);
        }
        Format::AdesXml => {
            xml::read_with(file, text, stations, sink);
        }
        Format::JsonLines => jsonl::read_with(file, text, stations, sink),
    }
}

/// Reads a text in a known format.
pub fn read_text(file: &str, text: &str, format: Format, stations: &StationList) -> FileRead {
    let file: Arc<str> = Arc::from(file);
    let (mut observations, mut rejected) = (Vec::new(), Vec::new());
    read_text_with(&file, text, format, stations, |r| match r {
        Ok(o) => observations.push(o),
        Err(e) => rejected.push(e),
    });
    FileRead {
        file,
        format: Some(format),
        observations,
        rejected,
    }
}

/// A rejection of a whole file (`line` 0 when no line is to blame).
fn whole_file(file: &str, line: u32, problem: Problem) -> Rejection {
    Rejection {
        file: file.to_string(),
        line,
        column: None,
        field: None,
        problem,
    }
}

/// Reads one file, picking the reader by extension or content.
pub fn read_path(path: &Path, stations: &StationList) -> FileRead {
    let name = path.display().to_string();
    let fail = |line, problem| FileRead {
        file: Arc::from(name.as_str()),
        format: None,
        observations: Vec::new(),
        rejected: vec![whole_file(&name, line, problem)],
    };
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) => return fail(0, Problem::Io { why: e.to_string() }),
    };
    let text = match String::from_utf8(bytes) {
        Ok(t) => t,
        Err(e) => {
            let at = e.utf8_error().valid_up_to();
            let line = e.as_bytes()[..at].iter().filter(|&&b| b == b'\n').count() as u32 + 1;
            return fail(
                line,
                Problem::Syntax {
                    why: "not UTF-8 text".into(),
                },
            );
        }
    };
    match Format::detect(path, &text) {
        Some(f) => read_text(&name, &text, f, stations),
        None => fail(
            1,
            Problem::Syntax {
                why: UNKNOWN_FORMAT.into(),
            },
        ),
    }
}

/// One object's observations after linking and de-duplication, in time order.
#[derive(Debug, Clone)]
pub struct ObjectObservations {
    pub id: ObjectId,
    pub designations: Vec<DesignationKey>,
    pub observations: Vec<Observation>,
}

/// The result of ingesting files: observations grouped by object, and the
/// summary to show or serialise.
#[derive(Debug, Clone)]
pub struct IngestOutcome {
    pub objects: Vec<ObjectObservations>,
    pub summary: IngestSummary,
}

/// Links designations across all files read so far, then groups and
/// de-duplicates at the end (a later file may join two earlier objects).
#[derive(Debug, Default)]
pub struct Batch {
    linker: Linker,
    files: Vec<FileSummary>,
    observations: Vec<Observation>,
    rejected: Vec<Rejection>,
}

impl Batch {
    pub fn new(links: &[Vec<DesignationKey>]) -> Self {
        Self {
            linker: Linker::new(links),
            ..Self::default()
        }
    }

    pub fn add(&mut self, read: FileRead) {
        for o in &read.observations {
            self.linker.link_all(&DesignationKey::of(o));
        }
        self.files.push(FileSummary {
            file: read.file.to_string(),
            format: read.format.map_or("unknown", Format::name),
            observations_read: read.observations.len(),
            lines_rejected: read.rejected.len(),
        });
        self.observations.extend(read.observations);
        self.rejected.extend(read.rejected);
    }

    pub fn finish(mut self) -> IngestOutcome {
        let observations_read = self.observations.len();
        let mut groups: BTreeMap<ObjectId, Vec<Observation>> = BTreeMap::new();
        for o in self.observations {
            let key = DesignationKey::of(&o);
            // Validation guarantees at least one designation.
            let Some(first) = key.first() else { continue };
            let id = self.linker.object_of(first);
            groups.entry(id).or_default().push(o);
        }
        let mut duplicates_dropped = 0;
        let mut per_station_all: BTreeMap<String, usize> = BTreeMap::new();
        let mut objects = Vec::new();
        let mut summaries = Vec::new();
        for (id, mut obs) in groups {
            let mut seen = HashSet::new();
            let before = obs.len();
            obs.retain(|o| seen.insert(ContentKey::of(o)));
            duplicates_dropped += before - obs.len();
            obs.sort_by_key(|o| o.time.sort_key());
            let mut per_station: BTreeMap<String, usize> = BTreeMap::new();
            for o in &obs {
                *per_station.entry(o.station().to_string()).or_default() += 1;
                *per_station_all.entry(o.station().to_string()).or_default() += 1;
            }
            let designations = self.linker.designations(&id);
            summaries.push(ObjectSummary {
                object_id: id.clone(),
                designations: summary::designation_texts(&designations),
                observations: obs.len(),
                first_obs_time_utc: obs
                    .first()
                    .map(|o| o.obs_time_text().to_string())
                    .unwrap_or_default(),
                last_obs_time_utc: obs
                    .last()
                    .map(|o| o.obs_time_text().to_string())
                    .unwrap_or_default(),
                per_station,
            });
            objects.push(ObjectObservations {
                id,
                designations,
                observations: obs,
            });
        }
        let all = objects.iter().flat_map(|o| o.observations.iter());
        let first = all.clone().min_by_key(|o| o.time.sort_key());
        let last = all.max_by_key(|o| o.time.sort_key());
        let summary = IngestSummary {
            files: self.files,
            observations_read,
            observations_kept: observations_read - duplicates_dropped,
            duplicates_dropped,
            objects: summaries,
            per_station: per_station_all,
            first_obs_time_utc: first.map(|o| o.obs_time_text().to_string()),
            last_obs_time_utc: last.map(|o| o.obs_time_text().to_string()),
            merged_ids: self.linker.absorbed().to_vec(),
            rejected: self.rejected,
        };
        IngestOutcome { objects, summary }
    }
}

/// Reads, validates, links and de-duplicates a set of files.
pub fn ingest_files<P: AsRef<Path>>(
    paths: &[P],
    stations: &StationList,
    links: &[Vec<DesignationKey>],
) -> IngestOutcome {
    let mut batch = Batch::new(links);
    for p in paths {
        batch.add(read_path(p.as_ref(), stations));
    }
    batch.finish()
}

/// Reads one file: [`ingest_files`] for a single path.
pub fn read_file(
    path: &Path,
    stations: &StationList,
    links: &[Vec<DesignationKey>],
) -> IngestOutcome {
    ingest_files(&[path], stations, links)
}

/// Validates a stored record's text again, as the readers do (without the
/// ADES-only demands, which the record met when it was first read).
pub fn revalidate(
    text: RecordText,
    source: record::Source,
    context: Option<Arc<BlockContext>>,
    stations: &StationList,
) -> Result<Observation, String> {
    let rules = validate::Rules {
        ades_mandatory: false,
    };
    validate::build(text, source, context, stations, rules).map_err(|p| match p.field {
        Some(f) => format!("{}: {}", f.ades_name(), p.problem),
        None => p.problem.to_string(),
    })
}
