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
    /// Header lines seen since the last data; the next record names columns.
    Header,
    Data(Block),
}

struct Reader<'a, F> {
    file: Arc<str>,
    stations: &'a StationList,
    sink: F,
    context: Option<Arc<BlockContext>>,
    pending: BlockContext,
    group: Option<&'a str>,
}

impl<F: FnMut(Result<Observation, Rejection>)> Reader<'_, F> {
    fn reject(&mut self, line: u32, column: Option<u32>, field: Option<&str>, problem: Problem) {
        (self.sink)(Err(Rejection {
            file: self.file.to_string(),
            line,
            column,
            field: field.map(str::to_string),
            problem,
        }));
    }
}

fn column_of(line: &str, byte: usize) -> u32 {
    line.get(..byte).map_or(byte, |s| s.chars().count()) as u32 + 1
}

/// Reads a PSV text, handing every observation or rejection to `sink` in
/// file order. Returns the version the file declares, if it declares a
/// valid one.
pub fn read_with<F>(
    file: &Arc<str>,
    text: &str,
    stations: &StationList,
    sink: F,
) -> Option<&'static str>
where
    F: FnMut(Result<Observation, Rejection>),
{
    let mut r = Reader {
        file: file.clone(),
        stations,
        sink,
        context: None,
        pending: BlockContext::default(),
        group: None,
    };
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut lines = text.split_inclusive('\n').enumerate();
    // The version line comes first; without it nothing else can be trusted.
    let version = loop {
        let Some((i, raw)) = lines.next() else {
            r.reject(
                1,
                None,
                None,
                Problem::BadVersion {
                    why: "empty file; expected '# version=2017' or '# version=2022'".into(),
                },
            );
            return None;
        };
        let line = raw.trim_end_matches(['\n', '\r']).trim_ascii();
        if line.is_empty() {
            continue;
        }
        let declared = line
            .strip_prefix('#')
            .map(str::trim_ascii)
            .and_then(|l| l.strip_prefix("version"))
            .map(str::trim_ascii)
            .and_then(|l| l.strip_prefix('='))
            .map(str::trim_ascii);
        match declared {
            Some(v) => match VERSIONS.iter().find(|&&known| known == v) {
                Some(known) => break *known,
                None => {
                    r.reject(
                        i as u32 + 1,
                        None,
                        None,
                        Problem::BadVersion {
                            why: format!("version '{v}' is not 2017 or 2022"),
                        },
                    );
                    return None;
                }
            },
            None => {
                r.reject(
                    i as u32 + 1,
                    None,
                    None,
                    Problem::BadVersion {
                        why: "the first line must be '# version=2017' or '# version=2022'".into(),
                    },
                );
                return None;
            }
        }
    };

    let mut state = State::Header;
    for (i, raw) in lines {
        let number = i as u32 + 1;
        let ends_with_newline = raw.ends_with('\n');
        let line = raw.trim_end_matches(['\n', '\r']);
        let trimmed = line.trim_ascii();
        if trimmed.is_empty() {
            continue;
        }
        if let Some(rest) = trimmed.strip_prefix('#') {
            state = State::Header;
            r.header(number, rest.trim_ascii(), version);
            continue;
        }
        if let Some(rest) = trimmed.strip_prefix('!') {
            if matches!(state, State::Data(_)) {
                state = State::Header;
            }
            r.member(number, rest.trim_ascii());
            continue;
        }
        match &state {
            State::Header => {
                r.context = Some(Arc::new(std::mem::take(&mut r.pending)));
                r.group = None;
                state = State::Data(r.keywords(number, line));
            }
            State::Data(block) => r.data(number, line, block, ends_with_newline),
        }
    }
    Some(version)
}

impl<'a, F: FnMut(Result<Observation, Rejection>)> Reader<'a, F> {
    fn header(&mut self, number: u32, rest: &'a str, version: &str) {
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

    fn member(&mut self, number: u32, rest: &str) {
        let (key, value) = rest
            .split_once(|c: char| c.is_ascii_whitespace())
            .map_or((rest, ""), |(k, v)| (k, v.trim_ascii()));
        match self.group {
            None => self.reject(
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

    fn keywords(&mut self, number: u32, line: &str) -> Block {
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
                    self.reject(number, Some(col), Some(name), Problem::UnknownColumn);
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

    fn data(&mut self, number: u32, line: &str, block: &Block, ends_with_newline: bool) {
        if block.rejected {
            return self.reject(
                number,
                None,
                None,
                Problem::BlockRejected {
                    keyword_line: block.keyword_line,
                },
            );
        }
        if let Some(kind) = block.kind {
            return self.reject(number, None, None, Problem::Unsupported { kind });
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
            return self.reject(number, None, None, Problem::FieldCount { found, keywords });
        }
        if found < keywords && !ends_with_newline {
            return self.reject(number, None, None, Problem::Truncated);
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
            Ok(obs) => (self.sink)(Ok(obs)),
            Err(p) => {
                let column = p
                    .field
                    .map(|f| column_of(line, offsets[f as usize] as usize));
                let field = p.field.map(Field::ades_name);
                self.reject(number, column, field, p.problem)
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
