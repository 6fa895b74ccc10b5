//! Writing calibrated values back into a network file.
//!
//! The file is parsed with `toml_edit` to find each value, and the output is the original text with only
//! the bytes of the changed values replaced: comments, key order, spacing, line endings and number
//! formatting everywhere else stay byte for byte. A value set to what it already was is left untouched
//! (so `c = 110` stays `110`, not `110.0`). A key that is absent (a group's `min`, say) is added on a
//! new line after the entry's last value. New numbers are written as the shortest decimal that reads
//! back as the same `f64`; round them first if a shorter form is wanted.

use std::collections::{BTreeMap, BTreeSet};
use std::ops::Range;

use toml_edit::{Document, InlineTable, Item, Table, TableLike, Value};

use super::model::{DEFAULT_GROUP_MAX_C, DEFAULT_GROUP_MIN_C};

/// Why an edit of a network file could not be made. Nothing is written when any edit fails.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NetworkEditError {
    /// The original text is not TOML.
    #[error("the network file is not valid TOML at line {line}, column {column}: {message}")]
    Syntax {
        line: usize,
        column: usize,
        message: String,
    },
    /// Ids given for editing that no `[[pipe]]` of the file has.
    #[error("no pipe with these ids in the network file: {}", .0.join(", "))]
    UnknownPipes(Vec<String>),
    /// Group names that neither a `[[group]]` nor a pipe of the file uses (for bounds: that have no
    /// `[[group]]` entry).
    #[error("no group with these names in the network file: {}", .0.join(", "))]
    UnknownGroups(Vec<String>),
    /// A C-factor or bound that is not a positive finite number.
    #[error("{what} must be a positive finite number, got {value}")]
    NotPositive { what: String, value: f64 },
    /// Bounds that would leave a group with min >= max.
    #[error("group {group}: min ({min}) must be below max ({max})")]
    BoundsCrossed { group: String, min: f64, max: f64 },
    /// The key to change is written in a form that is not a plain value (e.g. a sub-table).
    #[error("cannot change `{key}` of {entry}: it is not a plain value")]
    NotEditable { entry: String, key: String },
}

/// New settings for one `[[group]]`; `None` leaves a setting as it is.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct GroupUpdate {
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub locked: Option<bool>,
}

/// Sets the `c` of the pipes named in `c_by_pipe_id`. Every id must be a pipe of the file.
pub fn apply_c_factors(
    original_text: &str,
    c_by_pipe_id: &BTreeMap<String, f64>,
) -> Result<String, NetworkEditError> {
    for (id, &c) in c_by_pipe_id {
        check_positive(&format!("C-factor of pipe {id}"), c)?;
    }
    let mut editor = Editor::new(original_text)?;
    let targets: Vec<(usize, String, f64)> = editor
        .entries("pipe")
        .iter()
        .enumerate()
        .filter_map(|(index, pipe)| {
            let (id, &c) = c_by_pipe_id.get_key_value(pipe.get_str("id")?)?;
            Some((index, id.clone(), c))
        })
        .collect();
    let found: BTreeSet<&String> = targets.iter().map(|(_, id, _)| id).collect();
    let unknown = keys_not_in(c_by_pipe_id, |id| found.contains(id));
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownPipes(unknown));
    }
    for (index, _, c) in &targets {
        set_number(&mut editor, "pipe", *index, "c", *c)?;
    }
    Ok(editor.finish())
}

/// Sets the `c` of every pipe whose `group` is a key of `c_by_group_name`. Every name must be a group
/// of the file (declared in a `[[group]]` or used by a pipe); a declared group with no pipes changes
/// nothing.
pub fn apply_group_c(
    original_text: &str,
    c_by_group_name: &BTreeMap<String, f64>,
) -> Result<String, NetworkEditError> {
    for (name, &c) in c_by_group_name {
        check_positive(&format!("C-factor of group {name}"), c)?;
    }
    let mut editor = Editor::new(original_text)?;
    let mut known: BTreeSet<String> = editor
        .entries("group")
        .iter()
        .filter_map(|group| group.get_str("name").map(str::to_string))
        .collect();
    let mut targets: Vec<(usize, f64)> = Vec::new();
    for (index, pipe) in editor.entries("pipe").iter().enumerate() {
        let Some(group) = pipe.get_str("group") else {
            continue;
        };
        if let Some(&c) = c_by_group_name.get(group) {
            targets.push((index, c));
        }
        known.insert(group.to_string());
    }
    let unknown = keys_not_in(c_by_group_name, |name| known.contains(name));
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownGroups(unknown));
    }
    for (index, c) in targets {
        set_number(&mut editor, "pipe", index, "c", c)?;
    }
    Ok(editor.finish())
}

/// Updates `min`, `max` and `locked` of `[[group]]` entries, adding a key to the entry when it was
/// absent. Every name must have a `[[group]]` entry. The resulting bounds (after defaults of
/// [`DEFAULT_GROUP_MIN_C`] and [`DEFAULT_GROUP_MAX_C`] for absent ones) must satisfy 0 < min < max.
pub fn update_groups(
    original_text: &str,
    updates: &BTreeMap<String, GroupUpdate>,
) -> Result<String, NetworkEditError> {
    let mut editor = Editor::new(original_text)?;
    let mut targets: Vec<(usize, GroupUpdate)> = Vec::new();
    let mut found = BTreeSet::new();
    for (index, group) in editor.entries("group").iter().enumerate() {
        let Some((name, update)) = group
            .get_str("name")
            .and_then(|name| updates.get_key_value(name))
        else {
            continue;
        };
        found.insert(name.clone());
        let current = |key: &str, default: f64| {
            group
                .table_like()
                .get(key)
                .and_then(Item::as_value)
                .and_then(value_number)
                .unwrap_or(default)
        };
        let min = update
            .min
            .unwrap_or_else(|| current("min", DEFAULT_GROUP_MIN_C));
        let max = update
            .max
            .unwrap_or_else(|| current("max", DEFAULT_GROUP_MAX_C));
        check_positive(&format!("min of group {name}"), min)?;
        check_positive(&format!("max of group {name}"), max)?;
        if min >= max {
            return Err(NetworkEditError::BoundsCrossed {
                group: name.clone(),
                min,
                max,
            });
        }
        targets.push((index, *update));
    }
    let unknown = keys_not_in(updates, |name| found.contains(name));
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownGroups(unknown));
    }
    for (index, update) in targets {
        if let Some(min) = update.min {
            set_number(&mut editor, "group", index, "min", min)?;
        }
        if let Some(max) = update.max {
            set_number(&mut editor, "group", index, "max", max)?;
        }
        if let Some(locked) = update.locked {
            editor.set("group", index, "locked", locked.to_string(), |old| {
                old.as_bool() == Some(locked)
            })?;
        }
    }
    Ok(editor.finish())
}

/// The keys of `map` for which `found` is false, in order.
fn keys_not_in<T>(map: &BTreeMap<String, T>, found: impl Fn(&String) -> bool) -> Vec<String> {
    map.keys().filter(|key| !found(key)).cloned().collect()
}

fn check_positive(what: &str, value: f64) -> Result<(), NetworkEditError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(NetworkEditError::NotPositive {
            what: what.to_string(),
            value,
        })
    }
}

/// A replacement of the original text: the bytes of `range` become `text`.
struct Splice {
    range: Range<usize>,
    text: String,
}

/// An entry of an array of tables, written either as a `[[...]]` table or as an inline table.
#[derive(Clone, Copy)]
enum Entry<'d> {
    Table(&'d Table),
    Inline(&'d InlineTable),
}

impl<'d> Entry<'d> {
    fn table_like(self) -> &'d dyn TableLike {
        match self {
            Self::Table(table) => table,
            Self::Inline(table) => table,
        }
    }

    fn get_str(self, key: &str) -> Option<&'d str> {
        self.table_like().get(key).and_then(Item::as_str)
    }
}

/// The original text with the edits collected so far.
struct Editor<'t> {
    text: &'t str,
    document: Document<&'t str>,
    splices: Vec<Splice>,
}

impl<'t> Editor<'t> {
    fn new(text: &'t str) -> Result<Self, NetworkEditError> {
        let document = Document::parse(text).map_err(|error| {
            let offset = error.span().map_or(0, |span| span.start).min(text.len());
            let before = text.get(..offset).unwrap_or("");
            let line = before.matches('\n').count() + 1;
            let column = before.rsplit('\n').next().unwrap_or("").chars().count() + 1;
            NetworkEditError::Syntax {
                line,
                column,
                message: error.message().trim().replace('\n', "; "),
            }
        })?;
        Ok(Self {
            text,
            document,
            splices: Vec::new(),
        })
    }

    /// The `[[key]]` entries of the root, written either as an array of tables or as an inline array
    /// of inline tables.
    fn entries(&self, key: &str) -> Vec<Entry<'_>> {
        match self.document.as_table().get(key) {
            Some(Item::ArrayOfTables(tables)) => tables.iter().map(Entry::Table).collect(),
            Some(Item::Value(Value::Array(array))) => array
                .iter()
                .filter_map(Value::as_inline_table)
                .map(Entry::Inline)
                .collect(),
            _ => Vec::new(),
        }
    }

    /// The entry `index` of [`Self::entries`], found without listing them all: a calibrated city
    /// network sets the C of 180,000 pipes, one lookup each.
    fn entry(&self, key: &str, index: usize) -> Option<Entry<'_>> {
        match self.document.as_table().get(key) {
            Some(Item::ArrayOfTables(tables)) => tables.get(index).map(Entry::Table),
            _ => self.entries(key).get(index).copied(),
        }
    }

    /// Plans setting `key` of the entry `index` of `[[section]]` to `new_text`, unless `unchanged`
    /// says its value already is the new one. An absent key is added after the entry's last value.
    fn set(
        &mut self,
        section: &str,
        index: usize,
        key: &str,
        new_text: String,
        unchanged: impl Fn(&Value) -> bool,
    ) -> Result<(), NetworkEditError> {
        let Some(entry) = self.entry(section, index) else {
            return Ok(());
        };
        let not_editable = || NetworkEditError::NotEditable {
            entry: format!(
                "[[{section}]] {}",
                entry
                    .get_str("id")
                    .or_else(|| entry.get_str("name"))
                    .unwrap_or("?")
            ),
            key: key.to_string(),
        };
        let table = entry.table_like();
        let splice = match table.get(key) {
            Some(Item::Value(old)) => {
                if unchanged(old) {
                    return Ok(());
                }
                let range = old.span().ok_or_else(not_editable)?;
                Splice {
                    range,
                    text: new_text,
                }
            }
            Some(_) => return Err(not_editable()),
            None => {
                let last_end = table
                    .iter()
                    .filter_map(|(_, item)| item.span())
                    .map(|span| span.end)
                    .max()
                    .ok_or_else(not_editable)?;
                match entry {
                    Entry::Inline(_) => Splice {
                        range: last_end..last_end,
                        text: format!(", {key} = {new_text}"),
                    },
                    Entry::Table(_) => self.line_after(last_end, &format!("{key} = {new_text}")),
                }
            }
        };
        self.splices.push(splice);
        Ok(())
    }

    /// Inserts `line` as a new line after the line holding `offset`, with the same line ending.
    fn line_after(&self, offset: usize, line: &str) -> Splice {
        let rest = self.text.get(offset..).unwrap_or("");
        match rest.find('\n') {
            Some(newline) => {
                let at = offset + newline + 1;
                let crlf = self
                    .text
                    .get(..offset + newline)
                    .is_some_and(|s| s.ends_with('\r'));
                let ending = if crlf { "\r\n" } else { "\n" };
                Splice {
                    range: at..at,
                    text: format!("{line}{ending}"),
                }
            }
            None => Splice {
                range: self.text.len()..self.text.len(),
                text: format!("\n{line}"),
            },
        }
    }

    /// The original text with every planned edit made.
    fn finish(mut self) -> String {
        // Built front to back in one pass (replacing in place would move the rest of a 30 MB text
        // once per pipe); the sort is stable, so two insertions at one place read in the order they
        // were planned.
        self.splices.sort_by_key(|splice| splice.range.start);
        let added: usize = self.splices.iter().map(|splice| splice.text.len()).sum();
        let mut out = String::with_capacity(self.text.len() + added);
        let mut copied = 0;
        for splice in &self.splices {
            let (Some(kept), true) = (
                self.text.get(copied..splice.range.start),
                self.text.is_char_boundary(splice.range.end),
            ) else {
                continue;
            };
            out.push_str(kept);
            out.push_str(&splice.text);
            copied = splice.range.end;
        }
        out.push_str(self.text.get(copied..).unwrap_or(""));
        out
    }
}

/// A TOML float: Debug formatting of f64 is the shortest round-trip decimal and always has a `.` or an
/// exponent (`110.0`, `97.25`, `1e-7`), which TOML reads back as the same float.
fn float_text(value: f64) -> String {
    format!("{value:?}")
}

/// Plans setting a number, unless it already holds that value.
fn set_number(
    editor: &mut Editor<'_>,
    section: &str,
    index: usize,
    key: &str,
    number: f64,
) -> Result<(), NetworkEditError> {
    editor.set(section, index, key, float_text(number), |old| {
        value_number(old) == Some(number)
    })
}

/// A TOML number (integer or float) as f64.
fn value_number(value: &Value) -> Option<f64> {
    match value {
        Value::Integer(i) => Some(*i.value() as f64),
        Value::Float(f) => Some(*f.value()),
        _ => None,
    }
}
