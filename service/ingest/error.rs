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
    #[error("station '{code}' is not in the station list")]
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
        write!(f, "{}:{}: ", self.file, self.line)?;
        if let Some(field) = &self.field {
            write!(f, "field '{field}': ")?;
        }
        write!(f, "{}", self.problem)
    }
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
