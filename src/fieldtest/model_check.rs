//! Every field test against the network model: modelled static and residual pressure at the gauge, the
//! errors, the drops, and the model's own flow available at the target residual; and the hand-over of
//! usable tests to calibration.
//!
//! One [`GradientSolver`] (one symbolic factorization) serves every test; each residual solve starts
//! from its static solution.

use std::collections::HashMap;

use crate::calibrate::CalibrationTest;
use crate::hydraulics::headloss::HW_FLOW_EXPONENT;
use crate::hydraulics::{GradientSolver, OperatingState, Solution, SolveError, ValveState};
use crate::network::Network;

use super::fireflow::AvailableFlow;
use super::reading::{FlowTest, SheetReading};
use super::screening::{Finding, Severity, check_modelled_static};

/// One row of the sheet next to the model (pressures in the sheet's unit, flows in the sheet's flow
/// unit). A row that does not read as a test (a bad number, a blank id, ...) is listed too, with its
/// findings and no values where its cells give none.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelComparison {
    /// The test id as written (may be empty).
    pub test_id: String,
    pub row: usize,
    /// 1-based line of the sheet.
    pub line: usize,
    /// The residual hydrant as written (may be empty).
    pub residual_node: String,
    /// Whether the row read as a test (its values are then all present).
    pub read: bool,
    pub measured_static: Option<f64>,
    pub measured_residual: Option<f64>,
    pub modelled_static: Option<f64>,
    pub modelled_residual: Option<f64>,
    pub total_flow: Option<f64>,
    /// NFPA 291 extrapolation of the field readings to the target residual.
    pub field_available: AvailableFlow,
    /// Largest total hydrant flow (split as in the test) for which the modelled residual pressure stays
    /// at or above the target; `None` when the model cannot say (gauge isolated).
    pub model_available: Option<f64>,
    /// Screening findings of the row, including the modelled-static check.
    pub findings: Vec<Finding>,
    /// The model gave a negative pressure somewhere in the residual state.
    pub negative_pressure_somewhere: bool,
    /// The gauge's junction has no open path to a fixed head in the static or the residual state, so
    /// the model has no pressure for it (a closed check valve or a pump that cannot lift cut it off).
    pub gauge_isolated_in_model: bool,
    /// Every control valve in the modelled static state (empty when the row was not modelled): a
    /// valve that changes state between static and flowing explains a drop the pipes alone do not.
    pub valves_static: Vec<ValveState>,
    /// Every control valve in the modelled residual (flowing) state.
    pub valves_residual: Vec<ValveState>,
}

impl ModelComparison {
    /// Measured minus modelled static pressure.
    pub fn static_error(&self) -> Option<f64> {
        Some(self.measured_static? - self.modelled_static?)
    }

    /// Measured minus modelled residual pressure.
    pub fn residual_error(&self) -> Option<f64> {
        Some(self.measured_residual? - self.modelled_residual?)
    }

    pub fn measured_drop(&self) -> Option<f64> {
        Some(self.measured_static? - self.measured_residual?)
    }

    pub fn modelled_drop(&self) -> Option<f64> {
        Some(self.modelled_static? - self.modelled_residual?)
    }

    /// Whether the row has an error finding (it is left out of calibration).
    pub fn has_error(&self) -> bool {
        self.findings.iter().any(|f| f.severity == Severity::Error)
    }
}

/// A test resolved against the network: junction indices and operating states.
struct ResolvedTest {
    residual_junction: usize,
    condition: Option<usize>,
    hydrants: Vec<(usize, f64)>,
}

fn resolve(net: &Network, test: &FlowTest) -> Option<ResolvedTest> {
    let residual_junction = net.find_junction(&test.residual_node)?;
    let condition = match &test.condition {
        Some(name) => Some(net.conditions.iter().position(|c| &c.name == name)?),
        None => None,
    };
    let hydrants = test
        .flowing
        .iter()
        .map(|h| Some((net.find_junction(&h.node)?, h.flow_m3s)))
        .collect::<Option<Vec<_>>>()?;
    Some(ResolvedTest {
        residual_junction,
        condition,
        hydrants,
    })
}

/// Compares every row of `reading` with the model, in sheet order. `target` is the target residual in
/// the sheet's pressure unit. Rows with a screening error are listed with their findings and no model
/// values; rows that do not read as a test at all are listed with their findings alone.
pub fn compare_with_model(
    net: &Network,
    reading: &SheetReading,
    target: f64,
) -> Result<Vec<ModelComparison>, SolveError> {
    let mut out = Vec::new();
    let tested = compare_tests(net, reading, target)?;
    let mut tested = tested.into_iter().peekable();
    for row in reading.rows() {
        if let Some(comparison) = tested.next_if(|c| c.row == row) {
            out.push(comparison);
            continue;
        }
        let findings: Vec<Finding> = reading.findings_for_row(row).cloned().collect();
        let Some(first) = findings.first() else {
            continue;
        };
        out.push(ModelComparison {
            test_id: first.test_id.clone(),
            row,
            line: first.line,
            residual_node: String::new(),
            read: false,
            measured_static: None,
            measured_residual: None,
            modelled_static: None,
            modelled_residual: None,
            total_flow: None,
            field_available: AvailableFlow::Undefined,
            model_available: None,
            findings,
            negative_pressure_somewhere: false,
            gauge_isolated_in_model: false,
            valves_static: Vec::new(),
            valves_residual: Vec::new(),
        });
    }
    Ok(out)
}

/// [`compare_with_model`] for the rows that read as tests.
fn compare_tests(
    net: &Network,
    reading: &SheetReading,
    target: f64,
) -> Result<Vec<ModelComparison>, SolveError> {
    let solver = GradientSolver::new(net)?;
    let c = net.c_factors();
    let units = reading.units;
    let target_head_m = units.pressure_to_head_m(target);
    let mut out = Vec::with_capacity(reading.tests.len());
    for test in &reading.tests {
        let mut findings: Vec<Finding> = reading.findings_for_row(test.row).cloned().collect();
        let mut comparison = ModelComparison {
            test_id: test.test_id.clone(),
            row: test.row,
            line: test.line,
            residual_node: test.residual_node.clone(),
            read: true,
            measured_static: Some(test.static_pressure()),
            measured_residual: Some(test.residual_pressure()),
            modelled_static: None,
            modelled_residual: None,
            total_flow: Some(test.total_flow()),
            field_available: test.available_flow(target),
            model_available: None,
            findings: Vec::new(),
            negative_pressure_somewhere: false,
            gauge_isolated_in_model: false,
            valves_static: Vec::new(),
            valves_residual: Vec::new(),
        };
        let resolved = if reading.row_has_error(test.row) {
            None
        } else {
            resolve(net, test)
        };
        if let Some(resolved) = resolved {
            let base = OperatingState::for_condition_index(net, resolved.condition);
            let statics = solver.solve(net, &base, &c, None)?;
            let residual_state = with_hydrants(&base, &resolved.hydrants, 1.0);
            let flowing = solver.solve(net, &residual_state, &c, Some(&statics))?;
            let j = resolved.residual_junction;
            let static_head = statics.pressure_head_m(net, j);
            let residual_head = flowing.pressure_head_m(net, j);
            comparison.modelled_static = static_head.map(|h| units.pressure_from_head_m(h));
            comparison.modelled_residual = residual_head.map(|h| units.pressure_from_head_m(h));
            comparison.negative_pressure_somewhere =
                !flowing.negative_pressure_junctions(net).is_empty();
            comparison.gauge_isolated_in_model = static_head.is_none() || residual_head.is_none();
            comparison.valves_static = statics.valve_states(net);
            comparison.valves_residual = flowing.valve_states(net);
            if let Some(h) = static_head
                && let Some(finding) = check_modelled_static(test, h)
            {
                findings.push(finding);
            }
            comparison.model_available = model_available_flow(
                &solver,
                net,
                &base,
                &c,
                (resolved.residual_junction, &resolved.hydrants),
                &statics,
                target_head_m,
            )?
            .map(|(q, _)| units.flow_from_m3s(q));
        }
        comparison.findings = findings;
        out.push(comparison);
    }
    Ok(out)
}

fn with_hydrants(base: &OperatingState, hydrants: &[(usize, f64)], scale: f64) -> OperatingState {
    let mut state = base.clone();
    for &(junction, q) in hydrants {
        state.add_demand(junction, q * scale);
    }
    state
}

/// Root search on the solver for the hydrant flow (m^3/s) that brings the gauge to the target pressure:
/// the hydrants (junction, test flow in m^3/s) keep the test's split and their total is scaled.
/// Also returns the solution at the flow found (with its factorization, for sensitivities), or `None`
/// when the flow is 0 because the static is already below the target.
///
/// The drop at the gauge grows nearly as the flow to the power 1.852 (every head loss on the way is a
/// Hazen-Williams loss), so the search is a secant on the pressure against `scale^1.852`, started
/// from the static and the test flow itself: two or three solves where bisection needs fifteen, which
/// on a city model is the difference between seconds and a minute per calibration. Should the secant
/// leave its safe ground (a pump or valve bending the curve, a solve that fails), the search falls
/// back to doubling from the test flow and bisection to 0.1 % of the flow.
pub(crate) fn model_available_flow(
    solver: &GradientSolver,
    net: &Network,
    base: &OperatingState,
    c: &[f64],
    (j, hydrants): (usize, &[(usize, f64)]),
    statics: &Solution,
    target_head_m: f64,
) -> Result<Option<(f64, Option<Solution>)>, SolveError> {
    let Some(static_head) = statics.pressure_head_m(net, j) else {
        return Ok(None);
    };
    let total: f64 = hydrants.iter().map(|h| h.1).sum();
    if static_head < target_head_m {
        return Ok(Some((0.0, None)));
    }
    if total <= 0.0 {
        return Ok(None);
    }
    let pressure_at = |scale: f64, warm: &Solution| -> Result<(f64, Solution), SolveError> {
        let solution = solver.solve(net, &with_hydrants(base, hydrants, scale), c, Some(warm))?;
        let head = solution
            .pressure_head_m(net, j)
            .unwrap_or(f64::NEG_INFINITY);
        Ok((head, solution))
    };
    if let Some((scale, solution)) =
        secant_search(&pressure_at, statics, static_head, target_head_m)
    {
        return Ok(Some((scale * total, Some(solution))));
    }
    let mut low = 0.0;
    let mut high = 1.0;
    let mut warm = statics.clone();
    let mut at_low: Option<Solution> = None;
    loop {
        let (head, solution) = pressure_at(high, &warm)?;
        if head < target_head_m {
            break;
        }
        low = high;
        high *= 2.0;
        at_low = Some(solution.clone());
        warm = solution;
        if high > 1024.0 {
            // The gauge never falls to the target within a thousand times the test flow.
            return Ok(None);
        }
    }
    while (high - low) > 1e-3 * high {
        let mid = 0.5 * (low + high);
        let (head, solution) = pressure_at(mid, &warm)?;
        if head >= target_head_m {
            low = mid;
            at_low = Some(solution.clone());
            warm = solution;
        } else {
            high = mid;
        }
    }
    Ok(Some((low * total, at_low)))
}

/// A solve at a hydrant flow scale, warm-started from a solution: the gauge's pressure head and the
/// solution.
type PressureAt<'a> = dyn Fn(f64, &Solution) -> Result<(f64, Solution), SolveError> + 'a;

/// The secant of [`model_available_flow`]: the hydrant flow scale at which the gauge pressure head
/// falls to `target_head_m` (within a millimetre), and the solution there; `None` when the secant
/// cannot be trusted (the caller then brackets and bisects).
fn secant_search(
    pressure_at: &PressureAt<'_>,
    statics: &Solution,
    static_head_m: f64,
    target_head_m: f64,
) -> Option<(f64, Solution)> {
    const MAX_SOLVES: usize = 12;
    const LARGEST_SCALE: f64 = 1024.0;
    // Points (scale^n, pressure head): the static at no flow, then each solve.
    let power = |scale: f64| scale.powf(HW_FLOW_EXPONENT);
    let mut older = (0.0, static_head_m);
    let mut scale = 1.0;
    let (head, mut solution) = pressure_at(scale, statics).ok()?;
    let mut newer = (power(scale), head);
    for _ in 0..MAX_SOLVES {
        let (u_old, h_old) = older;
        let (u_new, h_new) = newer;
        // The pressure must fall as the flow grows, or the straight line says nothing.
        if !(h_new < h_old && u_new > u_old) {
            return None;
        }
        let u_next = u_new + (target_head_m - h_new) * (u_new - u_old) / (h_new - h_old);
        let next_scale = u_next.max(0.0).powf(1.0 / HW_FLOW_EXPONENT);
        if !next_scale.is_finite() || next_scale <= 0.0 || next_scale > LARGEST_SCALE {
            return None;
        }
        let (head, next_solution) = pressure_at(next_scale, &solution).ok()?;
        older = newer;
        newer = (u_next, head);
        scale = next_scale;
        solution = next_solution;
        // Within a millimetre of water of the target: the flow is then right to about 1e-5 of itself.
        if (head - target_head_m).abs() < 1e-3 {
            return Some((scale, solution));
        }
    }
    None
}

/// A test the calibration will not use, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct ExcludedTest {
    pub test_id: String,
    pub row: usize,
    /// 1-based line of the sheet file (the row numbering every output uses).
    pub line: usize,
    pub reason: String,
    /// Left out by choice (`use = no` on the sheet) rather than screened out by an error.
    pub left_out: bool,
}

/// The modelled static pressure head at every junction, for the network as written and for each of its
/// conditions: one solve per condition with no hydrant open, enough to run the static-pressure check
/// ([`check_modelled_static`]) on any number of tests without solving per test.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct StaticHeads {
    /// Index 0: the network as written; `i + 1`: condition `i`. `None` where the solve failed (the
    /// check is then left to whoever solves that state and reports why it fails).
    by_state: Vec<Option<Vec<Option<f64>>>>,
}

impl StaticHeads {
    /// Solves `net` with no hydrant open under every condition.
    pub fn solve(net: &Network) -> StaticHeads {
        let Ok(solver) = GradientSolver::new(net) else {
            return StaticHeads::default();
        };
        let c = net.c_factors();
        let states = std::iter::once(None).chain((0..net.conditions.len()).map(Some));
        let by_state = states
            .map(|condition| {
                let state = OperatingState::for_condition_index(net, condition);
                let solution = solver.solve(net, &state, &c, None).ok()?;
                Some(
                    (0..net.junctions.len())
                        .map(|j| solution.pressure_head_m(net, j))
                        .collect(),
                )
            })
            .collect();
        StaticHeads { by_state }
    }

    /// Modelled static pressure head at junction `junction` under `condition` (`None`: as written).
    pub fn head_m(&self, condition: Option<usize>, junction: usize) -> Option<f64> {
        let state = condition.map_or(0, |c| c + 1);
        (*self.by_state.get(state)?.as_ref()?.get(junction)?).filter(|h| h.is_finite())
    }
}

/// The static-pressure warnings ([`check_modelled_static`]) of every test of `reading` that resolves
/// against `net` and has no error finding.
pub fn static_findings(net: &Network, reading: &SheetReading, heads: &StaticHeads) -> Vec<Finding> {
    // Hashed once: the workbench runs this on every committed edit of sheets of thousands of rows.
    let junctions: HashMap<&str, usize> = net
        .junctions
        .iter()
        .enumerate()
        .map(|(i, j)| (j.id.as_str(), i))
        .collect();
    reading
        .tests
        .iter()
        .filter(|t| !reading.row_has_error(t.row))
        .filter_map(|test| {
            let junction = *junctions.get(test.residual_node.as_str())?;
            let condition = match &test.condition {
                Some(name) => Some(net.conditions.iter().position(|c| &c.name == name)?),
                None => None,
            };
            let head = heads.head_m(condition, junction)?;
            check_modelled_static(test, head)
        })
        .collect()
}

/// `reading` with the static-pressure warnings of [`static_findings`] added (in row order): every
/// screening warning `tests` gives, for `calibrate` and the workbench.
pub fn with_static_findings(
    net: &Network,
    mut reading: SheetReading,
    heads: &StaticHeads,
) -> SheetReading {
    let found = static_findings(net, &reading, heads);
    if !found.is_empty() {
        reading.findings.extend(found);
        reading.findings.sort_by_key(|f| f.row);
    }
    reading
}

/// Why a test with `use = no` is not in the fit (the words "left out" are a contract of `--json`).
pub const LEFT_OUT_REASON: &str = "left out on the sheet (use = no)";

/// What a calibration is given from a screened sheet.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CalibrationInput {
    /// The usable tests, in sheet order.
    pub tests: Vec<CalibrationTest>,
    /// The warnings of each usable test (parallel to `tests`): a warning keeps a test in the fit.
    pub warnings: Vec<Vec<Finding>>,
    /// The tests left out, with their reasons.
    pub excluded: Vec<ExcludedTest>,
}

/// The usable tests of a screened sheet as calibration input, and the ones left out with their reasons
/// (every error finding of the row). Warnings keep a test in.
pub fn calibration_tests(
    net: &Network,
    reading: &SheetReading,
) -> (Vec<CalibrationTest>, Vec<ExcludedTest>) {
    let input = calibration_input(net, reading);
    (input.tests, input.excluded)
}

/// As [`calibration_tests`], with the warnings of every usable test.
pub fn calibration_input(net: &Network, reading: &SheetReading) -> CalibrationInput {
    let mut usable = Vec::new();
    let mut warnings = Vec::new();
    let mut excluded = Vec::new();
    for row in reading.rows() {
        let errors: Vec<&Finding> = reading
            .findings_for_row(row)
            .filter(|f| f.severity == Severity::Error)
            .collect();
        let test = reading.test_for_row(row);
        let test_id = test.map_or_else(
            || {
                errors
                    .first()
                    .map(|f| f.test_id.clone())
                    .unwrap_or_default()
            },
            |t| t.test_id.clone(),
        );
        // A row that read as no test still has findings, and every finding has its line.
        let line = test
            .map(|t| t.line)
            .or_else(|| reading.findings_for_row(row).next().map(|f| f.line))
            .unwrap_or(row + 2);
        if reading.is_left_out(row) {
            excluded.push(ExcludedTest {
                test_id,
                row,
                line,
                reason: LEFT_OUT_REASON.to_string(),
                left_out: true,
            });
            continue;
        }
        if !errors.is_empty() {
            excluded.push(ExcludedTest {
                test_id,
                row,
                line,
                left_out: false,
                reason: errors
                    .iter()
                    .map(|f| format!("{}: {}", f.column, f.reason))
                    .collect::<Vec<_>>()
                    .join("; "),
            });
            continue;
        }
        let Some(test) = test else { continue };
        match resolve(net, test) {
            Some(resolved) => {
                usable.push(CalibrationTest {
                    id: test.test_id.clone(),
                    residual_junction: resolved.residual_junction,
                    condition: resolved.condition,
                    hydrant_flows_m3s: resolved.hydrants,
                    static_head_m: test.static_head_m,
                    residual_head_m: test.residual_head_m,
                });
                warnings.push(reading.findings_for_row(row).cloned().collect());
            }
            None => excluded.push(ExcludedTest {
                test_id,
                row,
                line,
                left_out: false,
                reason: "a node or condition of the test is not in the network".into(),
            }),
        }
    }
    CalibrationInput {
        tests: usable,
        warnings,
        excluded,
    }
}
