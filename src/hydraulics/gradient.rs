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
//!
//! **Control valves** follow the extension of the global gradient algorithm to pressure and flow
//! regulating devices by status switching (Todini and Pilati 1988; the status logic of regulating
//! valves as analysed by Deuerlein, Simpson and Dempe 2009, J. Hydraul. Eng. 135(11), and Piller and
//! van Zyl 2014, J. Hydraul. Eng. 140(11); from memory). A valve is, at each iteration, in one of three
//! states: *open* (a minor loss K v^2/2g, its fully open K), *closed*, or *active*:
//!
//! - an active pressure-reducing valve fixes the head of its downstream junction at the setting
//!   (elevation plus set pressure): that junction is pinned in the head system like a fixed head, and the
//!   valve's flow is whatever continuity at the pinned junction asks of it;
//! - an active pressure-sustaining valve pins its upstream junction the same way;
//! - an active flow-control valve carries exactly its setting (a known flow in the right-hand side);
//! - a throttle valve is always open, its setting the loss coefficient.
//!
//! After each head solve, a pressure-reducing valve goes active when its downstream head rises above the
//! setting, opens fully when the upstream head less its open loss cannot reach the setting, and closes
//! against reverse flow (reopening when the heads across it would drive flow forward again); a
//! pressure-sustaining valve mirrors this on its upstream side; a flow-control valve goes active when it
//! would pass more than its setting and opens when the head across it can no longer drive the setting.
//! As for check valves, a valve that keeps switching is frozen closed with a warning. Pinning keeps the
//! matrix pattern and its definiteness, so one symbolic analysis still serves every state. The C
//! sensitivities treat an active valve's flow as fixed in the iteration it converged at: exact when the
//! zone below a pressure-reducing valve has no other supply, otherwise a first-order approximation that
//! ignores how that zone's roughness moves the valve's share of the supply.

use std::sync::Arc;

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::sparse::linalg::SupernodalThreshold;
use faer::sparse::linalg::cholesky::{
    CholeskySymbolicParams, LltRef, SymbolicCholesky, SymmetricOrdering,
    factorize_symbolic_cholesky,
};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::{Conj, MatMut, Par, Side};

use super::headloss::{HW_FLOW_EXPONENT, HazenWilliams, minor_loss_coefficient};
use crate::network::{Condition, Network, NodeRef, ValveKind};

/// Threading of the factorization and the triangular solves. Sequential kernels measured faster than
/// two threads on this project's 2-core benchmark machine at both 10,000 and 90,000 junctions (the
/// blocks of a distribution network's factor are too small to share), and calibration runs its tests on
/// separate threads anyway.
const LINEAR_ALGEBRA_PARALLELISM: Par = Par::Seq;

/// Velocity of the starting flow in every pipe of a cold start (m/s).
const INITIAL_VELOCITY_MS: f64 = 0.1;

/// Smallest Newton slope of an open valve (m per m^3/s). A valve with no open loss has a law h = 0 whose
/// slope vanishes; the floor keeps its conductance finite (1,000 m^3/s per m, thousands of times a
/// main's) without changing the law the iteration converges to, only how fast.
const OPEN_VALVE_MIN_SLOPE: f64 = 1e-3;

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

/// The `[[condition]]` of `net` called `name`, or an error that lists the conditions there are.
pub fn named_condition<'a>(net: &'a Network, name: &str) -> Result<&'a Condition, SolveError> {
    net.find_condition(name)
        .ok_or_else(|| SolveError::UnknownCondition {
            name: name.to_string(),
            known: net.conditions.iter().map(|c| c.name.clone()).collect(),
        })
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
    /// Setting of each valve in internal units (see [`crate::network::Valve::setting`]).
    pub valve_setting: Vec<f64>,
    pub valve_closed: Vec<bool>,
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
            valve_setting: net.valves.iter().map(|v| v.setting).collect(),
            valve_closed: net.valves.iter().map(|v| v.closed).collect(),
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
        for &(valve, setting) in &condition.valve_settings {
            if let Some(slot) = state.valve_setting.get_mut(valve) {
                *slot = setting;
            }
        }
        for &valve in &condition.closed_valves {
            if let Some(slot) = state.valve_closed.get_mut(valve) {
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
            Some(name) => named_condition(net, name).map(|c| Self::for_condition(net, c)),
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
    /// A control valve regulating: holding its set pressure or flow.
    Active,
    /// A control valve shut by its own control: against reverse flow, or a pressure-reducing valve whose
    /// downstream head is already above its setting.
    ControlClosed,
}

impl LinkStatus {
    /// Flows by its own law (a pipe, a running pump, an open valve).
    fn carries_flow(self) -> bool {
        self == Self::Open
    }

    /// Joins its two ends hydraulically: open, or a valve regulating.
    fn connects(self) -> bool {
        matches!(self, Self::Open | Self::Active)
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
            Self::Active => "active",
            Self::ControlClosed => "closed (control)",
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
    Valve(usize),
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
    pub valve_flow_m3s: Vec<f64>,
    /// Head across each valve, from end minus to end (m); NaN where an end is isolated.
    pub valve_head_loss_m: Vec<f64>,
    pub valve_status: Vec<LinkStatus>,
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
    /// p_k = 1/g_k of every link (pipes, pumps, valves) at the final iterate; 0 for links carrying no
    /// flow by their own law.
    conductance: Vec<f64>,
    /// Junctions whose head an active valve fixed: their heads do not move with any C.
    pinned: Vec<bool>,
}

/// One control valve in one solved state, in internal units: what `solve`, `tests`, the calibration's
/// per-test records and the map report for it.
#[derive(Debug, Clone, PartialEq)]
pub struct ValveState {
    /// Index into [`Network::valves`].
    pub valve: usize,
    pub status: LinkStatus,
    /// Flow from `from` to `to` (m^3/s).
    pub flow_m3s: f64,
    /// Head at `from` minus head at `to` (m); `None` where an end is isolated.
    pub head_loss_m: Option<f64>,
}

impl Solution {
    /// Every control valve of `net` in this solution, in the network's order.
    pub fn valve_states(&self, net: &Network) -> Vec<ValveState> {
        (0..net.valves.len())
            .map(|k| ValveState {
                valve: k,
                status: self
                    .valve_status
                    .get(k)
                    .copied()
                    .unwrap_or(LinkStatus::Closed),
                flow_m3s: self.valve_flow_m3s.get(k).copied().unwrap_or(0.0),
                head_loss_m: self
                    .valve_head_loss_m
                    .get(k)
                    .copied()
                    .filter(|h| h.is_finite()),
            })
            .collect()
    }

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
            NodeRef::Junction(i) if !system.pinned[i] => lambda[i],
            NodeRef::Junction(_) | NodeRef::FixedHead(_) => 0.0,
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
                // Only the Hazen-Williams part of the loss depends on C, not the minor loss.
                let q = self.pipe_flow_m3s[k];
                let minor_m =
                    minor_loss_coefficient(pipe.minor_loss, pipe.diameter_m) * q * q.abs();
                let dh_dc = -HW_FLOW_EXPONENT * (self.pipe_headloss_m[k] - minor_m) / c_factors[k];
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
        // A pinned junction's head is set by its valve: nothing upstream moves it.
        if system.pinned.get(junction).copied().unwrap_or(false) {
            return Some((system, vec![0.0; n]));
        }
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

/// Where one link's terms go in the head matrix: its ends and the value slots they touch.
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

/// One link as the solver sees it, built once per network: the law it follows and where its terms go.
/// The link table holds the pipes first, in network order, then the pumps, so a link's position is
/// also its place in every per-link vector of the iterate.
#[derive(Debug, Clone, Copy)]
enum SolverLink {
    /// Pipe `index` of the network: Hazen-Williams plus its minor loss m Q|Q|, and a check valve if the
    /// pipe has one.
    Pipe {
        index: usize,
        check_valve: bool,
        minor_m: f64,
        slots: LinkSlots,
    },
    /// Pump `index` of the network: its head curve.
    Pump { index: usize, slots: LinkSlots },
    /// Valve `index` of the network: its control, and a minor loss when open.
    Valve {
        index: usize,
        kind: ValveKind,
        slots: LinkSlots,
    },
}

impl SolverLink {
    fn slots(&self) -> LinkSlots {
        match *self {
            SolverLink::Pipe { slots, .. }
            | SolverLink::Pump { slots, .. }
            | SolverLink::Valve { slots, .. } => slots,
        }
    }

    fn link_ref(&self) -> LinkRef {
        match *self {
            SolverLink::Pipe { index, .. } => LinkRef::Pipe(index),
            SolverLink::Pump { index, .. } => LinkRef::Pump(index),
            SolverLink::Valve { index, .. } => LinkRef::Valve(index),
        }
    }

    /// The junction whose head this link fixes while it is active: a pressure-reducing valve's
    /// downstream end, a pressure-sustaining valve's upstream end.
    fn controlled_junction(&self) -> Option<usize> {
        match *self {
            SolverLink::Valve {
                kind: ValveKind::PressureReducing,
                slots,
                ..
            } => slots.to.junction(),
            SolverLink::Valve {
                kind: ValveKind::PressureSustaining,
                slots,
                ..
            } => slots.from.junction(),
            _ => None,
        }
    }
}

/// The sparsity pattern of the head matrix (lower triangle, column by column) and its symbolic Cholesky
/// analysis: fixed for one network and shared by every solve.
#[derive(Debug, Clone)]
struct HeadPattern {
    junction_count: usize,
    col_ptr: Vec<usize>,
    row_idx: Vec<usize>,
    diagonal_slot: Vec<usize>,
    symbolic: Option<Arc<SymbolicCholesky<usize>>>,
}

impl HeadPattern {
    /// The pattern of `ends` over `n` junctions: every diagonal, and one entry per pair of junctions
    /// joined by at least one link. Also returns each link's value slots.
    fn analyse(
        n: usize,
        ends: &[(NodeRef, NodeRef)],
    ) -> Result<(Self, Vec<LinkSlots>), SolveError> {
        let mut below: Vec<Vec<usize>> = vec![Vec::new(); n];
        for &(a, b) in ends {
            if let (NodeRef::Junction(i), NodeRef::Junction(j)) = (a, b)
                && i != j
            {
                below[i.min(j)].push(i.max(j));
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
        let diag = |node: NodeRef| match node {
            NodeRef::Junction(i) => Some(diagonal_slot[i]),
            NodeRef::FixedHead(_) => None,
        };
        let slots = ends
            .iter()
            .map(|&(from, to)| LinkSlots {
                from,
                to,
                diag_from: diag(from),
                diag_to: diag(to),
                off_diagonal: match (from, to) {
                    (NodeRef::Junction(i), NodeRef::Junction(j)) if i != j => {
                        Some(slot_of(i.max(j), i.min(j)))
                    }
                    _ => None,
                },
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
        let pattern = Self {
            junction_count: n,
            col_ptr,
            row_idx,
            diagonal_slot,
            symbolic,
        };
        Ok((pattern, slots))
    }
}

/// The linear head system `A H = b` of one Newton iteration (see the module documentation), with its
/// storage reused from iteration to iteration: matrix values on the fixed pattern, right-hand side,
/// numeric factor and factorization workspace.
struct HeadSystem<'p> {
    pattern: &'p HeadPattern,
    values: Vec<f64>,
    rhs: Vec<f64>,
    factor: Vec<f64>,
    workspace: Option<MemBuffer>,
    /// Head an active valve fixes at each junction, NaN where none does.
    pinned_head_m: Vec<f64>,
    /// The junctions pinned now, to clear them at the next assembly.
    pinned: Vec<usize>,
}

impl<'p> HeadSystem<'p> {
    fn new(pattern: &'p HeadPattern) -> Self {
        Self {
            pattern,
            values: vec![0.0; pattern.row_idx.len()],
            rhs: vec![0.0; pattern.junction_count],
            factor: Vec::new(),
            workspace: None,
            pinned_head_m: vec![f64::NAN; pattern.junction_count],
            pinned: Vec::new(),
        }
    }

    /// Pins the junction of every active pressure valve at the valve's target head.
    fn pin_controlled_heads(&mut self, links: &[SolverLink], laws: &LinkLaws, it: &Iterate) {
        for &j in &self.pinned {
            self.pinned_head_m[j] = f64::NAN;
        }
        self.pinned.clear();
        for (k, link) in links.iter().enumerate().skip(laws.first_valve) {
            if it.status[k] != LinkStatus::Active || isolated_end(&it.isolated, link.slots()) {
                continue;
            }
            if let (Some(j), SolverLink::Valve { index, .. }) = (link.controlled_junction(), link) {
                self.pinned_head_m[j] = laws.valve_target[*index];
                self.pinned.push(j);
            }
        }
    }

    /// A link end as the head system sees it: an unknown head, or a known one (fixed head, pinned).
    fn end(&self, node: NodeRef, fixed_head_m: &[f64]) -> LinkEnd {
        match node {
            NodeRef::Junction(i) if self.pinned_head_m[i].is_nan() => LinkEnd::Unknown(i),
            NodeRef::Junction(i) => LinkEnd::Known(self.pinned_head_m[i]),
            NodeRef::FixedHead(f) => LinkEnd::Known(fixed_head_m[f]),
        }
    }

    /// Linearises every link at the iterate's flows and assembles the head system. A link that carries
    /// no flow, or has an end cut off from every fixed head, gets conductance 0 and flow 0; isolated
    /// junctions are pinned (diagonal 1, right-hand side 0) so the matrix stays definite.
    fn assemble(
        &mut self,
        links: &[SolverLink],
        laws: &mut LinkLaws,
        it: &mut Iterate,
        demand_m3s: &[f64],
        fixed_head_m: &[f64],
    ) {
        self.values.iter_mut().for_each(|v| *v = 0.0);
        for (r, d) in self.rhs.iter_mut().zip(demand_m3s) {
            *r = -d;
        }
        self.pin_controlled_heads(links, laws, it);
        for (k, link) in links.iter().enumerate() {
            let slots = link.slots();
            if !it.status[k].connects() || isolated_end(&it.isolated, slots) {
                it.conductance[k] = 0.0;
                it.flow[k] = 0.0;
                continue;
            }
            if it.status[k] == LinkStatus::Active {
                // A regulating valve: a known flow (the set flow, or what continuity asked of it at the
                // last iteration) and no conductance.
                it.conductance[k] = 0.0;
                if let Some(set_flow) = laws.set_flow_m3s(link) {
                    it.flow[k] = set_flow;
                }
                self.add_link(slots, 0.0, it.flow[k], fixed_head_m);
                continue;
            }
            let (loss, slope) = laws.at(k, link, it.flow[k]);
            let p = 1.0 / slope;
            it.conductance[k] = p;
            self.add_link(slots, p, it.flow[k] - p * loss, fixed_head_m);
        }
        for (j, &cut) in it.isolated.iter().enumerate() {
            if cut {
                self.values[self.pattern.diagonal_slot[j]] = 1.0;
                self.rhs[j] = 0.0;
            }
        }
        for &j in &self.pinned {
            self.values[self.pattern.diagonal_slot[j]] = 1.0;
            self.rhs[j] = self.pinned_head_m[j];
        }
    }

    /// One link's terms: conductance `p` on the diagonal of each unknown end and minus it off the
    /// diagonal between two unknown ends; the carried flow Q - y leaves the from junction and enters the
    /// to junction; a known end (fixed head, pinned junction) of head H adds p H to the other end instead.
    fn add_link(&mut self, slots: LinkSlots, p: f64, carried_m3s: f64, fixed_head_m: &[f64]) {
        match (
            self.end(slots.from, fixed_head_m),
            self.end(slots.to, fixed_head_m),
        ) {
            (LinkEnd::Unknown(i), LinkEnd::Unknown(j)) => {
                for d in [slots.diag_from, slots.diag_to].into_iter().flatten() {
                    self.values[d] += p;
                }
                if let Some(o) = slots.off_diagonal {
                    self.values[o] -= p;
                }
                self.rhs[i] -= carried_m3s;
                self.rhs[j] += carried_m3s;
            }
            (LinkEnd::Unknown(i), LinkEnd::Known(head_m)) => {
                self.values[self.pattern.diagonal_slot[i]] += p;
                self.rhs[i] += p * head_m - carried_m3s;
            }
            (LinkEnd::Known(head_m), LinkEnd::Unknown(j)) => {
                self.values[self.pattern.diagonal_slot[j]] += p;
                self.rhs[j] += p * head_m + carried_m3s;
            }
            (LinkEnd::Known(_), LinkEnd::Known(_)) => {}
        }
    }

    /// Factorizes the assembled matrix (numeric Cholesky on the shared symbolic analysis) and solves for
    /// the new heads.
    fn factor_solve(&mut self, head: &mut [f64]) -> Result<(), SolveError> {
        let Some(symbolic) = &self.pattern.symbolic else {
            return Ok(());
        };
        let n = self.pattern.junction_count;
        let structure = SymbolicSparseColMatRef::new_checked(
            n,
            n,
            &self.pattern.col_ptr,
            None,
            &self.pattern.row_idx,
        );
        let matrix = SparseColMatRef::new(structure, &self.values);
        let par = LINEAR_ALGEBRA_PARALLELISM;
        let workspace = self.workspace.get_or_insert_with(|| {
            MemBuffer::new(
                symbolic
                    .factorize_numeric_llt_scratch::<f64>(par, Default::default())
                    .or(symbolic.solve_in_place_scratch::<f64>(1, par)),
            )
        });
        self.factor.resize(symbolic.len_val(), 0.0);
        let llt = symbolic
            .factorize_numeric_llt(
                &mut self.factor,
                matrix,
                Side::Lower,
                Default::default(),
                par,
                MemStack::new(workspace),
                Default::default(),
            )
            .map_err(|e| SolveError::Factorization(format!("{e:?}")))?;
        head.copy_from_slice(&self.rhs);
        llt.solve_in_place_with_conj(
            Conj::No,
            MatMut::from_column_major_slice_mut(head, n, 1),
            par,
            MemStack::new(workspace),
        );
        Ok(())
    }

    /// The last factor and the junctions it pinned, kept with the solution for sensitivities.
    fn into_factor(self) -> Option<LastFactor> {
        let symbolic = self.pattern.symbolic.as_ref()?;
        Some(LastFactor {
            symbolic: Arc::clone(symbolic),
            factor: self.factor,
            pinned: self.pinned_head_m.iter().map(|h| !h.is_nan()).collect(),
        })
    }
}

/// One end of a link in the head system.
#[derive(Debug, Clone, Copy)]
enum LinkEnd {
    /// A junction whose head is solved for.
    Unknown(usize),
    /// A fixed head, or a junction pinned by an active valve (m).
    Known(f64),
}

/// The factor of the last iteration, as [`HeadSystem::into_factor`] hands it on.
struct LastFactor {
    symbolic: Arc<SymbolicCholesky<usize>>,
    factor: Vec<f64>,
    pinned: Vec<bool>,
}

/// The Newton iterate: heads per junction; flow, status and conductance p = 1/g per solver link.
struct Iterate {
    head: Vec<f64>,
    flow: Vec<f64>,
    status: Vec<LinkStatus>,
    conductance: Vec<f64>,
    isolated: Vec<bool>,
    /// How often each link changed status, to freeze one that oscillates.
    status_changes: Vec<u32>,
    warnings: Vec<SolveWarning>,
}

impl Iterate {
    fn node_head_m(&self, fixed_head_m: &[f64], node: NodeRef) -> f64 {
        match node {
            NodeRef::Junction(i) => self.head[i],
            NodeRef::FixedHead(f) => fixed_head_m[f],
        }
    }
}

/// The link laws of one solve (pipe resistances at the trial C, pump curves), with a one-entry-per-link
/// cache: each iteration evaluates the law at the new flows for its head residual, and the next
/// iteration assembles at exactly those flows, so the power function runs once per link and iteration
/// instead of three times.
struct LinkLaws<'a> {
    net: &'a Network,
    resistance: &'a [f64],
    linear_below_m3s: f64,
    cache: Vec<LawAtFlow>,
    /// Position of the first valve in the link table.
    first_valve: usize,
    /// Open-loss coefficient m (h = m Q|Q|) of each valve: its open K, or a throttle's setting.
    valve_open_m: Vec<f64>,
    /// What each valve holds while active: a head (m) for pressure valves (elevation of the controlled
    /// end plus the set pressure head; NaN when that end is a fixed head), a flow (m^3/s) for flow
    /// control, NaN for throttles.
    valve_target: Vec<f64>,
}

impl<'a> LinkLaws<'a> {
    fn new(
        net: &'a Network,
        state: &OperatingState,
        resistance: &'a [f64],
        linear_below_m3s: f64,
    ) -> Self {
        let unevaluated = LawAtFlow {
            flow_m3s: f64::NAN,
            loss_m: 0.0,
            slope: 0.0,
        };
        let elevation = |node: NodeRef| match node {
            NodeRef::Junction(i) => net.junctions[i].elevation_m,
            NodeRef::FixedHead(_) => f64::NAN,
        };
        let (valve_open_m, valve_target) = net
            .valves
            .iter()
            .zip(&state.valve_setting)
            .map(|(valve, &setting)| match valve.kind {
                ValveKind::Throttle => {
                    (minor_loss_coefficient(setting, valve.diameter_m), f64::NAN)
                }
                kind => {
                    let open_m = minor_loss_coefficient(valve.minor_loss, valve.diameter_m);
                    let target = match kind {
                        ValveKind::PressureReducing => elevation(valve.to) + setting,
                        ValveKind::PressureSustaining => elevation(valve.from) + setting,
                        _ => setting,
                    };
                    (open_m, target)
                }
            })
            .unzip();
        Self {
            net,
            resistance,
            linear_below_m3s,
            cache: vec![unevaluated; net.pipes.len() + net.pumps.len() + net.valves.len()],
            first_valve: net.pipes.len() + net.pumps.len(),
            valve_open_m,
            valve_target,
        }
    }

    /// The flow an active flow-control valve carries.
    fn set_flow_m3s(&self, link: &SolverLink) -> Option<f64> {
        match *link {
            SolverLink::Valve {
                index,
                kind: ValveKind::FlowControl,
                ..
            } => Some(self.valve_target[index]),
            _ => None,
        }
    }

    /// Loss of a valve fully open at flow `q` (m).
    fn valve_open_loss_m(&self, valve: usize, q: f64) -> f64 {
        self.valve_open_m[valve] * q * q.abs()
    }

    /// Head loss of link `k` in its own direction at flow `q` (a pump's loss is minus its gain), and its
    /// Newton slope.
    fn at(&mut self, k: usize, link: &SolverLink, q: f64) -> (f64, f64) {
        let entry = self.cache[k];
        if entry.flow_m3s.to_bits() == q.to_bits() {
            return (entry.loss_m, entry.slope);
        }
        let (loss_m, slope) = match *link {
            SolverLink::Pipe { index, minor_m, .. } => {
                let r = self.resistance[index];
                let q0 = self.linear_below_m3s;
                let (loss, slope) = if q.abs() < q0 {
                    let slope = r * q0.powf(HW_FLOW_EXPONENT - 1.0);
                    (slope * q, slope)
                } else {
                    HazenWilliams::head_loss_and_slope(r, q)
                };
                (
                    loss + minor_m * q * q.abs(),
                    slope + 2.0 * minor_m * q.abs(),
                )
            }
            SolverLink::Valve { index, .. } => {
                let m = self.valve_open_m[index];
                (
                    m * q * q.abs(),
                    (2.0 * m * q.abs()).max(OPEN_VALVE_MIN_SLOPE),
                )
            }
            SolverLink::Pump { index, .. } => {
                let curve = &self.net.pumps[index].curve;
                // A pump curve must fall with flow; a flat spot would make the slope vanish.
                let slope = (-curve.slope(q)).max(1e-6 * curve.shutoff_head_m().abs().max(1.0));
                (-curve.head_gain_m(q), slope)
            }
        };
        self.cache[k] = LawAtFlow {
            flow_m3s: q,
            loss_m,
            slope,
        };
        (loss_m, slope)
    }
}

/// A solver bound to one network topology, holding its symbolic factorization.
#[derive(Debug, Clone)]
pub struct GradientSolver {
    settings: SolverSettings,
    links: Vec<SolverLink>,
    pattern: HeadPattern,
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
        let ends: Vec<(NodeRef, NodeRef)> = net
            .pipes
            .iter()
            .map(|p| (p.from, p.to))
            .chain(net.pumps.iter().map(|p| (p.from, p.to)))
            .chain(net.valves.iter().map(|v| (v.from, v.to)))
            .collect();
        let (pattern, slots) = HeadPattern::analyse(net.junctions.len(), &ends)?;
        let pipes = net
            .pipes
            .iter()
            .enumerate()
            .map(|(index, pipe)| SolverLink::Pipe {
                index,
                check_valve: pipe.check_valve,
                minor_m: minor_loss_coefficient(pipe.minor_loss, pipe.diameter_m),
                slots: slots[index],
            });
        let pumps = (0..net.pumps.len()).map(|index| SolverLink::Pump {
            index,
            slots: slots[net.pipes.len() + index],
        });
        let first_valve = net.pipes.len() + net.pumps.len();
        let valves = net
            .valves
            .iter()
            .enumerate()
            .map(|(index, valve)| SolverLink::Valve {
                index,
                kind: valve.kind,
                slots: slots[first_valve + index],
            });
        Ok(Self {
            settings,
            links: pipes.chain(pumps).chain(valves).collect(),
            pattern,
            law: HazenWilliams::for_network(net),
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
    ///
    /// Each Newton iteration: find the junctions cut off from every fixed head (only after a status
    /// changed), assemble and solve the head system, update the flows from the new heads, let check
    /// valves and pumps change status, and measure the head-balance residual.
    pub fn solve_with_resistances(
        &self,
        net: &Network,
        state: &OperatingState,
        resistance: &[f64],
        warm_start: Option<&Solution>,
    ) -> Result<Solution, SolveError> {
        self.check_sizes(net, state, ("the resistance list", resistance.len()))?;
        let settings = self.settings;
        let demand_m3s: Vec<f64> = (0..self.pattern.junction_count)
            .map(|j| state.demand_m3s(net, j))
            .collect();
        let mut laws = LinkLaws::new(net, state, resistance, settings.linear_below_m3s);
        let mut it = self.starting_iterate(net, state, warm_start);
        let mut system = HeadSystem::new(&self.pattern);
        let mut relative_change = f64::INFINITY;
        let mut head_residual = f64::INFINITY;
        // Isolation depends only on statuses, so it is redone only after one changed.
        let mut statuses_changed = true;
        for iteration in 1..=settings.max_iterations {
            if statuses_changed {
                it.isolated = self.isolated_junctions(net, &it.status);
            }
            system.assemble(
                &self.links,
                &mut laws,
                &mut it,
                &demand_m3s,
                &state.fixed_head_m,
            );
            system.factor_solve(&mut it.head)?;
            if it.head.iter().any(|h| !h.is_finite()) {
                return Err(SolveError::NonFinite { iteration });
            }
            relative_change = self.update_flows(&mut laws, &mut it, state, &demand_m3s);
            statuses_changed = self.update_statuses(net, state, &laws, &mut it);
            head_residual = self.head_residual(&mut laws, &it, &state.fixed_head_m);
            if !statuses_changed
                && relative_change < settings.relative_flow_tolerance
                && head_residual < settings.head_tolerance_m
            {
                let factor = system.into_factor();
                return self.finish(net, state, laws, it, factor, iteration);
            }
        }
        Err(SolveError::NotConverged {
            iterations: settings.max_iterations,
            relative_flow_change: relative_change,
            max_head_residual_m: head_residual,
        })
    }

    /// Statuses fixed by the file or the condition, starting flows (or a warm start's), starting heads.
    fn starting_iterate(
        &self,
        net: &Network,
        state: &OperatingState,
        warm_start: Option<&Solution>,
    ) -> Iterate {
        let link_count = self.links.len();
        let (mut status, mut flow): (Vec<LinkStatus>, Vec<f64>) = self
            .links
            .iter()
            .map(|link| match *link {
                SolverLink::Pipe { index, .. } => {
                    let status = if state.pipe_closed[index] {
                        LinkStatus::Closed
                    } else {
                        LinkStatus::Open
                    };
                    // 0.1 m/s (a third of a foot a second) in every pipe, about what mains carry on an
                    // average day. Measured on the synthetic cities, it converged in fewer iterations than
                    // 0.03, 0.3 or 1 m/s (9 against 11 at 10,000 junctions); the answer does not depend on
                    // it.
                    let d = net.pipes[index].diameter_m;
                    (
                        status,
                        INITIAL_VELOCITY_MS * std::f64::consts::PI * d * d / 4.0,
                    )
                }
                SolverLink::Pump { index, .. } => {
                    let status = if state.pump_off[index] {
                        LinkStatus::PumpOff
                    } else {
                        LinkStatus::Open
                    };
                    let curve = &net.pumps[index].curve;
                    let q = curve
                        .max_flow_m3s()
                        .map(|q| q / 2.0)
                        .or_else(|| curve.points.get(curve.points.len() / 2).map(|p| p.0))
                        .unwrap_or(0.01)
                        .max(1e-4);
                    (status, q)
                }
                SolverLink::Valve { index, .. } => {
                    let status = if state.valve_closed[index] {
                        LinkStatus::Closed
                    } else {
                        LinkStatus::Open
                    };
                    let d = net.valves[index].diameter_m;
                    (
                        status,
                        INITIAL_VELOCITY_MS * std::f64::consts::PI * d * d / 4.0,
                    )
                }
            })
            .unzip();
        let mut head = vec![0.0; self.pattern.junction_count];
        if let Some(warm) = warm_start
            && warm.pipe_flow_m3s.len() == net.pipes.len()
            && warm.pump_flow_m3s.len() == net.pumps.len()
            && warm.valve_flow_m3s.len() == net.valves.len()
        {
            for (k, link) in self.links.iter().enumerate() {
                let (warm_q, warm_status) = match *link {
                    SolverLink::Pipe { index, .. } => {
                        (warm.pipe_flow_m3s[index], warm.pipe_status[index])
                    }
                    SolverLink::Pump { index, .. } => {
                        (warm.pump_flow_m3s[index], warm.pump_status[index])
                    }
                    SolverLink::Valve { index, .. } => {
                        (warm.valve_flow_m3s[index], warm.valve_status[index])
                    }
                };
                if status[k] != LinkStatus::Open {
                    continue;
                }
                if matches!(
                    warm_status,
                    LinkStatus::CheckValveClosed
                        | LinkStatus::PumpCannotLift
                        | LinkStatus::ControlClosed
                        | LinkStatus::Active
                ) {
                    status[k] = warm_status;
                }
                if warm_status.connects() && warm_q != 0.0 {
                    flow[k] = warm_q;
                }
            }
        }
        if let Some(warm) = warm_start
            && warm.head_m.len() == head.len()
        {
            for (h, &w) in head.iter_mut().zip(&warm.head_m) {
                if w.is_finite() {
                    *h = w;
                }
            }
        }
        Iterate {
            head,
            flow,
            status,
            conductance: vec![0.0; link_count],
            isolated: vec![false; self.pattern.junction_count],
            status_changes: vec![0; link_count],
            warnings: Vec::new(),
        }
    }

    /// New flows from the new heads, Q' = Q - y + p (H_a - H_b), and for each active pressure valve the
    /// flow continuity asks of it at the junction it pins; returns the relative flow change
    /// sum|Q' - Q| / sum|Q'|.
    fn update_flows(
        &self,
        laws: &mut LinkLaws,
        it: &mut Iterate,
        state: &OperatingState,
        demand_m3s: &[f64],
    ) -> f64 {
        let fixed_head_m = &state.fixed_head_m;
        let mut change_sum = 0.0;
        let mut flow_sum = 0.0;
        for (k, link) in self.links.iter().enumerate() {
            let p = it.conductance[k];
            if p == 0.0 {
                continue;
            }
            let slots = link.slots();
            let (loss, _) = laws.at(k, link, it.flow[k]);
            let drop =
                it.node_head_m(fixed_head_m, slots.from) - it.node_head_m(fixed_head_m, slots.to);
            let new_q = it.flow[k] - p * loss + p * drop;
            change_sum += (new_q - it.flow[k]).abs();
            flow_sum += new_q.abs();
            it.flow[k] = new_q;
        }
        for (k, new_q) in self.pressure_valve_flows(laws, it, demand_m3s) {
            change_sum += (new_q - it.flow[k]).abs();
            flow_sum += new_q.abs();
            it.flow[k] = new_q;
        }
        // A network at rest has no flow to be relative to: measure against the linearisation flow.
        change_sum / flow_sum.max(self.links.len() as f64 * self.settings.linear_below_m3s)
    }

    /// The flow of each active pressure valve from continuity at the junction it pins: what that
    /// junction's other links and demand leave over. Valves pinning one junction share it equally.
    fn pressure_valve_flows(
        &self,
        laws: &LinkLaws,
        it: &Iterate,
        demand_m3s: &[f64],
    ) -> Vec<(usize, f64)> {
        let regulating: Vec<(usize, usize)> = self
            .links
            .iter()
            .enumerate()
            .skip(laws.first_valve)
            .filter(|(k, link)| {
                it.status[*k] == LinkStatus::Active && !isolated_end(&it.isolated, link.slots())
            })
            .filter_map(|(k, link)| link.controlled_junction().map(|j| (k, j)))
            .collect();
        if regulating.is_empty() {
            return Vec::new();
        }
        let mut inflow = vec![0.0; self.pattern.junction_count];
        let mut sharing = vec![0u32; self.pattern.junction_count];
        for &(_, j) in &regulating {
            sharing[j] += 1;
        }
        for (k, link) in self.links.iter().enumerate() {
            if regulating.iter().any(|&(r, _)| r == k) {
                continue;
            }
            let slots = link.slots();
            if let NodeRef::Junction(i) = slots.from {
                inflow[i] -= it.flow[k];
            }
            if let NodeRef::Junction(i) = slots.to {
                inflow[i] += it.flow[k];
            }
        }
        regulating
            .iter()
            .map(|&(k, j)| {
                let left_over = (demand_m3s[j] - inflow[j]) / f64::from(sharing[j]);
                // Downstream of a reducing valve the junction needs what it does not receive; upstream
                // of a sustaining valve it passes on what it does not use.
                let q = if slots_to_is(self.links[k].slots(), j) {
                    left_over
                } else {
                    -left_over
                };
                (k, q)
            })
            .collect()
    }

    /// Check valves close against reverse flow and reopen when the heads would push flow forward; a pump
    /// that would run backwards stops lifting and restarts when the lift falls below its shutoff head. A
    /// link that changes status more than [`SolverSettings::max_status_changes`] times is frozen closed
    /// with a warning. Returns whether any status changed.
    fn update_statuses(
        &self,
        net: &Network,
        state: &OperatingState,
        laws: &LinkLaws,
        it: &mut Iterate,
    ) -> bool {
        let settings = self.settings;
        let tolerance = settings.head_tolerance_m;
        let mut changed = false;
        for (k, link) in self.links.iter().enumerate() {
            let slots = link.slots();
            let lift = it.node_head_m(&state.fixed_head_m, slots.to)
                - it.node_head_m(&state.fixed_head_m, slots.from);
            let new_status = match (*link, it.status[k]) {
                (
                    SolverLink::Pipe {
                        check_valve: false, ..
                    },
                    _,
                ) => continue,
                (SolverLink::Pump { index, .. }, _) if state.pump_off[index] => continue,
                _ if isolated_end(&it.isolated, slots) => continue,
                (SolverLink::Pipe { .. }, LinkStatus::Open) if it.flow[k] < 0.0 => {
                    LinkStatus::CheckValveClosed
                }
                (SolverLink::Pipe { .. }, LinkStatus::CheckValveClosed) if -lift > tolerance => {
                    LinkStatus::Open
                }
                (SolverLink::Pump { .. }, LinkStatus::Open) if it.flow[k] < 0.0 => {
                    LinkStatus::PumpCannotLift
                }
                (SolverLink::Pump { index, .. }, LinkStatus::PumpCannotLift)
                    if lift < net.pumps[index].curve.shutoff_head_m() - tolerance =>
                {
                    LinkStatus::Open
                }
                (SolverLink::Valve { index, kind, .. }, status) => {
                    let target = laws.valve_target[index];
                    let heads = ValveHeads {
                        from_m: it.node_head_m(&state.fixed_head_m, slots.from),
                        to_m: it.node_head_m(&state.fixed_head_m, slots.to),
                        open_loss_m: laws.valve_open_loss_m(
                            index,
                            if kind == ValveKind::FlowControl {
                                target
                            } else {
                                it.flow[k]
                            },
                        ),
                    };
                    match next_valve_status(kind, status, heads, it.flow[k], target, tolerance) {
                        Some(next) => next,
                        None => continue,
                    }
                }
                _ => continue,
            };
            changed = true;
            it.status_changes[k] += 1;
            if it.status_changes[k] > settings.max_status_changes {
                it.status[k] = LinkStatus::FrozenClosed;
                it.warnings.push(SolveWarning::StatusOscillation {
                    link: link.link_ref(),
                });
            } else {
                it.status[k] = new_status;
            }
            it.flow[k] = match (new_status, *link) {
                (LinkStatus::Active, link) => laws
                    .set_flow_m3s(&link)
                    .unwrap_or(settings.linear_below_m3s * 10.0),
                (LinkStatus::Open, SolverLink::Pipe { .. } | SolverLink::Valve { .. }) => {
                    settings.linear_below_m3s * 10.0
                }
                (LinkStatus::Open, SolverLink::Pump { index, .. }) => net.pumps[index]
                    .curve
                    .max_flow_m3s()
                    .map_or(1e-3, |q| q / 2.0),
                _ => 0.0,
            };
        }
        changed
    }

    /// Largest head-balance residual |h_k(Q_k) - (H_a - H_b)| over the links that carry flow (m).
    fn head_residual(&self, laws: &mut LinkLaws, it: &Iterate, fixed_head_m: &[f64]) -> f64 {
        let mut largest = 0.0f64;
        for (k, link) in self.links.iter().enumerate() {
            if it.conductance[k] == 0.0 || !it.status[k].carries_flow() {
                continue;
            }
            let slots = link.slots();
            let (loss, _) = laws.at(k, link, it.flow[k]);
            let drop =
                it.node_head_m(fixed_head_m, slots.from) - it.node_head_m(fixed_head_m, slots.to);
            largest = largest.max((loss - drop).abs());
        }
        largest
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
                self.pattern.junction_count,
            ),
            (
                "the link list",
                net.pipes.len() + net.pumps.len() + net.valves.len(),
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
            (
                "the valve setting list",
                state.valve_setting.len(),
                net.valves.len(),
            ),
            (
                "the valve status list",
                state.valve_closed.len(),
                net.valves.len(),
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

    /// Junctions with no path through flowing links to a fixed head
    /// ([`crate::network::graph::junctions_reaching_fixed_heads`] over the links whose status connects).
    fn isolated_junctions(&self, net: &Network, status: &[LinkStatus]) -> Vec<bool> {
        let flowing = self
            .links
            .iter()
            .zip(status)
            .filter(|(_, s)| s.connects())
            .map(|(link, _)| {
                let slots = link.slots();
                (slots.from, slots.to)
            });
        crate::network::graph::junctions_reaching_fixed_heads(net, flowing)
            .into_iter()
            .map(|reached| !reached)
            .collect()
    }

    /// Checks the mass balance of the converged iterate and hands it out as a [`Solution`], with its
    /// warnings (isolated junctions, pumps that cannot lift, negative pressures) and the last factor.
    fn finish(
        &self,
        net: &Network,
        state: &OperatingState,
        laws: LinkLaws,
        it: Iterate,
        factor: Option<LastFactor>,
        iterations: usize,
    ) -> Result<Solution, SolveError> {
        let Iterate {
            mut head,
            flow,
            status,
            conductance,
            isolated,
            mut warnings,
            ..
        } = it;
        let pipe_count = net.pipes.len();
        let first_valve = laws.first_valve;
        let fixed_head_m = &state.fixed_head_m;
        let demand_m3s: Vec<f64> = (0..head.len()).map(|j| state.demand_m3s(net, j)).collect();

        let mut imbalance: Vec<f64> = demand_m3s.iter().map(|d| -d).collect();
        for (link, q) in self.links.iter().zip(&flow) {
            let slots = link.slots();
            if let NodeRef::Junction(i) = slots.from {
                imbalance[i] -= q;
            }
            if let NodeRef::Junction(i) = slots.to {
                imbalance[i] += q;
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
        let total_demand: f64 = demand_m3s.iter().map(|d| d.abs()).sum();
        let allowed_m3s = MASS_BALANCE_TOLERANCE * total_demand.max(1e-3);
        if max_imbalance_m3s > allowed_m3s || !max_imbalance_m3s.is_finite() {
            return Err(SolveError::MassBalance {
                imbalance_m3s: max_imbalance_m3s,
                allowed_m3s,
            });
        }

        let isolated_list: Vec<usize> = (0..head.len()).filter(|&j| isolated[j]).collect();
        for &j in &isolated_list {
            head[j] = f64::NAN;
        }
        if !isolated_list.is_empty() {
            warnings.push(SolveWarning::Isolated {
                junctions: isolated_list,
            });
        }
        for (link, s) in self.links.iter().zip(&status) {
            if let (SolverLink::Pump { index, .. }, LinkStatus::PumpCannotLift) = (link, s) {
                warnings.push(SolveWarning::PumpCannotLift { pump: *index });
            }
        }

        let pipe_flow_m3s: Vec<f64> = flow[..pipe_count].to_vec();
        // The true law everywhere, also below the linearisation flow; the cache already holds it above.
        let pipe_headloss_m = pipe_flow_m3s
            .iter()
            .zip(laws.resistance)
            .zip(&laws.cache)
            .map(|((&q, &r), cached)| {
                if cached.flow_m3s.to_bits() == q.to_bits() && q.abs() >= laws.linear_below_m3s {
                    cached.loss_m
                } else {
                    HazenWilliams::head_loss_m(r, q)
                }
            })
            .collect();
        let pump_flow_m3s: Vec<f64> = flow[pipe_count..first_valve].to_vec();
        let valve_head_loss_m = self.links[first_valve..]
            .iter()
            .map(|link| {
                let slots = link.slots();
                let head_of = |node: NodeRef| match node {
                    NodeRef::Junction(i) => head[i],
                    NodeRef::FixedHead(f) => fixed_head_m[f],
                };
                head_of(slots.from) - head_of(slots.to)
            })
            .collect();
        let pump_head_gain_m = pump_flow_m3s
            .iter()
            .zip(&net.pumps)
            .zip(&status[pipe_count..first_valve])
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
            pump_status: status[pipe_count..first_valve].to_vec(),
            valve_flow_m3s: flow[first_valve..].to_vec(),
            valve_head_loss_m,
            valve_status: status[first_valve..].to_vec(),
            iterations,
            max_imbalance_m3s,
            isolated,
            warnings,
            system: factor.map(|last| FactorizedSystem {
                symbolic: last.symbolic,
                factor: last.factor,
                conductance,
                pinned: last.pinned,
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

/// Heads at a valve's two ends and its loss when fully open at the flow that matters (m).
#[derive(Debug, Clone, Copy)]
struct ValveHeads {
    from_m: f64,
    to_m: f64,
    open_loss_m: f64,
}

/// The state a regulating valve moves to after a head solve, if it changes (the status logic of the
/// module documentation). `target` is the head a pressure valve holds (m) or the flow a flow-control
/// valve caps (m^3/s); `flow` the valve's flow in its own direction (m^3/s).
fn next_valve_status(
    kind: ValveKind,
    status: LinkStatus,
    heads: ValveHeads,
    flow: f64,
    target: f64,
    tolerance_m: f64,
) -> Option<LinkStatus> {
    use LinkStatus::{Active, ControlClosed, Open};
    let ValveHeads {
        from_m,
        to_m,
        open_loss_m,
    } = heads;
    let next = match (kind, status) {
        (ValveKind::PressureReducing | ValveKind::PressureSustaining, Active | Open)
            if flow < 0.0 =>
        {
            ControlClosed
        }
        // Even fully open the upstream head cannot give the set downstream head.
        (ValveKind::PressureReducing, Active) if from_m - open_loss_m < target - tolerance_m => {
            Open
        }
        (ValveKind::PressureReducing, Open) if to_m > target + tolerance_m => Active,
        (ValveKind::PressureReducing, ControlClosed)
            if from_m > target + tolerance_m && to_m < target - tolerance_m =>
        {
            Active
        }
        (ValveKind::PressureReducing, ControlClosed)
            if from_m > to_m + tolerance_m && from_m <= target + tolerance_m =>
        {
            Open
        }
        // Even fully open the downstream head keeps the upstream above its setting.
        (ValveKind::PressureSustaining, Active) if to_m + open_loss_m > target + tolerance_m => {
            Open
        }
        (ValveKind::PressureSustaining, Open) if from_m < target - tolerance_m => Active,
        (ValveKind::PressureSustaining, ControlClosed)
            if from_m > target + tolerance_m && to_m < target - tolerance_m =>
        {
            Active
        }
        (ValveKind::PressureSustaining, ControlClosed)
            if from_m > to_m + tolerance_m && to_m >= target - tolerance_m =>
        {
            Open
        }
        // The head across it can no longer drive the set flow even fully open.
        (ValveKind::FlowControl, Active) if from_m - to_m < open_loss_m - tolerance_m => Open,
        (ValveKind::FlowControl, Open) if flow > target => Active,
        _ => return None,
    };
    Some(next)
}

/// Whether `junction` is the to end of a link.
fn slots_to_is(slots: LinkSlots, junction: usize) -> bool {
    slots.to == NodeRef::Junction(junction)
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

#[cfg(test)]
mod tests {
    use super::*;

    fn chain_slots(
        pattern_links: &[(NodeRef, NodeRef)],
        n: usize,
    ) -> (HeadPattern, Vec<LinkSlots>) {
        HeadPattern::analyse(n, pattern_links).expect("a chain has a definite pattern")
    }

    /// Assembly against the head equation written out by hand for a fixed head F feeding junction 0,
    /// which feeds junction 1 (module documentation): row 0 is (p1 + p2) H0 - p2 H1 = -d0 + (Q1 - y1)
    /// - (Q2 - y2) + p1 H_F, row 1 is p2 H1 - p2 H0 = -d1 + (Q2 - y2).
    #[test]
    fn assembly_is_the_head_equation_of_a_two_junction_chain() {
        let ends = [
            (NodeRef::FixedHead(0), NodeRef::Junction(0)),
            (NodeRef::Junction(0), NodeRef::Junction(1)),
        ];
        let (pattern, slots) = chain_slots(&ends, 2);
        let mut system = HeadSystem::new(&pattern);
        system.values.iter_mut().for_each(|v| *v = 0.0);
        system.rhs = vec![-0.01, -0.02];
        let (p1, c1, p2, c2, h_f) = (3.0, 0.05, 2.0, 0.02, 40.0);
        system.add_link(slots[0], p1, c1, &[h_f]);
        system.add_link(slots[1], p2, c2, &[h_f]);
        let diag0 = system.values[pattern.diagonal_slot[0]];
        let diag1 = system.values[pattern.diagonal_slot[1]];
        let off = system.values[slots[1].off_diagonal.expect("junction-junction link")];
        assert_eq!((diag0, diag1, off), (p1 + p2, p2, -p2));
        assert!((system.rhs[0] - (-0.01 + c1 - c2 + p1 * h_f)).abs() < 1e-12);
        assert!((system.rhs[1] - (-0.02 + c2)).abs() < 1e-12);
    }

    /// The factor and solve return the exact solution of a small definite system: with p1 = 3, p2 = 2,
    /// right-hand side (b0, b1) the heads solve [[5, -2], [-2, 2]] H = b.
    #[test]
    fn factor_solve_inverts_the_assembled_matrix() {
        let ends = [
            (NodeRef::FixedHead(0), NodeRef::Junction(0)),
            (NodeRef::Junction(0), NodeRef::Junction(1)),
        ];
        let (pattern, slots) = chain_slots(&ends, 2);
        let mut system = HeadSystem::new(&pattern);
        system.add_link(slots[0], 3.0, 0.0, &[0.0]);
        system.add_link(slots[1], 2.0, 0.0, &[0.0]);
        system.rhs = vec![1.0, 4.0];
        let mut head = vec![0.0; 2];
        system.factor_solve(&mut head).expect("definite");
        // [[5, -2], [-2, 2]]^-1 (1, 4) = (1/6) [[2, 2], [2, 5]] (1, 4) = (10/6, 22/6).
        assert!((head[0] - 10.0 / 6.0).abs() < 1e-12, "{head:?}");
        assert!((head[1] - 22.0 / 6.0).abs() < 1e-12, "{head:?}");
    }
}
