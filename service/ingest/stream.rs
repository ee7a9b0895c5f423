//! Reading a file of any size in bounded chunks, for the daemon.
//!
//! [`super::read_path`] holds the whole text, every observation and every
//! rejection at once, a few hundred bytes per line on top of the file
//! itself: fine for a command, not for a daemon that must take whatever
//! lands in its directory. Here a file is read in chunks of at most
//! [`Limits::chunk_lines`] lines (or [`Limits::chunk_bytes`] bytes), so
//! memory depends on the chunk, never on the file:
//!
//! - ADES PSV and JSON lines are streamed a line at a time; the PSV
//!   reader ([`PsvLines`]) carries what a line needs from the lines before
//!   it (the version, the block's observatory and submitter, its column
//!   header) from one chunk to the next, so a chunk boundary changes no
//!   result.
//! - ADES XML is a tree and is read whole, so files over
//!   [`Limits::xml_bytes`] are refused with that reason; what is read is
//!   still handed out in chunks.
//! - A first pass over the file checks that it is UTF-8 throughout and
//!   finds its first character: a file with a bad byte anywhere is refused
//!   whole before any of it is used, as [`super::read_path`] refuses it.
//! - No line is held beyond [`Limits::line_bytes`]: a longer one (a file
//!   without line ends, say) is skipped and rejected with its number.

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;
use std::sync::Arc;

use crate::config::StationList;

use super::error::{Problem, Rejection};
use super::psv::PsvLines;
use super::record::Observation;
use super::{first_char, jsonl, whole_file, xml, Format, UNKNOWN_FORMAT};

/// How much of a file is held at once.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    /// A chunk ends after this many lines...
    pub chunk_lines: usize,
    /// ...or once it has read this many bytes, whichever comes first.
    pub chunk_bytes: u64,
    /// Lines longer than this are rejected without being held.
    pub line_bytes: usize,
    /// ADES XML files larger than this are refused (they are read whole).
    pub xml_bytes: u64,
}

impl Limits {
    /// The daemon's limits.
    ///
    /// Chunks are small because the index applies each journal entry in
    /// one sled transaction, and sled holds tens of KB per observation
    /// written in a transaction until it commits: measured on a 43 MB file,
    /// the daemon peaked at about 100 MiB with 500 lines a chunk, 120-150
    /// with 1,000, 170-230 with 2,000 and 350-425 with 10,000, the same
    /// for 100,000 rows as for 300,000 (docs/performance.md has the 100 MB
    /// figures). The byte bound keeps chunks of long lines small too.
    ///
    /// The longest ADES record with every field is well under 2 KiB, so a
    /// line over 16 KiB is never a real record. XML is parsed whole into a
    /// tree several times its size: a 15.8 MB file laid out as the ADES
    /// examples are (44,000 observations) took the daemon to 174 MiB,
    /// about what a chunked file of any size costs, so 16 MiB is the
    /// largest XML file it reads.
    pub const DAEMON: Limits = Limits {
        chunk_lines: 1_000,
        chunk_bytes: 1 << 20,
        line_bytes: 16 << 10,
        xml_bytes: 16 << 20,
    };
}

/// One chunk's results, in file order.
#[derive(Debug, Default)]
pub struct Chunk {
    pub observations: Vec<Observation>,
    pub rejected: Vec<Rejection>,
}

impl Chunk {
    fn is_empty(&self) -> bool {
        self.observations.is_empty() && self.rejected.is_empty()
    }

    fn take(&mut self, result: Result<Observation, Rejection>) {
        match result {
            Ok(o) => self.observations.push(o),
            Err(r) => self.rejected.push(r),
        }
    }
}

/// Why a file is not read at all.
#[derive(Debug)]
pub enum Refused {
    /// The file disappeared before it could be opened.
    Missing,
    /// Refused whole, with its reason (unreadable, not UTF-8, unknown
    /// format, too large to read whole).
    Rejected(Rejection),
}

/// A read that failed part-way (the file was readable when opened).
#[derive(Debug, thiserror::Error)]
#[error("{file}: reading after line {line}: {source}")]
pub struct ReadError {
    pub file: String,
    pub line: u32,
    pub source: std::io::Error,
}

/// What the first pass found.
#[derive(Debug, Default, PartialEq)]
struct Survey {
    bytes: u64,
    first: Option<char>,
    /// The line of the first byte that is not UTF-8, if any.
    not_utf8_line: Option<u32>,
}

/// Block size of the first pass.
const SURVEY_BLOCK: usize = 64 << 10;

/// Reads the file once through: its size, its first non-blank character,
/// and whether it is UTF-8 throughout (else the line where it stops).
fn survey(reader: &mut impl Read) -> std::io::Result<Survey> {
    let mut s = Survey::default();
    let mut block = vec![0u8; SURVEY_BLOCK];
    // The start of a character cut by the block's end (at most 3 bytes).
    let mut carry: Vec<u8> = Vec::with_capacity(4);
    let mut newlines: u32 = 0;
    let mut seen_text = false;
    loop {
        let n = reader.read(&mut block)?;
        if n == 0 {
            break;
        }
        s.bytes += n as u64;
        let mut data = std::mem::take(&mut carry);
        data.extend_from_slice(&block[..n]);
        let (valid, bad) = match std::str::from_utf8(&data) {
            Ok(_) => (data.len(), false),
            // An incomplete character at the end: carried to the next block.
            Err(e) if e.error_len().is_none() => (e.valid_up_to(), false),
            Err(e) => (e.valid_up_to(), true),
        };
        let text = std::str::from_utf8(&data[..valid]).unwrap_or_default();
        if !seen_text {
            s.first = first_char(text);
            seen_text = s.first.is_some();
        }
        if bad {
            newlines += text.bytes().filter(|&b| b == b'\n').count() as u32;
            s.not_utf8_line = Some(newlines + 1);
            return Ok(s);
        }
        newlines += text.bytes().filter(|&b| b == b'\n').count() as u32;
        carry.extend_from_slice(&data[valid..]);
    }
    if !carry.is_empty() {
        // The file ends inside a character.
        s.not_utf8_line = Some(newlines + 1);
    }
    Ok(s)
}

/// One line as read: its text with its line end, or how long it was when
/// too long to keep.
enum Line<'b> {
    Text(&'b [u8]),
    TooLong,
}

/// Lines of a reader, none held beyond a limit.
struct LineSource<R> {
    reader: R,
    buf: Vec<u8>,
    limit: usize,
    /// The number of the last line returned.
    number: u32,
    bytes_read: u64,
}

impl<R: BufRead> LineSource<R> {
    fn new(reader: R, limit: usize) -> Self {
        Self {
            reader,
            buf: Vec::new(),
            limit,
            number: 0,
            bytes_read: 0,
        }
    }

    /// The next line and its number (`None` at the end), keeping at most
    /// `limit` bytes of it and reading past the rest.
    fn next_line(&mut self) -> std::io::Result<Option<(u32, Line<'_>)>> {
        self.buf.clear();
        let mut consumed = 0usize;
        let mut too_long = false;
        loop {
            let available = self.reader.fill_buf()?;
            if available.is_empty() {
                break;
            }
            let (take, done) = match available.iter().position(|&b| b == b'\n') {
                Some(i) => (i + 1, true),
                None => (available.len(), false),
            };
            let room = self.limit.saturating_sub(self.buf.len());
            if take > room {
                too_long = true;
            }
            self.buf.extend_from_slice(&available[..take.min(room)]);
            self.reader.consume(take);
            consumed += take;
            if done {
                break;
            }
        }
        if consumed == 0 {
            return Ok(None);
        }
        self.number += 1;
        self.bytes_read += consumed as u64;
        let line = if too_long {
            Line::TooLong
        } else {
            Line::Text(&self.buf)
        };
        Ok(Some((self.number, line)))
    }
}

/// The line-at-a-time readers.
enum LineReader<'s> {
    Psv(PsvLines<'s>),
    Jsonl(&'s StationList),
}

impl LineReader<'_> {
    fn line(&mut self, file: &Arc<str>, number: u32, raw: &str, chunk: &mut Chunk) {
        match self {
            LineReader::Psv(r) => r.line(number, raw, &mut |res| chunk.take(res)),
            LineReader::Jsonl(stations) => {
                if let Some(res) = jsonl::read_line(file, number, raw, stations) {
                    chunk.take(res);
                }
            }
        }
    }

    fn finish(&mut self, chunk: &mut Chunk) {
        if let LineReader::Psv(r) = self {
            r.finish(&mut |res| chunk.take(res));
        }
    }
}

enum Body<'s> {
    Lines {
        source: LineSource<BufReader<File>>,
        reader: LineReader<'s>,
    },
    /// Read whole (XML): handed out a chunk at a time.
    Whole {
        observations: std::vec::IntoIter<Observation>,
        rejected: Vec<Rejection>,
    },
}

/// A file being read a chunk at a time.
pub struct ChunkedFile<'s> {
    file: Arc<str>,
    format: Format,
    limits: Limits,
    bytes_total: u64,
    body: Body<'s>,
    done: bool,
}

fn io_rejection(file: &str, e: &std::io::Error) -> Refused {
    if e.kind() == std::io::ErrorKind::NotFound {
        Refused::Missing
    } else {
        Refused::Rejected(whole_file(file, 0, Problem::Io { why: e.to_string() }))
    }
}

/// Opens a file for chunked reading: surveys it, tells its format, and
/// refuses it whole when it cannot be read (with the same reasons as
/// [`super::read_path`], plus an XML file too large to read whole).
pub fn open<'s>(
    path: &Path,
    stations: &'s StationList,
    limits: Limits,
) -> Result<ChunkedFile<'s>, Refused> {
    let name = path.display().to_string();
    let refuse = |line, problem| Refused::Rejected(whole_file(&name, line, problem));
    let s = File::open(path)
        .and_then(|mut f| survey(&mut f))
        .map_err(|e| io_rejection(&name, &e))?;
    if let Some(line) = s.not_utf8_line {
        let why = "not UTF-8 text".into();
        return Err(refuse(line, Problem::Syntax { why }));
    }
    let Some(format) = Format::detect_by(path, s.first) else {
        let why = UNKNOWN_FORMAT.into();
        return Err(refuse(1, Problem::Syntax { why }));
    };
    let file: Arc<str> = Arc::from(name.as_str());
    let body = match format {
        Format::AdesXml => whole_body(&file, path, s.bytes, stations, limits)?,
        Format::AdesPsv | Format::JsonLines => {
            let f = File::open(path).map_err(|e| io_rejection(&name, &e))?;
            let reader = match format {
                Format::AdesPsv => LineReader::Psv(PsvLines::new(file.clone(), stations)),
                _ => LineReader::Jsonl(stations),
            };
            Body::Lines {
                source: LineSource::new(BufReader::with_capacity(1 << 16, f), limits.line_bytes),
                reader,
            }
        }
    };
    Ok(ChunkedFile {
        file,
        format,
        limits,
        bytes_total: s.bytes,
        body,
        done: false,
    })
}

/// Reads an XML file whole, if it is small enough to.
fn whole_body<'s>(
    file: &Arc<str>,
    path: &Path,
    bytes: u64,
    stations: &StationList,
    limits: Limits,
) -> Result<Body<'s>, Refused> {
    if bytes > limits.xml_bytes {
        let problem = Problem::TooLarge {
            bytes,
            limit_bytes: limits.xml_bytes,
            format: Format::AdesXml.name(),
        };
        return Err(Refused::Rejected(whole_file(file, 0, problem)));
    }
    let text = std::fs::read_to_string(path).map_err(|e| io_rejection(file, &e))?;
    let mut chunk = Chunk::default();
    xml::read_with(file, &text, stations, |res| chunk.take(res));
    Ok(Body::Whole {
        observations: chunk.observations.into_iter(),
        rejected: chunk.rejected,
    })
}

impl ChunkedFile<'_> {
    pub fn format(&self) -> Format {
        self.format
    }

    /// The file's size when it was surveyed.
    pub fn bytes_total(&self) -> u64 {
        self.bytes_total
    }

    /// Bytes read so far (all of them, for a file read whole).
    pub fn bytes_read(&self) -> u64 {
        match &self.body {
            Body::Lines { source, .. } => source.bytes_read,
            Body::Whole { .. } => self.bytes_total,
        }
    }

    /// The next chunk, or `None` once the file is read.
    pub fn next_chunk(&mut self) -> Result<Option<Chunk>, ReadError> {
        if self.done {
            return Ok(None);
        }
        let chunk = match &mut self.body {
            Body::Lines { source, reader } => {
                let (chunk, ended) = lines_chunk(&self.file, source, reader, self.limits)?;
                self.done = ended;
                chunk
            }
            Body::Whole {
                observations,
                rejected,
            } => {
                let chunk = Chunk {
                    observations: observations.take(self.limits.chunk_lines).collect(),
                    rejected: std::mem::take(rejected),
                };
                self.done = observations.as_slice().is_empty();
                chunk
            }
        };
        Ok((!(self.done && chunk.is_empty())).then_some(chunk))
    }
}

/// Reads lines until the chunk is full or the file ends; says which.
fn lines_chunk(
    file: &Arc<str>,
    source: &mut LineSource<BufReader<File>>,
    reader: &mut LineReader<'_>,
    limits: Limits,
) -> Result<(Chunk, bool), ReadError> {
    let mut chunk = Chunk::default();
    let start = source.bytes_read;
    for _ in 0..limits.chunk_lines {
        if source.bytes_read - start >= limits.chunk_bytes {
            return Ok((chunk, false));
        }
        let last = source.number;
        let line = source.next_line().map_err(|e| ReadError {
            file: file.to_string(),
            line: last,
            source: e,
        })?;
        match line {
            None => {
                reader.finish(&mut chunk);
                return Ok((chunk, true));
            }
            Some((number, Line::TooLong)) => {
                chunk.rejected.push(line_too_long(file, number, limits))
            }
            Some((number, Line::Text(bytes))) => match std::str::from_utf8(bytes) {
                Ok(text) => {
                    // A byte-order mark may open the file, and only it.
                    let text = match number {
                        1 => text.strip_prefix('\u{feff}').unwrap_or(text),
                        _ => text,
                    };
                    reader.line(file, number, text, &mut chunk);
                }
                // The survey found the file UTF-8; it changed since.
                Err(_) => chunk.rejected.push(whole_file(
                    file,
                    number,
                    Problem::Syntax {
                        why: "not UTF-8 text".into(),
                    },
                )),
            },
        }
    }
    Ok((chunk, false))
}

fn line_too_long(file: &str, number: u32, limits: Limits) -> Rejection {
    whole_file(
        file,
        number,
        Problem::LineTooLong {
            limit_bytes: limits.line_bytes,
        },
    )
}

#[cfg(test)]
mod tests;
