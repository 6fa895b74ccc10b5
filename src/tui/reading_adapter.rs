//! LOCAL ADAPTER, to be replaced by the field-test interpretation of `crate::fieldtest` when it lands
//! on main: reads one sheet row into a typed test with screening findings and the pitot flow.
//!
//! It is deliberately small (the checks a screen needs to be useful while typing). Everything else in
//! the workbench calls it only through [`read_row`] and [`calibration_tests`], so swapping in the real
//! interpretation touches this file alone.

use crate::calibrate::CalibrationTest;
use crate::fieldtest::{FieldSheet, SheetColumn};
use crate::network::{Network, UnitSystem};

/// How much a finding matters.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    /// The test is used, but looks doubtful.
    Warning,
    /// The test cannot be used as written.
    Error,
}

/// One screening finding on a row.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    pub severity: Severity,
    pub column: Option<SheetColumn>,
    /// Plain words, for the status line.
    pub reason: String,
}

/// A row as read: its findings, the flow it implies and, when usable, the test.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RowReading {
    pub findings: Vec<Finding>,
    /// Total flow of the flowing hydrants, in the sheet's flow unit (gpm or L/s), as given or computed
    /// from the pitot readings.
    pub total_flow: Option<f64>,
    /// Whether the flow was computed from pitot readings rather than written.
    pub flow_from_pitot: bool,
    /// The test, when no finding is an error.
    pub test: Option<CalibrationTest>,
    /// Every cell is empty: not a test yet (no findings either).
    pub blank: bool,
}

impl RowReading {
    /// The worst severity of the row's findings.
    pub fn worst(&self) -> Option<Severity> {
        self.findings.iter().map(|f| f.severity).max()
    }

    /// The worst finding of the row, for the status line.
    pub fn main_finding(&self) -> Option<&Finding> {
        self.findings.iter().max_by_key(|f| f.severity)
    }
}

/// Discharge coefficient of a smooth, well-rounded outlet when the sheet gives none (NFPA 291, from
/// memory: 0.90 for a smooth well-rounded outlet).
const DEFAULT_OUTLET_COEFFICIENT: f64 = 0.9;
/// Standard gravity (ISO 80000-3).
const G_M_S2: f64 = 9.80665;

/// Flow through an outlet from its pitot reading: Q = c (pi/4) d^2 sqrt(2 g h), h the pitot pressure
/// as a water column. In US units this is the familiar Q = 29.83 c d^2 sqrt(p) (NFPA 291).
fn pitot_flow_m3s(units: UnitSystem, pitot: f64, outlet: f64, coefficient: f64) -> f64 {
    let head_m = units.pressure_to_head_m(pitot);
    let diameter_m = units.diameter_to_m(outlet);
    coefficient * std::f64::consts::FRAC_PI_4 * diameter_m * diameter_m * (2.0 * G_M_S2 * head_m).sqrt()
}

fn split_list(text: &str) -> Vec<&str> {
    text.split(';').map(str::trim).collect()
}

/// Reads row `row` of `sheet`, with `override_cell` (header index, text) standing in for one cell: the
/// editor's buffer while a cell is being typed.
pub fn read_row(
    sheet: &FieldSheet,
    net: &Network,
    row: usize,
    override_cell: Option<(usize, &str)>,
) -> RowReading {
    let units = sheet.units();
    let text = |column: SheetColumn| -> &str {
        let Some(index) = sheet.column_index(column) else {
            return "";
        };
        match override_cell {
            Some((i, value)) if i == index => value.trim(),
            _ => sheet.cell_at(row, index).unwrap_or("").trim(),
        }
    };
    let mut reading = RowReading::default();
    let all_blank = SheetColumn::ALL.iter().all(|&c| text(c).is_empty());
    if all_blank {
        reading.blank = true;
        return reading;
    }
    let mut error = |column: SheetColumn, reason: String| Finding {
        severity: Severity::Error,
        column: Some(column),
        reason: format!("{}: {reason}", sheet.column_name(column)),
    };
    let mut findings = Vec::new();
    if text(SheetColumn::Test).is_empty() {
        findings.push(error(SheetColumn::Test, "no test id".into()));
    }
    let residual_junction = match text(SheetColumn::ResidualNode) {
        "" => {
            findings.push(error(SheetColumn::ResidualNode, "no residual hydrant".into()));
            None
        }
        id => match net.find_junction(id) {
            Some(j) => Some(j),
            None => {
                findings.push(error(
                    SheetColumn::ResidualNode,
                    format!("`{id}` is not a junction of the network"),
                ));
                None
            }
        },
    };
    let mut flow_junctions = Vec::new();
    match text(SheetColumn::FlowNode) {
        "" => findings.push(error(SheetColumn::FlowNode, "no flowing hydrant".into())),
        ids => {
            for id in split_list(ids) {
                match net.find_junction(id) {
                    Some(j) => flow_junctions.push(j),
                    None => findings.push(error(
                        SheetColumn::FlowNode,
                        format!("`{id}` is not a junction of the network"),
                    )),
                }
            }
        }
    }
    let mut number = |column: SheetColumn, findings: &mut Vec<Finding>| -> Option<f64> {
        let value = text(column);
        if value.is_empty() {
            findings.push(error(column, "missing".into()));
            return None;
        }
        match value.parse::<f64>() {
            Ok(v) if v.is_finite() && v >= 0.0 => Some(v),
            _ => {
                findings.push(error(column, format!("`{value}` is not a pressure")));
                None
            }
        }
    };
    let static_p = number(SheetColumn::Static, &mut findings);
    let residual_p = number(SheetColumn::Residual, &mut findings);
    if let (Some(s), Some(r)) = (static_p, residual_p) {
        if r > s {
            findings.push(error(
                SheetColumn::Residual,
                format!("residual {r} is above static {s}; swapped?"),
            ));
        } else {
            // A drop under about 10 psi says little about the mains (NFPA 291 recommends flowing
            // enough for a drop of at least 10 psi; from memory).
            let minimum_drop = match units {
                UnitSystem::Us => 10.0,
                UnitSystem::Si => 70.0,
            };
            if s - r < minimum_drop {
                findings.push(Finding {
                    severity: Severity::Warning,
                    column: Some(SheetColumn::Residual),
                    reason: format!(
                        "drop of {:.1} {} is small; the test says little about the pipes",
                        s - r,
                        units.pressure_label()
                    ),
                });
            }
        }
    }
    let hydrant_count = flow_junctions.len().max(1);
    let flows: Option<Vec<f64>> = match text(SheetColumn::Flow) {
        "" => {
            let pitots = text(SheetColumn::Pitot);
            if pitots.is_empty() {
                findings.push(error(SheetColumn::Flow, "no flow and no pitot reading".into()));
                None
            } else {
                pitot_flows(&mut findings, sheet, units, pitots, text(SheetColumn::Outlet), text(SheetColumn::Coefficient), hydrant_count)
            }
        }
        values => {
            let parsed: Option<Vec<f64>> = split_list(values)
                .into_iter()
                .map(|v| v.parse::<f64>().ok().filter(|q| q.is_finite() && *q > 0.0))
                .collect();
            match parsed {
                Some(list) if list.len() == hydrant_count => Some(list),
                Some(list) => {
                    findings.push(error(
                        SheetColumn::Flow,
                        format!("{} flows for {hydrant_count} flowing hydrants", list.len()),
                    ));
                    None
                }
                None => {
                    findings.push(error(SheetColumn::Flow, format!("`{values}` is not a flow")));
                    None
                }
            }
        }
    };
    reading.flow_from_pitot = text(SheetColumn::Flow).is_empty() && flows.is_some();
    reading.total_flow = flows.as_ref().map(|f| f.iter().sum());
    let condition = match text(SheetColumn::Condition) {
        "" => None,
        name => match net.conditions.iter().position(|c| c.name == name) {
            Some(c) => Some(c),
            None => {
                findings.push(error(
                    SheetColumn::Condition,
                    format!("no condition `{name}` in the network"),
                ));
                None
            }
        },
    };
    let usable = !findings.iter().any(|f| f.severity == Severity::Error);
    if let (true, Some(residual_junction), Some(s), Some(r), Some(flows)) =
        (usable, residual_junction, static_p, residual_p, flows)
    {
        reading.test = Some(CalibrationTest {
            id: text(SheetColumn::Test).to_string(),
            residual_junction,
            condition,
            hydrant_flows_m3s: flow_junctions
                .into_iter()
                .zip(flows.into_iter().map(|q| units.flow_to_m3s(q)))
                .collect(),
            static_head_m: units.pressure_to_head_m(s),
            residual_head_m: units.pressure_to_head_m(r),
        });
    }
    reading.findings = findings;
    reading
}

#[allow(clippy::too_many_arguments)]
fn pitot_flows(
    findings: &mut Vec<Finding>,
    sheet: &FieldSheet,
    units: UnitSystem,
    pitots: &str,
    outlets: &str,
    coefficients: &str,
    hydrants: usize,
) -> Option<Vec<f64>> {
    let error = |column: SheetColumn, reason: String| Finding {
        severity: Severity::Error,
        column: Some(column),
        reason: format!("{}: {reason}", sheet.column_name(column)),
    };
    let list = |column: SheetColumn, text: &str, findings: &mut Vec<Finding>| -> Option<Vec<f64>> {
        let values: Option<Vec<f64>> = split_list(text)
            .into_iter()
            .map(|v| v.parse::<f64>().ok().filter(|x| x.is_finite() && *x > 0.0))
            .collect();
        match values {
            Some(v) if v.len() == hydrants || v.len() == 1 => Some(v),
            Some(v) => {
                findings.push(error(column, format!("{} values for {hydrants} flowing hydrants", v.len())));
                None
            }
            None => {
                findings.push(error(column, format!("`{text}` is not a positive number")));
                None
            }
        }
    };
    let pitot = list(SheetColumn::Pitot, pitots, findings)?;
    if outlets.is_empty() {
        findings.push(error(SheetColumn::Outlet, "missing (needed with a pitot reading)".into()));
        return None;
    }
    let outlet = list(SheetColumn::Outlet, outlets, findings)?;
    let coefficient = if coefficients.is_empty() {
        vec![DEFAULT_OUTLET_COEFFICIENT]
    } else {
        list(SheetColumn::Coefficient, coefficients, findings)?
    };
    if coefficient.iter().any(|&c| c > 1.0) {
        findings.push(error(SheetColumn::Coefficient, "an outlet coefficient is at most 1".into()));
        return None;
    }
    if pitot.len() != hydrants {
        findings.push(error(SheetColumn::Pitot, format!("{} pitot readings for {hydrants} flowing hydrants", pitot.len())));
        return None;
    }
    let pick = |v: &[f64], i: usize| if v.len() == 1 { v[0] } else { v[i] };
    Some(
        (0..hydrants)
            .map(|i| {
                units.flow_from_m3s(pitot_flow_m3s(units, pitot[i], pick(&outlet, i), pick(&coefficient, i)))
            })
            .collect(),
    )
}

/// The usable tests of a sheet, from rows already read.
pub fn calibration_tests(readings: &[RowReading]) -> Vec<CalibrationTest> {
    readings.iter().filter_map(|r| r.test.clone()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pitot_flow_matches_the_us_formula() {
        // NFPA 291: Q = 29.83 c d^2 sqrt(p); 2.5 in outlet, c 0.9, 30 psi -> 29.83*0.9*6.25*sqrt(30).
        let q_m3s = pitot_flow_m3s(UnitSystem::Us, 30.0, 2.5, 0.9);
        let gpm = UnitSystem::Us.flow_from_m3s(q_m3s);
        let expected = 29.83 * 0.9 * 6.25 * 30f64.sqrt();
        assert!((gpm - expected).abs() / expected < 0.002, "{gpm} vs {expected}");
    }
}
