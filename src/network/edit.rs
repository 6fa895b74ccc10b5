//! Writing calibrated values back into a network file.
//!
//! The edits go through `toml_edit`, so the output is the original text byte for byte except the values
//! that change: comments, key order, spacing and number formatting elsewhere are kept, and a changed
//! value keeps the comment that followed it on its line. A value set to what it already was is left
//! untouched (so `c = 110` stays `110`, not `110.0`). New values are written with the shortest decimal
//! that reads back as the same `f64`; round them first if a shorter form is wanted.

use std::collections::{BTreeMap, BTreeSet};

use toml_edit::{DocumentMut, Item, TableLike, Value};

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
    /// Group names that neither a `[[group]]` nor a pipe of the file uses.
    #[error("no group with these names in the network file: {}", .0.join(", "))]
    UnknownGroups(Vec<String>),
    /// A C-factor or bound that is not a positive finite number.
    #[error("{what} must be a positive finite number, got {value}")]
    NotPositive { what: String, value: f64 },
    /// Bounds that would leave a group with min >= max.
    #[error("group {group}: min ({min}) must be below max ({max})")]
    BoundsCrossed { group: String, min: f64, max: f64 },
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
    let mut document = parse(original_text)?;
    let mut found = BTreeSet::new();
    for pipe in entries_mut(&mut document, "pipe") {
        let id = pipe.get("id").and_then(Item::as_str).map(str::to_string);
        if let Some((id, &c)) = id.and_then(|id| c_by_pipe_id.get_key_value(id.as_str())) {
            found.insert(id.clone());
            set_number(pipe, "c", c);
        }
    }
    let unknown: Vec<String> = c_by_pipe_id
        .keys()
        .filter(|id| !found.contains(*id))
        .cloned()
        .collect();
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownPipes(unknown));
    }
    Ok(document.to_string())
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
    let mut document = parse(original_text)?;
    let mut known: BTreeSet<String> = declared_group_names(&mut document);
    for pipe in entries_mut(&mut document, "pipe") {
        let Some(group) = pipe.get("group").and_then(Item::as_str).map(str::to_string) else {
            continue;
        };
        if let Some(&c) = c_by_group_name.get(&group) {
            set_number(pipe, "c", c);
        }
        known.insert(group);
    }
    let unknown: Vec<String> = c_by_group_name
        .keys()
        .filter(|name| !known.contains(*name))
        .cloned()
        .collect();
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownGroups(unknown));
    }
    Ok(document.to_string())
}

/// Updates `min`, `max` and `locked` of `[[group]]` entries, adding a key to the entry when it was
/// absent. Every name must have a `[[group]]` entry. The resulting bounds (after defaults of
/// [`DEFAULT_GROUP_MIN_C`] and [`DEFAULT_GROUP_MAX_C`] for absent ones) must satisfy 0 < min < max.
pub fn update_groups(
    original_text: &str,
    updates: &BTreeMap<String, GroupUpdate>,
) -> Result<String, NetworkEditError> {
    let mut document = parse(original_text)?;
    let mut found = BTreeSet::new();
    for group in entries_mut(&mut document, "group") {
        let name = group.get("name").and_then(Item::as_str).map(str::to_string);
        let Some((name, update)) = name.and_then(|name| updates.get_key_value(name.as_str()))
        else {
            continue;
        };
        found.insert(name.clone());
        let current = |key: &str, default: f64| {
            group
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
        if let Some(min) = update.min {
            set_number(group, "min", min);
        }
        if let Some(max) = update.max {
            set_number(group, "max", max);
        }
        if let Some(locked) = update.locked {
            set_value(group, "locked", Value::from(locked), |old| {
                old.as_bool() == Some(locked)
            });
        }
    }
    let unknown: Vec<String> = updates
        .keys()
        .filter(|name| !found.contains(*name))
        .cloned()
        .collect();
    if !unknown.is_empty() {
        return Err(NetworkEditError::UnknownGroups(unknown));
    }
    Ok(document.to_string())
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

fn parse(text: &str) -> Result<DocumentMut, NetworkEditError> {
    text.parse::<DocumentMut>().map_err(|error| {
        let offset = error.span().map_or(0, |span| span.start).min(text.len());
        let before = text.get(..offset).unwrap_or("");
        let line = before.matches('\n').count() + 1;
        let column = before.rsplit('\n').next().unwrap_or("").chars().count() + 1;
        NetworkEditError::Syntax {
            line,
            column,
            message: error.message().trim().replace('\n', "; "),
        }
    })
}

/// The `[[key]]` entries of the root, written either as an array of tables or as an inline array of
/// inline tables.
fn entries_mut<'d>(document: &'d mut DocumentMut, key: &str) -> Vec<&'d mut dyn TableLike> {
    match document.as_table_mut().get_mut(key) {
        Some(Item::ArrayOfTables(tables)) => tables
            .iter_mut()
            .map(|table| table as &mut dyn TableLike)
            .collect(),
        Some(Item::Value(Value::Array(array))) => array
            .iter_mut()
            .filter_map(Value::as_inline_table_mut)
            .map(|table| table as &mut dyn TableLike)
            .collect(),
        _ => Vec::new(),
    }
}

fn declared_group_names(document: &mut DocumentMut) -> BTreeSet<String> {
    entries_mut(document, "group")
        .into_iter()
        .filter_map(|group| group.get("name").and_then(Item::as_str).map(str::to_string))
        .collect()
}

fn value_number(value: &Value) -> Option<f64> {
    match value {
        Value::Integer(i) => Some(*i.value() as f64),
        Value::Float(f) => Some(*f.value()),
        _ => None,
    }
}

fn set_number(table: &mut dyn TableLike, key: &str, number: f64) {
    set_value(table, key, Value::from(number), |old| {
        value_number(old) == Some(number)
    });
}

/// Sets `key` to `new` unless `unchanged(old)` says it already holds that value. A replaced value keeps
/// the spacing and comment around the old one.
fn set_value(
    table: &mut dyn TableLike,
    key: &str,
    mut new: Value,
    unchanged: impl Fn(&Value) -> bool,
) {
    match table.get_mut(key) {
        Some(Item::Value(old)) => {
            if unchanged(old) {
                return;
            }
            *new.decor_mut() = old.decor().clone();
            *old = new;
        }
        Some(other) => *other = Item::Value(new),
        None => {
            table.insert(key, Item::Value(new));
        }
    }
}
