//! Writing observations back out as ADES PSV, ADES XML or JSON lines, from
//! their original text, so a read-then-write keeps every digit.

use std::fmt::Write as _;

use super::field::{Field, FIELD_COUNT};
use super::record::Observation;

/// A value the target format cannot carry.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "field '{field}' of the observation from {file}:{line} contains {what}, which PSV cannot carry"
)]
pub struct WriteError {
    pub field: &'static str,
    pub file: String,
    pub line: u32,
    pub what: &'static str,
}

fn same_context(a: &Observation, b: &Observation) -> bool {
    a.context == b.context
}

/// Writes ADES PSV of the given version (`"2017"` or `"2022"`): one block
/// per run of observations sharing a header context, columns padded to a
/// common width as the ADES examples lay them out.
pub fn to_psv(observations: &[Observation], version: &str) -> Result<String, WriteError> {
    let mut out = format!("# version={version}\n");
    let mut start = 0;
    while start < observations.len() {
        let mut end = start + 1;
        while end < observations.len() && same_context(&observations[start], &observations[end]) {
            end += 1;
        }
        write_block(&mut out, &observations[start..end])?;
        start = end;
    }
    Ok(out)
}

fn write_block(out: &mut String, block: &[Observation]) -> Result<(), WriteError> {
    if let Some(ctx) = block[0].context.as_deref() {
        if let Some(code) = &ctx.observatory_code {
            let _ = writeln!(out, "# observatory\n! mpcCode {code}");
        }
        if let Some(name) = &ctx.submitter {
            let _ = writeln!(out, "# submitter\n! name {name}");
        }
    }
    let mut width = [0usize; FIELD_COUNT];
    for o in block {
        for (f, t) in o.text.iter() {
            for (bad, what) in [
                ('|', "a '|'"),
                ('\n', "a line break"),
                ('\r', "a line break"),
            ] {
                if t.contains(bad) {
                    return Err(WriteError {
                        field: f.ades_name(),
                        file: o.source.file.to_string(),
                        line: o.source.line,
                        what,
                    });
                }
            }
            let w = &mut width[f as usize];
            *w = (*w).max(t.chars().count()).max(f.ades_name().len());
        }
    }
    let cols: Vec<Field> = Field::ALL
        .into_iter()
        .filter(|&f| width[f as usize] > 0)
        .collect();
    let row = |out: &mut String, cell: &dyn Fn(Field) -> String| {
        let cells: Vec<String> = cols
            .iter()
            .map(|&f| format!("{:<w$}", cell(f), w = width[f as usize]))
            .collect();
        out.push_str(cells.join("|").trim_end());
        out.push('\n');
    };
    row(out, &|f| f.ades_name().to_string());
    for o in block {
        row(out, &|f| o.text.get(f).unwrap_or("").to_string());
    }
    Ok(())
}

fn escape(s: &str) -> String {
    let mut e = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => e.push_str("&amp;"),
            '<' => e.push_str("&lt;"),
            '>' => e.push_str("&gt;"),
            '"' => e.push_str("&quot;"),
            c => e.push(c),
        }
    }
    e
}

/// Writes ADES XML: one `<obsBlock>` per run of observations sharing a
/// header context, elements in the schema's order.
pub fn to_xml(observations: &[Observation], version: &str) -> String {
    let mut out =
        format!("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<ades version=\"{version}\">\n");
    let mut start = 0;
    while start < observations.len() {
        let mut end = start + 1;
        while end < observations.len() && same_context(&observations[start], &observations[end]) {
            end += 1;
        }
        out.push_str("  <obsBlock>\n");
        if let Some(ctx) = observations[start].context.as_deref() {
            out.push_str("    <obsContext>\n");
            if let Some(code) = &ctx.observatory_code {
                let _ = writeln!(
                    out,
                    "      <observatory><mpcCode>{}</mpcCode></observatory>",
                    escape(code)
                );
            }
            if let Some(name) = &ctx.submitter {
                let _ = writeln!(
                    out,
                    "      <submitter><name>{}</name></submitter>",
                    escape(name)
                );
            }
            out.push_str("    </obsContext>\n");
        }
        out.push_str("    <obsData>\n");
        for o in &observations[start..end] {
            out.push_str("      <optical>\n");
            for (f, t) in o.text.iter() {
                let n = f.ades_name();
                let _ = writeln!(out, "        <{n}>{}</{n}>", escape(t));
            }
            out.push_str("      </optical>\n");
        }
        out.push_str("    </obsData>\n  </obsBlock>\n");
        start = end;
    }
    out.push_str("</ades>\n");
    out
}
