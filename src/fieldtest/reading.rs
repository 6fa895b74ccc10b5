//! The field sheet read into typed flow tests. Reading never fails as a whole: each row gives a test
//! or findings (or a test and warnings), so one bad row never hides the rest.
//!
//! Typed values are in SI, named so (`static_head_m`, `flow_m3s`); the methods without a unit in their
//! name (`static_pressure`, `flow`) give the sheet's own units (psi or kPa, gpm or L/s, in or mm).

// Sheets are edited by hand: no indexing that could panic on what they hold.
#![cfg_attr(not(test), deny(clippy::indexing_slicing))]

use std::collections::HashMap;

use super::fireflow::{AvailableFlow, available_flow};
use super::pitot::{DEFAULT_OUTLET_COEFFICIENT, pitot_flow};
use super::screening::{Finding, Rule, Severity, number, screen};
use super::sheet::{FieldSheet, SheetColumn};
use crate::network::units::as_typed;
use crate::network::{Network, UnitSystem};

/// The largest number a cell may hold (in the sheet's units): far above any pressure, flow, outlet or
/// coefficient a crew can read, and small enough that every unit conversion stays finite.
pub const MAX_READING: f64 = 1e9;

/// One hydrant flowing during a test.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowingHydrant {
    /// Node id of the hydrant in the network.
    pub node: String,
    /// Flow of this hydrant, as written or computed from the pitot reading.
    pub flow_m3s: f64,
    /// Pitot (velocity) pressure as a water column, if read.
    pub pitot_head_m: Option<f64>,
    /// Outlet diameter, if given.
    pub outlet_diameter_m: Option<f64>,
    /// Outlet coefficient as used: the sheet's, or [`DEFAULT_OUTLET_COEFFICIENT`] when blank.
    pub coefficient: f64,
    /// The sheet left the coefficient blank and the default was used.
    pub coefficient_defaulted: bool,
    /// The flow was computed from the pitot reading and outlet (the flow cell was blank).
    pub computed: bool,
}

impl FlowingHydrant {
    /// Flow in the sheet's flow unit (gpm or L/s).
    pub fn flow(&self, units: UnitSystem) -> f64 {
        as_typed(units.flow_from_m3s(self.flow_m3s))
    }

    /// Pitot pressure in the sheet's pressure unit (psi or kPa).
    pub fn pitot_pressure(&self, units: UnitSystem) -> Option<f64> {
        self.pitot_head_m
            .map(|h| as_typed(units.pressure_from_head_m(h)))
    }

    /// Outlet diameter in the sheet's diameter unit (in or mm).
    pub fn outlet(&self, units: UnitSystem) -> Option<f64> {
        self.outlet_diameter_m
            .map(|d| as_typed(units.diameter_from_m(d)))
    }
}

/// One hydrant flow test, read from one row of the sheet.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowTest {
    pub test_id: String,
    /// 0-based data row of the sheet.
    pub row: usize,
    /// 1-based line of the file.
    pub line: usize,
    /// Units of the sheet the test came from (for display and reasons).
    pub units: UnitSystem,
    /// The hydrant (node) where static and residual pressures were read.
    pub residual_node: String,
    /// The hydrants flowing, in sheet order (at least one).
    pub flowing: Vec<FlowingHydrant>,
    /// Static pressure (no hydrant open) as a water column above the gauge.
    pub static_head_m: f64,
    /// Residual pressure (hydrants flowing) as a water column above the gauge.
    pub residual_head_m: f64,
    /// A `[[condition]]` of the network; `None` for the network as written.
    pub condition: Option<String>,
    pub date: String,
    pub time: String,
    pub note: String,
}

impl FlowTest {
    /// Static pressure in the sheet's unit (psi or kPa), as typed.
    pub fn static_pressure(&self) -> f64 {
        as_typed(self.units.pressure_from_head_m(self.static_head_m))
    }

    /// Residual pressure in the sheet's unit (psi or kPa), as typed.
    pub fn residual_pressure(&self) -> f64 {
        as_typed(self.units.pressure_from_head_m(self.residual_head_m))
    }

    /// Total flow of all flowing hydrants.
    pub fn total_flow_m3s(&self) -> f64 {
        self.flowing.iter().map(|h| h.flow_m3s).sum()
    }

    /// Total flow in the sheet's unit (gpm or L/s).
    pub fn total_flow(&self) -> f64 {
        as_typed(self.units.flow_from_m3s(self.total_flow_m3s()))
    }

    /// Flow available at `target` residual (sheet pressure unit), in the sheet's flow unit (NFPA 291
    /// extrapolation, see [`available_flow`]).
    pub fn available_flow(&self, target: f64) -> AvailableFlow {
        available_flow(
            self.total_flow(),
            self.static_pressure(),
            self.residual_pressure(),
            target,
        )
    }
}

/// Every test of a sheet and every finding about its rows, findings in row order.
#[derive(Debug, Clone, PartialEq)]
pub struct SheetReading {
    pub units: UnitSystem,
    pub tests: Vec<FlowTest>,
    pub findings: Vec<Finding>,
    /// Data rows (0-based, ascending) whose `use` cell says `no`: left out of the fit by choice, whatever
    /// else the row holds. Their tests and findings are still read and shown.
    pub left_out: Vec<usize>,
}

impl SheetReading {
    /// Findings about one data row.
    pub fn findings_for_row(&self, row: usize) -> impl Iterator<Item = &Finding> {
        let start = self.findings.partition_point(|f| f.row < row);
        self.findings
            .iter()
            .skip(start)
            .take_while(move |f| f.row == row)
    }

    /// Whether a row has an error finding (its test, if any, is left out of calibration).
    pub fn row_has_error(&self, row: usize) -> bool {
        self.findings_for_row(row)
            .any(|f| f.severity == Severity::Error)
    }

    /// Tests with no error finding and not left out by the `use` column: the ones calibration may use.
    pub fn usable_tests(&self) -> impl Iterator<Item = &FlowTest> {
        self.tests
            .iter()
            .filter(|t| !self.row_has_error(t.row) && !self.is_left_out(t.row))
    }

    /// Whether the row's `use` cell says `no`.
    pub fn is_left_out(&self, row: usize) -> bool {
        self.left_out.binary_search(&row).is_ok()
    }

    /// Rows that have a test or a finding, in order (rows left wholly blank are not tests).
    pub fn rows(&self) -> Vec<usize> {
        let mut rows: Vec<usize> = self
            .tests
            .iter()
            .map(|t| t.row)
            .chain(self.findings.iter().map(|f| f.row))
            .collect();
        rows.sort_unstable();
        rows.dedup();
        rows
    }

    /// The test read from a row, if the row gave one.
    pub fn test_for_row(&self, row: usize) -> Option<&FlowTest> {
        let i = self.tests.partition_point(|t| t.row < row);
        self.tests.get(i).filter(|t| t.row == row)
    }
}

/// Reads every row, then screens the tests (see [`screen`]). `network` is used only for node ids and
/// condition names; `None` runs the sheet-only rules.
pub fn screen_sheet(sheet: &FieldSheet, network: Option<&Network>) -> SheetReading {
    let mut reading = read_tests(sheet);
    reading.findings.extend(screen(&reading.tests, network));
    // Stable: a row's reading findings stay ahead of its screening findings.
    reading.findings.sort_by_key(|f| f.row);
    reading
}

/// Reads every row of the sheet into a test or findings. Rows whose cells are all blank are skipped.
/// A test id used by an earlier row is found whatever else is wrong with either row.
pub fn read_tests(sheet: &FieldSheet) -> SheetReading {
    let mut tests = Vec::new();
    let mut findings = Vec::new();
    let mut left_out = Vec::new();
    let mut first_line_of_id: HashMap<String, usize> = HashMap::new();
    for row in 0..sheet.row_count() {
        let test_id = sheet.cell(row, SheetColumn::Test).unwrap_or("").trim();
        let line = sheet.line(row).unwrap_or_default();
        match use_cell(sheet.cell(row, SheetColumn::Use).unwrap_or("")) {
            Some(true) => {}
            Some(false) => left_out.push(row),
            None => findings.push(Finding::new(
                Rule::UseNotYesNo,
                test_id,
                row,
                line,
                sheet.column_name(SheetColumn::Use),
                format!(
                    "use {:?} is neither yes nor no; write yes (or leave blank) to fit the test, no \
                     to leave it out",
                    sheet.cell(row, SheetColumn::Use).unwrap_or("").trim()
                ),
            )),
        }
        if !test_id.is_empty() {
            match first_line_of_id.get(test_id) {
                Some(&first_line) => findings.push(Finding::new(
                    Rule::DuplicateTestId,
                    test_id,
                    row,
                    line,
                    sheet.column_name(SheetColumn::Test),
                    format!(
                        "test id {test_id} is also used on line {first_line}; give every test its \
                         own id"
                    ),
                )),
                None => {
                    first_line_of_id.insert(test_id.to_string(), line);
                }
            }
        }
        let mut reader = RowReader {
            sheet,
            row,
            line: sheet.line(row).unwrap_or_default(),
            test_id: sheet.cell(row, SheetColumn::Test).unwrap_or("").trim(),
            findings: &mut findings,
            errors: 0,
        };
        if let Some(test) = reader.read() {
            tests.push(test);
        }
    }
    SheetReading {
        units: sheet.units(),
        tests,
        findings,
        left_out,
    }
}

/// The `use` cell: blank or `yes` keeps the test in, `no` leaves it out (letter case and surrounding
/// spaces ignored); anything else is `None`.
pub fn use_cell(text: &str) -> Option<bool> {
    match text.trim().to_ascii_lowercase().as_str() {
        "" | "yes" => Some(true),
        "no" => Some(false),
        _ => None,
    }
}

struct RowReader<'a> {
    sheet: &'a FieldSheet,
    row: usize,
    line: usize,
    test_id: &'a str,
    findings: &'a mut Vec<Finding>,
    errors: usize,
}

/// A list cell: blank, or one entry per `;`, each blank or a number.
type NumberList = Option<Vec<Option<f64>>>;

impl RowReader<'_> {
    fn push(&mut self, rule: Rule, column: &str, reason: String) {
        if rule.severity() == Severity::Error {
            self.errors += 1;
        }
        self.findings.push(Finding::new(
            rule,
            self.test_id,
            self.row,
            self.line,
            column,
            reason,
        ));
    }

    fn text(&self, column: SheetColumn) -> &str {
        self.sheet.cell(self.row, column).unwrap_or("").trim()
    }

    fn name(&self, column: SheetColumn) -> String {
        self.sheet.column_name(column).to_string()
    }

    fn read(&mut self) -> Option<FlowTest> {
        let cells = self.sheet.row_cells(self.row)?;
        if cells.iter().all(|c| c.trim().is_empty()) {
            return None;
        }
        self.check_width(cells.len());
        let units = self.sheet.units();
        if self.test_id.is_empty() {
            let column = self.name(SheetColumn::Test);
            self.push(
                Rule::EmptyTestId,
                &column,
                "the test id is blank; give every test an id".into(),
            );
        }
        let residual_node = self.text(SheetColumn::ResidualNode).to_string();
        if residual_node.is_empty() {
            let column = self.name(SheetColumn::ResidualNode);
            self.push(
                Rule::EmptyResidualNode,
                &column,
                "the residual node is blank; name the hydrant where the gauge was read".into(),
            );
        }
        let static_p = self.pressure(SheetColumn::Static, "static");
        let residual_p = self.pressure(SheetColumn::Residual, "residual");
        let flowing = self.flowing_hydrants(units);
        let condition =
            Some(self.text(SheetColumn::Condition).to_string()).filter(|c| !c.is_empty());
        if self.errors > 0 {
            return None;
        }
        Some(FlowTest {
            test_id: self.test_id.to_string(),
            row: self.row,
            line: self.line,
            units,
            residual_node,
            flowing: flowing?,
            static_head_m: units.pressure_to_head_m(static_p?),
            residual_head_m: units.pressure_to_head_m(residual_p?),
            condition,
            date: self.text(SheetColumn::Date).to_string(),
            time: self.text(SheetColumn::Time).to_string(),
            note: self.text(SheetColumn::Note).to_string(),
        })
    }

    fn check_width(&mut self, cells: usize) {
        let header = self.sheet.headers().len();
        if cells > header {
            self.push(
                Rule::TooManyCells,
                &format!("field {}", header + 1),
                format!(
                    "the row has {cells} cells but the header has {header}: the extra cells have no \
                     column (a comma in an unquoted note?)"
                ),
            );
        } else if cells < header {
            let column = self
                .sheet
                .headers()
                .get(cells)
                .filter(|name| !name.trim().is_empty())
                .cloned()
                // A blank header cell still needs a name a person can find.
                .unwrap_or_else(|| format!("field {}", cells + 1));
            self.push(
                Rule::TooFewCells,
                &column,
                format!(
                    "the row has {cells} cells but the header has {header}: the missing cells are read \
                     as blank"
                ),
            );
        }
    }

    /// A single number; `None` (with a finding) when not a finite number, negative or above
    /// [`MAX_READING`].
    fn number(&mut self, column: SheetColumn, text: &str, what: &str) -> Option<f64> {
        let name = self.name(column);
        // A sheet separated by `;` or tabs comes from a locale whose decimal mark may be a comma
        // (`65,5`); a comma cannot be a field separator there, so it can only be that mark.
        let decimal_comma = self.sheet.delimiter() != b',' && !text.contains('.');
        let parsed = if decimal_comma {
            text.replacen(',', ".", 1).parse::<f64>()
        } else {
            text.parse::<f64>()
        };
        match parsed {
            Ok(value) if value.is_finite() && value < 0.0 => {
                self.push(
                    Rule::Negative,
                    &name,
                    format!("{what} {text} is negative; readings here are never below zero"),
                );
                None
            }
            // 1e300 psi is a finite f64 but turns infinite in SI: no gauge or meter reads a billion.
            Ok(value) if value.is_finite() && value > MAX_READING => {
                self.push(
                    Rule::NotNumber,
                    &name,
                    format!("{what} {text} is too large to be a reading"),
                );
                None
            }
            Ok(value) if value.is_finite() => Some(value),
            _ => {
                self.push(
                    Rule::NotNumber,
                    &name,
                    format!("{what} {text:?} is not a number"),
                );
                None
            }
        }
    }

    fn pressure(&mut self, column: SheetColumn, what: &str) -> Option<f64> {
        let text = self.text(column).to_string();
        if text.is_empty() {
            let name = self.name(column);
            self.push(
                Rule::MissingPressure,
                &name,
                format!("the {what} pressure is blank"),
            );
            return None;
        }
        self.number(column, &text, &format!("{what} pressure"))
    }

    /// A `;`-separated list of numbers (blank entries allowed), or `None` for a blank cell.
    fn number_list(&mut self, column: SheetColumn, what: &str) -> NumberList {
        let text = self.text(column).to_string();
        if text.is_empty() {
            return None;
        }
        let mut values = Vec::new();
        for item in text.split(';').map(str::trim) {
            if item.is_empty() {
                values.push(None);
            } else {
                values.push(self.number(column, item, what));
            }
        }
        Some(values)
    }

    /// Checks a list length against the number of flowing hydrants; `single_applies_to_all` allows one
    /// value for every hydrant (outlet size, coefficient).
    fn check_length(
        &mut self,
        list: &NumberList,
        column: SheetColumn,
        hydrants: usize,
        single_applies_to_all: bool,
    ) -> bool {
        let Some(list) = list else { return true };
        if list.len() == hydrants || (single_applies_to_all && list.len() == 1) {
            return true;
        }
        let name = self.name(column);
        let flow_node = self.name(SheetColumn::FlowNode);
        let also = if single_applies_to_all {
            " (or one value for all)"
        } else {
            ""
        };
        self.push(
            Rule::ListLengths,
            &name,
            format!(
                "{flow_node} lists {hydrants} hydrants but {name} lists {} values; give one per \
                 hydrant{also}, separated by ;",
                list.len()
            ),
        );
        false
    }

    fn flowing_hydrants(&mut self, units: UnitSystem) -> Option<Vec<FlowingHydrant>> {
        let flow_node = self.name(SheetColumn::FlowNode);
        let nodes: Vec<String> = self
            .text(SheetColumn::FlowNode)
            .split(';')
            .map(|n| n.trim().to_string())
            .collect();
        if nodes.iter().all(String::is_empty) {
            self.push(
                Rule::EmptyFlowNode,
                &flow_node,
                "no flowing hydrant is named; list the hydrants opened, separated by ;".into(),
            );
            return None;
        }
        if let Some(blank) = nodes.iter().position(String::is_empty) {
            self.push(
                Rule::EmptyFlowNode,
                &flow_node,
                format!("entry {} of {flow_node} is blank", blank + 1),
            );
            return None;
        }
        let errors_before_lists = self.errors;
        let flows = self.number_list(SheetColumn::Flow, "flow");
        let pitots = self.number_list(SheetColumn::Pitot, "pitot pressure");
        let outlets = self.number_list(SheetColumn::Outlet, "outlet diameter");
        let coefficients = self.number_list(SheetColumn::Coefficient, "coefficient");
        // A value that is not a number already has its finding; do not report it missing as well.
        let lists_read = self.errors == errors_before_lists;
        let n = nodes.len();
        let lengths_ok = [
            self.check_length(&flows, SheetColumn::Flow, n, false),
            self.check_length(&pitots, SheetColumn::Pitot, n, false),
            self.check_length(&outlets, SheetColumn::Outlet, n, true),
            self.check_length(&coefficients, SheetColumn::Coefficient, n, true),
        ];
        if lengths_ok.contains(&false) {
            return None;
        }
        let at = |list: &NumberList, i: usize| -> Option<f64> {
            let list = list.as_ref()?;
            if let [single] = list.as_slice() {
                *single
            } else {
                list.get(i).copied().flatten()
            }
        };
        let mut hydrants = Vec::with_capacity(n);
        for (i, node) in nodes.into_iter().enumerate() {
            let flow = at(&flows, i);
            let pitot = at(&pitots, i);
            let outlet = at(&outlets, i);
            let given_coefficient = at(&coefficients, i);
            let coefficient = given_coefficient.unwrap_or(DEFAULT_OUTLET_COEFFICIENT);
            for (value, column, what) in [
                (flow, SheetColumn::Flow, "flow"),
                (pitot, SheetColumn::Pitot, "pitot pressure"),
                (outlet, SheetColumn::Outlet, "outlet diameter"),
                (given_coefficient, SheetColumn::Coefficient, "coefficient"),
            ] {
                if value == Some(0.0) {
                    let name = self.name(column);
                    self.push(
                        Rule::Zero,
                        &name,
                        format!("{what} of hydrant {node} is zero; a flowing hydrant must flow"),
                    );
                }
            }
            if given_coefficient.is_some_and(|c| c > 1.0) {
                let name = self.name(SheetColumn::Coefficient);
                self.push(
                    Rule::CoefficientAboveOne,
                    &name,
                    format!(
                        "coefficient {} of hydrant {node} is above 1; outlet coefficients are 0.70 to \
                         0.90",
                        number(coefficient)
                    ),
                );
            }
            let (flow, computed) = match (flow, pitot, outlet) {
                (Some(flow), _, _) => (flow, false),
                (None, Some(pitot), Some(outlet)) => {
                    (pitot_flow(units, coefficient, outlet, pitot), true)
                }
                _ if !lists_read => continue,
                _ => {
                    let name = self.name(SheetColumn::Flow);
                    let reason = format!(
                        "no flow for hydrant {node}: give {name}, or {} and {}",
                        self.name(SheetColumn::Pitot),
                        self.name(SheetColumn::Outlet)
                    );
                    self.push(Rule::NoFlow, &name, reason);
                    continue;
                }
            };
            hydrants.push(FlowingHydrant {
                node,
                flow_m3s: units.flow_to_m3s(flow),
                pitot_head_m: pitot.map(|p| units.pressure_to_head_m(p)),
                outlet_diameter_m: outlet.map(|d| units.diameter_to_m(d)),
                coefficient,
                coefficient_defaulted: given_coefficient.is_none(),
                computed,
            });
        }
        (hydrants.len() == n).then_some(hydrants)
    }
}
