//! Every field test against the network model: modelled static and residual pressure at the gauge, the
//! errors, the drops, and the model's own flow available at the target residual; and the hand-over of
//! usable tests to calibration.
//!
//! One [`GradientSolver`] (one symbolic factorization) serves every test; each residual solve starts
//! from its static solution.

use crate::calibrate::CalibrationTest;
use crate::hydraulics::{GradientSolver, OperatingState, Solution, SolveError};
use crate::network::Network;

use super::fireflow::AvailableFlow;
use super::reading::{FlowTest, SheetReading};
use super::screening::{Finding, Severity, check_modelled_static};

/// One test next to the model (pressures in the sheet's unit, flows in the sheet's flow unit).
#[derive(Debug, Clone, PartialEq)]
pub struct ModelComparison {
    pub test_id: String,
    pub row: usize,
    pub residual_node: String,
    pub measured_static: f64,
    pub measured_residual: f64,
    pub modelled_static: Option<f64>,
    pub modelled_residual: Option<f64>,
    pub total_flow: f64,
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
}

impl ModelComparison {
    /// Measured minus modelled static pressure.
    pub fn static_error(&self) -> Option<f64> {
        self.modelled_static.map(|m| self.measured_static - m)
    }

    /// Measured minus modelled residual pressure.
    pub fn residual_error(&self) -> Option<f64> {
        self.modelled_residual.map(|m| self.measured_residual - m)
    }

    pub fn measured_drop(&self) -> f64 {
        self.measured_static - self.measured_residual
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

/// Compares every test of `reading` with the model. `target` is the target residual in the sheet's
/// pressure unit. Tests with a screening error are listed with their findings and no model values.
pub fn compare_with_model(
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
            residual_node: test.residual_node.clone(),
            measured_static: test.static_pressure(),
            measured_residual: test.residual_pressure(),
            modelled_static: None,
            modelled_residual: None,
            total_flow: test.total_flow(),
            field_available: test.available_flow(target),
            model_available: None,
            findings: Vec::new(),
            negative_pressure_somewhere: false,
            gauge_isolated_in_model: false,
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
            if let Some(h) = static_head
                && let Some(finding) = check_modelled_static(test, h)
            {
                findings.push(finding);
            }
            comparison.model_available =
                model_available_flow(&solver, net, &base, &c, &resolved, &statics, target_head_m)?
                    .map(|q| units.flow_from_m3s(q));
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

/// Root search on the solver for the hydrant flow that brings the gauge to the target pressure: the
/// hydrants keep the test's split and their total is scaled. Bracketed by doubling from the test flow,
/// then bisection to 0.1 % of the flow.
fn model_available_flow(
    solver: &GradientSolver,
    net: &Network,
    base: &OperatingState,
    c: &[f64],
    test: &ResolvedTest,
    statics: &Solution,
    target_head_m: f64,
) -> Result<Option<f64>, SolveError> {
    let j = test.residual_junction;
    let Some(static_head) = statics.pressure_head_m(net, j) else {
        return Ok(None);
    };
    let total: f64 = test.hydrants.iter().map(|h| h.1).sum();
    if static_head < target_head_m {
        return Ok(Some(0.0));
    }
    if total <= 0.0 {
        return Ok(None);
    }
    let pressure_at = |scale: f64, warm: &Solution| -> Result<(f64, Solution), SolveError> {
        let solution = solver.solve(
            net,
            &with_hydrants(base, &test.hydrants, scale),
            c,
            Some(warm),
        )?;
        let head = solution
            .pressure_head_m(net, j)
            .unwrap_or(f64::NEG_INFINITY);
        Ok((head, solution))
    };
    let mut low = 0.0;
    let mut high = 1.0;
    let mut warm = statics.clone();
    loop {
        let (head, solution) = pressure_at(high, &warm)?;
        if head < target_head_m {
            break;
        }
        low = high;
        high *= 2.0;
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
            warm = solution;
        } else {
            high = mid;
        }
    }
    Ok(Some(low * total))
}

/// A test the calibration will not use, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct ExcludedTest {
    pub test_id: String,
    pub row: usize,
    pub reason: String,
}

/// The usable tests of a screened sheet as calibration input, and the ones left out with their reasons
/// (every error finding of the row). Warnings keep a test in.
pub fn calibration_tests(
    net: &Network,
    reading: &SheetReading,
) -> (Vec<CalibrationTest>, Vec<ExcludedTest>) {
    let mut usable = Vec::new();
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
        if !errors.is_empty() {
            excluded.push(ExcludedTest {
                test_id,
                row,
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
            Some(resolved) => usable.push(CalibrationTest {
                id: test.test_id.clone(),
                residual_junction: resolved.residual_junction,
                condition: resolved.condition,
                hydrant_flows_m3s: resolved.hydrants,
                static_head_m: test.static_head_m,
                residual_head_m: test.residual_head_m,
            }),
            None => excluded.push(ExcludedTest {
                test_id,
                row,
                reason: "a node or condition of the test is not in the network".into(),
            }),
        }
    }
    (usable, excluded)
}
