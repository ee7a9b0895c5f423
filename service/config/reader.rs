//! A span-aware reader over a parsed TOML table that collects every problem
//! instead of stopping at the first, so `check-config` can list them all.
//!
//! serde would stop at the first error and forget where a key was; this
//! reader keeps the byte span of each key and value and turns it into a line
//! number, and reports keys nobody asked for as unknown.

use std::cell::RefCell;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use toml_edit::{Item, Key, TableLike, Value};

use super::ConfigProblem;

/// Shared state of one file being read: its text (for line numbers) and the
/// problems found so far.
pub struct Source<'s> {
    pub file: PathBuf,
    text: &'s str,
    problems: RefCell<Vec<ConfigProblem>>,
}

impl<'s> Source<'s> {
    pub fn new(file: &Path, text: &'s str) -> Self {
        Self {
            file: file.to_path_buf(),
            text,
            problems: RefCell::new(Vec::new()),
        }
    }

    /// 1-based line of a byte offset.
    pub fn line_of(&self, offset: usize) -> usize {
        let end = offset.min(self.text.len());
        self.text.as_bytes()[..end]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1
    }

    pub fn problem(&self, line: usize, key: &str, reason: impl Into<String>) {
        self.problems.borrow_mut().push(ConfigProblem {
            file: self.file.clone(),
            line,
            key: key.to_string(),
            reason: reason.into(),
        });
    }

    pub fn into_problems(self) -> Vec<ConfigProblem> {
        self.problems.into_inner()
    }

    pub fn has_problems(&self) -> bool {
        !self.problems.borrow().is_empty()
    }

    /// Directory that relative paths in this file are resolved against.
    pub fn base_dir(&self) -> PathBuf {
        self.file
            .parent()
            .map(Path::to_path_buf)
            .unwrap_or_else(|| PathBuf::from("."))
    }
}

/// One table (or inline table) of the document, with the dotted path that
/// names it in messages.
pub struct TableReader<'a, 's> {
    src: &'a Source<'s>,
    table: &'a dyn TableLike,
    path: String,
    line: usize,
    seen: RefCell<BTreeSet<String>>,
}

impl<'a, 's> TableReader<'a, 's> {
    pub fn new(src: &'a Source<'s>, table: &'a dyn TableLike, path: &str, line: usize) -> Self {
        Self {
            src,
            table,
            path: path.to_string(),
            line,
            seen: RefCell::new(BTreeSet::new()),
        }
    }

    pub fn source(&self) -> &'a Source<'s> {
        self.src
    }

    /// Line of the table header (or of its first key).
    pub fn line(&self) -> usize {
        self.line
    }

    pub fn full_key(&self, key: &str) -> String {
        if self.path.is_empty() {
            key.to_string()
        } else {
            format!("{}.{}", self.path, key)
        }
    }

    fn entry(&self, key: &str) -> Option<(&'a Key, &'a Item)> {
        self.seen.borrow_mut().insert(key.to_string());
        self.table.get_key_value(key)
    }

    fn line_of_entry(&self, k: &Key, item: &Item) -> usize {
        k.span()
            .or_else(|| item.span())
            .map(|s| self.src.line_of(s.start))
            .unwrap_or(self.line)
    }

    /// Reports a problem about `key` of this table, at its line if present.
    pub fn problem(&self, key: &str, reason: impl Into<String>) {
        let line = self
            .table
            .get_key_value(key)
            .map(|(k, item)| self.line_of_entry(k, item))
            .unwrap_or(self.line);
        self.src.problem(line, &self.full_key(key), reason);
    }

    fn value(&self, key: &str, required: bool) -> Option<(&'a Value, usize)> {
        match self.entry(key) {
            None => {
                if required {
                    self.src
                        .problem(self.line, &self.full_key(key), "required key is missing");
                }
                None
            }
            Some((k, item)) => {
                let line = self.line_of_entry(k, item);
                match item.as_value() {
                    Some(v) => Some((v, line)),
                    None => {
                        self.src.problem(
                            line,
                            &self.full_key(key),
                            "expected a value, found a table",
                        );
                        None
                    }
                }
            }
        }
    }

    fn typed<T>(
        &self,
        key: &str,
        required: bool,
        expected: &str,
        get: impl Fn(&Value) -> Option<T>,
    ) -> Option<T> {
        let (v, line) = self.value(key, required)?;
        match get(v) {
            Some(t) => Some(t),
            None => {
                self.src.problem(
                    line,
                    &self.full_key(key),
                    format!("expected {expected}, found {}", v.type_name()),
                );
                None
            }
        }
    }

    pub fn string(&self, key: &str, required: bool) -> Option<String> {
        self.typed(key, required, "a string", |v| {
            v.as_str().map(str::to_string)
        })
    }

    pub fn bool(&self, key: &str) -> Option<bool> {
        self.typed(key, false, "true or false", Value::as_bool)
    }

    /// A float; an integer is accepted too, since `1` and `1.0` mean the same
    /// to a person writing a threshold.
    pub fn f64(&self, key: &str, required: bool) -> Option<f64> {
        self.typed(key, required, "a number", |v| {
            v.as_float().or_else(|| v.as_integer().map(|i| i as f64))
        })
    }

    /// A float that must satisfy `check`, which names the reason when not.
    pub fn f64_where(
        &self,
        key: &str,
        required: bool,
        check: impl Fn(f64) -> Result<(), String>,
    ) -> Option<f64> {
        let x = self.f64(key, required)?;
        match check(x) {
            Ok(()) => Some(x),
            Err(reason) => {
                self.problem(key, reason);
                None
            }
        }
    }

    pub fn u64(&self, key: &str, required: bool) -> Option<u64> {
        let i = self.typed(key, required, "an integer", Value::as_integer)?;
        match u64::try_from(i) {
            Ok(u) => Some(u),
            Err(_) => {
                self.problem(key, format!("{i} is negative"));
                None
            }
        }
    }

    pub fn string_array(&self, key: &str, required: bool) -> Option<Vec<String>> {
        let arr = self.typed(key, required, "an array of strings", |v| {
            v.as_array().cloned()
        })?;
        let mut out = Vec::with_capacity(arr.len());
        for v in arr.iter() {
            match v.as_str() {
                Some(s) => out.push(s.to_string()),
                None => {
                    self.problem(
                        key,
                        format!(
                            "expected an array of strings, found a {} in it",
                            v.type_name()
                        ),
                    );
                    return None;
                }
            }
        }
        Some(out)
    }

    /// An array of numbers (integers accepted as for [`Self::f64`]).
    pub fn f64_array(&self, key: &str, required: bool) -> Option<Vec<f64>> {
        let arr = self.typed(key, required, "an array of numbers", |v| {
            v.as_array().cloned()
        })?;
        let numbers: Option<Vec<f64>> = arr
            .iter()
            .map(|v| v.as_float().or_else(|| v.as_integer().map(|i| i as f64)))
            .collect();
        if numbers.is_none() {
            self.problem(
                key,
                "expected an array of numbers, found something else in it",
            );
        }
        numbers
    }

    /// Whether `key` is present, whatever its type (it counts as read).
    pub fn has(&self, key: &str) -> bool {
        self.entry(key).is_some()
    }

    /// A path, resolved against the directory of the file it is written in.
    pub fn path(&self, key: &str, required: bool) -> Option<PathBuf> {
        let s = self.string(key, required)?;
        if s.trim().is_empty() {
            self.problem(key, "path is empty");
            return None;
        }
        let p = PathBuf::from(s);
        Some(if p.is_absolute() {
            p
        } else {
            self.src.base_dir().join(p)
        })
    }

    /// A sub-table; absent is fine (`None`), a non-table is a problem.
    pub fn table(&self, key: &str) -> Option<TableReader<'a, 's>> {
        let (k, item) = self.entry(key)?;
        let line = self.line_of_entry(k, item);
        match item.as_table_like() {
            Some(t) => Some(TableReader::new(self.src, t, &self.full_key(key), line)),
            None => {
                self.src.problem(
                    line,
                    &self.full_key(key),
                    format!("expected a table, found {}", item.type_name()),
                );
                None
            }
        }
    }

    /// An array of tables (`[[key]]`); absent gives an empty list.
    pub fn tables(&self, key: &str) -> Vec<TableReader<'a, 's>> {
        let Some((k, item)) = self.entry(key) else {
            return Vec::new();
        };
        let line = self.line_of_entry(k, item);
        match item.as_array_of_tables() {
            Some(arr) => arr
                .iter()
                .enumerate()
                .map(|(i, t)| {
                    let l = t.span().map(|s| self.src.line_of(s.start)).unwrap_or(line);
                    TableReader::new(self.src, t, &format!("{}[{}]", self.full_key(key), i), l)
                })
                .collect(),
            None => {
                self.src.problem(
                    line,
                    &self.full_key(key),
                    format!("expected [[{key}]] entries, found {}", item.type_name()),
                );
                Vec::new()
            }
        }
    }

    /// Reports every key of this table that no reader asked for.
    pub fn finish(self) {
        let seen = self.seen.borrow();
        for (key, item) in self.table.iter() {
            if !seen.contains(key) {
                let line = self
                    .table
                    .get_key_value(key)
                    .map(|(k, _)| self.line_of_entry(k, item))
                    .unwrap_or(self.line);
                self.src.problem(
                    line,
                    &self.full_key(key),
                    "unknown key (misspelt, or not a setting)",
                );
            }
        }
    }
}

/// Parses `text` as TOML, recording a syntax error as a problem.
pub fn parse(src: &Source<'_>, text: &str) -> Option<toml_edit::ImDocument<String>> {
    match toml_edit::ImDocument::parse(text.to_string()) {
        Ok(doc) => Some(doc),
        Err(e) => {
            let line = e.span().map(|s| src.line_of(s.start)).unwrap_or(1);
            let msg = e.message().trim().to_string();
            src.problem(line, "", format!("not valid TOML: {msg}"));
            None
        }
    }
}

impl Source<'_> {
    /// True when a problem was recorded for any key under `prefix`.
    pub fn has_problem_under(&self, prefix: &str) -> bool {
        self.problems
            .borrow()
            .iter()
            .any(|p| p.key.starts_with(prefix))
    }
}
