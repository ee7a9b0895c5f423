//! ADES XML: `<ades version="2017|2022">`, `<obsBlock>` with `<obsContext>`
//! and `<obsData>`, and `<optical>` records (also accepted directly under
//! `<ades>`, as the schema allows).

use std::sync::Arc;

use roxmltree::{Document, Node};

use crate::config::StationList;

use super::columns::{role, Role};
use super::error::{ObsKind, Problem, Rejection};
use super::field::{Field, RecordText, FIELD_COUNT};
use super::record::{BlockContext, Observation, Source};
use super::validate::{build, Rules};

/// Turns byte offsets into line and column numbers. Offsets are asked for
/// in document order, so counting newlines forward from the last answer
/// keeps the whole file linear.
struct Lines<'a> {
    text: &'a str,
    pos: usize,
    line: u32,
}

impl<'a> Lines<'a> {
    fn new(text: &'a str) -> Self {
        Self {
            text,
            pos: 0,
            line: 1,
        }
    }

    fn line_at(&mut self, pos: usize) -> u32 {
        if pos < self.pos {
            // Out of order (rare: error reporting); count from the start.
            self.pos = 0;
            self.line = 1;
        }
        let end = pos.min(self.text.len());
        let chunk = &self.text.as_bytes()[self.pos..end];
        self.line += chunk.iter().filter(|&&b| b == b'\n').count() as u32;
        self.pos = end;
        self.line
    }

    fn column_at(&self, pos: usize) -> u32 {
        let before = self.text.get(..pos).unwrap_or("");
        let start = before.rfind('\n').map_or(0, |i| i + 1);
        before[start..].chars().count() as u32 + 1
    }
}

struct Reader<'a, 'd, F> {
    file: Arc<str>,
    stations: &'a StationList,
    lines: Lines<'d>,
    sink: F,
}

fn text_of<'d>(node: Node<'d, 'd>) -> &'d str {
    node.text().unwrap_or("").trim_ascii()
}

impl<'d, F: FnMut(Result<Observation, Rejection>)> Reader<'_, 'd, F> {
    fn reject_at(&mut self, pos: usize, field: Option<&str>, problem: Problem) {
        let line = self.lines.line_at(pos);
        let column = Some(self.lines.column_at(pos));
        (self.sink)(Err(Rejection {
            file: self.file.to_string(),
            line,
            column,
            field: field.map(str::to_string),
            problem,
        }));
    }

    fn context(&mut self, node: Node<'d, 'd>) -> BlockContext {
        let mut ctx = BlockContext::default();
        for group in node.children().filter(Node::is_element) {
            let member = |name: &str| {
                group
                    .children()
                    .find(|c| c.has_tag_name(name))
                    .map(|c| text_of(c).to_string())
            };
            match group.tag_name().name() {
                "observatory" => ctx.observatory_code = member("mpcCode"),
                "submitter" => ctx.submitter = member("name"),
                _ => {}
            }
        }
        ctx
    }

    fn records(&mut self, data: Node<'d, 'd>, ctx: &Option<Arc<BlockContext>>) {
        for node in data.children().filter(Node::is_element) {
            self.record(node, ctx);
        }
    }

    fn record(&mut self, node: Node<'d, 'd>, ctx: &Option<Arc<BlockContext>>) {
        let pos = node.range().start;
        let kind = match node.tag_name().name() {
            "optical" => None,
            "offset" => Some(ObsKind::Offset),
            "occultation" => Some(ObsKind::Occultation),
            "radar" => Some(ObsKind::Radar),
            "opticalResidual" | "radarResidual" => Some(ObsKind::Residual),
            other => {
                let why = format!("unexpected element <{other}>");
                return self.reject_at(pos, None, Problem::BadHeader { why });
            }
        };
        if let Some(kind) = kind {
            return self.reject_at(pos, None, Problem::Unsupported { kind });
        }
        let line = self.lines.line_at(pos);
        let mut text = RecordText::with_capacity(node.range().len());
        let mut positions = [0usize; FIELD_COUNT];
        for child in node.children().filter(Node::is_element) {
            let name = child.tag_name().name();
            let cpos = child.range().start;
            match role(name) {
                Some(Role::Kept(f)) => {
                    if text.has(f) {
                        let first_column = self.lines.column_at(positions[f as usize]);
                        return self.reject_at(
                            cpos,
                            Some(name),
                            Problem::DuplicateColumn { first_column },
                        );
                    }
                    positions[f as usize] = cpos;
                    text.set(f, text_of(child));
                }
                Some(Role::Ignored) => {}
                Some(Role::OtherKind(kind)) => {
                    return self.reject_at(cpos, Some(name), Problem::Unsupported { kind })
                }
                None => return self.reject_at(cpos, Some(name), Problem::UnknownColumn),
            }
        }
        let source = Source {
            file: self.file.clone(),
            line,
        };
        let rules = Rules {
            ades_mandatory: true,
        };
        match build(text, source, ctx.clone(), self.stations, rules) {
            Ok(obs) => (self.sink)(Ok(obs)),
            Err(p) => {
                let at = p.field.map_or(pos, |f| match positions[f as usize] {
                    0 => pos,
                    fp => fp,
                });
                self.reject_at(at, p.field.map(Field::ades_name), p.problem)
            }
        }
    }
}

/// Reads an ADES XML text, handing every observation or rejection to
/// `sink` in document order. Returns the declared version when valid.
pub fn read_with<F>(
    file: &Arc<str>,
    text: &str,
    stations: &StationList,
    mut sink: F,
) -> Option<&'static str>
where
    F: FnMut(Result<Observation, Rejection>),
{
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let doc = match Document::parse(text) {
        Ok(d) => d,
        Err(e) => {
            let p = e.pos();
            let (problem, line, column) = match e {
                // The parser reports where the element started; the file
                // ends on its last line, which is where to look.
                roxmltree::Error::UnexpectedEndOfStream | roxmltree::Error::UnclosedRootNode => {
                    let last = text.trim_end().lines().count().max(1) as u32;
                    (Problem::Truncated, last, None)
                }
                other => (
                    Problem::Syntax {
                        why: other.to_string(),
                    },
                    p.row,
                    Some(p.col),
                ),
            };
            sink(Err(Rejection {
                file: file.to_string(),
                line,
                column,
                field: None,
                problem,
            }));
            return None;
        }
    };
    let mut r = Reader {
        file: file.clone(),
        stations,
        lines: Lines::new(text),
        sink,
    };
    let root = doc.root_element();
    let rpos = root.range().start;
    if root.tag_name().name() != "ades" {
        let why = format!("root element is <{}>, not <ades>", root.tag_name().name());
        r.reject_at(rpos, None, Problem::BadHeader { why });
        return None;
    }
    let version = match root.attribute("version") {
        Some(v) => match super::psv::VERSIONS.iter().find(|&&k| k == v) {
            Some(k) => *k,
            None => {
                let why = format!("version '{v}' is not 2017 or 2022");
                r.reject_at(rpos, None, Problem::BadVersion { why });
                return None;
            }
        },
        None => {
            let why = "<ades> has no version attribute".to_string();
            r.reject_at(rpos, None, Problem::BadVersion { why });
            return None;
        }
    };
    for child in root.children().filter(Node::is_element) {
        if child.has_tag_name("obsBlock") {
            let ctx = child
                .children()
                .find(|c| c.has_tag_name("obsContext"))
                .map(|c| Arc::new(r.context(c)));
            match child.children().find(|c| c.has_tag_name("obsData")) {
                Some(data) => r.records(data, &ctx),
                None => {
                    let why = "<obsBlock> without <obsData>".to_string();
                    r.reject_at(child.range().start, None, Problem::BadHeader { why })
                }
            }
        } else {
            r.record(child, &None);
        }
    }
    Some(version)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines_count_forward_and_back() {
        let text = "a\nbc\nd\n";
        let mut l = Lines::new(text);
        assert_eq!(l.line_at(0), 1);
        assert_eq!(l.line_at(3), 2);
        assert_eq!(l.line_at(5), 3);
        assert_eq!(l.line_at(2), 2);
        assert_eq!(l.column_at(3), 2);
    }
}
