//! Screening of flow tests: every problem of a row or a test is a [`Finding`] with a severity, the test,
//! its row and line, the column and a reason in plain words. An error leaves the test out of
//! calibration; a warning keeps it, flagged.

use std::collections::HashSet;

use super::pitot::pitot_pressure_for_flow;
use super::reading::FlowTest;
use super::sheet::SheetColumn;
use crate::network::{Network, UnitSystem};

/// Error: the test is left out of calibration. Warning: kept, flagged for review.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Severity {
    Error,
    Warning,
}

impl Severity {
    /// `error` or `warning`, as in `--json`.
    pub fn key(self) -> &'static str {
        match self {
            Self::Error => "error",
            Self::Warning => "warning",
        }
    }
}

/// Which screening rule a finding comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Rule {
    /// More cells than the header (error).
    TooManyCells,
    /// Fewer cells than the header; the missing ones read as blank (warning).
    TooFewCells,
    EmptyTestId,
    EmptyResidualNode,
    EmptyFlowNode,
    /// Static or residual pressure left blank.
    MissingPressure,
    NotNumber,
    Negative,
    /// A flow, pitot reading, outlet or coefficient of zero.
    Zero,
    /// A discharge coefficient above 1.
    CoefficientAboveOne,
    /// A list in flow, pitot, outlet or coefficient of another length than flow_node.
    ListLengths,
    /// A flowing hydrant with neither a flow nor a pitot reading and an outlet.
    NoFlow,
    /// The same hydrant twice in flow_node.
    RepeatedFlowingHydrant,
    ResidualNotBelowStatic,
    FlowingIsResidual,
    UnknownNode,
    /// A node of the network that is a reservoir or tank, not a junction.
    NotAJunction,
    UnknownCondition,
    /// Static minus residual under 10 psi / 70 kPa (warning).
    SmallDrop,
    /// Modelled static misses the measured one by more than 10 psi / 70 kPa (warning).
    StaticMismatch,
    /// A pitot reading above the static pressure (error: no outlet shows more than the main held, so
    /// the flow computed from it is wrong).
    PitotAboveStatic,
    /// A flow whose velocity pressure at the outlet would exceed the static pressure (warning: the
    /// flow may be metered right and the outlet size wrong).
    ImplausibleFlow,
    /// A test id used by an earlier row (warning).
    DuplicateTestId,
    /// A `use` cell that is neither `yes`, `no` nor blank (error: whether the crew meant the test in
    /// or out cannot be guessed).
    UseNotYesNo,
}

impl Rule {
    /// Severity of every finding of this rule.
    pub fn severity(self) -> Severity {
        match self {
            Self::TooFewCells
            | Self::SmallDrop
            | Self::StaticMismatch
            | Self::ImplausibleFlow
            | Self::DuplicateTestId => Severity::Warning,
            _ => Severity::Error,
        }
    }

    /// A stable kebab-case name of the rule, as in `--json` (`rule` key).
    pub fn key(self) -> &'static str {
        match self {
            Self::TooManyCells => "too-many-cells",
            Self::TooFewCells => "too-few-cells",
            Self::EmptyTestId => "empty-test-id",
            Self::EmptyResidualNode => "empty-residual-node",
            Self::EmptyFlowNode => "empty-flow-node",
            Self::MissingPressure => "missing-pressure",
            Self::NotNumber => "not-a-number",
            Self::Negative => "negative",
            Self::Zero => "zero",
            Self::CoefficientAboveOne => "coefficient-above-one",
            Self::ListLengths => "list-lengths",
            Self::NoFlow => "no-flow",
            Self::RepeatedFlowingHydrant => "repeated-flowing-hydrant",
            Self::ResidualNotBelowStatic => "residual-not-below-static",
            Self::FlowingIsResidual => "flowing-is-residual",
            Self::UnknownNode => "unknown-node",
            Self::NotAJunction => "not-a-junction",
            Self::UnknownCondition => "unknown-condition",
            Self::SmallDrop => "small-drop",
            Self::StaticMismatch => "static-mismatch",
            Self::PitotAboveStatic => "pitot-above-static",
            Self::ImplausibleFlow => "implausible-flow",
            Self::DuplicateTestId => "duplicate-test-id",
            Self::UseNotYesNo => "use-not-yes-no",
        }
    }
}

/// One problem of one row of the sheet.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    pub severity: Severity,
    pub rule: Rule,
    /// The test id as written (trimmed; may be empty).
    pub test_id: String,
    /// 0-based data row of the sheet.
    pub row: usize,
    /// 1-based line of the file.
    pub line: usize,
    /// Header name of the column, as written in the sheet (`field N` for a cell past the header).
    pub column: String,
    /// What is wrong, in plain words.
    pub reason: String,
}

impl Finding {
    /// A finding of `rule` with that rule's severity.
    pub fn new(
        rule: Rule,
        test_id: &str,
        row: usize,
        line: usize,
        column: &str,
        reason: String,
    ) -> Finding {
        Finding {
            severity: rule.severity(),
            rule,
            test_id: test_id.to_string(),
            row,
            line,
            column: column.to_string(),
            reason,
        }
    }

    fn for_test(test: &FlowTest, rule: Rule, column: SheetColumn, reason: String) -> Finding {
        Finding::new(
            rule,
            &test.test_id,
            test.row,
            test.line,
            column.header_name(test.units),
            reason,
        )
    }
}

/// Smallest pressure drop (static minus residual) that says much about roughness: 10 psi on a us
/// sheet, 70 kPa on an si one (common practice, no source: the drop should stand well above gauge
/// error, about 1 psi, and the drop across the pipes is what roughness moves).
pub fn min_drop(units: UnitSystem) -> f64 {
    match units {
        UnitSystem::Us => 10.0,
        UnitSystem::Si => 70.0,
    }
}

/// Largest miss of the modelled static pressure before it points at elevations or boundary heads
/// rather than roughness: 10 psi / 70 kPa (common practice, no source: with no hydrant open little
/// water moves, so roughness hardly changes the static pressure).
pub fn max_static_miss(units: UnitSystem) -> f64 {
    min_drop(units)
}

/// Formats a value in sheet units for a reason: up to two decimals, trailing zeros dropped.
pub(crate) fn number(value: f64) -> String {
    let text = format!("{value:.2}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

/// The sheet-only and network rules on typed tests. With `network` absent (the `fireflow` command)
/// node ids and condition names are not checked. The static-pressure rule needs a solved model: see
/// [`check_modelled_static`].
pub fn screen(tests: &[FlowTest], network: Option<&Network>) -> Vec<Finding> {
    let mut findings = Vec::new();
    let lookup = network.map(NodeLookup::new);
    for test in tests {
        screen_pressures(test, &mut findings);
        screen_hydrants(test, &mut findings);
        if let (Some(network), Some(lookup)) = (network, &lookup) {
            screen_against_network(test, network, lookup, &mut findings);
        }
    }
    findings
}

fn screen_pressures(test: &FlowTest, findings: &mut Vec<Finding>) {
    let units = test.units;
    let unit = units.pressure_label();
    let (static_p, residual_p) = (test.static_pressure(), test.residual_pressure());
    if test.residual_head_m >= test.static_head_m {
        findings.push(Finding::for_test(
            test,
            Rule::ResidualNotBelowStatic,
            SheetColumn::Residual,
            format!(
                "residual {} {unit} is not below static {} {unit}: opening a hydrant must lower the \
                 pressure; check the readings and their order",
                number(residual_p),
                number(static_p)
            ),
        ));
    } else if static_p - residual_p < min_drop(units) {
        findings.push(Finding::for_test(
            test,
            Rule::SmallDrop,
            SheetColumn::Residual,
            format!(
                "pressure drop {} {unit} is under {} {unit}: too close to gauge error to say much \
                 about roughness; flow more hydrants",
                number(static_p - residual_p),
                number(min_drop(units))
            ),
        ));
    }
}

fn screen_hydrants(test: &FlowTest, findings: &mut Vec<Finding>) {
    let units = test.units;
    let static_p = test.static_pressure();
    let mut seen = HashSet::new();
    for hydrant in &test.flowing {
        if hydrant.node == test.residual_node {
            findings.push(Finding::for_test(
                test,
                Rule::FlowingIsResidual,
                SheetColumn::FlowNode,
                format!(
                    "flowing hydrant {} is also the residual hydrant: read the residual on a hydrant \
                     that is not flowing",
                    hydrant.node
                ),
            ));
        }
        if !seen.insert(hydrant.node.as_str()) {
            findings.push(Finding::for_test(
                test,
                Rule::RepeatedFlowingHydrant,
                SheetColumn::FlowNode,
                format!(
                    "hydrant {} is listed twice in flow_node; list each flowing hydrant once with \
                     its own flow",
                    hydrant.node
                ),
            ));
        }
        // An open outlet cannot turn more pressure into velocity than the main held before it opened.
        let unit = units.pressure_label();
        if let Some(pitot) = hydrant.pitot_pressure(units) {
            if pitot > static_p {
                findings.push(Finding::for_test(
                    test,
                    Rule::PitotAboveStatic,
                    SheetColumn::Pitot,
                    format!(
                        "pitot reading {} {unit} at hydrant {} is above the static {} {unit}: an \
                         outlet cannot show more than the main held; check the reading and the units",
                        number(pitot),
                        hydrant.node,
                        number(static_p)
                    ),
                ));
            }
        } else if let Some(outlet) = hydrant.outlet(units) {
            let flow = hydrant.flow(units);
            let needed = pitot_pressure_for_flow(units, hydrant.coefficient, outlet, flow);
            if needed > static_p {
                findings.push(Finding::for_test(
                    test,
                    Rule::ImplausibleFlow,
                    SheetColumn::Flow,
                    format!(
                        "{} {} through a {} {} outlet at hydrant {} needs a pitot pressure of {} \
                         {unit}, above the static {} {unit}: check the flow, the outlet size and the \
                         units",
                        number(flow),
                        units.flow_label(),
                        number(outlet),
                        units.diameter_label(),
                        hydrant.node,
                        number(needed),
                        number(static_p)
                    ),
                ));
            }
        }
    }
}

/// Junction and fixed-head ids of a network, hashed once for many tests.
struct NodeLookup<'a> {
    junctions: HashSet<&'a str>,
    fixed_heads: HashSet<&'a str>,
}

impl<'a> NodeLookup<'a> {
    fn new(network: &'a Network) -> Self {
        NodeLookup {
            junctions: network.junctions.iter().map(|j| j.id.as_str()).collect(),
            fixed_heads: network.fixed_heads.iter().map(|f| f.id.as_str()).collect(),
        }
    }
}

fn screen_against_network(
    test: &FlowTest,
    network: &Network,
    lookup: &NodeLookup,
    findings: &mut Vec<Finding>,
) {
    let nodes = std::iter::once((test.residual_node.as_str(), SheetColumn::ResidualNode)).chain(
        test.flowing
            .iter()
            .map(|h| (h.node.as_str(), SheetColumn::FlowNode)),
    );
    for (node, column) in nodes {
        if lookup.junctions.contains(node) {
            continue;
        }
        let (rule, reason) = if lookup.fixed_heads.contains(node) {
            (
                Rule::NotAJunction,
                format!(
                    "{node} is a reservoir or tank of the network, not a junction: a hydrant must be a junction"
                ),
            )
        } else {
            let closest = closest_ids(node, network.junctions.iter().map(|j| j.id.as_str()), 3);
            let hint = if closest.is_empty() {
                String::new()
            } else {
                format!(" (closest: {})", closest.join(", "))
            };
            (
                Rule::UnknownNode,
                format!("node {node} is not in the network{hint}"),
            )
        };
        findings.push(Finding::for_test(test, rule, column, reason));
    }
    if let Some(condition) = &test.condition
        && network.find_condition(condition).is_none()
    {
        let names: Vec<&str> = network.conditions.iter().map(|c| c.name.as_str()).collect();
        let known = if names.is_empty() {
            "the network has none".to_string()
        } else {
            format!("the network has {}", names.join(", "))
        };
        findings.push(Finding::for_test(
            test,
            Rule::UnknownCondition,
            SheetColumn::Condition,
            format!("condition {condition} is not a [[condition]] of the network ({known})"),
        ));
    }
}

/// Compares the modelled static pressure of a test (the model solved under the test's condition with
/// no hydrant open) with the measured one; a miss over [`max_static_miss`] is a warning. To be called
/// by whoever solves the model.
pub fn check_modelled_static(test: &FlowTest, modelled_static_head_m: f64) -> Option<Finding> {
    let units = test.units;
    let modelled = units.pressure_from_head_m(modelled_static_head_m);
    let measured = test.static_pressure();
    let miss = modelled - measured;
    if miss.abs() <= max_static_miss(units) || !miss.is_finite() {
        return None;
    }
    let unit = units.pressure_label();
    Some(Finding::for_test(
        test,
        Rule::StaticMismatch,
        SheetColumn::Static,
        format!(
            "modelled static {} {unit} misses the measured {} {unit} by {} {unit} (more than {}): \
             suspect the elevations or the boundary heads, not roughness",
            number(modelled),
            number(measured),
            number(miss.abs()),
            number(max_static_miss(units))
        ),
    ))
}

/// Edit distance (Levenshtein, by characters, ignoring letter case) between two ids: the network's
/// [`crate::network::suggest::edit_distance`] on lowercased text.
pub fn edit_distance(a: &str, b: &str) -> usize {
    crate::network::suggest::edit_distance(&a.to_lowercase(), &b.to_lowercase())
}

/// Up to `count` ids closest to `id` by [`edit_distance`], nearest first (ties by id).
pub fn closest_ids<'a>(id: &str, ids: impl Iterator<Item = &'a str>, count: usize) -> Vec<&'a str> {
    let mut ranked: Vec<(usize, &str)> =
        ids.map(|other| (edit_distance(id, other), other)).collect();
    ranked.sort_unstable();
    ranked
        .into_iter()
        .take(count)
        .map(|(_, other)| other)
        .collect()
}
