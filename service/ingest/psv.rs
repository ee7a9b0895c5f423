//! ADES PSV (pipe-separated values), versions 2017 and 2022.
//!
//! Layout, as the ADES standard and its example files have it: a
//! `# version=2017` or `# version=2022` first line; header groups (`# name`)
//! with `! key value` members; then a keyword record naming the columns,
//! pipe-separated, in any order; then data records with the same columns,
//! values padded with spaces for alignment and an empty value meaning the
//! field is absent. A `#` line after data opens a new block, whose first
//! record is again a keyword record.

use std::sync::Arc;

use crate::config::StationList;

use super::columns::{block_kind, role, Role};
use super::error::{Problem, Rejection};
use super::field::{Field, RecordText, FIELD_COUNT};
use super::record::{BlockContext, Observation, Source};
use super::validate::{build, Rules};

/// The ADES versions the reader understands.
pub const VERSIONS: [&str; 2] = ["2017", "2022"];

/// Header groups the ADES PSV layout defines (the obsContext elements).
const GROUPS: [&str; 10] = [
    "observatory",
    "submitter",
    "observers",
    "measurers",
    "telescope",
    "software",
    "coinvestigators",
    "collaborators",
    "fundingSource",
    "comment",
];

struct Block {
    keyword_line: u32,
    columns: Vec<Role>,
    kind: Option<super::error::ObsKind>,
    /// Set when the keyword record was rejected: its data lines are skipped.
    rejected: bool,
}

enum State {
    /// Before the version line: only blank lines may come first.
    Start,
    /// The version line was missing or wrong: nothing after it can be
    /// trusted, so every further line is passed over.
    Refused,
    /// Header lines seen since the last data; the next record names columns.
    Header,
    Data(Block),
}

/// A PSV reader fed one line at a time, so that a file of any size can be
/// read in chunks: everything a line needs from the lines before it (the
/// version, the block's observatory and submitter, its column header) is
/// kept here between calls.
pub struct PsvLines<'s> {
    file: Arc<str>,
    stations: &'s StationList,
    version: Option<&'static str>,
    state: State,
    context: Option<Arc<BlockContext>>,
    pending: BlockContext,
    group: Option<&'static str>,
}

type Sink<'f> = dyn FnMut(Result<Observation, Rejection>) + 'f;

fn column_of(line: &str, byte: usize) -> u32 {
    line.get(..byte).map_or(byte, |s| s.chars().count()) as u32 + 1
}

/// The version a `# version=...` line declares, if it is one.
fn declared_version(line: &str) -> Option<&str> {
    line.strip_prefix('#')
        .map(str::trim_ascii)
        .and_then(|l| l.strip_prefix("version"))
        .map(str::trim_ascii)
        .and_then(|l| l.strip_prefix('='))
        .map(str::trim_ascii)
}

/// Reads a PSV text, handing every observation or rejection to `sink` in
/// file order. Returns the version the file declares, if it declares a
/// valid one.
pub fn read_with<F>(
    file: &Arc<str>,
    text: &str,
    stations: &StationList,
    mut sink: F,
) -> Option<&'static str>
where
    F: FnMut(Result<Observation, Rejection>),
{
    let mut reader = PsvLines::new(file.clone(), stations);
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    for (i, raw) in text.split_inclusive('\n').enumerate() {
        reader.line(i as u32 + 1, raw, &mut sink);
    }
    reader.finish(&mut sink);
    reader.version()
}

impl<'s> PsvLines<'s> {
    pub fn new(file: Arc<str>, stations: &'s StationList) -> Self {
        Self {
            file,
            stations,
            version: None,
            state: State::Start,
            context: None,
            pending: BlockContext::default(),
            group: None,
        }
    }

    /// The version the file declared, once its version line was read.
    pub fn version(&self) -> Option<&'static str> {
        self.version
    }

    /// Reads line `number` (1-based), `raw` with its line end if it has
    /// one: a line without one is the file's last, perhaps cut short.
    pub fn line(&mut self, number: u32, raw: &str, sink: &mut Sink<'_>) {
        let ends_with_newline = raw.ends_with('\n');
        let line = raw.trim_end_matches(['\n', '\r']);
        let trimmed = line.trim_ascii();
        if trimmed.is_empty() {
            return;
        }
        let version = match (&self.state, self.version) {
            (State::Refused, _) => return,
            (State::Start, _) | (_, None) => return self.version_line(number, trimmed, sink),
            (_, Some(v)) => v,
        };
        if let Some(rest) = trimmed.strip_prefix('#') {
            self.state = State::Header;
            self.header(number, rest.trim_ascii(), version, sink);
            return;
        }
        if let Some(rest) = trimmed.strip_prefix('!') {
            if matches!(self.state, State::Data(_)) {
                self.state = State::Header;
            }
            self.member(number, rest.trim_ascii(), sink);
            return;
        }
        match std::mem::replace(&mut self.state, State::Header) {
            State::Data(block) => {
                self.data(number, line, &block, ends_with_newline, sink);
                self.state = State::Data(block);
            }
            _ => {
                self.context = Some(Arc::new(std::mem::take(&mut self.pending)));
                self.group = None;
                self.state = State::Data(self.keywords(number, line, sink));
            }
        }
    }

    /// Ends the file: a file with no version line at all is refused here.
    pub fn finish(&mut self, sink: &mut Sink<'_>) {
        if matches!(self.state, State::Start) {
            self.state = State::Refused;
            self.reject(
                sink,
                1,
                None,
                None,
                Problem::BadVersion {
                    why: "empty file; expected '# version=2017' or '# version=2022'".into(),
                },
            );
        }
    }

    /// The first non-blank line: the version line comes first, and
    /// without it nothing else can be trusted.
    fn version_line(&mut self, number: u32, line: &str, sink: &mut Sink<'_>) {
        let why = match declared_version(line) {
            Some(v) => match VERSIONS.iter().find(|&&known| known == v) {
                Some(known) => {
                    self.version = Some(known);
                    self.state = State::Header;
                    return;
                }
                None => format!("version '{v}' is not 2017 or 2022"),
            },
            None => "the first line must be '# version=2017' or '# version=2022'".into(),
        };
        self.state = State::Refused;
        self.reject(sink, number, None, None, Problem::BadVersion { why });
    }

    fn reject(
        &self,
        sink: &mut Sink<'_>,
        line: u32,
        column: Option<u32>,
        field: Option<&str>,
        problem: Problem,
    ) {
        sink(Err(Rejection {
            file: self.file.to_string(),
            line,
            column,
            field: field.map(str::to_string),
            problem,
        }));
    }

    fn header(&mut self, number: u32, rest: &str, version: &str, sink: &mut Sink<'_>) {
        // A header after data starts a new block with a fresh context.
        if self.group.is_none() && self.context.is_some() {
            self.pending = BlockContext::default();
            self.context = None;
        }
        let name = rest.split_ascii_whitespace().next().unwrap_or("");
        if name.starts_with("version") {
            let again = rest.trim_start_matches("version").trim_ascii();
            let again = again.trim_start_matches('=').trim_ascii();
            if again != version {
                self.reject(
                    sink,
                    number,
                    None,
                    None,
                    Problem::BadVersion {
                        why: format!("second version line '{again}' contradicts '{version}'"),
                    },
                );
            }
            return;
        }
        match GROUPS.iter().find(|&&g| g == name) {
            Some(g) => self.group = Some(g),
            None => {
                self.group = Some("");
                self.reject(
                    sink,
                    number,
                    None,
                    None,
                    Problem::BadHeader {
                        why: format!("unknown header group '{name}'"),
                    },
                );
            }
        }
    }

    fn member(&mut self, number: u32, rest: &str, sink: &mut Sink<'_>) {
        let (key, value) = rest
            .split_once(|c: char| c.is_ascii_whitespace())
            .map_or((rest, ""), |(k, v)| (k, v.trim_ascii()));
        match self.group {
            None => self.reject(
                sink,
                number,
                None,
                None,
                Problem::BadHeader {
                    why: format!("'! {key}' is outside any '#' group"),
                },
            ),
            Some("observatory") if key == "mpcCode" => {
                self.pending.observatory_code = Some(value.to_string())
            }
            Some("submitter") if key == "name" => self.pending.submitter = Some(value.to_string()),
            Some(_) => {}
        }
    }

    fn keywords(&mut self, number: u32, line: &str, sink: &mut Sink<'_>) -> Block {
        let mut columns = Vec::new();
        let mut seen: Vec<(&str, u32)> = Vec::new();
        let mut rejected = false;
        let mut offset = 0;
        for name in line.split('|') {
            let col = column_of(line, offset + (name.len() - name.trim_start().len()));
            offset += name.len() + 1;
            let name = name.trim_ascii();
            if name.is_empty() {
                self.reject(
                    sink,
                    number,
                    Some(col),
                    None,
                    Problem::BadHeader {
                        why: "empty column name in the keyword record".into(),
                    },
                );
                rejected = true;
                continue;
            }
            if let Some(&(_, first)) = seen.iter().find(|(n, _)| *n == name) {
                self.reject(
                    sink,
                    number,
                    Some(col),
                    Some(name),
                    Problem::DuplicateColumn {
                        first_column: first,
                    },
                );
                rejected = true;
                continue;
            }
            seen.push((name, col));
            match role(name) {
                Some(role) => columns.push(role),
                None => {
                    self.reject(sink, number, Some(col), Some(name), Problem::UnknownColumn);
                    rejected = true;
                    columns.push(Role::Ignored);
                }
            }
        }
        let kind = block_kind(columns.iter().copied());
        Block {
            keyword_line: number,
            columns,
            kind,
            rejected,
        }
    }

    fn data(
        &self,
        number: u32,
        line: &str,
        block: &Block,
        ends_with_newline: bool,
        sink: &mut Sink<'_>,
    ) {
        if block.rejected {
            return self.reject(
                sink,
                number,
                None,
                None,
                Problem::BlockRejected {
                    keyword_line: block.keyword_line,
                },
            );
        }
        if let Some(kind) = block.kind {
            return self.reject(sink, number, None, None, Problem::Unsupported { kind });
        }
        let mut text = RecordText::with_capacity(line.len());
        let mut offsets = [0u32; FIELD_COUNT];
        // One pass over the bytes: '|' is ASCII, so every split point is a
        // char boundary, and short fields are not worth a memchr call each.
        let bytes = line.as_bytes();
        let mut found = 0;
        let mut start = 0usize;
        for end in (0..=bytes.len()).filter(|&i| i == bytes.len() || bytes[i] == b'|') {
            if let Some(&Role::Kept(f)) = block.columns.get(found) {
                let (mut a, mut b) = (start, end);
                while a < b && bytes[a].is_ascii_whitespace() {
                    a += 1;
                }
                while b > a && bytes[b - 1].is_ascii_whitespace() {
                    b -= 1;
                }
                if a < b {
                    offsets[f as usize] = a as u32;
                    text.set(f, &line[a..b]);
                }
            }
            found += 1;
            start = end + 1;
        }
        let keywords = block.columns.len();
        if found > keywords {
            return self.reject(
                sink,
                number,
                None,
                None,
                Problem::FieldCount { found, keywords },
            );
        }
        if found < keywords && !ends_with_newline {
            return self.reject(sink, number, None, None, Problem::Truncated);
        }
        let source = Source {
            file: self.file.clone(),
            line: number,
        };
        match build(
            text,
            source,
            self.context.clone(),
            self.stations,
            Rules {
                ades_mandatory: true,
            },
        ) {
            Ok(obs) => sink(Ok(obs)),
            Err(p) => {
                let column = p
                    .field
                    .map(|f| column_of(line, offsets[f as usize] as usize));
                let field = p.field.map(Field::ades_name);
                self.reject(sink, number, column, field, p.problem)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Station;

    fn stations() -> StationList {
        StationList::new(["XQ1", "XQ2"].map(|c| Station {
            code: c.into(),
            name: "Invented".into(),
            longitude_deg: 0.0,
            latitude_deg: 0.0,
            height_m: 0.0,
            sigma_arcsec: None,
        }))
    }

    fn read(text: &str) -> (Vec<Observation>, Vec<Rejection>) {
        let (mut ok, mut bad) = (Vec::new(), Vec::new());
        read_with(&Arc::from("t.psv"), text, &stations(), |r| match r {
            Ok(o) => ok.push(o),
            Err(e) => bad.push(e),
        });
        (ok, bad)
    }

    #[test]
    fn reads_a_padded_block() {
        let text = "# version=2022\n# observatory\n! mpcCode XQ1\n# submitter\n! name A. Nobody\n\
permID |trkSub  |mode|stn |obsTime                |ra         |dec        |astCat\n\
       |  qx01  | CCD|XQ1 |2026-03-14T05:12:33.25Z|215.65605  |-13.547872 |Gaia3\n";
        let (ok, bad) = read(text);
        assert!(bad.is_empty(), "{bad:?}");
        assert_eq!(ok.len(), 1);
        assert_eq!(ok[0].trk_sub(), Some("qx01"));
        assert_eq!(ok[0].perm_id(), None);
        assert_eq!(ok[0].source.line, 7);
        assert_eq!(ok[0].submitter(), Some("A. Nobody"));
    }

    #[test]
    fn column_of_bad_field() {
        let text = "# version=2017\ntrkSub|mode|stn|obsTime|ra|dec|astCat\nqx01|CCD|XQ1|2026-03-14T05:12:33Z|215.6|91.2|Gaia3\n";
        let (_, bad) = read(text);
        assert_eq!(bad.len(), 1);
        assert_eq!(bad[0].line, 3);
        assert_eq!(bad[0].field.as_deref(), Some("dec"));
        // "qx01|CCD|XQ1|2026-03-14T05:12:33Z|215.6|" is 40 characters.
        assert_eq!(bad[0].column, Some(41));
    }
}
