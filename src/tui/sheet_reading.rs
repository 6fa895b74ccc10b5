//! The sheet as the workbench shows it: each row's findings and flow, from the field-test screening of
//! [`crate::fieldtest`], screened as [`crate::calibrate::Job`] screens the sheet a fit starts from.

use crate::fieldtest::{
    FieldSheet, Finding, Severity, SheetReading, StaticHeads, screen_sheet, with_static_findings,
};
use crate::network::Network;

/// One row as read and screened.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct RowReading {
    pub findings: Vec<Finding>,
    /// Total flow of the flowing hydrants in the sheet's flow unit (gpm or L/s), when the row reads.
    pub total_flow: Option<f64>,
    /// Some hydrant's flow was computed from its pitot reading and outlet.
    pub flow_from_pitot: bool,
    /// The row gives a test with no error finding.
    pub usable: bool,
    /// Every cell is empty: not a test yet.
    pub blank: bool,
    /// The residual hydrant of the row's test, when the row reads.
    pub residual_node: Option<String>,
}

impl RowReading {
    /// The worst severity of the row's findings.
    pub fn worst(&self) -> Option<Severity> {
        let mut worst = None;
        for finding in &self.findings {
            match finding.severity {
                Severity::Error => return Some(Severity::Error),
                Severity::Warning => worst = Some(Severity::Warning),
            }
        }
        worst
    }

    /// The finding to show in the status line: the first error, else the first warning.
    pub fn main_finding(&self) -> Option<&Finding> {
        self.findings
            .iter()
            .find(|f| f.severity == Severity::Error)
            .or_else(|| self.findings.first())
    }

    /// The worst severity of the findings about one column (header name as written).
    pub fn column_severity(&self, column: &str) -> Option<Severity> {
        let mut worst = None;
        for finding in self.findings.iter().filter(|f| f.column == column) {
            match finding.severity {
                Severity::Error => return Some(Severity::Error),
                Severity::Warning => worst = Some(Severity::Warning),
            }
        }
        worst
    }
}

fn row_reading(
    sheet: &FieldSheet,
    reading: &SheetReading,
    row: usize,
    as_row: usize,
) -> RowReading {
    let test = reading.test_for_row(row);
    let findings: Vec<Finding> = reading
        .findings_for_row(row)
        .cloned()
        .map(|mut f| {
            f.row = as_row;
            f
        })
        .collect();
    RowReading {
        usable: test.is_some() && !findings.iter().any(|f| f.severity == Severity::Error),
        total_flow: test.map(|t| t.total_flow()),
        flow_from_pitot: test.is_some_and(|t| t.flowing.iter().any(|h| h.computed)),
        residual_node: test.map(|t| t.residual_node.clone()),
        blank: sheet
            .row_cells(row)
            .is_some_and(|cells| cells.iter().all(|c| c.trim().is_empty())),
        findings,
    }
}

/// The sheet screened against `net`, with the modelled-static check from `heads`: the same findings
/// `roughcal tests` gives.
fn screened(sheet: &FieldSheet, net: &Network, heads: &StaticHeads) -> SheetReading {
    with_static_findings(net, screen_sheet(sheet, Some(net)), heads)
}

/// Every row of `sheet` read and screened against `net`.
pub fn read_sheet(sheet: &FieldSheet, net: &Network, heads: &StaticHeads) -> Vec<RowReading> {
    let reading = screened(sheet, net, heads);
    (0..sheet.row_count())
        .map(|row| row_reading(sheet, &reading, row, row))
        .collect()
}

/// A sheet with `sheet`'s header and no rows, for [`preview_row`].
pub fn header_only(sheet: &FieldSheet) -> FieldSheet {
    let mut empty = sheet.clone();
    while empty.row_count() > 0 {
        let _ = empty.delete_row(empty.row_count() - 1);
    }
    empty
}

/// Row `row` of `sheet` as it would read with `text` in header column `column`: the screen while a
/// cell is being typed. Rules across rows (a repeated test id) are left to the full reading.
pub fn preview_row(
    header: &FieldSheet,
    sheet: &FieldSheet,
    net: &Network,
    heads: &StaticHeads,
    row: usize,
    column: usize,
    text: &str,
) -> RowReading {
    let mut cells: Vec<String> = sheet
        .row_cells(row)
        .unwrap_or_default()
        .into_iter()
        .map(str::to_string)
        .collect();
    while cells.len() <= column {
        cells.push(String::new());
    }
    cells[column] = text.to_string();
    let mut single = header.clone();
    if single.insert_row_cells(0, cells).is_err() {
        return RowReading::default();
    }
    let reading = screened(&single, net, heads);
    row_reading(&single, &reading, 0, row)
}
