//! The global gradient algorithm (Todini and Pilati, 1988): Newton iterations on junction heads and link
//! flows together, with the flow unknowns eliminated so that each iteration solves one sparse symmetric
//! positive definite system in the heads (the Schur complement `A21 D^-1 A12`).
//!
//! For a link k from node a to node b with head loss h_k(Q) and slope g_k = dh_k/dQ, write p_k = 1/g_k and
//! y_k = p_k h_k(Q_k). Linearising h_k(Q) = H_a - H_b and substituting into continuity at every junction
//! gives, for junction i,
//!
//! ```text
//!   (sum_k p_k) H_i - sum_(neighbour junctions) p_k H_j
//!       = -d_i + sum_(k into i) (Q_k - y_k) - sum_(k out of i) (Q_k - y_k) + sum_(fixed-head neighbours) p_k H_f
//! ```
//!
//! and the new flows follow as Q_k' = Q_k - y_k + p_k (H_a - H_b). The matrix has the sparsity of the
//! junction adjacency, which never changes for one network, so its symbolic Cholesky analysis (fill-reducing
//! ordering, elimination tree, supernodes) is done once in [`GradientSolver::new`] and reused by every
//! numeric factorization of every iteration, condition and field test. Closed links keep their matrix slots
//! with a zero value, so status changes never change the pattern.
//!
//! **Near-zero flows.** The Hazen-Williams slope 1.852 r |Q|^0.852 vanishes at Q = 0, which would make p
//! infinite. Below [`SolverSettings::linear_below_m3s`] (q0, default 1e-6 m^3/s, about 0.016 gpm) the law is
//! replaced by its chord through the origin, h = r q0^0.852 Q (the usual linearisation near zero flow): it
//! meets the true law at |Q| = q0, keeps the slope positive, and changes a head loss by less than
//! r q0^1.852, far below any gauge's resolution.
//!
//! **Convergence.** An iteration is accepted as converged when (1) the relative flow change
//! sum|Q' - Q| / sum|Q'| is below [`SolverSettings::relative_flow_tolerance`] (default 1e-6, a thousand
//! times tighter than the 1e-3 common in distribution-network solvers (common practice, no source),
//! because calibration differentiates the pressures), (2) the largest
//! head-balance residual |h_k(Q_k) - (H_a - H_b)| over open links is below
//! [`SolverSettings::head_tolerance_m`] (default 1e-6 m), and (3) no link changed status in that iteration.
//! Not meeting all three within [`SolverSettings::max_iterations`] is [`SolveError::NotConverged`].

use std::sync::Arc;

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::sparse::linalg::SupernodalThreshold;
use faer::sparse::linalg::cholesky::{
    CholeskySymbolicParams, LltRef, SymbolicCholesky, SymmetricOrdering,
    factorize_symbolic_cholesky,
};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::{Conj, MatMut, Par, Side};

use super::headloss::{HW_FLOW_EXPONENT, HazenWilliams};
use crate::network::{Condition, Network, NodeRef};

/// Threading of the factorization and the triangular solves. Sequential kernels measured faster than
/// two threads on this project's 2-core benchmark machine at both 10,000 and 90,000 junctions (the
/// blocks of a distribution network's factor are too small to share), and calibration runs its tests on
/// separate threads anyway.
const LINEAR_ALGEBRA_PARALLELISM: Par = Par::Seq;

/// Velocity of the starting flow in every pipe of a cold start (m/s).
const INITIAL_VELOCITY_MS: f64 = 0.1;

/// Largest junction imbalance a solution may have, as a share of the total demand (or of 1 L/s when the
/// network carries almost nothing).
pub const MASS_BALANCE_TOLERANCE: f64 = 1e-6;

/// Tunable limits of the gradient solver; see the module documentation for what each one means.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SolverSettings {
    pub max_iterations: usize,
    pub relative_flow_tolerance: f64,
    pub head_tolerance_m: f64,
    /// Below this flow the Hazen-Williams Newton slope is held constant.
    pub linear_below_m3s: f64,
    /// A link that changes status more often than this is frozen in its closed state (with a warning),
    /// so that a check valve or pump on the edge of flowing cannot make the solver cycle forever.
    pub max_status_changes: u32,
}

impl Default for SolverSettings {
    fn default() -> Self {
        Self {
            max_iterations: 200,
            relative_flow_tolerance: 1e-6,
            head_tolerance_m: 1e-6,
            linear_below_m3s: 1e-6,
            max_status_changes: 8,
        }
    }
}

/// The boundary state of one solve: demands, fixed-head grades, and which links are out of service.
#[derive(Debug, Clone, PartialEq)]
pub struct OperatingState {
    /// Multiplies every base demand.
    pub demand_factor: f64,
    /// Demand added on top of the scaled base demand at each junction (m^3/s), e.g. flowing hydrants.
    pub extra_demand_m3s: Vec<f64>,
    /// Grade of each fixed head (m).
    pub fixed_head_m: Vec<f64>,
    pub pipe_closed: Vec<bool>,
    pub pump_off: Vec<bool>,
}

impl OperatingState {
    /// The network as written in its file.
    pub fn base(net: &Network) -> Self {
        Self {
            demand_factor: 1.0,
            extra_demand_m3s: vec![0.0; net.junctions.len()],
            fixed_head_m: net.fixed_heads.iter().map(|f| f.head_m).collect(),
            pipe_closed: net.pipes.iter().map(|p| p.closed).collect(),
            pump_off: net.pumps.iter().map(|p| p.off).collect(),
        }
    }

    /// The network under a `[[condition]]`: scaled demands, overridden grades, extra closures.
    pub fn for_condition(net: &Network, condition: &Condition) -> Self {
        let mut state = Self::base(net);
        state.demand_factor = condition.demand_factor;
        for &(fixed, head_m) in &condition.heads {
            if let Some(slot) = state.fixed_head_m.get_mut(fixed) {
                *slot = head_m;
            }
        }
        for &pipe in &condition.closed_pipes {
            if let Some(slot) = state.pipe_closed.get_mut(pipe) {
                *slot = true;
            }
        }
        for &pump in &condition.pumps_off {
            if let Some(slot) = state.pump_off.get_mut(pump) {
                *slot = true;
            }
        }
        state
    }

    /// The network under the condition at index `condition` of [`Network::conditions`], or as written
    /// when `None` (an index out of range also gives the network as written).
    pub fn for_condition_index(net: &Network, condition: Option<usize>) -> Self {
        match condition.and_then(|c| net.conditions.get(c)) {
            Some(c) => Self::for_condition(net, c),
            None => Self::base(net),
        }
    }

    /// The network under a named condition, or as written when `name` is `None`.
    pub fn for_condition_name(net: &Network, name: Option<&str>) -> Result<Self, SolveError> {
        match name {
            None => Ok(Self::base(net)),
            Some(name) => net
                .find_condition(name)
                .map(|c| Self::for_condition(net, c))
                .ok_or_else(|| SolveError::UnknownCondition {
                    name: name.to_string(),
                    known: net.conditions.iter().map(|c| c.name.clone()).collect(),
                }),
        }
    }

    /// Adds a withdrawal (m^3/s) at a junction, e.g. a flowing hydrant.
    pub fn add_demand(&mut self, junction: usize, flow_m3s: f64) {
        if let Some(slot) = self.extra_demand_m3s.get_mut(junction) {
            *slot += flow_m3s;
        }
    }

    /// Total demand at a junction (m^3/s).
    pub fn demand_m3s(&self, net: &Network, junction: usize) -> f64 {
        net.junctions[junction].demand_m3s * self.demand_factor + self.extra_demand_m3s[junction]
    }
}

/// How a link ended up in a solution.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LinkStatus {
    Open,
    /// Closed in the file or by the condition.
    Closed,
    /// A check valve holding against reverse flow.
    CheckValveClosed,
    /// A pump switched off in the file or by the condition.
    PumpOff,
    /// A pump that cannot lift against the grade across it, shut off by the solver.
    PumpCannotLift,
    /// A link whose status kept changing; frozen closed.
    FrozenClosed,
}

impl LinkStatus {
    fn carries_flow(self) -> bool {
        self == Self::Open
    }

    /// Short word for tables and JSON.
    pub fn label(self) -> &'static str {
        match self {
            Self::Open => "open",
            Self::Closed => "closed",
            Self::CheckValveClosed => "check valve closed",
            Self::PumpOff => "off",
            Self::PumpCannotLift => "cannot lift",
            Self::FrozenClosed => "closed (status oscillated)",
        }
    }
}

/// Something a user should know about a solution that is still valid.
#[derive(Debug, Clone, PartialEq)]
pub enum SolveWarning {
    /// Junctions with no open path to any fixed head; their heads are undefined.
    Isolated { junctions: Vec<usize> },
    /// Junctions whose head is below their elevation.
    NegativePressure { junctions: Vec<usize> },
    /// A pump shut off because the grade across it exceeds its shutoff head.
    PumpCannotLift { pump: usize },
    /// A link whose status oscillated and was frozen closed.
    StatusOscillation { link: LinkRef },
}

/// A pipe or a pump by index.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LinkRef {
    Pipe(usize),
    Pump(usize),
}

/// The conditions a network has, for a message about a name it lacks.
fn known_conditions(known: &[String]) -> String {
    if known.is_empty() {
        "the network has no [[condition]]: leave out --condition to solve it as written".to_string()
    } else {
        format!("the network's conditions: {}", known.join(", "))
    }
}

/// Why a solve produced no answer.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SolveError {
    #[error(
        "the network did not converge in {iterations} iterations (relative flow change {relative_flow_change:.2e}, largest head residual {max_head_residual_m:.2e} m)"
    )]
    NotConverged {
        iterations: usize,
        relative_flow_change: f64,
        max_head_residual_m: f64,
    },
    #[error("the network has no fixed head (reservoir or tank): nothing sets the grade")]
    NoFixedHead,
    #[error(
        "the head system could not be factorized ({0}): check for pipes of extreme length or diameter, or an extreme demand"
    )]
    Factorization(String),
    #[error("unknown condition `{name}`; {}", known_conditions(.known))]
    UnknownCondition { name: String, known: Vec<String> },
    #[error("{what} has {found} entries but the network has {expected}")]
    SizeMismatch {
        what: &'static str,
        found: usize,
        expected: usize,
    },
    #[error(
        "the solution went non-finite at iteration {iteration}: check for zero-length or zero-diameter pipes"
    )]
    NonFinite { iteration: usize },
    #[error(
        "the solution fails the mass-balance check: a junction is out of balance by {imbalance_m3s:.3e} m^3/s (allowed {allowed_m3s:.3e})"
    )]
    MassBalance {
        imbalance_m3s: f64,
        allowed_m3s: f64,
    },
}

/// A converged steady state. Heads of isolated junctions are NaN and listed in `isolated`; use
/// [`Solution::pressure_head_m`] to read pressures safely.
#[derive(Debug, Clone)]
pub struct Solution {
    /// Hydraulic grade at each junction (m).
    pub head_m: Vec<f64>,
    pub pipe_flow_m3s: Vec<f64>,
    /// Head loss along each pipe in its from-to direction (m).
    pub pipe_headloss_m: Vec<f64>,
    pub pipe_status: Vec<LinkStatus>,
    pub pump_flow_m3s: Vec<f64>,
    pub pump_head_gain_m: Vec<f64>,
    pub pump_status: Vec<LinkStatus>,
    pub iterations: usize,
    /// Largest |inflow - outflow - demand| over junctions (m^3/s), computed from the final flows.
    pub max_imbalance_m3s: f64,
    pub isolated: Vec<bool>,
    pub warnings: Vec<SolveWarning>,
    /// The last factorized head system and link conductances, for sensitivities.
    system: Option<FactorizedSystem>,
}

#[derive(Debug, Clone)]
struct FactorizedSystem {
    symbolic: Arc<SymbolicCholesky<usize>>,
    /// Numeric values of the Cholesky factor, laid out by `symbolic`.
    factor: Vec<f64>,
    /// p_k = 1/g_k of every link (pipes then pumps) at the final iterate; 0 for links carrying no flow.
    conductance: Vec<f64>,
}

impl Solution {
    /// This solution kept only for warm-starting later solves: flows, heads and statuses, with the
    /// factorization (which can be large) dropped.
    pub fn into_warm_start(mut self) -> Solution {
        self.system = None;
        self
    }

    /// Pressure head (m of water above the junction elevation), or `None` for an isolated junction.
    pub fn pressure_head_m(&self, net: &Network, junction: usize) -> Option<f64> {
        if self.isolated.get(junction).copied().unwrap_or(true) {
            return None;
        }
        Some(self.head_m[junction] - net.junctions[junction].elevation_m)
    }

    /// Hydraulic grade of any node (fixed heads from the state).
    pub fn node_head_m(&self, state: &OperatingState, node: NodeRef) -> f64 {
        match node {
            NodeRef::Junction(i) => self.head_m[i],
            NodeRef::FixedHead(i) => state.fixed_head_m[i],
        }
    }

    /// Indices of junctions whose head is below their elevation.
    pub fn negative_pressure_junctions(&self, net: &Network) -> Vec<usize> {
        (0..self.head_m.len())
            .filter(|&j| self.pressure_head_m(net, j).is_some_and(|p| p < 0.0))
            .collect()
    }

    /// Sensitivity of the head at `junction` to the C-factor of every pipe, d H_junction / d C_k
    /// (m per unit of C), by implicit differentiation of the converged equations.
    ///
    /// At a solution, h_k(Q_k, C_k) = H_a - H_b on every open link and continuity holds at every junction.
    /// Differentiating with respect to C_k and eliminating dQ gives `A dH = b`, with A the head matrix
    /// already factorized and b_a = p_k dh_k/dC_k, b_b = -p_k dh_k/dC_k. For one junction this is an adjoint
    /// solve `A lambda = e_junction` (one pair of triangular solves, A is symmetric), after which
    /// dH_junction/dC_k = p_k (dh_k/dC_k) (lambda_a - lambda_b) with dh_k/dC_k = -1.852 h_k / C_k for
    /// Hazen-Williams. The cost is one solve per junction of interest, whatever the number of pipes or
    /// roughness groups.
    pub fn head_sensitivity_to_c(
        &self,
        net: &Network,
        c_factors: &[f64],
        junction: usize,
    ) -> Option<Vec<f64>> {
        let (system, lambda) = self.adjoint(junction)?;
        let lambda_of = |node: NodeRef| match node {
            NodeRef::Junction(i) => lambda[i],
            NodeRef::FixedHead(_) => 0.0,
        };
        let sensitivities = net
            .pipes
            .iter()
            .enumerate()
            .map(|(k, pipe)| {
                let p = system.conductance[k];
                if p == 0.0 {
                    return 0.0;
                }
                let dh_dc = -HW_FLOW_EXPONENT * self.pipe_headloss_m[k] / c_factors[k];
                p * dh_dc * (lambda_of(pipe.from) - lambda_of(pipe.to))
            })
            .collect();
        Some(sensitivities)
    }

    /// Sensitivity of the head at `junction` to the demand at every junction, d H_junction / d d_i
    /// (m per m^3/s; negative: more withdrawal lowers the grade).
    ///
    /// Differentiating continuity at a solution with respect to the demand d_i gives `A dH = -e_i` with
    /// the same head matrix A as [`Solution::head_sensitivity_to_c`], so dH_junction/dd_i =
    /// -(A^-1)_(junction, i) = -lambda_i with `A lambda = e_junction` (A is symmetric): one adjoint solve
    /// for every junction's demand at once.
    pub fn head_sensitivity_to_demand(&self, junction: usize) -> Option<Vec<f64>> {
        let (_, lambda) = self.adjoint(junction)?;
        Some(lambda.into_iter().map(|l| -l).collect())
    }

    /// The adjoint vector lambda of `A lambda = e_junction` on the last factorized head system.
    fn adjoint(&self, junction: usize) -> Option<(&FactorizedSystem, Vec<f64>)> {
        let system = self.system.as_ref()?;
        if self.isolated.get(junction).copied().unwrap_or(true) {
            return None;
        }
        let n = self.head_m.len();
        let mut lambda = vec![0.0; n];
        lambda[junction] = 1.0;
        let par = LINEAR_ALGEBRA_PARALLELISM;
        let mut scratch = MemBuffer::new(system.symbolic.solve_in_place_scratch::<f64>(1, par));
        LltRef::new(&system.symbolic, &system.factor).solve_in_place_with_conj(
            Conj::No,
            MatMut::from_column_major_slice_mut(&mut lambda, n, 1),
            par,
            MemStack::new(&mut scratch),
        );
        Some((system, lambda))
    }
}

/// One link as the solver sees it: ends and where its terms go in the matrix values.
#[derive(Debug, Clone, Copy)]
struct LinkSlots {
    from: NodeRef,
    to: NodeRef,
    /// Index into the values array of the from junction's diagonal, if `from` is a junction.
    diag_from: Option<usize>,
    diag_to: Option<usize>,
    /// Index of the off-diagonal entry when both ends are junctions.
    off_diagonal: Option<usize>,
}

/// A solver bound to one network topology, holding its symbolic factorization.
#[derive(Debug, Clone)]
pub struct GradientSolver {
    settings: SolverSettings,
    junction_count: usize,
    /// Pipes first, then pumps.
    links: Vec<LinkSlots>,
    /// For each junction, the links touching it (for mass balance and isolation checks).
    col_ptr: Vec<usize>,
    row_idx: Vec<usize>,
    diagonal_slot: Vec<usize>,
    symbolic: Option<Arc<SymbolicCholesky<usize>>>,
    law: HazenWilliams,
}

impl GradientSolver {
    /// Analyses the topology of `net` once: matrix pattern and symbolic Cholesky factorization.
    pub fn new(net: &Network) -> Result<Self, SolveError> {
        Self::with_settings(net, SolverSettings::default())
    }

    /// As [`GradientSolver::new`] with explicit settings.
    pub fn with_settings(net: &Network, settings: SolverSettings) -> Result<Self, SolveError> {
        if net.fixed_heads.is_empty() {
            return Err(SolveError::NoFixedHead);
        }
        let n = net.junctions.len();
        let ends: Vec<(NodeRef, NodeRef)> = net
            .pipes
            .iter()
            .map(|p| (p.from, p.to))
            .chain(net.pumps.iter().map(|p| (p.from, p.to)))
            .collect();

        // Lower-triangular pattern, column by column: the diagonal and every junction neighbour below it.
        let mut below: Vec<Vec<usize>> = vec![Vec::new(); n];
        for &(a, b) in &ends {
            if let (NodeRef::Junction(i), NodeRef::Junction(j)) = (a, b)
                && i != j
            {
                let (lo, hi) = if i < j { (i, j) } else { (j, i) };
                below[lo].push(hi);
            }
        }
        let mut col_ptr = Vec::with_capacity(n + 1);
        let mut row_idx = Vec::new();
        let mut diagonal_slot = Vec::with_capacity(n);
        col_ptr.push(0);
        for (col, rows) in below.iter_mut().enumerate() {
            rows.sort_unstable();
            rows.dedup();
            diagonal_slot.push(row_idx.len());
            row_idx.push(col);
            row_idx.extend_from_slice(rows);
            col_ptr.push(row_idx.len());
        }
        let slot_of = |row: usize, col: usize| -> usize {
            let rows = &row_idx[col_ptr[col]..col_ptr[col + 1]];
            // Present by construction; the search cannot miss.
            col_ptr[col] + rows.binary_search(&row).unwrap_or(0)
        };
        let links = ends
            .iter()
            .map(|&(from, to)| {
                let diag = |node: NodeRef| match node {
                    NodeRef::Junction(i) => Some(diagonal_slot[i]),
                    NodeRef::FixedHead(_) => None,
                };
                let off_diagonal = match (from, to) {
                    (NodeRef::Junction(i), NodeRef::Junction(j)) if i != j => {
                        Some(slot_of(i.max(j), i.min(j)))
                    }
                    _ => None,
                };
                LinkSlots {
                    from,
                    to,
                    diag_from: diag(from),
                    diag_to: diag(to),
                    off_diagonal,
                }
            })
            .collect();

        let symbolic = if n == 0 {
            None
        } else {
            let pattern = SymbolicSparseColMatRef::new_checked(n, n, &col_ptr, None, &row_idx);
            // Supernodal (dense blocks) always: faer's flop-count heuristic picks the simplicial kernel for
            // street networks, which measured 1.3x slower at 10,000 junctions and 3.7x slower at 90,000.
            let params = CholeskySymbolicParams {
                supernodal_flop_ratio_threshold: SupernodalThreshold::FORCE_SUPERNODAL,
                ..Default::default()
            };
            Some(Arc::new(
                factorize_symbolic_cholesky(pattern, Side::Lower, SymmetricOrdering::Amd, params)
                    .map_err(|e| SolveError::Factorization(format!("{e:?}")))?,
            ))
        };
        Ok(Self {
            settings,
            junction_count: n,
            links,
            col_ptr,
            row_idx,
            diagonal_slot,
            symbolic,
            law: HazenWilliams::for_units(net.units),
        })
    }

    /// The settings in force.
    pub fn settings(&self) -> SolverSettings {
        self.settings
    }

    /// Solves the steady state of `net` under `state` with the pipe C-factors `c_factors` (one per pipe,
    /// in pipe order; calibration passes trial values here instead of editing the network).
    /// `warm_start` seeds flows and statuses from an earlier solution of the same network.
    pub fn solve(
        &self,
        net: &Network,
        state: &OperatingState,
        c_factors: &[f64],
        warm_start: Option<&Solution>,
    ) -> Result<Solution, SolveError> {
        self.check_sizes(net, state, ("the C-factor list", c_factors.len()))?;
        let resistance = self.pipe_resistances(net, c_factors);
        self.solve_with_resistances(net, state, &resistance, warm_start)
    }

    /// Hazen-Williams resistance r of every pipe (h = r Q|Q|^0.852 in m and m^3/s) at the C-factors
    /// `c_factors`, for [`GradientSolver::solve_with_resistances`].
    pub fn pipe_resistances(&self, net: &Network, c_factors: &[f64]) -> Vec<f64> {
        net.pipes
            .iter()
            .zip(c_factors)
            .map(|(p, &c)| self.law.resistance(p.length_m, p.diameter_m, c))
            .collect()
    }

    /// As [`GradientSolver::solve`] with the pipe resistances computed beforehand: many solves at one
    /// set of C-factors (the tests of one calibration step) then share the power evaluations.
    pub fn solve_with_resistances(
        &self,
        net: &Network,
        state: &OperatingState,
        resistance: &[f64],
        warm_start: Option<&Solution>,
    ) -> Result<Solution, SolveError> {
        self.check_sizes(net, state, ("the resistance list", resistance.len()))?;
        let n = self.junction_count;
        let pipe_count = net.pipes.len();
        let link_count = self.links.len();
        let settings = self.settings;

        let demand: Vec<f64> = (0..n).map(|j| state.demand_m3s(net, j)).collect();

        // Statuses fixed by the file or the condition never change during the solve.
        let mut status: Vec<LinkStatus> = (0..link_count)
            .map(|k| {
                if k < pipe_count {
                    if state.pipe_closed[k] {
                        LinkStatus::Closed
                    } else {
                        LinkStatus::Open
                    }
                } else if state.pump_off[k - pipe_count] {
                    LinkStatus::PumpOff
                } else {
                    LinkStatus::Open
                }
            })
            .collect();
        let mut flow: Vec<f64> = vec![0.0; link_count];
        for (k, q) in flow.iter_mut().enumerate() {
            *q = if k < pipe_count {
                // 0.1 m/s (a third of a foot a second) in every pipe, about what mains carry on an average
                // day. Measured on the synthetic cities, it converged in fewer iterations than 0.03, 0.3
                // or 1 m/s (9 against 11 at 10,000 junctions); the answer does not depend on it.
                INITIAL_VELOCITY_MS * std::f64::consts::PI * net.pipes[k].diameter_m.powi(2) / 4.0
            } else {
                let curve = &net.pumps[k - pipe_count].curve;
                curve
                    .max_flow_m3s()
                    .map(|q| q / 2.0)
                    .or_else(|| curve.points.get(curve.points.len() / 2).map(|p| p.0))
                    .unwrap_or(0.01)
                    .max(1e-4)
            };
        }
        if let Some(warm) = warm_start
            && warm.pipe_flow_m3s.len() == pipe_count
            && warm.pump_flow_m3s.len() == link_count - pipe_count
        {
            for k in 0..link_count {
                let (warm_q, warm_status) = if k < pipe_count {
                    (warm.pipe_flow_m3s[k], warm.pipe_status[k])
                } else {
                    (
                        warm.pump_flow_m3s[k - pipe_count],
                        warm.pump_status[k - pipe_count],
                    )
                };
                if status[k] == LinkStatus::Open {
                    if matches!(
                        warm_status,
                        LinkStatus::CheckValveClosed | LinkStatus::PumpCannotLift
                    ) {
                        status[k] = warm_status;
                    } else if warm_status == LinkStatus::Open && warm_q != 0.0 {
                        flow[k] = warm_q;
                    }
                }
            }
        }
        let mut status_changes = vec![0u32; link_count];
        let mut warnings = Vec::new();

        let mut head = vec![0.0; n];
        if let Some(warm) = warm_start
            && warm.head_m.len() == n
        {
            for (h, &w) in head.iter_mut().zip(&warm.head_m) {
                if w.is_finite() {
                    *h = w;
                }
            }
        }
        let mut values = vec![0.0; self.row_idx.len()];
        let mut rhs = vec![0.0; n];
        let mut conductance = vec![0.0; link_count];
        let mut isolated = vec![false; n];
        let mut factor: Vec<f64> = Vec::new();
        let mut workspace: Option<MemBuffer> = None;
        let mut relative_change = f64::INFINITY;
        let mut head_residual = f64::INFINITY;
        let mut law_cache = vec![
            LawAtFlow {
                flow_m3s: f64::NAN,
                loss_m: 0.0,
                slope: 0.0,
            };
            link_count
        ];
        // Isolation depends only on statuses, so it is redone only after one changed.
        let mut statuses_changed = true;

        for iteration in 1..=settings.max_iterations {
            if statuses_changed {
                isolated = self.isolated_junctions(&status, n);
            }
            values.iter_mut().for_each(|v| *v = 0.0);
            for (j, r) in rhs.iter_mut().enumerate() {
                *r = -demand[j];
            }
            for k in 0..link_count {
                let slots = self.links[k];
                let cut_off = |node: NodeRef| matches!(node, NodeRef::Junction(i) if isolated[i]);
                if !status[k].carries_flow() || cut_off(slots.from) || cut_off(slots.to) {
                    conductance[k] = 0.0;
                    flow[k] = 0.0;
                    continue;
                }
                let (loss, slope) =
                    self.cached_loss_and_slope(net, resistance, &mut law_cache, k, flow[k]);
                let p = 1.0 / slope;
                let y = p * loss;
                conductance[k] = p;
                let carried = flow[k] - y;
                if let Some(d) = slots.diag_from {
                    values[d] += p;
                }
                if let Some(d) = slots.diag_to {
                    values[d] += p;
                }
                if let Some(o) = slots.off_diagonal {
                    values[o] -= p;
                }
                match slots.from {
                    NodeRef::Junction(i) => rhs[i] -= carried,
                    NodeRef::FixedHead(f) => {
                        if let NodeRef::Junction(j) = slots.to {
                            rhs[j] += p * state.fixed_head_m[f];
                        }
                    }
                }
                match slots.to {
                    NodeRef::Junction(i) => rhs[i] += carried,
                    NodeRef::FixedHead(f) => {
                        if let NodeRef::Junction(j) = slots.from {
                            rhs[j] += p * state.fixed_head_m[f];
                        }
                    }
                }
            }
            for (j, &cut) in isolated.iter().enumerate() {
                if cut {
                    // Pin an isolated junction so the system stays definite; its head is reported as NaN.
                    values[self.diagonal_slot[j]] = 1.0;
                    rhs[j] = 0.0;
                }
            }

            if let Some(symbolic) = &self.symbolic {
                let pattern =
                    SymbolicSparseColMatRef::new_checked(n, n, &self.col_ptr, None, &self.row_idx);
                let matrix = SparseColMatRef::new(pattern, &values);
                let par = LINEAR_ALGEBRA_PARALLELISM;
                let workspace = workspace.get_or_insert_with(|| {
                    MemBuffer::new(
                        symbolic
                            .factorize_numeric_llt_scratch::<f64>(par, Default::default())
                            .or(symbolic.solve_in_place_scratch::<f64>(1, par)),
                    )
                });
                factor.resize(symbolic.len_val(), 0.0);
                let llt = symbolic
                    .factorize_numeric_llt(
                        &mut factor,
                        matrix,
                        Side::Lower,
                        Default::default(),
                        par,
                        MemStack::new(workspace),
                        Default::default(),
                    )
                    .map_err(|e| SolveError::Factorization(format!("{e:?}")))?;
                head.copy_from_slice(&rhs);
                llt.solve_in_place_with_conj(
                    Conj::No,
                    MatMut::from_column_major_slice_mut(&mut head, n, 1),
                    par,
                    MemStack::new(workspace),
                );
            }
            if head.iter().any(|h| !h.is_finite()) {
                return Err(SolveError::NonFinite { iteration });
            }

            // New flows from the new heads.
            let node_head = |node: NodeRef| match node {
                NodeRef::Junction(i) => head[i],
                NodeRef::FixedHead(f) => state.fixed_head_m[f],
            };
            let mut change_sum = 0.0;
            let mut flow_sum = 0.0;
            for k in 0..link_count {
                let p = conductance[k];
                if p == 0.0 {
                    continue;
                }
                let slots = self.links[k];
                let (loss, _) =
                    self.cached_loss_and_slope(net, resistance, &mut law_cache, k, flow[k]);
                let new_q = flow[k] - p * loss + p * (node_head(slots.from) - node_head(slots.to));
                change_sum += (new_q - flow[k]).abs();
                flow_sum += new_q.abs();
                flow[k] = new_q;
            }
            // A network at rest has no flow to be relative to: measure against the linearisation flow.
            relative_change =
                change_sum / flow_sum.max(link_count as f64 * settings.linear_below_m3s);

            // Status changes: check valves and pumps.
            let mut changed = false;
            for k in 0..link_count {
                let slots = self.links[k];
                let is_pipe = k < pipe_count;
                let check_valve = is_pipe && net.pipes[k].check_valve;
                if !is_pipe && state.pump_off[k - pipe_count] || is_pipe && !check_valve {
                    continue;
                }
                if isolated_end(&isolated, slots) {
                    continue;
                }
                let lift = node_head(slots.to) - node_head(slots.from);
                let new_status = match status[k] {
                    LinkStatus::Open if check_valve && flow[k] < 0.0 => {
                        Some(LinkStatus::CheckValveClosed)
                    }
                    LinkStatus::CheckValveClosed if -lift > settings.head_tolerance_m => {
                        Some(LinkStatus::Open)
                    }
                    LinkStatus::Open if !is_pipe && flow[k] < 0.0 => {
                        Some(LinkStatus::PumpCannotLift)
                    }
                    LinkStatus::PumpCannotLift
                        if lift
                            < net.pumps[k - pipe_count].curve.shutoff_head_m()
                                - settings.head_tolerance_m =>
                    {
                        Some(LinkStatus::Open)
                    }
                    _ => None,
                };
                if let Some(new_status) = new_status {
                    changed = true;
                    status_changes[k] += 1;
                    if status_changes[k] > settings.max_status_changes {
                        status[k] = LinkStatus::FrozenClosed;
                        let link = if is_pipe {
                            LinkRef::Pipe(k)
                        } else {
                            LinkRef::Pump(k - pipe_count)
                        };
                        warnings.push(SolveWarning::StatusOscillation { link });
                    } else {
                        status[k] = new_status;
                    }
                    if new_status == LinkStatus::Open {
                        flow[k] = if is_pipe {
                            settings.linear_below_m3s * 10.0
                        } else {
                            net.pumps[k - pipe_count]
                                .curve
                                .max_flow_m3s()
                                .map_or(1e-3, |q| q / 2.0)
                        };
                    } else {
                        flow[k] = 0.0;
                    }
                }
            }

            statuses_changed = changed;
            head_residual = 0.0f64;
            for k in 0..link_count {
                if conductance[k] == 0.0 || !status[k].carries_flow() {
                    continue;
                }
                let slots = self.links[k];
                let (loss, _) =
                    self.cached_loss_and_slope(net, resistance, &mut law_cache, k, flow[k]);
                let residual = (loss - (node_head(slots.from) - node_head(slots.to))).abs();
                head_residual = head_residual.max(residual);
            }

            if !changed
                && relative_change < settings.relative_flow_tolerance
                && head_residual < settings.head_tolerance_m
            {
                return self.finish(
                    net,
                    state,
                    resistance,
                    SolveOutcome {
                        head,
                        flow,
                        status,
                        conductance,
                        isolated,
                        warnings,
                        iterations: iteration,
                        factor: self.symbolic.as_ref().map(|s| (Arc::clone(s), factor)),
                        law_cache,
                    },
                );
            }
        }
        Err(SolveError::NotConverged {
            iterations: settings.max_iterations,
            relative_flow_change: relative_change,
            max_head_residual_m: head_residual,
        })
    }

    fn check_sizes(
        &self,
        net: &Network,
        state: &OperatingState,
        (per_pipe_list, per_pipe_len): (&'static str, usize),
    ) -> Result<(), SolveError> {
        let checks = [
            (per_pipe_list, per_pipe_len, net.pipes.len()),
            (
                "the junction list",
                net.junctions.len(),
                self.junction_count,
            ),
            (
                "the link list",
                net.pipes.len() + net.pumps.len(),
                self.links.len(),
            ),
            (
                "the demand list",
                state.extra_demand_m3s.len(),
                net.junctions.len(),
            ),
            (
                "the fixed-head list",
                state.fixed_head_m.len(),
                net.fixed_heads.len(),
            ),
            (
                "the pipe status list",
                state.pipe_closed.len(),
                net.pipes.len(),
            ),
            (
                "the pump status list",
                state.pump_off.len(),
                net.pumps.len(),
            ),
        ];
        for (what, found, expected) in checks {
            if found != expected {
                return Err(SolveError::SizeMismatch {
                    what,
                    found,
                    expected,
                });
            }
        }
        Ok(())
    }

    /// Head loss in the link direction (a pump's loss is minus its gain) and its Newton slope.
    fn loss_and_slope(&self, net: &Network, resistance: &[f64], k: usize, q: f64) -> (f64, f64) {
        let pipe_count = resistance.len();
        if k < pipe_count {
            let r = resistance[k];
            let q0 = self.settings.linear_below_m3s;
            if q.abs() < q0 {
                let slope = r * q0.powf(HW_FLOW_EXPONENT - 1.0);
                (slope * q, slope)
            } else {
                HazenWilliams::head_loss_and_slope(r, q)
            }
        } else {
            let curve = &net.pumps[k - pipe_count].curve;
            // A pump curve must fall with flow; a flat spot would make the slope vanish.
            let slope = (-curve.slope(q)).max(1e-6 * curve.shutoff_head_m().abs().max(1.0));
            (-curve.head_gain_m(q), slope)
        }
    }

    /// [`Self::loss_and_slope`] through a one-entry-per-link cache: each iteration evaluates the law at the
    /// new flows for its head residual, and the next iteration assembles at exactly those flows, so the
    /// power function runs once per link and iteration instead of three times.
    fn cached_loss_and_slope(
        &self,
        net: &Network,
        resistance: &[f64],
        cache: &mut [LawAtFlow],
        k: usize,
        q: f64,
    ) -> (f64, f64) {
        let entry = &mut cache[k];
        if entry.flow_m3s.to_bits() != q.to_bits() {
            let (loss_m, slope) = self.loss_and_slope(net, resistance, k, q);
            *entry = LawAtFlow {
                flow_m3s: q,
                loss_m,
                slope,
            };
        }
        (entry.loss_m, entry.slope)
    }

    /// Junctions with no path through flowing links to a fixed head.
    fn isolated_junctions(&self, status: &[LinkStatus], n: usize) -> Vec<bool> {
        let mut adjacency_start = vec![0usize; n + 1];
        for (slots, s) in self.links.iter().zip(status) {
            if !s.carries_flow() {
                continue;
            }
            for node in [slots.from, slots.to] {
                if let NodeRef::Junction(i) = node {
                    adjacency_start[i + 1] += 1;
                }
            }
        }
        for i in 0..n {
            adjacency_start[i + 1] += adjacency_start[i];
        }
        let mut fill = adjacency_start.clone();
        let mut neighbours = vec![usize::MAX; adjacency_start[n]];
        let mut reached = vec![false; n];
        let mut stack = Vec::new();
        for (slots, s) in self.links.iter().zip(status) {
            if !s.carries_flow() {
                continue;
            }
            match (slots.from, slots.to) {
                (NodeRef::Junction(i), NodeRef::Junction(j)) => {
                    neighbours[fill[i]] = j;
                    fill[i] += 1;
                    neighbours[fill[j]] = i;
                    fill[j] += 1;
                }
                (NodeRef::Junction(i), NodeRef::FixedHead(_))
                | (NodeRef::FixedHead(_), NodeRef::Junction(i)) => {
                    neighbours[fill[i]] = usize::MAX;
                    fill[i] += 1;
                    if !reached[i] {
                        reached[i] = true;
                        stack.push(i);
                    }
                }
                _ => {}
            }
        }
        while let Some(i) = stack.pop() {
            for &j in &neighbours[adjacency_start[i]..adjacency_start[i + 1]] {
                if j != usize::MAX && !reached[j] {
                    reached[j] = true;
                    stack.push(j);
                }
            }
        }
        reached.iter().map(|r| !r).collect()
    }

    fn finish(
        &self,
        net: &Network,
        state: &OperatingState,
        resistance: &[f64],
        outcome: SolveOutcome,
    ) -> Result<Solution, SolveError> {
        let SolveOutcome {
            mut head,
            flow,
            status,
            conductance,
            isolated,
            mut warnings,
            iterations,
            factor,
            law_cache,
        } = outcome;
        let pipe_count = net.pipes.len();
        let n = self.junction_count;
        let demand: Vec<f64> = (0..n).map(|j| state.demand_m3s(net, j)).collect();

        let mut imbalance: Vec<f64> = demand.iter().map(|d| -d).collect();
        for (k, slots) in self.links.iter().enumerate() {
            if let NodeRef::Junction(i) = slots.from {
                imbalance[i] -= flow[k];
            }
            if let NodeRef::Junction(i) = slots.to {
                imbalance[i] += flow[k];
            }
        }
        let max_imbalance_m3s = imbalance
            .iter()
            .zip(&isolated)
            .filter(|(_, cut)| !**cut)
            .map(|(v, _)| v.abs())
            .fold(0.0, f64::max);

        // Every solution handed out must balance: the Newton update satisfies continuity exactly up to the
        // linear solve, so anything beyond round-off means the factorization went wrong.
        let total_demand: f64 = demand.iter().map(|d| d.abs()).sum();
        let allowed_m3s = MASS_BALANCE_TOLERANCE * total_demand.max(1e-3);
        if max_imbalance_m3s > allowed_m3s || !max_imbalance_m3s.is_finite() {
            return Err(SolveError::MassBalance {
                imbalance_m3s: max_imbalance_m3s,
                allowed_m3s,
            });
        }

        let isolated_list: Vec<usize> = (0..n).filter(|&j| isolated[j]).collect();
        for &j in &isolated_list {
            head[j] = f64::NAN;
        }
        if !isolated_list.is_empty() {
            warnings.push(SolveWarning::Isolated {
                junctions: isolated_list,
            });
        }
        for (k, s) in status.iter().enumerate().skip(pipe_count) {
            if *s == LinkStatus::PumpCannotLift {
                warnings.push(SolveWarning::PumpCannotLift {
                    pump: k - pipe_count,
                });
            }
        }

        let pipe_flow_m3s: Vec<f64> = flow[..pipe_count].to_vec();
        // The true law everywhere, also below the linearisation flow; the cache already holds it above.
        let pipe_headloss_m = pipe_flow_m3s
            .iter()
            .zip(resistance)
            .zip(&law_cache)
            .map(|((&q, &r), cached)| {
                if cached.flow_m3s.to_bits() == q.to_bits()
                    && q.abs() >= self.settings.linear_below_m3s
                {
                    cached.loss_m
                } else {
                    HazenWilliams::head_loss_m(r, q)
                }
            })
            .collect();
        let pump_flow_m3s: Vec<f64> = flow[pipe_count..].to_vec();
        let pump_head_gain_m = pump_flow_m3s
            .iter()
            .zip(&net.pumps)
            .zip(&status[pipe_count..])
            .map(|((&q, pump), s)| {
                if s.carries_flow() {
                    pump.curve.head_gain_m(q)
                } else {
                    0.0
                }
            })
            .collect();
        let mut solution = Solution {
            head_m: head,
            pipe_flow_m3s,
            pipe_headloss_m,
            pipe_status: status[..pipe_count].to_vec(),
            pump_flow_m3s,
            pump_head_gain_m,
            pump_status: status[pipe_count..].to_vec(),
            iterations,
            max_imbalance_m3s,
            isolated,
            warnings,
            system: factor.map(|(symbolic, factor)| FactorizedSystem {
                symbolic,
                factor,
                conductance,
            }),
        };
        let negative = solution.negative_pressure_junctions(net);
        if !negative.is_empty() {
            solution.warnings.push(SolveWarning::NegativePressure {
                junctions: negative,
            });
        }
        Ok(solution)
    }
}

fn isolated_end(isolated: &[bool], slots: LinkSlots) -> bool {
    [slots.from, slots.to]
        .iter()
        .any(|node| matches!(node, NodeRef::Junction(i) if isolated[*i]))
}

/// A link's head loss and slope at the flow they were evaluated for.
#[derive(Debug, Clone, Copy)]
struct LawAtFlow {
    flow_m3s: f64,
    loss_m: f64,
    slope: f64,
}

struct SolveOutcome {
    head: Vec<f64>,
    flow: Vec<f64>,
    status: Vec<LinkStatus>,
    conductance: Vec<f64>,
    isolated: Vec<bool>,
    warnings: Vec<SolveWarning>,
    iterations: usize,
    factor: Option<(Arc<SymbolicCholesky<usize>>, Vec<f64>)>,
    /// The law at the final flows, as the last head-residual check evaluated it.
    law_cache: Vec<LawAtFlow>,
}
