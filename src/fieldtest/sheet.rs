//! The field sheet as text: every cell exactly as written, so that a sheet loaded and saved comes back
//! the same (same values, same column order, same extra columns, same rows), and so that an editor can
//! change one cell at a time and save after every edit.
//!
//! Nothing here interprets a value; see [`super::reading`] for typed tests and findings.

// The loader faces files edited by hand: no indexing that could panic on what they hold.
#![cfg_attr(not(test), deny(clippy::indexing_slicing))]

use std::collections::HashMap;
use std::fmt;
use std::path::Path;

use crate::network::UnitSystem;
use crate::storage::{WriteError, write_atomic};

/// A known column of the field sheet, whatever its unit suffix.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum SheetColumn {
    Test,
    Date,
    Time,
    ResidualNode,
    FlowNode,
    Static,
    Residual,
    Flow,
    Pitot,
    Outlet,
    Coefficient,
    Condition,
    Note,
    /// Optional: `yes` (or blank) keeps the test in the fit, `no` leaves it out (the crew's or the
    /// engineer's choice, kept apart from tests screened out by an error).
    Use,
}

impl SheetColumn {
    /// Every known column, in the order of the template header: [`SheetColumn::KNOWN`] without the
    /// optional columns at its end.
    pub const ALL: [SheetColumn; 13] = match Self::KNOWN.first_chunk::<13>() {
        Some(template) => *template,
        None => panic!("KNOWN starts with the template's columns"),
    };

    /// Every column the reader recognises: the template's ([`SheetColumn::ALL`], first) and the
    /// optional ones a sheet may add (`use`).
    pub const KNOWN: [SheetColumn; 14] = [
        Self::Test,
        Self::Date,
        Self::Time,
        Self::ResidualNode,
        Self::FlowNode,
        Self::Static,
        Self::Residual,
        Self::Flow,
        Self::Pitot,
        Self::Outlet,
        Self::Coefficient,
        Self::Condition,
        Self::Note,
        Self::Use,
    ];

    /// Whether the column name carries a unit suffix.
    pub fn has_units(self) -> bool {
        matches!(
            self,
            Self::Static | Self::Residual | Self::Flow | Self::Pitot | Self::Outlet
        )
    }

    /// The column's header name in a sheet of `units` (e.g. `static_psi` or `static_kpa`).
    pub fn header_name(self, units: UnitSystem) -> &'static str {
        match (self, units) {
            (Self::Test, _) => "test",
            (Self::Date, _) => "date",
            (Self::Time, _) => "time",
            (Self::ResidualNode, _) => "residual_node",
            (Self::FlowNode, _) => "flow_node",
            (Self::Static, UnitSystem::Us) => "static_psi",
            (Self::Static, UnitSystem::Si) => "static_kpa",
            (Self::Residual, UnitSystem::Us) => "residual_psi",
            (Self::Residual, UnitSystem::Si) => "residual_kpa",
            (Self::Flow, UnitSystem::Us) => "flow_gpm",
            (Self::Flow, UnitSystem::Si) => "flow_lps",
            (Self::Pitot, UnitSystem::Us) => "pitot_psi",
            (Self::Pitot, UnitSystem::Si) => "pitot_kpa",
            (Self::Outlet, UnitSystem::Us) => "outlet_in",
            (Self::Outlet, UnitSystem::Si) => "outlet_mm",
            (Self::Coefficient, _) => "coefficient",
            (Self::Condition, _) => "condition",
            (Self::Note, _) => "note",
            (Self::Use, _) => "use",
        }
    }

    /// Recognises a header name: the column and, for a unit-suffixed one, the unit system it implies.
    /// Matching ignores surrounding spaces and letter case (`Static_PSI` is `static_psi`).
    pub fn from_header(name: &str) -> Option<(SheetColumn, Option<UnitSystem>)> {
        let name = name.trim().to_ascii_lowercase();
        for column in Self::KNOWN {
            if column.has_units() {
                for units in [UnitSystem::Us, UnitSystem::Si] {
                    if name == column.header_name(units) {
                        return Some((column, Some(units)));
                    }
                }
            } else if name == column.header_name(UnitSystem::Us) {
                return Some((column, None));
            }
        }
        None
    }
}

/// The header of `field-sheets/template.csv` and of [`FieldSheet::empty`], in `units`.
pub fn template_header(units: UnitSystem) -> Vec<&'static str> {
    SheetColumn::ALL
        .iter()
        .map(|c| c.header_name(units))
        .collect()
}

/// Why a field sheet cannot be read as a whole.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum SheetErrorKind {
    #[error("cannot read the file: {0}")]
    Io(String),
    #[error("{0}")]
    Write(String),
    #[error("not a text file: {0}")]
    NotText(String),
    #[error("not a CSV file: {0}")]
    NotCsv(String),
    #[error("the file is empty: expected a header line such as `{}`", template_header(UnitSystem::Us).join(","))]
    Empty,
    #[error("required column missing (expected `{0}`)")]
    MissingColumn(String),
    #[error("the column appears twice (fields {0} and {1})")]
    DuplicateColumn(usize, usize),
    #[error(
        "mixed units: this column is {this} but `{other}` is {other_units}; a sheet is all us or all si"
    )]
    MixedUnits {
        this: &'static str,
        other: String,
        other_units: &'static str,
    },
    #[error(
        "the header line is a single column whose name holds `{0}`: cells seem separated by `{0}`; \
         separate them with commas, semicolons or tabs"
    )]
    UnknownSeparator(char),
    #[error("a row is longer than the sheet reader accepts ({0} bytes)")]
    RowTooLong(usize),
}

/// A field sheet that cannot be read at all. Displays as `file:line: column: reason` (line and column
/// are left out where they do not apply, e.g. a file that cannot be opened).
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub struct SheetError {
    pub file: String,
    /// 1-based line of the file.
    pub line: Option<usize>,
    /// Header name (or `field N` where there is none).
    pub column: Option<String>,
    pub kind: SheetErrorKind,
}

impl fmt::Display for SheetError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        write!(f, ": ")?;
        if let Some(column) = &self.column {
            write!(f, "{column}: ")?;
        }
        write!(f, "{}", self.kind)
    }
}

/// An edit that does not fit the sheet.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum EditError {
    #[error("row {row} does not exist (the sheet has {rows} rows)")]
    NoSuchRow { row: usize, rows: usize },
    #[error("column {0} does not exist")]
    NoSuchColumn(String),
    #[error("the row would be longer than the sheet holds (4 GiB)")]
    RowTooLong,
}

/// One data row: the cells concatenated in one string with the end offset of each, which keeps a
/// sheet of a million rows in a few hundred bytes a row.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
struct Row {
    text: String,
    ends: Vec<u32>,
}

impl Row {
    fn from_cells<'a>(cells: impl IntoIterator<Item = &'a str>) -> Option<Row> {
        let mut row = Row::default();
        for cell in cells {
            row.text.push_str(cell);
            row.ends.push(u32::try_from(row.text.len()).ok()?);
        }
        row.text.shrink_to_fit();
        row.ends.shrink_to_fit();
        Some(row)
    }

    fn len(&self) -> usize {
        self.ends.len()
    }

    fn get(&self, index: usize) -> Option<&str> {
        let end = *self.ends.get(index)? as usize;
        let start = match index.checked_sub(1) {
            Some(before) => *self.ends.get(before)? as usize,
            None => 0,
        };
        self.text.get(start..end)
    }

    fn cells(&self) -> impl Iterator<Item = &str> {
        (0..self.len()).filter_map(|i| self.get(i))
    }

    /// Replaces cell `index` (padding a short row with blank cells) and returns the old text.
    fn set(&mut self, index: usize, value: &str) -> Result<String, EditError> {
        let mut cells: Vec<&str> = self.cells().collect();
        while cells.len() <= index {
            cells.push("");
        }
        // The padding above makes `index` a cell of the row.
        let old = match cells.get_mut(index) {
            Some(cell) => std::mem::replace(cell, value).to_string(),
            None => String::new(),
        };
        *self = Row::from_cells(cells).ok_or(EditError::RowTooLong)?;
        Ok(old)
    }

    fn newlines(&self) -> usize {
        self.text.bytes().filter(|&b| b == b'\n').count()
    }
}

/// A field sheet: the header and the raw text of every cell, in file order.
///
/// Rows may be ragged (fewer or more cells than the header) exactly as in the file; reading a test
/// reports that as a finding. Every mutation keeps [`FieldSheet::line`] in step with the file that
/// [`FieldSheet::to_csv_string`] would write.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FieldSheet {
    file_name: String,
    headers: Vec<String>,
    rows: Vec<Row>,
    units: UnitSystem,
    /// Index in `headers` of each known column.
    columns: [Option<usize>; 14],
    /// 1-based file line on which each row starts.
    lines: Vec<usize>,
    crlf: bool,
    byte_order_mark: bool,
    /// The field separator of the file as loaded (`,`, `;` or tab), kept when saving.
    delimiter: u8,
}

/// The field separator of a sheet, from its header line: a comma, unless the header holds no comma
/// outside quotes and does hold semicolons or tabs (spreadsheet exports in locales whose decimal mark is
/// a comma write `;`, and "text, tab separated" writes tabs). A header names at least the five required
/// columns, so a real header always has four separators or more.
pub fn detect_delimiter(text: &str) -> u8 {
    let header = text.split('\n').next().unwrap_or_default();
    let (mut commas, mut semicolons, mut tabs) = (0usize, 0usize, 0usize);
    let mut quoted = false;
    for b in header.bytes() {
        match b {
            b'"' => quoted = !quoted,
            b',' if !quoted => commas += 1,
            b';' if !quoted => semicolons += 1,
            b'\t' if !quoted => tabs += 1,
            _ => {}
        }
    }
    if commas > 0 || (semicolons == 0 && tabs == 0) {
        b','
    } else if tabs >= semicolons {
        b'\t'
    } else {
        b';'
    }
}

/// For a header read as one column: the first character of its name that no column name holds (a
/// separator other than `,`, `;` or tab, such as `|`), if any.
fn unknown_separator(headers: &[String]) -> Option<char> {
    let [only] = headers else { return None };
    only.trim()
        .chars()
        .find(|c| !(c.is_alphanumeric() || *c == '_' || *c == ' '))
}

fn column_slot(column: SheetColumn) -> usize {
    SheetColumn::KNOWN
        .iter()
        .position(|&c| c == column)
        .unwrap_or_default()
}

impl FieldSheet {
    /// A sheet with the template header in `units` and no rows.
    pub fn empty(units: UnitSystem) -> FieldSheet {
        let headers: Vec<String> = template_header(units)
            .into_iter()
            .map(str::to_string)
            .collect();
        let mut columns = [None; 14];
        for (i, slot) in columns.iter_mut().take(SheetColumn::ALL.len()).enumerate() {
            *slot = Some(i);
        }
        FieldSheet {
            file_name: String::new(),
            headers,
            rows: Vec::new(),
            units,
            columns,
            lines: Vec::new(),
            crlf: false,
            byte_order_mark: false,
            delimiter: b',',
        }
    }

    /// Reads a sheet from its text. `file_name` is used in error messages only.
    ///
    /// Fails only when the file as a whole cannot be a field sheet: not text, no header, a required
    /// column missing, a column named twice, or unit columns of both systems. Required columns: `test`,
    /// `residual_node`, `flow_node`, static, residual, and either the flow column or both pitot and
    /// outlet columns. Problems of single rows are left to [`super::reading::read_tests`].
    pub fn parse(text: &str, file_name: &str) -> Result<FieldSheet, SheetError> {
        let error = |line: Option<usize>, column: Option<String>, kind| SheetError {
            file: file_name.to_string(),
            line,
            column,
            kind,
        };
        let (text, byte_order_mark) = match text.strip_prefix('\u{feff}') {
            Some(rest) => (rest, true),
            None => (text, false),
        };
        if let Some(offset) = text.find('\0') {
            let line = 1 + text[..offset].bytes().filter(|&b| b == b'\n').count();
            return Err(error(
                Some(line),
                None,
                SheetErrorKind::NotText("it contains a NUL byte".to_string()),
            ));
        }
        let crlf = text.split('\n').next().is_some_and(|l| l.ends_with('\r'));
        let delimiter = detect_delimiter(text);
        let mut reader = csv::ReaderBuilder::new()
            .delimiter(delimiter)
            .has_headers(false)
            .flexible(true)
            .from_reader(text.as_bytes());
        let mut record = csv::StringRecord::new();
        let mut headers: Option<(Vec<String>, usize)> = None;
        let mut rows = Vec::new();
        let mut lines = Vec::new();
        loop {
            match reader.read_record(&mut record) {
                Ok(true) => {}
                Ok(false) => break,
                Err(e) => {
                    let line = e.position().map(|p| p.line() as usize);
                    return Err(error(line, None, SheetErrorKind::NotCsv(e.to_string())));
                }
            }
            let line = record.position().map_or(1, |p| p.line() as usize);
            if headers.is_none() {
                headers = Some((record.iter().map(str::to_string).collect(), line));
                continue;
            }
            let row = Row::from_cells(record.iter()).ok_or_else(|| {
                error(
                    Some(line),
                    None,
                    SheetErrorKind::RowTooLong(record.as_slice().len()),
                )
            })?;
            rows.push(row);
            lines.push(line);
        }
        let Some((headers, header_line)) = headers else {
            return Err(error(Some(1), None, SheetErrorKind::Empty));
        };
        let (units, columns) =
            Self::classify_header(&headers).map_err(|(column, kind)| {
                match (&kind, unknown_separator(&headers)) {
                    (SheetErrorKind::MissingColumn(_), Some(separator)) => error(
                        Some(header_line),
                        None,
                        SheetErrorKind::UnknownSeparator(separator),
                    ),
                    _ => error(Some(header_line), Some(column), kind),
                }
            })?;
        Ok(FieldSheet {
            file_name: file_name.to_string(),
            headers,
            rows,
            units,
            columns,
            lines,
            crlf,
            byte_order_mark,
            delimiter,
        })
    }

    /// Finds the known columns of a header and its unit system, or the first reason it is not one.
    #[allow(clippy::type_complexity)]
    fn classify_header(
        headers: &[String],
    ) -> Result<(UnitSystem, [Option<usize>; 14]), (String, SheetErrorKind)> {
        let mut columns: [Option<usize>; 14] = [None; 14];
        let mut units: Option<(UnitSystem, usize)> = None;
        let mut seen: HashMap<String, usize> = HashMap::with_capacity(headers.len());
        for (i, name) in headers.iter().enumerate() {
            // Any repeated name is ambiguous to a crew, known column or not.
            if let Some(first) = seen.insert(name.trim().to_ascii_lowercase(), i) {
                return Err((
                    name.clone(),
                    SheetErrorKind::DuplicateColumn(first + 1, i + 1),
                ));
            }
            let Some((column, column_units)) = SheetColumn::from_header(name) else {
                continue;
            };
            if let Some(column_units) = column_units {
                match units {
                    None => units = Some((column_units, i)),
                    Some((seen, at)) if seen != column_units => {
                        return Err((
                            name.clone(),
                            SheetErrorKind::MixedUnits {
                                this: column_units.key(),
                                other: headers.get(at).cloned().unwrap_or_default(),
                                other_units: seen.key(),
                            },
                        ));
                    }
                    Some(_) => {}
                }
            }
            let Some(slot) = columns.get_mut(column_slot(column)) else {
                continue; // column_slot is a position in SheetColumn::KNOWN, which has 14 entries.
            };
            if let Some(first) = *slot {
                return Err((
                    name.clone(),
                    SheetErrorKind::DuplicateColumn(first + 1, i + 1),
                ));
            }
            *slot = Some(i);
        }
        let units = units.map_or(UnitSystem::Us, |(u, _)| u);
        let has = |c: SheetColumn| columns.get(column_slot(c)).is_some_and(Option::is_some);
        for column in [
            SheetColumn::Test,
            SheetColumn::ResidualNode,
            SheetColumn::FlowNode,
            SheetColumn::Static,
            SheetColumn::Residual,
        ] {
            if !has(column) {
                let expected = if column.has_units() {
                    format!(
                        "{}` or `{}",
                        column.header_name(UnitSystem::Us),
                        column.header_name(UnitSystem::Si)
                    )
                } else {
                    column.header_name(units).to_string()
                };
                return Err((
                    column.header_name(units).to_string(),
                    SheetErrorKind::MissingColumn(expected),
                ));
            }
        }
        let flow_given =
            has(SheetColumn::Flow) || (has(SheetColumn::Pitot) && has(SheetColumn::Outlet));
        if !flow_given {
            let flow = SheetColumn::Flow.header_name(units);
            return Err((
                flow.to_string(),
                SheetErrorKind::MissingColumn(format!(
                    "{flow}`, or both `{}` and `{}",
                    SheetColumn::Pitot.header_name(units),
                    SheetColumn::Outlet.header_name(units)
                )),
            ));
        }
        Ok((units, columns))
    }

    /// The sheet as CSV text: the header and every row, cells quoted only where CSV needs it. Line
    /// endings (LF or CRLF) and a leading byte-order mark follow the file as loaded.
    pub fn to_csv_string(&self) -> String {
        let terminator = if self.crlf {
            csv::Terminator::CRLF
        } else {
            csv::Terminator::Any(b'\n')
        };
        let mut writer = csv::WriterBuilder::new()
            .delimiter(self.delimiter)
            .flexible(true)
            .terminator(terminator)
            .quote_style(csv::QuoteStyle::Necessary)
            .from_writer(Vec::new());
        // Writing to a Vec cannot fail and every cell is UTF-8; a failure would leave the text short,
        // never panic.
        let _ = writer.write_record(&self.headers);
        for row in &self.rows {
            let _ = writer.write_record(row.cells());
        }
        let bytes = writer.into_inner().unwrap_or_default();
        let mut text = String::from_utf8(bytes).unwrap_or_default();
        if self.byte_order_mark {
            text.insert(0, '\u{feff}');
        }
        text
    }

    /// The field separator of the file as loaded (`b','` for a new sheet); see [`detect_delimiter`].
    pub fn delimiter(&self) -> u8 {
        self.delimiter
    }

    /// The file name given to [`FieldSheet::parse`] (or set by [`FieldSheet::set_file_name`]).
    pub fn file_name(&self) -> &str {
        &self.file_name
    }

    /// Sets the name used in findings and errors (e.g. after "save as").
    pub fn set_file_name(&mut self, name: &str) {
        self.file_name = name.to_string();
    }

    /// The unit system, decided by the header.
    pub fn units(&self) -> UnitSystem {
        self.units
    }

    /// Header names as written, in file order.
    pub fn headers(&self) -> &[String] {
        &self.headers
    }

    /// Number of data rows (the header is not a row).
    pub fn row_count(&self) -> usize {
        self.rows.len()
    }

    /// Number of cells of a data row as found (may differ from the header in a ragged sheet).
    pub fn row_len(&self, row: usize) -> Option<usize> {
        self.rows.get(row).map(Row::len)
    }

    /// Every cell of a data row as written.
    pub fn row_cells(&self, row: usize) -> Option<Vec<&str>> {
        self.rows.get(row).map(|r| r.cells().collect())
    }

    /// 1-based file line on which a data row starts.
    pub fn line(&self, row: usize) -> Option<usize> {
        self.lines.get(row).copied()
    }

    /// Index in [`FieldSheet::headers`] of a known column, if the sheet has it.
    pub fn column_index(&self, column: SheetColumn) -> Option<usize> {
        self.columns.get(column_slot(column)).copied().flatten()
    }

    /// Index of a column by its header name as written (exact text).
    pub fn column_index_named(&self, name: &str) -> Option<usize> {
        self.headers.iter().position(|h| h == name)
    }

    /// The header name of a known column in this sheet: as written if present, else the name it would
    /// get in this sheet's units.
    pub fn column_name(&self, column: SheetColumn) -> &str {
        match self.column_index(column) {
            Some(i) => self
                .headers
                .get(i)
                .map_or_else(|| column.header_name(self.units), String::as_str),
            None => column.header_name(self.units),
        }
    }

    /// The known column at a header index, if it is one.
    pub fn column_at(&self, index: usize) -> Option<SheetColumn> {
        SheetColumn::KNOWN
            .into_iter()
            .find(|&c| self.column_index(c) == Some(index))
    }

    /// Text of a cell by header index. `None` if the row does not exist or the index is past both the
    /// header and the row; a cell missing from a short row is `Some("")`.
    pub fn cell_at(&self, row: usize, index: usize) -> Option<&str> {
        let r = self.rows.get(row)?;
        match r.get(index) {
            Some(text) => Some(text),
            None if index < self.headers.len() => Some(""),
            None => None,
        }
    }

    /// Text of a cell of a known column; `None` if the row does not exist or the sheet has no such column.
    pub fn cell(&self, row: usize, column: SheetColumn) -> Option<&str> {
        self.cell_at(row, self.column_index(column)?)
    }

    /// Text of a cell by header name as written.
    pub fn cell_named(&self, row: usize, name: &str) -> Option<&str> {
        self.cell_at(row, self.column_index_named(name)?)
    }

    /// Replaces a cell by header index and returns its previous text (for undo). A short row is padded
    /// with blank cells up to the index.
    pub fn set_cell_at(
        &mut self,
        row: usize,
        index: usize,
        value: &str,
    ) -> Result<String, EditError> {
        if index >= self.headers.len() && self.row_len(row).is_none_or(|len| index >= len) {
            if row >= self.rows.len() {
                return Err(self.no_such_row(row));
            }
            return Err(EditError::NoSuchColumn(format!("field {}", index + 1)));
        }
        let rows = self.rows.len();
        let r = self
            .rows
            .get_mut(row)
            .ok_or(EditError::NoSuchRow { row, rows })?;
        let old = r.set(index, value)?;
        self.renumber();
        Ok(old)
    }

    /// Replaces a cell of a known column and returns its previous text. A column the sheet lacks is
    /// added at the end of the header, named in the sheet's units.
    pub fn set_cell(
        &mut self,
        row: usize,
        column: SheetColumn,
        value: &str,
    ) -> Result<String, EditError> {
        if row >= self.rows.len() {
            return Err(self.no_such_row(row));
        }
        let index = self.add_column(column);
        self.set_cell_at(row, index, value)
    }

    /// Replaces a cell by header name as written.
    pub fn set_cell_named(
        &mut self,
        row: usize,
        name: &str,
        value: &str,
    ) -> Result<String, EditError> {
        let index = self
            .column_index_named(name)
            .ok_or_else(|| EditError::NoSuchColumn(name.to_string()))?;
        self.set_cell_at(row, index, value)
    }

    /// Adds a known column at the end of the header if the sheet lacks it; returns its index.
    pub fn add_column(&mut self, column: SheetColumn) -> usize {
        if let Some(i) = self.column_index(column) {
            return i;
        }
        self.headers
            .push(column.header_name(self.units).to_string());
        let index = self.headers.len() - 1;
        if let Some(slot) = self.columns.get_mut(column_slot(column)) {
            *slot = Some(index);
        }
        index
    }

    /// Inserts a blank row (one empty cell per header column) before row `at` (`at == row_count()`
    /// appends).
    pub fn insert_row(&mut self, at: usize) -> Result<(), EditError> {
        let blank = vec![String::new(); self.headers.len()];
        self.insert_row_cells(at, blank)
    }

    /// Inserts a row with the given cells before row `at`, e.g. to undo [`FieldSheet::delete_row`].
    pub fn insert_row_cells(&mut self, at: usize, cells: Vec<String>) -> Result<(), EditError> {
        if at > self.rows.len() {
            return Err(self.no_such_row(at));
        }
        let row = Row::from_cells(cells.iter().map(String::as_str)).ok_or(EditError::RowTooLong)?;
        self.rows.insert(at, row);
        self.lines.insert(at, 0);
        self.renumber();
        Ok(())
    }

    /// Removes row `at` and returns its cells (for undo).
    pub fn delete_row(&mut self, at: usize) -> Result<Vec<String>, EditError> {
        if at >= self.rows.len() {
            return Err(self.no_such_row(at));
        }
        let row = self.rows.remove(at);
        self.lines.remove(at);
        self.renumber();
        Ok(row.cells().map(str::to_string).collect())
    }

    fn no_such_row(&self, row: usize) -> EditError {
        EditError::NoSuchRow {
            row,
            rows: self.rows.len(),
        }
    }

    /// Line numbers as [`FieldSheet::to_csv_string`] lays the rows out: one line per row plus any line
    /// breaks inside its cells.
    fn renumber(&mut self) {
        let header_newlines: usize = self
            .headers
            .iter()
            .map(|h| h.bytes().filter(|&b| b == b'\n').count())
            .sum();
        let mut line = 1 + header_newlines + 1;
        for (row, slot) in self.rows.iter().zip(self.lines.iter_mut()) {
            *slot = line;
            line += 1 + row.newlines();
        }
    }
}

/// Reads a field sheet file. The thin edge between the file system and [`FieldSheet::parse`].
pub fn load_sheet(path: &Path) -> Result<FieldSheet, SheetError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| SheetError {
        file: file.clone(),
        line: None,
        column: None,
        kind: SheetErrorKind::Io(e.to_string()),
    })?;
    let text = match std::str::from_utf8(&bytes) {
        Ok(text) => text,
        Err(e) => {
            let offset = e.valid_up_to();
            let line = 1 + bytes.iter().take(offset).filter(|&&b| b == b'\n').count();
            return Err(SheetError {
                file,
                line: Some(line),
                column: None,
                kind: SheetErrorKind::NotText(format!(
                    "invalid UTF-8 at byte {offset}; save the sheet as UTF-8 CSV"
                )),
            });
        }
    };
    FieldSheet::parse(text, &file)
}

/// Writes a field sheet file through [`crate::storage::write_atomic`]: a save interrupted half-way (an
/// editor saves after every edit) leaves the previous file, never half a sheet.
pub fn save_sheet(sheet: &FieldSheet, path: &Path) -> Result<(), SheetError> {
    write_atomic(path, sheet.to_csv_string().as_bytes()).map_err(|e| {
        let reason = match &e {
            WriteError::Temporary { cause: source, .. } => {
                format!("cannot write a temporary file beside it: {source}")
            }
            WriteError::Write { cause: source, .. } => {
                format!("writing failed, the previous file is kept: {source}")
            }
            WriteError::Replace { cause: source, .. } => {
                format!("cannot replace the file, the previous file is kept: {source}")
            }
            WriteError::Keep { cause, .. } => {
                format!("cannot keep the file's mode or owner, the previous file is kept: {cause}")
            }
            WriteError::Exists { .. } => "the file already exists".to_string(),
        };
        SheetError {
            file: path.display().to_string(),
            line: None,
            column: None,
            kind: SheetErrorKind::Write(reason),
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const SHEET: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note,crew\n\
        T1,2024-05-02,09:10,H1,H2,72,58,1050,,,,,\"gate at Elm, half shut\",AB\n\
        T2,,,H3,H4;H5,70,51,,30;28,2.5,0.9,,Ünïcödé ✓ 水,\n";

    #[test]
    fn round_trip_keeps_every_cell() {
        let sheet = FieldSheet::parse(SHEET, "s.csv").unwrap();
        assert_eq!(sheet.to_csv_string(), SHEET);
        assert_eq!(sheet.units(), UnitSystem::Us);
        assert_eq!(
            sheet.cell(0, SheetColumn::Note),
            Some("gate at Elm, half shut")
        );
        assert_eq!(sheet.cell_named(0, "crew"), Some("AB"));
        assert_eq!(sheet.line(1), Some(3));
    }

    #[test]
    fn edits_return_what_they_replaced() {
        let mut sheet = FieldSheet::parse(SHEET, "s.csv").unwrap();
        assert_eq!(sheet.set_cell(1, SheetColumn::Static, "71").unwrap(), "70");
        assert_eq!(sheet.cell(1, SheetColumn::Static), Some("71"));
        sheet.insert_row(0).unwrap();
        assert_eq!(sheet.row_count(), 3);
        assert_eq!(sheet.cell(0, SheetColumn::Test), Some(""));
        assert_eq!(sheet.line(2), Some(4));
        let removed = sheet.delete_row(0).unwrap();
        assert_eq!(removed.len(), 14);
        sheet.set_cell(1, SheetColumn::Static, "70").unwrap();
        assert_eq!(sheet.to_csv_string(), SHEET);
        assert!(matches!(
            sheet.set_cell(9, SheetColumn::Test, "x"),
            Err(EditError::NoSuchRow { row: 9, rows: 2 })
        ));
    }

    #[test]
    fn odd_rows_round_trip() {
        // A lone blank quoted cell, an unterminated quote, a blank line (dropped: it is no row).
        let header = template_header(UnitSystem::Us).join(",");
        for rows in ["\"\"\n", "T1,\"open\n", "\n\nT1\n", "\"a\"\"b\",,\n"] {
            let text = format!("{header}\n{rows}");
            let sheet = FieldSheet::parse(&text, "odd.csv").unwrap();
            let again = FieldSheet::parse(&sheet.to_csv_string(), "odd.csv").unwrap();
            assert_eq!(again.to_csv_string(), sheet.to_csv_string(), "{rows:?}");
            assert_eq!(again.row_count(), sheet.row_count(), "{rows:?}");
        }
    }

    #[test]
    fn si_header_and_template() {
        let sheet = FieldSheet::empty(UnitSystem::Si);
        assert_eq!(sheet.column_name(SheetColumn::Flow), "flow_lps");
        let text = sheet.to_csv_string();
        assert_eq!(
            FieldSheet::parse(&text, "t.csv").unwrap().units(),
            UnitSystem::Si
        );
    }
}
