//! Why a line was rejected, and where it is.

use serde::Serialize;

/// Kinds of ADES observation the service does not fit (yet).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ObsKind {
    Offset,
    Occultation,
    Radar,
    Residual,
}

impl std::fmt::Display for ObsKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            ObsKind::Offset => "offset",
            ObsKind::Occultation => "occultation",
            ObsKind::Radar => "radar",
            ObsKind::Residual => "residual",
        })
    }
}

/// The reason a line or field was rejected.
#[derive(Debug, Clone, PartialEq, Serialize, thiserror::Error)]
#[serde(tag = "reason", rename_all = "snake_case")]
pub enum Problem {
    #[error("'{text}' is not a number")]
    NotANumber { text: String },
    #[error("{text} is outside {range}")]
    OutOfRange { text: String, range: &'static str },
    #[error("{text} must be greater than zero")]
    NotPositive { text: String },
    #[error("'{text}' is not a UTC time: {why}")]
    BadTime { text: String, why: String },
    // The remedy is named: the station list is not always the one the
    // reader thinks (a configuration without one, or another file).
    #[error(
        "station '{code}' is not in the station list (name a list that has it \
         with --stations or the configuration's stations.file)"
    )]
    UnknownStation { code: String },
    #[error("no designation: one of trkSub, provID or permID is required")]
    MissingDesignation,
    #[error("required but absent")]
    Missing,
    #[error("'{text}' is not valid here: {why}")]
    BadValue { text: String, why: String },
    #[error("observer position: {why}")]
    BadLocation { why: String },
    #[error("column appears twice in the keyword record (first at column {first_column})")]
    DuplicateColumn { first_column: u32 },
    #[error("unknown column")]
    UnknownColumn,
    #[error("{found} fields, but the keyword record has {keywords}")]
    FieldCount { found: usize, keywords: usize },
    #[error("file ends inside a record (truncated?)")]
    Truncated,
    #[error("version line: {why}")]
    BadVersion { why: String },
    #[error("header: {why}")]
    BadHeader { why: String },
    #[error("data record before any keyword record")]
    NoKeywordRecord,
    #[error("skipped: the keyword record at line {keyword_line} was rejected")]
    BlockRejected { keyword_line: u32 },
    #[error("{kind} observations are not supported")]
    Unsupported { kind: ObsKind },
    #[error("syntax: {why}")]
    Syntax { why: String },
    #[error("cannot read file: {why}")]
    Io { why: String },
    #[error("the line is longer than {limit_bytes} bytes (no record is that long)")]
    LineTooLong { limit_bytes: usize },
    #[error("the file is {bytes} bytes; {format} files over {limit_bytes} bytes are refused because they are read whole (send ADES PSV or JSON lines, which are read in chunks, or split the file)")]
    TooLarge {
        bytes: u64,
        limit_bytes: u64,
        format: &'static str,
    },
}

impl Problem {
    /// The reason's name, as the `reason` tag of its JSON form spells it
    /// (rejection reports count lines by it).
    pub fn reason(&self) -> &'static str {
        match self {
            Problem::NotANumber { .. } => "not_a_number",
            Problem::OutOfRange { .. } => "out_of_range",
            Problem::NotPositive { .. } => "not_positive",
            Problem::BadTime { .. } => "bad_time",
            Problem::UnknownStation { .. } => "unknown_station",
            Problem::MissingDesignation => "missing_designation",
            Problem::Missing => "missing",
            Problem::BadValue { .. } => "bad_value",
            Problem::BadLocation { .. } => "bad_location",
            Problem::DuplicateColumn { .. } => "duplicate_column",
            Problem::UnknownColumn => "unknown_column",
            Problem::FieldCount { .. } => "field_count",
            Problem::Truncated => "truncated",
            Problem::BadVersion { .. } => "bad_version",
            Problem::BadHeader { .. } => "bad_header",
            Problem::NoKeywordRecord => "no_keyword_record",
            Problem::BlockRejected { .. } => "block_rejected",
            Problem::Unsupported { .. } => "unsupported",
            Problem::Syntax { .. } => "syntax",
            Problem::Io { .. } => "io",
            Problem::LineTooLong { .. } => "line_too_long",
            Problem::TooLarge { .. } => "too_large",
        }
    }
}

/// One rejected line: which file, which line, which field and why.
///
/// Displays as `obs.psv:14: field 'dec': 91.2 is outside [-90, 90]`.
#[derive(Debug, Clone, PartialEq, Serialize, thiserror::Error)]
pub struct Rejection {
    pub file: String,
    /// 1-based line number; 0 when the problem concerns the whole file.
    pub line: u32,
    /// 1-based character column of the field, where the format has one.
    pub column: Option<u32>,
    /// The field's name as the format spells it (`dec`, `dec_deg`).
    pub field: Option<String>,
    pub problem: Problem,
}

impl std::fmt::Display for Rejection {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Line 0 means the whole file: no line is shown, and a file that
        // could not be read at all says so in plain words.
        match (&self.problem, self.line) {
            (Problem::Io { why }, 0) => return write!(f, "cannot open {}: {why}", self.file),
            (_, 0) => write!(f, "{}: ", self.file)?,
            _ => write!(f, "{}:{}: ", self.file, self.line)?,
        }
        self.write_reason(f)
    }
}

impl Rejection {
    /// The field and reason, without file or line.
    fn write_reason(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if let Some(field) = &self.field {
            write!(f, "field '{field}': ")?;
        }
        write!(f, "{}", self.problem)
    }
}

/// How many line numbers a group of rejections shows in text.
pub const GROUP_LINES_SHOWN: usize = 5;

/// Rejections that differ only in their line: one file, one field, one
/// reason with the same words. Text output shows a group as one line, so a
/// reason repeated on thousands of lines does not bury the others.
#[derive(Debug, Clone, PartialEq)]
pub struct RejectionGroup<'a> {
    /// The group's first rejection, in the order they were given.
    pub first: &'a Rejection,
    /// How many rejections the group holds.
    pub count: usize,
    /// The lines of its first rejections, at most the number asked for.
    pub lines: Vec<u32>,
}

impl std::fmt::Display for RejectionGroup<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if self.count == 1 {
            return write!(f, "{}", self.first);
        }
        // The lines come before the reason, whose own words may end in
        // parentheses.
        let lines: Vec<String> = self.lines.iter().map(u32::to_string).collect();
        let more = if self.count > self.lines.len() {
            ", ..."
        } else {
            ""
        };
        write!(
            f,
            "{}: {} lines ({}{more}): ",
            self.first.file,
            self.count,
            lines.join(", ")
        )?;
        self.first.write_reason(f)
    }
}

/// Groups rejections by file, field and reason (its kind and its words),
/// in the order each group's first rejection comes, keeping the first
/// `lines_kept` line numbers of each.
pub fn group_rejections(rejections: &[Rejection], lines_kept: usize) -> Vec<RejectionGroup<'_>> {
    let mut index: std::collections::HashMap<(&str, Option<&str>, &str, String), usize> =
        std::collections::HashMap::new();
    let mut groups: Vec<RejectionGroup<'_>> = Vec::new();
    for r in rejections {
        let key = (
            r.file.as_str(),
            r.field.as_deref(),
            r.problem.reason(),
            r.problem.to_string(),
        );
        match index.get(&key) {
            Some(&i) => {
                let g = &mut groups[i];
                g.count += 1;
                if g.lines.len() < lines_kept {
                    g.lines.push(r.line);
                }
            }
            None => {
                index.insert(key, groups.len());
                groups.push(RejectionGroup {
                    first: r,
                    count: 1,
                    lines: if lines_kept > 0 {
                        vec![r.line]
                    } else {
                        Vec::new()
                    },
                });
            }
        }
    }
    groups
}

/// A problem with one named field of a record, before the reader has said
/// where the record is.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldProblem {
    pub field: Option<super::Field>,
    pub problem: Problem,
}

impl FieldProblem {
    pub fn new(field: super::Field, problem: Problem) -> Self {
        Self {
            field: Some(field),
            problem,
        }
    }

    pub fn record(problem: Problem) -> Self {
        Self {
            field: None,
            problem,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reason_names_match_the_json_tag() {
        // Every variant, with placeholder contents (the test's own).
        let all = [
            Problem::NotANumber { text: "x".into() },
            Problem::OutOfRange {
                text: "x".into(),
                range: "[0, 1]",
            },
            Problem::NotPositive { text: "x".into() },
            Problem::BadTime {
                text: "x".into(),
                why: "y".into(),
            },
            Problem::UnknownStation { code: "x".into() },
            Problem::MissingDesignation,
            Problem::Missing,
            Problem::BadValue {
                text: "x".into(),
                why: "y".into(),
            },
            Problem::BadLocation { why: "y".into() },
            Problem::DuplicateColumn { first_column: 1 },
            Problem::UnknownColumn,
            Problem::FieldCount {
                found: 1,
                keywords: 2,
            },
            Problem::Truncated,
            Problem::BadVersion { why: "y".into() },
            Problem::BadHeader { why: "y".into() },
            Problem::NoKeywordRecord,
            Problem::BlockRejected { keyword_line: 1 },
            Problem::Unsupported {
                kind: ObsKind::Radar,
            },
            Problem::Syntax { why: "y".into() },
            Problem::Io { why: "y".into() },
            Problem::LineTooLong { limit_bytes: 1 },
            Problem::TooLarge {
                bytes: 2,
                limit_bytes: 1,
                format: "ADES XML",
            },
        ];
        for p in all {
            let json = serde_json::to_value(&p).unwrap();
            assert_eq!(json["reason"], p.reason(), "{p:?}");
        }
    }

    /// One rejection per line, from a file and field the test invents.
    fn at(file: &str, line: u32, field: &str, problem: Problem) -> Rejection {
        Rejection {
            file: file.into(),
            line,
            column: None,
            field: Some(field.into()),
            problem,
        }
    }

    #[test]
    fn one_reason_on_many_lines_is_one_group() {
        // The layout is the one issue 12 (point 7) asks for: the count,
        // the reason once, the first five lines.
        let unknown = |code: &str| Problem::UnknownStation { code: code.into() };
        let mut all: Vec<Rejection> = (3..10)
            .map(|line| at("a.psv", line, "stn", unknown("ZQX")))
            .collect();
        // Another station's words, another file and another reason each
        // make their own group.
        all.insert(2, at("a.psv", 20, "stn", unknown("ZQY")));
        all.push(at("b.psv", 4, "stn", unknown("ZQX")));
        all.push(at("a.psv", 30, "ra", Problem::Missing));
        all.push(at("a.psv", 31, "ra", Problem::Missing));
        let groups = group_rejections(&all, GROUP_LINES_SHOWN);
        let summary: Vec<(&str, u32, usize, Vec<u32>)> = groups
            .iter()
            .map(|g| {
                (
                    g.first.file.as_str(),
                    g.first.line,
                    g.count,
                    g.lines.clone(),
                )
            })
            .collect();
        assert_eq!(
            summary,
            [
                ("a.psv", 3, 7, vec![3, 4, 5, 6, 7]),
                ("a.psv", 20, 1, vec![20]),
                ("b.psv", 4, 1, vec![4]),
                ("a.psv", 30, 2, vec![30, 31]),
            ]
        );
        let text: Vec<String> = groups.iter().map(ToString::to_string).collect();
        assert_eq!(
            text[0],
            "a.psv: 7 lines (3, 4, 5, 6, 7, ...): field 'stn': station 'ZQX' is not in the \
             station list (name a list that has it with --stations or the configuration's \
             stations.file)"
        );
        // A group of one reads as the rejection itself.
        assert_eq!(text[2], all[8].to_string());
        assert!(text[2].starts_with("b.psv:4: field 'stn': "), "{}", text[2]);
        // Every line is shown when there are no more than asked for.
        assert_eq!(
            text[3],
            "a.psv: 2 lines (30, 31): field 'ra': required but absent"
        );
        // Every rejection is in exactly one group.
        assert_eq!(groups.iter().map(|g| g.count).sum::<usize>(), all.len());
        assert!(group_rejections(&[], GROUP_LINES_SHOWN).is_empty());
    }

    #[test]
    fn a_file_that_cannot_be_read_names_no_line() {
        // Issue 12, point 7: "cannot open FILE: reason", no line 0.
        let r = Rejection {
            file: "gone.psv".into(),
            line: 0,
            column: None,
            field: None,
            problem: Problem::Io {
                why: "No such file or directory (os error 2)".into(),
            },
        };
        assert_eq!(
            r.to_string(),
            "cannot open gone.psv: No such file or directory (os error 2)"
        );
        let r = Rejection {
            problem: Problem::Syntax {
                why: "empty".into(),
            },
            ..r
        };
        assert_eq!(r.to_string(), "gone.psv: syntax: empty");
    }

    #[test]
    fn display_names_file_line_field_and_reason() {
        let r = Rejection {
            file: "obs.psv".into(),
            line: 14,
            column: Some(40),
            field: Some("dec".into()),
            problem: Problem::OutOfRange {
                text: "91.2".into(),
                range: "[-90, 90]",
            },
        };
        assert_eq!(
            r.to_string(),
            "obs.psv:14: field 'dec': 91.2 is outside [-90, 90]"
        );
        let r = Rejection {
            field: None,
            problem: Problem::Truncated,
            ..r
        };
        assert_eq!(
            r.to_string(),
            "obs.psv:14: file ends inside a record (truncated?)"
        );
    }
}
