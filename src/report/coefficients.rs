//! The coefficient set: the fitted C of every roughness group, as `calibrate` writes it
//! (`coefficients.toml`, `coefficients.csv`) and as `apply` reads it back.
//!
//! Writers build text from a [`CalibrationResult`]; readers parse text into a [`CoefficientSet`] and stop
//! at the first defect with its file, line and field. The only I/O is [`load_coefficients`]. Both
//! schemas are documented in `docs/coefficients-file.md`.

use std::collections::BTreeMap;
use std::fmt;
use std::path::Path;

use toml_edit::{ArrayOfTables, Document, DocumentMut, Item, Table, TableLike, Value};

use crate::calibrate::{CAUTION, CalibrationResult, GroupStatus};
use crate::hydraulics::headloss::HwConstant;
use crate::network::{Network, UnitSystem};

/// Header of `coefficients.csv`, in order. `units` and `hazen_williams_constant` repeat on every row
/// (a CSV has no header block): the Hazen-Williams constant, and the unit system of its formula, that
/// the C values belong to.
pub const CSV_HEADER: [&str; 10] = [
    "group",
    "start",
    "fitted",
    "std_error",
    "ci_low",
    "ci_high",
    "tests",
    "status",
    "units",
    "hazen_williams_constant",
];

/// Keys a `[[group]]` entry of `coefficients.toml` may hold.
pub const TOML_GROUP_KEYS: [&str; 11] = [
    "name",
    "c",
    "min",
    "max",
    "locked",
    "start",
    "std_error",
    "ci_low",
    "ci_high",
    "tests",
    "status",
];

const STATUSES: [GroupStatus; 4] = [
    GroupStatus::Fitted,
    GroupStatus::AtBound,
    GroupStatus::Locked,
    GroupStatus::NotInformed,
];

/// The status of a moved group in a set built from a fit that did not converge. `calibrate` writes no
/// such set, but the builders mark one honestly, and `apply` refuses any set that carries it.
pub const NOT_CONVERGED_STATUS: &str = "not converged";

/// The status word written for `group` of `result`.
fn status_label(result: &CalibrationResult, status: GroupStatus) -> &'static str {
    let moved = matches!(status, GroupStatus::Fitted | GroupStatus::AtBound);
    if moved && !result.converged {
        NOT_CONVERGED_STATUS
    } else {
        status.label()
    }
}

fn known_status(status: &str) -> bool {
    status == NOT_CONVERGED_STATUS || STATUSES.iter().any(|s| s.label() == status)
}

/// One group of a coefficient set. Only `name` and `c` act when the set is applied; the rest is what
/// the calibration reported about the group.
#[derive(Debug, Clone, PartialEq)]
pub struct CoefficientEntry {
    pub name: String,
    /// The C to give every pipe of the group.
    pub c: f64,
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub locked: Option<bool>,
    pub start: Option<f64>,
    pub std_error: Option<f64>,
    pub ci95: Option<(f64, f64)>,
    pub tests: Option<usize>,
    /// A [`GroupStatus::label`].
    pub status: Option<String>,
    /// Line of the entry in its file (the `[[group]]` header or the CSV record), 1-based.
    pub line: usize,
    /// Line of the entry's name (its `name` key in TOML, the record in CSV), where a duplicate is shown.
    pub name_line: usize,
}

/// A coefficient set read from a file.
#[derive(Debug, Clone, PartialEq)]
pub struct CoefficientSet {
    /// Display name of the file, used in errors.
    pub file: String,
    pub entries: Vec<CoefficientEntry>,
    /// The Hazen-Williams constant the C values belong to, when the set says (`coefficients.toml`
    /// written since the constant was recorded; a CSV set does not say).
    pub hazen_williams: Option<HwConstant>,
    /// Covariance of the fitted groups' C (`[covariance]` of `coefficients.toml`), for intervals on
    /// what the calibrated network predicts; `None` in a CSV set or a set written without one.
    pub covariance: Option<GroupCovariance>,
}

/// The covariance of the C of the groups a fit moved, in the order of `groups`.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupCovariance {
    pub groups: Vec<String>,
    /// Square, `groups.len()` on a side, in units of C squared.
    pub matrix: Vec<Vec<f64>>,
}

impl CoefficientSet {
    /// The C of each group by name, as [`crate::network::edit::apply_group_c`] takes it.
    pub fn c_by_group(&self) -> BTreeMap<String, f64> {
        self.entries
            .iter()
            .map(|entry| (entry.name.clone(), entry.c))
            .collect()
    }

    /// Checks that every group of the set is a group of `net`.
    pub fn check_against(&self, net: &Network) -> Result<(), CoefficientError> {
        match self
            .entries
            .iter()
            .find(|entry| net.find_group(&entry.name).is_none())
        {
            Some(entry) => Err(CoefficientError {
                file: self.file.clone(),
                line: Some(entry.line),
                field: Some(name_field(&self.file).to_string()),
                kind: CoefficientErrorKind::UnknownGroup {
                    name: entry.name.clone(),
                    known: net.groups.iter().map(|g| g.name.clone()).collect(),
                },
            }),
            None => Ok(()),
        }
    }

    /// When the set's C values belong to another Hazen-Williams constant than `net`'s, the factor they
    /// would need (see [`HwConstant::c_scale_to`]); `None` when they agree or the set does not say.
    pub fn constant_mismatch(&self, net: &Network) -> Option<(HwConstant, HwConstant, f64)> {
        let ours = self.hazen_williams?;
        let theirs = HwConstant::of_network(net);
        let scale = ours.c_scale_to(theirs);
        ((scale - 1.0).abs() > 1e-9).then_some((ours, theirs, scale))
    }

    /// Refuses a set whose status says the fit that made it did not converge: its C values are where
    /// the optimizer stopped, not a fit.
    pub fn check_converged(&self) -> Result<(), CoefficientError> {
        match self
            .entries
            .iter()
            .find(|entry| entry.status.as_deref() == Some(NOT_CONVERGED_STATUS))
        {
            Some(entry) => Err(CoefficientError {
                file: self.file.clone(),
                line: Some(entry.line),
                field: Some("status".to_string()),
                kind: CoefficientErrorKind::NotConverged {
                    name: entry.name.clone(),
                },
            }),
            None => Ok(()),
        }
    }
}

/// The field holding a group's name: `group` in the CSV, `name` in the TOML.
fn name_field(file: &str) -> &'static str {
    if is_csv(file) { "group" } else { "name" }
}

fn is_csv(file: &str) -> bool {
    Path::new(file)
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"))
}

/// A defect of a coefficient file. Displays as `file:line: field: what is wrong`, leaving out the parts
/// that do not apply.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub struct CoefficientError {
    pub file: String,
    pub line: Option<usize>,
    pub field: Option<String>,
    pub kind: CoefficientErrorKind,
}

impl fmt::Display for CoefficientError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        if let Some(field) = &self.field {
            write!(f, ": {field}")?;
        }
        write!(f, ": {}", self.kind)
    }
}

/// What is wrong in a coefficient file.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CoefficientErrorKind {
    #[error("cannot read the file: {0}")]
    Unreadable(String),
    #[error(
        "`units` and `hazen_williams_constant` go together: the constant means nothing without the unit system of its formula"
    )]
    ConstantWithoutUnits,
    #[error("a coefficient set is a .toml or a .csv file")]
    UnknownExtension,
    #[error("not valid {format}: {message}")]
    Syntax {
        format: &'static str,
        message: String,
    },
    #[error("unknown key; expected one of {}", .allowed.join(", "))]
    UnknownKey { allowed: Vec<&'static str> },
    #[error("expected {expected}, found {found}")]
    WrongType {
        expected: &'static str,
        found: String,
    },
    #[error("required, but missing")]
    Missing,
    #[error("must be a positive finite number, got {0}")]
    NotPositive(f64),
    #[error("must be a finite number of zero or more, got {0}")]
    NotFinite(f64),
    #[error("min ({min}) must be below max ({max})")]
    BoundsCrossed { min: f64, max: f64 },
    #[error("group `{name}` appears twice (first on line {first_line})")]
    DuplicateGroup { name: String, first_line: usize },
    #[error("the network has no group `{name}` (its groups: {})", .known.join(", "))]
    UnknownGroup { name: String, known: Vec<String> },
    #[error(
        "unknown status `{0}`; expected one of: fitted, at bound, locked, not informed, not converged"
    )]
    UnknownStatus(String),
    #[error(
        "group `{name}` is marked not converged: the fit that wrote this set did not converge, so its C \
         values are not a fit; run calibrate again and apply the set of a converged fit"
    )]
    NotConverged { name: String },
    #[error("the file lists no group")]
    NoGroups,
    #[error(
        "differs from line {first_line}: one coefficient set belongs to one Hazen-Williams constant"
    )]
    ConstantDiffersBetweenRows { first_line: usize },
}

/// Reads a coefficient set, choosing the schema by extension (`.toml` or `.csv`).
pub fn load_coefficients(path: &Path) -> Result<CoefficientSet, CoefficientError> {
    let file = path.display().to_string();
    let error = |kind| CoefficientError {
        file: file.clone(),
        line: None,
        field: None,
        kind,
    };
    let extension = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase());
    let parse: fn(&str, &str) -> Result<CoefficientSet, CoefficientError> =
        match extension.as_deref() {
            Some("toml") => parse_coefficients_toml,
            Some("csv") => parse_coefficients_csv,
            _ => return Err(error(CoefficientErrorKind::UnknownExtension)),
        };
    let text = std::fs::read_to_string(path)
        .map_err(|e| error(CoefficientErrorKind::Unreadable(e.to_string())))?;
    parse(&text, &file)
}

/// Builds errors at places of one file.
struct Place<'a> {
    file: &'a str,
    text: &'a str,
}

impl Place<'_> {
    fn line_of(&self, offset: usize) -> usize {
        let end = offset.min(self.text.len());
        self.text.get(..end).unwrap_or("").matches('\n').count() + 1
    }

    fn error(&self, line: usize, field: &str, kind: CoefficientErrorKind) -> CoefficientError {
        CoefficientError {
            file: self.file.to_string(),
            line: Some(line),
            field: (!field.is_empty()).then(|| field.to_string()),
            kind,
        }
    }
}

/// Parses the text of a `coefficients.toml`: a root holding only a `[[group]]` list.
pub fn parse_coefficients_toml(text: &str, file: &str) -> Result<CoefficientSet, CoefficientError> {
    let place = Place { file, text };
    let document = Document::parse(text).map_err(|e| {
        let line = place.line_of(e.span().map_or(0, |s| s.start));
        place.error(
            line,
            "",
            CoefficientErrorKind::Syntax {
                format: "TOML",
                message: e.message().trim().replace('\n', "; "),
            },
        )
    })?;
    let root = document.as_table();
    for (key, item) in root.iter() {
        if !TOML_TOP_KEYS.contains(&key) {
            let span = root.key(key).and_then(|k| k.span()).or_else(|| item.span());
            let line = place.line_of(span.map_or(0, |s| s.start));
            return Err(place.error(
                line,
                key,
                CoefficientErrorKind::UnknownKey {
                    allowed: TOML_TOP_KEYS.to_vec(),
                },
            ));
        }
    }
    let hazen_williams = toml_constant(&place, root)?;
    let tables: Vec<(&dyn TableLike, usize)> = match root.get("group") {
        None => Vec::new(),
        Some(Item::ArrayOfTables(tables)) => tables
            .iter()
            .map(|t| (t as &dyn TableLike, t.span().map_or(0, |s| s.start)))
            .collect(),
        Some(Item::Value(Value::Array(array))) => {
            let mut tables = Vec::new();
            for element in array.iter() {
                let start = element.span().map_or(0, |s| s.start);
                match element.as_inline_table() {
                    Some(t) => tables.push((t as &dyn TableLike, start)),
                    None => {
                        return Err(place.error(
                            place.line_of(start),
                            "group",
                            wrong_type("a table", element),
                        ));
                    }
                }
            }
            tables
        }
        Some(other) => {
            let start = other.span().map_or(0, |s| s.start);
            return Err(place.error(
                place.line_of(start),
                "group",
                CoefficientErrorKind::WrongType {
                    expected: "a [[group]] list",
                    found: other.type_name().to_string(),
                },
            ));
        }
    };
    let mut entries = Vec::with_capacity(tables.len());
    for (table, start) in tables {
        entries.push(toml_entry(&place, table, place.line_of(start))?);
    }
    let mut set = finish(&place, entries)?;
    set.hazen_williams = hazen_williams;
    set.covariance = toml_covariance(&place, root)?;
    Ok(set)
}

/// `[covariance]`: `groups` (names) and `matrix` (rows of numbers, square, one row per group).
fn toml_covariance(
    place: &Place<'_>,
    root: &toml_edit::Table,
) -> Result<Option<GroupCovariance>, CoefficientError> {
    let Some(item) = root.get("covariance") else {
        return Ok(None);
    };
    let line = place.line_of(item.span().map_or(0, |s| s.start));
    let wrong = |found: &str| {
        place.error(
            line,
            "covariance",
            CoefficientErrorKind::WrongType {
                expected: "a table of `groups` (names) and `matrix` (one row of numbers per group)",
                found: found.to_string(),
            },
        )
    };
    let Some(table) = item.as_table_like() else {
        return Err(wrong(item.type_name()));
    };
    let groups: Option<Vec<String>> = table
        .get("groups")
        .and_then(Item::as_array)
        .map(|a| a.iter().map(|v| v.as_str().map(str::to_string)).collect())
        .and_then(|v: Vec<Option<String>>| v.into_iter().collect());
    let number = |v: &Value| v.as_float().or_else(|| v.as_integer().map(|i| i as f64));
    let matrix: Option<Vec<Vec<f64>>> = table
        .get("matrix")
        .and_then(Item::as_array)
        .map(|rows| {
            rows.iter()
                .map(|row| {
                    row.as_array()
                        .and_then(|r| r.iter().map(number).collect::<Option<Vec<f64>>>())
                })
                .collect::<Option<Vec<_>>>()
        })
        .and_then(|m| m);
    match (groups, matrix) {
        (Some(groups), Some(matrix))
            if matrix.len() == groups.len()
                && matrix
                    .iter()
                    .all(|r| r.len() == groups.len() && r.iter().all(|v| v.is_finite())) =>
        {
            Ok(Some(GroupCovariance { groups, matrix }))
        }
        _ => Err(wrong("another shape")),
    }
}

/// Top-level keys of `coefficients.toml`.
pub const TOML_TOP_KEYS: [&str; 4] = ["group", "units", "hazen_williams_constant", "covariance"];

/// `units` and `hazen_williams_constant` of a set: both or neither.
fn toml_constant(
    place: &Place<'_>,
    root: &toml_edit::Table,
) -> Result<Option<HwConstant>, CoefficientError> {
    let line_of =
        |key: &str| place.line_of(root.key(key).and_then(|k| k.span()).map_or(0, |s| s.start));
    let units = match root.get("units").and_then(Item::as_value) {
        None => None,
        Some(value) => match value.as_str().and_then(UnitSystem::parse) {
            Some(units) => Some(units),
            None => {
                return Err(place.error(
                    line_of("units"),
                    "units",
                    wrong_type("\"us\" or \"si\"", value),
                ));
            }
        },
    };
    let k = match root.get("hazen_williams_constant").and_then(Item::as_value) {
        None => None,
        Some(value) => match value
            .as_float()
            .or_else(|| value.as_integer().map(|i| i as f64))
            .filter(|k| k.is_finite() && *k > 0.0)
        {
            Some(k) => Some(k),
            None => {
                return Err(place.error(
                    line_of("hazen_williams_constant"),
                    "hazen_williams_constant",
                    wrong_type("a positive number", value),
                ));
            }
        },
    };
    match (units, k) {
        (Some(units), Some(k)) => Ok(Some(HwConstant { units, k })),
        (None, None) => Ok(None),
        (None, Some(_)) => Err(place.error(
            line_of("hazen_williams_constant"),
            "units",
            CoefficientErrorKind::ConstantWithoutUnits,
        )),
        (Some(_), None) => Err(place.error(
            line_of("units"),
            "hazen_williams_constant",
            CoefficientErrorKind::ConstantWithoutUnits,
        )),
    }
}

fn wrong_type(expected: &'static str, value: &Value) -> CoefficientErrorKind {
    CoefficientErrorKind::WrongType {
        expected,
        found: format!("{} `{}`", value.type_name(), value.to_string().trim()),
    }
}

fn toml_entry(
    place: &Place<'_>,
    table: &dyn TableLike,
    header_line: usize,
) -> Result<CoefficientEntry, CoefficientError> {
    let line_of_key = |key: &str| {
        table
            .get(key)
            .and_then(Item::span)
            .or_else(|| table.key(key).and_then(|k| k.span()))
            .map_or(header_line, |s| place.line_of(s.start))
    };
    for (key, _) in table.iter() {
        if !TOML_GROUP_KEYS.contains(&key) {
            return Err(place.error(
                line_of_key(key),
                key,
                CoefficientErrorKind::UnknownKey {
                    allowed: TOML_GROUP_KEYS.to_vec(),
                },
            ));
        }
    }
    let value = |key: &str| table.get(key).and_then(Item::as_value);
    let error = |key: &str, kind| place.error(line_of_key(key), key, kind);
    let number = |key: &str| -> Result<Option<f64>, CoefficientError> {
        match value(key) {
            None => Ok(None),
            Some(Value::Integer(i)) => Ok(Some(*i.value() as f64)),
            Some(Value::Float(f)) => Ok(Some(*f.value())),
            Some(other) => Err(error(key, wrong_type("a number", other))),
        }
    };
    let name = match value("name") {
        None => return Err(place.error(header_line, "name", CoefficientErrorKind::Missing)),
        Some(Value::String(s)) => s.value().clone(),
        Some(other) => return Err(error("name", wrong_type("a string", other))),
    };
    let c =
        number("c")?.ok_or_else(|| place.error(header_line, "c", CoefficientErrorKind::Missing))?;
    let locked = match value("locked") {
        None => None,
        Some(Value::Boolean(b)) => Some(*b.value()),
        Some(other) => return Err(error("locked", wrong_type("true or false", other))),
    };
    let tests = match value("tests") {
        None => None,
        Some(Value::Integer(i)) if *i.value() >= 0 => usize::try_from(*i.value()).ok(),
        Some(other) => return Err(error("tests", wrong_type("a whole number >= 0", other))),
    };
    let status = match value("status") {
        None => None,
        Some(Value::String(s)) => Some(s.value().clone()),
        Some(other) => return Err(error("status", wrong_type("a string", other))),
    };
    let fields = RawEntry {
        name,
        c,
        min: number("min")?,
        max: number("max")?,
        locked,
        start: number("start")?,
        std_error: number("std_error")?,
        ci_low: number("ci_low")?,
        ci_high: number("ci_high")?,
        tests,
        status,
    };
    fields.check(
        |key, kind| error(key, kind),
        header_line,
        line_of_key("name"),
    )
}

/// An entry as read, before its values are checked.
struct RawEntry {
    name: String,
    c: f64,
    min: Option<f64>,
    max: Option<f64>,
    locked: Option<bool>,
    start: Option<f64>,
    std_error: Option<f64>,
    ci_low: Option<f64>,
    ci_high: Option<f64>,
    tests: Option<usize>,
    status: Option<String>,
}

impl RawEntry {
    /// Checks the values, naming the field of the first bad one through `error`.
    fn check(
        self,
        error: impl Fn(&str, CoefficientErrorKind) -> CoefficientError,
        line: usize,
        name_line: usize,
    ) -> Result<CoefficientEntry, CoefficientError> {
        let positive = |key: &str, v: Option<f64>| match v {
            Some(v) if !(v.is_finite() && v > 0.0) => {
                Err(error(key, CoefficientErrorKind::NotPositive(v)))
            }
            _ => Ok(()),
        };
        positive("c", Some(self.c))?;
        positive("min", self.min)?;
        positive("max", self.max)?;
        positive("start", self.start)?;
        positive("ci_low", self.ci_low)?;
        positive("ci_high", self.ci_high)?;
        if let Some(se) = self.std_error
            && !(se.is_finite() && se >= 0.0)
        {
            return Err(error("std_error", CoefficientErrorKind::NotFinite(se)));
        }
        if let (Some(min), Some(max)) = (self.min, self.max)
            && min >= max
        {
            return Err(error(
                "max",
                CoefficientErrorKind::BoundsCrossed { min, max },
            ));
        }
        if let Some(status) = &self.status
            && !known_status(status)
        {
            return Err(error(
                "status",
                CoefficientErrorKind::UnknownStatus(status.clone()),
            ));
        }
        let ci95 = match (self.ci_low, self.ci_high) {
            (Some(lo), Some(hi)) => Some((lo, hi)),
            (None, None) => None,
            (Some(_), None) => return Err(error("ci_high", CoefficientErrorKind::Missing)),
            (None, Some(_)) => return Err(error("ci_low", CoefficientErrorKind::Missing)),
        };
        Ok(CoefficientEntry {
            name: self.name,
            c: self.c,
            min: self.min,
            max: self.max,
            locked: self.locked,
            start: self.start,
            std_error: self.std_error,
            ci95,
            tests: self.tests,
            status: self.status,
            line,
            name_line,
        })
    }
}

/// Rejects duplicate groups and empty sets.
fn finish(
    place: &Place<'_>,
    entries: Vec<CoefficientEntry>,
) -> Result<CoefficientSet, CoefficientError> {
    if entries.is_empty() {
        // A defect of the whole file is shown at its first line, as the other loaders do.
        return Err(place.error(1, "", CoefficientErrorKind::NoGroups));
    }
    let mut first_line: BTreeMap<&str, usize> = BTreeMap::new();
    for entry in &entries {
        if let Some(&first) = first_line.get(entry.name.as_str()) {
            return Err(place.error(
                entry.name_line,
                name_field(place.file),
                CoefficientErrorKind::DuplicateGroup {
                    name: entry.name.clone(),
                    first_line: first,
                },
            ));
        }
        first_line.insert(&entry.name, entry.name_line);
    }
    Ok(CoefficientSet {
        file: place.file.to_string(),
        entries,
        hazen_williams: None,
        covariance: None,
    })
}

/// Parses the text of a `coefficients.csv`. Columns may come in any order; `group` and `fitted` are
/// required, the others of [`CSV_HEADER`] optional, any other column is an error.
pub fn parse_coefficients_csv(text: &str, file: &str) -> Result<CoefficientSet, CoefficientError> {
    let place = Place { file, text };
    let syntax = |line: usize, e: csv::Error| {
        place.error(
            line,
            "",
            CoefficientErrorKind::Syntax {
                format: "CSV",
                message: e.to_string(),
            },
        )
    };
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(false)
        .from_reader(text.as_bytes());
    let mut records = reader.records();
    let header = match records.next() {
        None => return Err(place.error(1, "", CoefficientErrorKind::NoGroups)),
        Some(header) => header.map_err(|e| syntax(1, e))?,
    };
    let header_line = header.position().map_or(1, |p| p.line() as usize);
    let mut columns: BTreeMap<&'static str, usize> = BTreeMap::new();
    for (index, name) in header.iter().enumerate() {
        let name = name.trim();
        let Some(&known) = CSV_HEADER.iter().find(|&&k| k == name) else {
            return Err(place.error(
                header_line,
                name,
                CoefficientErrorKind::UnknownKey {
                    allowed: CSV_HEADER.to_vec(),
                },
            ));
        };
        if columns.insert(known, index).is_some() {
            return Err(place.error(
                header_line,
                name,
                CoefficientErrorKind::Syntax {
                    format: "CSV",
                    message: "the column appears twice".to_string(),
                },
            ));
        }
    }
    for required in ["group", "fitted"] {
        if !columns.contains_key(required) {
            return Err(place.error(header_line, required, CoefficientErrorKind::Missing));
        }
    }
    let mut entries = Vec::new();
    // The set's constant and the line it was first read on.
    let mut constant: Option<(Option<HwConstant>, usize)> = None;
    for record in records {
        let record = record.map_err(|e| {
            let line = e.position().map_or(header_line, |p| p.line() as usize);
            syntax(line, e)
        })?;
        let line = record.position().map_or(header_line, |p| p.line() as usize);
        let cell = |key: &str| {
            columns
                .get(key)
                .and_then(|&i| record.get(i))
                .map(str::trim)
                .filter(|s| !s.is_empty())
        };
        let error = |key: &str, kind| place.error(line, key, kind);
        let number = |key: &str| -> Result<Option<f64>, CoefficientError> {
            match cell(key) {
                None => Ok(None),
                Some(text) => text.parse::<f64>().map(Some).map_err(|_| {
                    error(
                        key,
                        CoefficientErrorKind::WrongType {
                            expected: "a number",
                            found: format!("`{text}`"),
                        },
                    )
                }),
            }
        };
        let name = cell("group")
            .ok_or_else(|| error("group", CoefficientErrorKind::Missing))?
            .to_string();
        let units = match cell("units") {
            None => None,
            Some(text) => Some(UnitSystem::parse(text).ok_or_else(|| {
                error(
                    "units",
                    CoefficientErrorKind::WrongType {
                        expected: "\"us\" or \"si\"",
                        found: format!("`{text}`"),
                    },
                )
            })?),
        };
        let k = match number("hazen_williams_constant")? {
            Some(k) if !(k.is_finite() && k > 0.0) => {
                return Err(error(
                    "hazen_williams_constant",
                    CoefficientErrorKind::NotPositive(k),
                ));
            }
            k => k,
        };
        let row_constant = match (units, k) {
            (Some(units), Some(k)) => Some(HwConstant { units, k }),
            (None, None) => None,
            (None, Some(_)) => {
                return Err(error("units", CoefficientErrorKind::ConstantWithoutUnits));
            }
            (Some(_), None) => {
                return Err(error(
                    "hazen_williams_constant",
                    CoefficientErrorKind::ConstantWithoutUnits,
                ));
            }
        };
        match constant {
            None => constant = Some((row_constant, line)),
            Some((first, first_line)) if first != row_constant => {
                let field = if row_constant.map(|c| c.units) == first.map(|c| c.units) {
                    "hazen_williams_constant"
                } else {
                    "units"
                };
                return Err(error(
                    field,
                    CoefficientErrorKind::ConstantDiffersBetweenRows { first_line },
                ));
            }
            Some(_) => {}
        }
        let c = number("fitted")?.ok_or_else(|| error("fitted", CoefficientErrorKind::Missing))?;
        let tests = match cell("tests") {
            None => None,
            Some(text) => Some(text.parse::<usize>().map_err(|_| {
                error(
                    "tests",
                    CoefficientErrorKind::WrongType {
                        expected: "a whole number >= 0",
                        found: format!("`{text}`"),
                    },
                )
            })?),
        };
        let raw = RawEntry {
            name,
            c,
            min: None,
            max: None,
            locked: None,
            start: number("start")?,
            std_error: number("std_error")?,
            ci_low: number("ci_low")?,
            ci_high: number("ci_high")?,
            tests,
            status: cell("status").map(str::to_string),
        };
        // The CSV calls the C column `fitted`.
        let renamed = |key: &str, kind| error(if key == "c" { "fitted" } else { key }, kind);
        entries.push(raw.check(renamed, line, line)?);
    }
    let mut set = finish(&place, entries)?;
    set.hazen_williams = constant.and_then(|(constant, _)| constant);
    Ok(set)
}

/// `coefficients.csv`: [`CSV_HEADER`], then one row per group of the result. Numbers are written in
/// full precision (the shortest decimal that reads back as the same value); blank cells where the fit
/// gives no standard error or interval. Every row carries the fit's Hazen-Williams constant and its
/// unit system, so that `apply` can compare them with the target network's.
pub fn coefficients_csv(result: &CalibrationResult) -> String {
    let mut writer = csv::Writer::from_writer(Vec::new());
    let mut rows = vec![CSV_HEADER.iter().map(|s| s.to_string()).collect::<Vec<_>>()];
    let opt = |v: Option<f64>| v.map_or_else(String::new, |v| v.to_string());
    for group in &result.groups {
        rows.push(vec![
            group.name.clone(),
            group.start_c.to_string(),
            group.fitted_c.to_string(),
            opt(group.std_error),
            opt(group.ci95.map(|ci| ci.0)),
            opt(group.ci95.map(|ci| ci.1)),
            group.tests_informing.to_string(),
            status_label(result, group.status).to_string(),
            result.hazen_williams.units.key().to_string(),
            result.hazen_williams.k.to_string(),
        ]);
    }
    for row in rows {
        // Writing into memory cannot fail.
        let _ = writer.write_record(&row);
    }
    let bytes = writer.into_inner().unwrap_or_default();
    String::from_utf8(bytes).unwrap_or_default()
}

/// `coefficients.toml`: a `[[group]]` list whose `name`, `c`, `min`, `max` and `locked` read like the
/// network file's `[[group]]` entries, plus the informative `start`, `std_error`, `ci_low`, `ci_high`,
/// `tests` and `status`. `c` is in full precision so that applying the set reproduces the fit exactly.
pub fn coefficients_toml(result: &CalibrationResult, network_file: &str) -> String {
    let mut groups = ArrayOfTables::new();
    for group in &result.groups {
        let mut table = Table::new();
        table.insert("name", toml_edit::value(group.name.as_str()));
        table.insert("c", toml_edit::value(group.fitted_c));
        table.insert("min", toml_edit::value(group.min_c));
        table.insert("max", toml_edit::value(group.max_c));
        table.insert(
            "locked",
            toml_edit::value(group.status == GroupStatus::Locked),
        );
        table.insert("start", toml_edit::value(group.start_c));
        if let Some(se) = group.std_error {
            table.insert("std_error", toml_edit::value(se));
        }
        if let Some((lo, hi)) = group.ci95 {
            table.insert("ci_low", toml_edit::value(lo));
            table.insert("ci_high", toml_edit::value(hi));
        }
        table.insert(
            "tests",
            toml_edit::value(i64::try_from(group.tests_informing).unwrap_or(i64::MAX)),
        );
        table.insert(
            "status",
            toml_edit::value(status_label(result, group.status)),
        );
        groups.push(table);
    }
    let mut document = DocumentMut::new();
    // The C values belong to this constant (C scales with K^(1/1.852)); `apply` compares it with the
    // target network's.
    document.insert("units", toml_edit::value(result.hazen_williams.units.key()));
    document.insert(
        "hazen_williams_constant",
        toml_edit::value(result.hazen_williams.k),
    );
    document.insert("group", Item::ArrayOfTables(groups));
    if !result.covariance.is_empty() {
        // For intervals on what the calibrated network predicts (`roughcal tests --coefficients`).
        let mut table = Table::new();
        let mut names = toml_edit::Array::new();
        for name in &result.correlation_groups {
            names.push(name.as_str());
        }
        let mut rows = toml_edit::Array::new();
        for row in &result.covariance {
            let mut values = toml_edit::Array::new();
            for &v in row {
                values.push(v);
            }
            rows.push(values);
        }
        table.insert("groups", toml_edit::value(names));
        table.insert("matrix", toml_edit::value(rows));
        document.insert("covariance", Item::Table(table));
    }
    let mut out = String::new();
    out.push_str(&format!(
        "# Roughness coefficient set fitted by roughcal to the field tests of {}.\n",
        toml_comment_safe(network_file)
    ));
    out.push_str("# Apply it with `roughcal apply NETWORK coefficients.toml --out FILE`.\n");
    for line in wrap(CAUTION, 96) {
        out.push_str("# ");
        out.push_str(&line);
        out.push('\n');
    }
    out.push('\n');
    out.push_str(&document.to_string());
    out
}

fn toml_comment_safe(text: &str) -> String {
    text.replace(['\n', '\r'], " ")
}

/// Splits `text` into lines of at most `width` characters at spaces.
pub(crate) fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > width {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

/// What applying a coefficient set does to one group.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupChange {
    pub group: String,
    /// Lowest and highest C among the group's pipes before (equal in a calibrated network).
    pub old_c: Option<(f64, f64)>,
    pub new_c: f64,
    pub pipes: usize,
}

/// The change every entry of `set` makes to `net`, in the set's order. Entries naming a group the
/// network lacks are skipped (see [`CoefficientSet::check_against`]).
pub fn group_changes(net: &Network, set: &CoefficientSet) -> Vec<GroupChange> {
    set.entries
        .iter()
        .filter_map(|entry| {
            let g = net.find_group(&entry.name)?;
            let c: Vec<f64> = net
                .pipes
                .iter()
                .filter(|p| p.group == Some(g))
                .map(|p| p.c_factor)
                .collect();
            let old_c = (!c.is_empty()).then(|| {
                (
                    c.iter().copied().fold(f64::INFINITY, f64::min),
                    c.iter().copied().fold(f64::NEG_INFINITY, f64::max),
                )
            });
            Some(GroupChange {
                group: entry.name.clone(),
                old_c,
                new_c: entry.c,
                pipes: c.len(),
            })
        })
        .collect()
}

/// The changes as an aligned table: group, old C, new C, pipes.
pub fn group_changes_text(changes: &[GroupChange]) -> String {
    use super::table::{Align, TextTable};
    let mut table = TextTable::new(&[
        ("group", Align::Left),
        ("old C", Align::Right),
        ("new C", Align::Right),
        ("pipes", Align::Right),
    ]);
    let c = |v: f64| format!("{v:.2}");
    for change in changes {
        let old = match change.old_c {
            None => "-".to_string(),
            Some((lo, hi)) if lo == hi => c(lo),
            Some((lo, hi)) => format!("{} to {}", c(lo), c(hi)),
        };
        table.row(vec![
            change.group.clone(),
            old,
            c(change.new_c),
            change.pipes.to_string(),
        ]);
    }
    table.text("  ")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn toml_error(text: &str) -> String {
        match parse_coefficients_toml(text, "set.toml") {
            Ok(set) => panic!("accepted: {set:?}"),
            Err(e) => e.to_string(),
        }
    }

    fn csv_error(text: &str) -> String {
        match parse_coefficients_csv(text, "set.csv") {
            Ok(set) => panic!("accepted: {set:?}"),
            Err(e) => e.to_string(),
        }
    }

    #[test]
    fn a_good_toml_set_reads_every_key() {
        let text = "# comment\n[[group]]\nname = \"ci\"\nc = 72\nmin = 40.0\nmax = 140.0\n\
                    locked = false\nstart = 100.0\nstd_error = 2.5\nci_low = 67.1\nci_high = 76.9\n\
                    tests = 4\nstatus = \"fitted\"\n\n[[group]]\nname = \"di\"\nc = 118.5\n";
        let set = parse_coefficients_toml(text, "set.toml").unwrap();
        assert_eq!(set.entries.len(), 2);
        let ci = &set.entries[0];
        assert_eq!((ci.name.as_str(), ci.c, ci.line), ("ci", 72.0, 2));
        assert_eq!(ci.ci95, Some((67.1, 76.9)));
        assert_eq!((ci.tests, ci.status.as_deref()), (Some(4), Some("fitted")));
        assert_eq!((set.entries[1].c, set.entries[1].line), (118.5, 15));
        let by_name = set.c_by_group();
        assert_eq!(by_name["di"], 118.5);
    }

    #[test]
    fn toml_errors_name_file_line_and_field() {
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 72\ncolour = \"red\"\n"),
            "set.toml:4: colour: unknown key; expected one of name, c, min, max, locked, start, \
             std_error, ci_low, ci_high, tests, status"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = \"72\"\n"),
            "set.toml:3: c: expected a number, found string `\"72\"`"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = -5\n"),
            "set.toml:3: c: must be a positive finite number, got -5"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 0.0\n"),
            "set.toml:3: c: must be a positive finite number, got 0"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = nan\n"),
            "set.toml:3: c: must be a positive finite number, got NaN"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = inf\n"),
            "set.toml:3: c: must be a positive finite number, got inf"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\n"),
            "set.toml:1: c: required, but missing"
        );
        assert_eq!(
            toml_error("[[group]]\nc = 80\n"),
            "set.toml:1: name: required, but missing"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 80\n[[group]]\nname = \"ci\"\nc = 90\n"),
            "set.toml:5: name: group `ci` appears twice (first on line 2)"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 80\nlocked = \"yes\"\n"),
            "set.toml:4: locked: expected true or false, found string `\"yes\"`"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 80\nstatus = \"great\"\n"),
            "set.toml:4: status: unknown status `great`; expected one of: fitted, at bound, \
             locked, not informed, not converged"
        );
        assert_eq!(
            toml_error("[[group]]\nname = \"ci\"\nc = 80\nmin = 90\nmax = 60\n"),
            "set.toml:5: max: min (90) must be below max (60)"
        );
        assert_eq!(
            toml_error("title = \"x\"\n[[group]]\nname = \"ci\"\nc = 80\n"),
            "set.toml:1: title: unknown key; expected one of group, units, hazen_williams_constant, \
             covariance"
        );
        assert!(
            toml_error("[[group]]\nname = \"ci\nc = 80\n")
                .starts_with("set.toml:2: not valid TOML")
        );
        assert_eq!(
            toml_error("# nothing\n"),
            "set.toml:1: the file lists no group"
        );
    }

    #[test]
    fn a_csv_set_in_any_column_order() {
        let text = "status,fitted,group\nfitted,72.5,ci\n,118,di\n";
        let set = parse_coefficients_csv(text, "set.csv").unwrap();
        assert_eq!(set.entries[0].c, 72.5);
        assert_eq!(
            (set.entries[1].name.as_str(), set.entries[1].line),
            ("di", 3)
        );
        assert_eq!(set.entries[1].status, None);
    }

    #[test]
    fn csv_errors_name_file_line_and_field() {
        let header = "group,start,fitted,std_error,ci_low,ci_high,tests,status\n";
        assert_eq!(
            csv_error(&format!("{header}ci,100,abc,,,,3,fitted\n")),
            "set.csv:2: fitted: expected a number, found `abc`"
        );
        assert_eq!(
            csv_error(&format!(
                "{header}ci,100,80,,,,3,fitted\ndi,100,-4,,,,3,fitted\n"
            )),
            "set.csv:3: fitted: must be a positive finite number, got -4"
        );
        assert_eq!(
            csv_error(&format!("{header}ci,100,NaN,,,,3,fitted\n")),
            "set.csv:2: fitted: must be a positive finite number, got NaN"
        );
        assert_eq!(
            csv_error(&format!(
                "{header}ci,100,80,,,,3,fitted\nci,100,81,,,,3,fitted\n"
            )),
            "set.csv:3: group: group `ci` appears twice (first on line 2)"
        );
        assert_eq!(
            csv_error("group,fitted,colour\nci,80,red\n"),
            "set.csv:1: colour: unknown key; expected one of group, start, fitted, std_error, \
             ci_low, ci_high, tests, status, units, hazen_williams_constant"
        );
        assert_eq!(
            csv_error("group,start\nci,80\n"),
            "set.csv:1: fitted: required, but missing"
        );
        assert_eq!(
            csv_error("group,fitted,tests\nci,80,many\n"),
            "set.csv:2: tests: expected a whole number >= 0, found `many`"
        );
        assert_eq!(
            csv_error("group,fitted\n,80\n"),
            "set.csv:2: group: required, but missing"
        );
        assert!(csv_error("group,fitted\nci,80,extra\n").starts_with("set.csv:2: not valid CSV"));
    }

    #[test]
    fn unknown_groups_are_named_with_their_line() {
        use crate::network::{Network, RoughnessGroup, UnitSystem};
        let net = Network {
            title: String::new(),
            units: UnitSystem::Us,
            junctions: vec![],
            fixed_heads: vec![],
            pipes: vec![],
            pumps: vec![],
            groups: vec![RoughnessGroup {
                name: "ci".into(),
                min_c: 40.0,
                max_c: 140.0,
                locked: false,
            }],
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: None,
            conditions: vec![],
            lonlat_origin: None,
        };
        let set = parse_coefficients_toml(
            "[[group]]\nname = \"ci\"\nc = 80\n\n[[group]]\nname = \"pvc\"\nc = 140\n",
            "set.toml",
        )
        .unwrap();
        assert_eq!(
            set.check_against(&net).unwrap_err().to_string(),
            "set.toml:5: name: the network has no group `pvc` (its groups: ci)"
        );
        let csv = parse_coefficients_csv("group,fitted\npvc,140\n", "set.csv").unwrap();
        assert_eq!(
            csv.check_against(&net).unwrap_err().to_string(),
            "set.csv:2: group: the network has no group `pvc` (its groups: ci)"
        );
    }

    #[test]
    fn a_set_says_which_constant_its_c_values_belong_to() {
        use crate::network::{Network, UnitSystem};
        let net = |units, k| Network {
            title: String::new(),
            units,
            junctions: vec![],
            fixed_heads: vec![],
            pipes: vec![],
            pumps: vec![],
            groups: vec![],
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: k,
            lonlat_origin: None,
            conditions: vec![],
        };
        let set = parse_coefficients_toml(
            "units = \"si\"\nhazen_williams_constant = 10.5088\n[[group]]\nname = \"ci\"\nc = 80\n",
            "set.toml",
        )
        .unwrap();
        assert_eq!(
            set.hazen_williams,
            Some(HwConstant {
                units: UnitSystem::Si,
                k: 10.5088
            })
        );
        assert_eq!(
            set.constant_mismatch(&net(UnitSystem::Si, Some(10.5088))),
            None
        );
        // C scales with K^(1/1.852): the law is K / C^1.852.
        let (_, _, scale) = set
            .constant_mismatch(&net(UnitSystem::Si, None))
            .expect("10.5088 against the default 10.67");
        assert!((scale - (10.67f64 / 10.5088).powf(1.0 / 1.852)).abs() < 1e-12);
        assert_eq!(
            toml_error("units = \"si\"\n[[group]]\nname = \"ci\"\nc = 80\n"),
            "set.toml:1: hazen_williams_constant: `units` and `hazen_williams_constant` go together: \
             the constant means nothing without the unit system of its formula"
        );
        let old =
            parse_coefficients_toml("[[group]]\nname = \"ci\"\nc = 80\n", "set.toml").unwrap();
        assert_eq!(old.constant_mismatch(&net(UnitSystem::Us, None)), None);
    }

    #[test]
    fn a_csv_set_carries_its_constant_on_every_row() {
        use crate::network::UnitSystem;
        let header = "group,fitted,units,hazen_williams_constant\n";
        let set = parse_coefficients_csv(
            &format!("{header}ci,80,si,10.5088\npvc,140,si,10.5088\n"),
            "s.csv",
        )
        .unwrap();
        assert_eq!(
            set.hazen_williams,
            Some(HwConstant {
                units: UnitSystem::Si,
                k: 10.5088
            })
        );
        // A set written before the columns existed says nothing about its constant.
        let old = parse_coefficients_csv("group,fitted\nci,80\n", "s.csv").unwrap();
        assert_eq!(old.hazen_williams, None);
        assert_eq!(
            csv_error(&format!("{header}ci,80,si,10.5088\npvc,140,si,10.67\n")),
            "set.csv:3: hazen_williams_constant: differs from line 2: one coefficient set belongs to \
             one Hazen-Williams constant"
        );
        assert_eq!(
            csv_error(&format!("{header}ci,80,si,10.5088\npvc,140,us,10.5088\n")),
            "set.csv:3: units: differs from line 2: one coefficient set belongs to one \
             Hazen-Williams constant"
        );
        assert_eq!(
            csv_error(&format!("{header}ci,80,,10.5088\n")),
            "set.csv:2: units: `units` and `hazen_williams_constant` go together: the constant \
             means nothing without the unit system of its formula"
        );
        assert_eq!(
            csv_error(&format!("{header}ci,80,metric,10.67\n")),
            "set.csv:2: units: expected \"us\" or \"si\", found `metric`"
        );
        assert_eq!(
            csv_error(&format!("{header}ci,80,si,0\n")),
            "set.csv:2: hazen_williams_constant: must be a positive finite number, got 0"
        );
    }
}
