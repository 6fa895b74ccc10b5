//! The loop solver: Hardy Cross's method of balancing heads by correcting assumed flows (H. Cross,
//! "Analysis of flow in networks of conduits or conductors", University of Illinois Engineering
//! Experiment Station Bulletin 286, 1936).
//!
//! A second solver, independent of the gradient solver, whose every step an engineer can follow:
//!
//! 1. A breadth-first spanning tree over the open pipes is grown from fixed head 0 (then from any fixed
//!    head it did not reach). Every pipe left out of the tree (a cotree pipe) closes one fundamental
//!    loop: the pipe itself, then the tree path from its `to` end back to its `from` end. Every other
//!    fixed head in a tree adds a path loop: the tree path from it to the tree's root fixed head,
//!    closed by the known difference of their grades.
//! 2. The starting flows satisfy continuity: each tree pipe carries the demand of everything beyond it,
//!    cotree pipes carry nothing, and all water comes from the root fixed heads.
//! 3. Each iteration sweeps the loops in turn, applying each correction at once (later loops see it):
//!    `dQ = -sum(h) / (1.852 sum|h/Q|)`, with `h` the head loss of each pipe signed by the loop's
//!    direction and, in a path loop, the grade difference subtracted from the sum (Cross 1936, the
//!    method of balancing heads, with the Hazen-Williams exponent 1.852). The correction is added to
//!    every pipe of the loop with the loop's orientation, so continuity is kept at every junction.
//!    The iteration stops when the largest loop imbalance (the `sum(h)` above, evaluated after the
//!    sweep) is below the tolerance.
//!
//! `|h/Q| = r |Q|^0.852`, which vanishes with `Q`: a loop whose pipes all carry almost no flow (a
//! path loop between two fixed heads at the first iteration, say) would get an unbounded correction.
//! The guard floors `|Q|` at [`LoopOptions::min_flow_m3s`] in the denominator only; the step is then
//! too large at worst, and later Newton steps on the convex law walk it back.
//!
//! The method here handles plain Hazen-Williams pipes only. Each element without such a law is named in
//! [`LoopError::Unsupported`] with the reason ([`UnsupportedElement`]): a running pump (no pump curve in
//! a loop correction), a pipe with a check valve (no status switching), a control valve in service (no
//! valve law) and a pipe with a minor loss (the correction assumes the single exponent 1.852). Closed
//! pipes, closed valves and pumps that are off carry no flow and are left out.

use thiserror::Error;

use super::headloss::{HW_FLOW_EXPONENT, HazenWilliams};
use crate::network::graph::{self, Adjacency, ForestRoots, SpanningForest};
use crate::network::{Network, NodeRef};

/// Settings of [`solve_loops`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoopOptions {
    /// Most sweeps over the loops before giving up.
    pub max_iterations: usize,
    /// Converged when every loop's imbalance (sum of head around it) is below this, in metres.
    pub tolerance_m: f64,
    /// Floor of `|Q|` in the correction's denominator (see the module documentation), m^3/s.
    pub min_flow_m3s: f64,
}

impl Default for LoopOptions {
    /// 50 iterations, 1 mm of head, 1e-5 m^3/s (0.01 L/s, 0.16 gpm).
    fn default() -> Self {
        Self {
            max_iterations: 50,
            tolerance_m: 1e-3,
            min_flow_m3s: 1e-5,
        }
    }
}

/// One pipe of a loop and whether the loop runs through it from its `from` end to its `to` end.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LoopPipe {
    /// Index into [`Network::pipes`].
    pub pipe: usize,
    pub forward: bool,
}

/// What closes a loop.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LoopKind {
    /// A fundamental loop closed by a cotree pipe (the loop's first pipe, run forward).
    Closed { cotree_pipe: usize },
    /// A path from one fixed head to another through the tree, closed by their grade difference
    /// `head_difference_m = grade(from) - grade(to)`.
    BetweenFixedHeads {
        from_fixed_head: usize,
        to_fixed_head: usize,
        head_difference_m: f64,
    },
}

/// An independent loop of the network.
#[derive(Debug, Clone, PartialEq)]
pub struct Loop {
    pub kind: LoopKind,
    /// The pipes in order around the loop (or along the path).
    pub pipes: Vec<LoopPipe>,
}

/// What one sweep over the loops did.
#[derive(Debug, Clone, PartialEq)]
pub struct IterationRecord {
    /// 1 for the first sweep.
    pub iteration: usize,
    /// Correction applied to each loop in this sweep (in loop order), m^3/s along the loop's direction.
    pub corrections_m3s: Vec<f64>,
    /// Largest |imbalance| of any loop after the sweep, in metres.
    pub max_imbalance_m: f64,
}

/// The balanced network.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopSolution {
    /// The independent loops, closed loops first, then paths between fixed heads.
    pub loops: Vec<Loop>,
    /// One record per sweep; empty when the starting flows already balance (a branched network).
    pub iterations: Vec<IterationRecord>,
    /// Flow of every pipe, positive from `from` to `to`; zero in closed pipes.
    pub pipe_flow_m3s: Vec<f64>,
    /// Head loss of every pipe from `from` to `to` (negative when the flow runs backwards).
    pub pipe_head_loss_m: Vec<f64>,
    /// Hydraulic grade of every junction, carried from the root fixed head down the tree.
    pub junction_head_m: Vec<f64>,
    /// Net flow out of every fixed head into the network (negative: the fixed head takes water in).
    pub fixed_head_outflow_m3s: Vec<f64>,
}

impl LoopSolution {
    /// Largest loop imbalance of the last sweep (zero when no sweep was needed).
    pub fn max_imbalance_m(&self) -> f64 {
        self.iterations.last().map_or(0.0, |r| r.max_imbalance_m)
    }
}

/// Why the loop solver gave no answer.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum LoopError {
    /// Elements the loop method has no law for, every one of them listed.
    #[error(
        "the loop method here balances plain pipes only, and this network has {} element(s) it cannot model: {}; use `roughcal solve` (the gradient solver), or close or switch them off in a condition",
        elements.len(),
        elements.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; ")
    )]
    Unsupported { elements: Vec<UnsupportedElement> },
    #[error("{given} C-factors given for {pipes} pipes")]
    CFactorCount { given: usize, pipes: usize },
    #[error("pipe `{id}`: {field} must be positive and finite, not {value}")]
    BadPipe {
        id: String,
        field: &'static str,
        value: f64,
    },
    #[error(
        "junction `{id}` and {others} other(s) are not connected to any fixed head by open pipes"
    )]
    Unsupplied { id: String, others: usize },
    #[error(
        "no balance within {iterations} iterations: largest loop imbalance still {max_imbalance_m:.3e} m"
    )]
    NotConverged {
        iterations: usize,
        max_imbalance_m: f64,
        /// The history and the flows reached so far.
        partial: Box<LoopSolution>,
    },
}

/// One element of a network the loop method cannot model, and why.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum UnsupportedElement {
    #[error("pump `{id}` is running (a loop correction has no pump curve)")]
    RunningPump { id: String },
    #[error("pipe `{id}` has a check valve (the loop method cannot switch a pipe's status)")]
    CheckValve { id: String },
    #[error("valve `{id}` ({kind}) is in service (the loop method has no law for control valves)")]
    ControlValve { id: String, kind: &'static str },
    #[error(
        "pipe `{id}` has a minor loss K = {k} (a loop correction assumes the single exponent 1.852)"
    )]
    MinorLoss { id: String, k: f64 },
}

/// The loops as flat lists, for the sweeps.
struct LoopSet {
    loops: Vec<Loop>,
    /// Per loop: the sum of head it must balance (the grade difference of a path loop, else zero).
    closing_m: Vec<f64>,
}

/// Balances the flows of `net` with pipe C-factors `c_factors` (one per pipe) by Hardy Cross loop
/// corrections. See the module documentation for the method and its source.
pub fn solve_loops(
    net: &Network,
    c_factors: &[f64],
    options: LoopOptions,
) -> Result<LoopSolution, LoopError> {
    check_supported(net, c_factors)?;
    let law = HazenWilliams::for_network(net);
    let resistance: Vec<f64> = net
        .pipes
        .iter()
        .zip(c_factors)
        .map(|(p, &c)| {
            if p.closed {
                0.0
            } else {
                law.resistance(p.length_m, p.diameter_m, c)
            }
        })
        .collect();

    let adjacency = Adjacency::of_pipes(net, |_, p| !p.closed);
    let forest = SpanningForest::grow(net, &adjacency, ForestRoots::FixedHeadsInTurn);
    if let Some(first) = (0..net.junctions.len()).find(|&j| forest.root[j].is_none()) {
        let others = (first + 1..net.junctions.len())
            .filter(|&j| forest.root[j].is_none())
            .count();
        return Err(LoopError::Unsupplied {
            id: net.junctions[first].id.clone(),
            others,
        });
    }

    let mut flow_m3s = tree_flows(net, &forest);
    let set = find_loops(net, &forest);
    let mut iterations = Vec::new();
    let mut imbalance = max_imbalance_m(&set, &resistance, &flow_m3s);
    while imbalance >= options.tolerance_m {
        if iterations.len() == options.max_iterations || !imbalance.is_finite() {
            let partial = finish(net, &forest, &resistance, set.loops, iterations, flow_m3s);
            return Err(LoopError::NotConverged {
                iterations: partial.iterations.len(),
                max_imbalance_m: imbalance,
                partial: Box::new(partial),
            });
        }
        let corrections_m3s = sweep(&set, &resistance, &mut flow_m3s, options.min_flow_m3s);
        imbalance = max_imbalance_m(&set, &resistance, &flow_m3s);
        iterations.push(IterationRecord {
            iteration: iterations.len() + 1,
            corrections_m3s,
            max_imbalance_m: imbalance,
        });
    }
    Ok(finish(
        net,
        &forest,
        &resistance,
        set.loops,
        iterations,
        flow_m3s,
    ))
}

fn check_supported(net: &Network, c_factors: &[f64]) -> Result<(), LoopError> {
    let pumps = net
        .pumps
        .iter()
        .filter(|p| !p.off)
        .map(|p| UnsupportedElement::RunningPump { id: p.id.clone() });
    let check_valves = net
        .pipes
        .iter()
        .filter(|p| p.check_valve && !p.closed)
        .map(|p| UnsupportedElement::CheckValve { id: p.id.clone() });
    let valves =
        net.valves
            .iter()
            .filter(|v| !v.closed)
            .map(|v| UnsupportedElement::ControlValve {
                id: v.id.clone(),
                kind: v.kind.keyword(),
            });
    let minor_losses = net
        .pipes
        .iter()
        .filter(|p| p.minor_loss != 0.0 && !p.closed)
        .map(|p| UnsupportedElement::MinorLoss {
            id: p.id.clone(),
            k: p.minor_loss,
        });
    let elements: Vec<UnsupportedElement> = pumps
        .chain(check_valves)
        .chain(valves)
        .chain(minor_losses)
        .collect();
    if !elements.is_empty() {
        return Err(LoopError::Unsupported { elements });
    }
    if c_factors.len() != net.pipes.len() {
        return Err(LoopError::CFactorCount {
            given: c_factors.len(),
            pipes: net.pipes.len(),
        });
    }
    for (pipe, &c) in net.pipes.iter().zip(c_factors) {
        if pipe.closed {
            continue;
        }
        for (field, value) in [
            ("length", pipe.length_m),
            ("diameter", pipe.diameter_m),
            ("C-factor", c),
        ] {
            if !(value.is_finite() && value > 0.0) {
                return Err(LoopError::BadPipe {
                    id: pipe.id.clone(),
                    field,
                    value,
                });
            }
        }
    }
    Ok(())
}

/// Starting flows: every tree pipe carries the demand beyond it, away from its root; nothing else flows.
fn tree_flows(net: &Network, forest: &SpanningForest) -> Vec<f64> {
    let mut carried_m3s = vec![0.0; graph::node_count(net)];
    for (j, junction) in net.junctions.iter().enumerate() {
        carried_m3s[j] = junction.demand_m3s;
    }
    let mut flow_m3s = vec![0.0; net.pipes.len()];
    for &node in forest.order.iter().rev() {
        if let Some(pipe) = forest.parent_pipe[node] {
            let toward_to = graph::node_index(net, net.pipes[pipe].to) == node;
            flow_m3s[pipe] = if toward_to {
                carried_m3s[node]
            } else {
                -carried_m3s[node]
            };
            carried_m3s[forest.parent[node]] += carried_m3s[node];
        }
    }
    flow_m3s
}

fn find_loops(net: &Network, forest: &SpanningForest) -> LoopSet {
    let mut loops = Vec::new();
    let mut closing_m = Vec::new();
    let as_loop_pipes = |path: Vec<(usize, bool)>| {
        path.into_iter()
            .map(|(pipe, forward)| LoopPipe { pipe, forward })
    };
    for (i, pipe) in net.pipes.iter().enumerate() {
        if pipe.closed || forest.is_tree_pipe(net, i) {
            continue;
        }
        let (a, b) = (
            graph::node_index(net, pipe.from),
            graph::node_index(net, pipe.to),
        );
        let mut pipes = vec![LoopPipe {
            pipe: i,
            forward: true,
        }];
        pipes.extend(as_loop_pipes(forest.path(net, b, a)));
        loops.push(Loop {
            kind: LoopKind::Closed { cotree_pipe: i },
            pipes,
        });
        closing_m.push(0.0);
    }
    for (k, fixed) in net.fixed_heads.iter().enumerate() {
        let node = graph::node_index(net, NodeRef::FixedHead(k));
        let Some(root) = forest.root[node].filter(|&r| r != node) else {
            continue;
        };
        let NodeRef::FixedHead(root_k) = graph::node_ref(net, root) else {
            continue;
        };
        let head_difference_m = fixed.head_m - net.fixed_heads[root_k].head_m;
        loops.push(Loop {
            kind: LoopKind::BetweenFixedHeads {
                from_fixed_head: k,
                to_fixed_head: root_k,
                head_difference_m,
            },
            pipes: as_loop_pipes(forest.path(net, node, root)).collect(),
        });
        closing_m.push(head_difference_m);
    }
    LoopSet { loops, closing_m }
}

fn sign(forward: bool) -> f64 {
    if forward { 1.0 } else { -1.0 }
}

/// Sum of head loss around a loop along its direction, less the head it must balance.
fn imbalance_m(lp: &Loop, closing_m: f64, resistance: &[f64], flow_m3s: &[f64]) -> f64 {
    lp.pipes
        .iter()
        .map(|m| sign(m.forward) * HazenWilliams::head_loss_m(resistance[m.pipe], flow_m3s[m.pipe]))
        .sum::<f64>()
        - closing_m
}

fn max_imbalance_m(set: &LoopSet, resistance: &[f64], flow_m3s: &[f64]) -> f64 {
    set.loops
        .iter()
        .zip(&set.closing_m)
        .map(|(lp, &closing)| imbalance_m(lp, closing, resistance, flow_m3s).abs())
        .fold(0.0, f64::max)
}

/// One Hardy Cross sweep; returns the correction of each loop.
fn sweep(set: &LoopSet, resistance: &[f64], flow_m3s: &mut [f64], min_flow_m3s: f64) -> Vec<f64> {
    let floor_term = min_flow_m3s.powf(HW_FLOW_EXPONENT - 1.0);
    let mut corrections = Vec::with_capacity(set.loops.len());
    for (lp, &closing) in set.loops.iter().zip(&set.closing_m) {
        let mut head_sum = -closing;
        let mut slope_sum = 0.0;
        for m in &lp.pipes {
            let (r, q) = (resistance[m.pipe], flow_m3s[m.pipe]);
            let q_term = q.abs().powf(HW_FLOW_EXPONENT - 1.0);
            head_sum += sign(m.forward) * r * q * q_term;
            // |h/Q| = r |Q|^0.852, with |Q| floored (see the module documentation).
            slope_sum += r * q_term.max(floor_term);
        }
        let correction = if slope_sum > 0.0 {
            -head_sum / (HW_FLOW_EXPONENT * slope_sum)
        } else {
            0.0
        };
        for m in &lp.pipes {
            flow_m3s[m.pipe] += sign(m.forward) * correction;
        }
        corrections.push(correction);
    }
    corrections
}

fn finish(
    net: &Network,
    forest: &SpanningForest,
    resistance: &[f64],
    loops: Vec<Loop>,
    iterations: Vec<IterationRecord>,
    pipe_flow_m3s: Vec<f64>,
) -> LoopSolution {
    let pipe_head_loss_m: Vec<f64> = resistance
        .iter()
        .zip(&pipe_flow_m3s)
        .map(|(&r, &q)| HazenWilliams::head_loss_m(r, q))
        .collect();
    let first_fixed = net.junctions.len();
    let mut head_m = vec![0.0; graph::node_count(net)];
    for (k, fixed) in net.fixed_heads.iter().enumerate() {
        head_m[first_fixed + k] = fixed.head_m;
    }
    for &node in &forest.order {
        if let Some(pipe) = forest.parent_pipe[node] {
            let parent = forest.parent[node];
            let down = graph::node_index(net, net.pipes[pipe].from) == parent;
            let loss_m = sign(down) * pipe_head_loss_m[pipe];
            // A fixed head inside a tree keeps its grade; its path loop accounts for the mismatch.
            if node < first_fixed {
                head_m[node] = head_m[parent] - loss_m;
            }
        }
    }
    let mut fixed_head_outflow_m3s = vec![0.0; net.fixed_heads.len()];
    for (pipe, &q) in net.pipes.iter().zip(&pipe_flow_m3s) {
        if let NodeRef::FixedHead(k) = pipe.from {
            fixed_head_outflow_m3s[k] += q;
        }
        if let NodeRef::FixedHead(k) = pipe.to {
            fixed_head_outflow_m3s[k] -= q;
        }
    }
    head_m.truncate(first_fixed);
    LoopSolution {
        loops,
        iterations,
        pipe_flow_m3s,
        pipe_head_loss_m,
        junction_head_m: head_m,
        fixed_head_outflow_m3s,
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;
    use crate::network::synthetic::{self, Synthetic};
    use crate::network::{FixedHead, Junction, Pipe, Pump, PumpCurve, UnitSystem};

    fn junction(id: &str, demand_m3s: f64) -> Junction {
        Junction {
            id: id.into(),
            elevation_m: 0.0,
            demand_m3s,
            position: None,
        }
    }

    fn fixed_head(id: &str, head_m: f64) -> FixedHead {
        FixedHead {
            id: id.into(),
            head_m,
            position: None,
        }
    }

    fn pipe(id: &str, from: NodeRef, to: NodeRef, length_m: f64, diameter_m: f64, c: f64) -> Pipe {
        Pipe {
            id: id.into(),
            from,
            to,
            length_m,
            diameter_m,
            c_factor: c,
            group: None,
            closed: false,
            check_valve: false,
            minor_loss: 0.0,
        }
    }

    fn network(junctions: Vec<Junction>, fixed_heads: Vec<FixedHead>, pipes: Vec<Pipe>) -> Network {
        Network {
            title: "test".into(),
            units: UnitSystem::Si,
            junctions,
            fixed_heads,
            pipes,
            pumps: Vec::new(),
            groups: Vec::new(),
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: None,
            conditions: Vec::new(),
            lonlat_origin: None,
        }
    }

    fn tight() -> LoopOptions {
        LoopOptions {
            max_iterations: 5000,
            tolerance_m: 1e-8,
            ..LoopOptions::default()
        }
    }

    fn resistance(net: &Network, i: usize) -> f64 {
        let p = &net.pipes[i];
        HazenWilliams::for_units(net.units).resistance(p.length_m, p.diameter_m, p.c_factor)
    }

    fn head_at(net: &Network, solution: &LoopSolution, node: NodeRef) -> f64 {
        match node {
            NodeRef::Junction(j) => solution.junction_head_m[j],
            NodeRef::FixedHead(k) => net.fixed_heads[k].head_m,
        }
    }

    /// Continuity at every junction, recomputed from the pipe flows alone.
    fn assert_mass_balance(net: &Network, solution: &LoopSolution) {
        let mut net_inflow = vec![0.0; net.junctions.len()];
        for (p, &q) in net.pipes.iter().zip(&solution.pipe_flow_m3s) {
            if let NodeRef::Junction(j) = p.to {
                net_inflow[j] += q;
            }
            if let NodeRef::Junction(j) = p.from {
                net_inflow[j] -= q;
            }
        }
        let total: f64 = net.junctions.iter().map(|j| j.demand_m3s).sum();
        for (j, junction) in net.junctions.iter().enumerate() {
            let residual = net_inflow[j] - junction.demand_m3s;
            assert!(
                residual.abs() <= 1e-12 + 1e-10 * total,
                "{}: {residual}",
                junction.id
            );
        }
        let supplied: f64 = solution.fixed_head_outflow_m3s.iter().sum();
        assert!((supplied - total).abs() <= 1e-12 + 1e-10 * total);
    }

    /// Energy: every open pipe's head loss, recomputed from its flow, matches the head difference of
    /// its ends, and every reported loop sums to (about) zero.
    fn assert_energy_balance(net: &Network, solution: &LoopSolution, tolerance_m: f64) {
        for (i, p) in net.pipes.iter().enumerate() {
            if p.closed {
                continue;
            }
            let loss = HazenWilliams::head_loss_m(resistance(net, i), solution.pipe_flow_m3s[i]);
            let drop = head_at(net, solution, p.from) - head_at(net, solution, p.to);
            assert!(
                (drop - loss).abs() <= 3.0 * tolerance_m,
                "{}: {drop} vs {loss}",
                p.id
            );
        }
        for lp in &solution.loops {
            let closing = match lp.kind {
                LoopKind::Closed { .. } => 0.0,
                LoopKind::BetweenFixedHeads {
                    head_difference_m, ..
                } => head_difference_m,
            };
            let sum: f64 = lp
                .pipes
                .iter()
                .map(|m| sign(m.forward) * solution.pipe_head_loss_m[m.pipe])
                .sum();
            assert!(
                (sum - closing).abs() <= tolerance_m,
                "{lp:?}: {sum} vs {closing}"
            );
        }
    }

    #[test]
    fn two_parallel_pipes_split_as_the_closed_form() {
        // Derived from the Hazen-Williams law: both pipes lose the same head, r1 Q1^1.852 = r2 Q2^1.852,
        // so Q1 / Q2 = (r2 / r1)^(1/1.852) and Q1 + Q2 = demand.
        let (s, j) = (NodeRef::FixedHead(0), NodeRef::Junction(0));
        let net = network(
            vec![junction("J", 0.05)],
            vec![fixed_head("S", 50.0)],
            vec![
                pipe("P1", s, j, 500.0, 0.2, 100.0),
                pipe("P2", j, s, 800.0, 0.15, 130.0),
            ],
        );
        let solution = solve_loops(&net, &net.c_factors(), tight()).expect("balances");
        assert_eq!(solution.loops.len(), 1);
        let ratio = (resistance(&net, 1) / resistance(&net, 0)).powf(1.0 / HW_FLOW_EXPONENT);
        let q1 = 0.05 * ratio / (1.0 + ratio);
        let q2 = 0.05 - q1;
        assert!((solution.pipe_flow_m3s[0] - q1).abs() < 1e-9 * 0.05);
        // P2 is drawn from J to S, so its flow is negative.
        assert!((solution.pipe_flow_m3s[1] + q2).abs() < 1e-9 * 0.05);
        let head_j = 50.0 - HazenWilliams::head_loss_m(resistance(&net, 0), q1);
        assert!((solution.junction_head_m[0] - head_j).abs() < 1e-7);
        // The first correction is a Hardy Cross step (Cross 1936) from the tree start: all demand in
        // the tree pipe P1, none in P2; the loop runs along the cotree pipe P2 (J to S), then P1 (S to
        // J), so its head sum is +h1 and the correction is -h1 / (1.852 sum|h/Q|).
        let r1 = resistance(&net, 0);
        let h1 = HazenWilliams::head_loss_m(r1, 0.05);
        let floor = LoopOptions::default()
            .min_flow_m3s
            .powf(HW_FLOW_EXPONENT - 1.0);
        let expected = -h1 / (HW_FLOW_EXPONENT * (h1 / 0.05 + resistance(&net, 1) * floor));
        let first = solution.iterations[0].corrections_m3s[0];
        assert!((first - expected).abs() < 1e-12, "{first} vs {expected}");
        assert_mass_balance(&net, &solution);
    }

    #[test]
    fn two_reservoirs_one_pipe_match_the_closed_form() {
        // Derived from the Hazen-Williams law: H1 - H2 = r Q^1.852, so Q = ((H1 - H2) / r)^(1/1.852).
        for (h1, h2, forward) in [(60.0, 50.0, true), (48.0, 55.0, true), (60.0, 45.0, false)] {
            let (a, b) = (NodeRef::FixedHead(0), NodeRef::FixedHead(1));
            let (from, to) = if forward { (a, b) } else { (b, a) };
            let net = network(
                Vec::new(),
                vec![fixed_head("A", h1), fixed_head("B", h2)],
                vec![pipe("P", from, to, 1500.0, 0.3, 110.0)],
            );
            let solution = solve_loops(&net, &net.c_factors(), tight()).expect("balances");
            let r = resistance(&net, 0);
            let q_a_to_b = (h1 - h2).signum() * ((h1 - h2).abs() / r).powf(1.0 / 1.852);
            let expected = if forward { q_a_to_b } else { -q_a_to_b };
            let got = solution.pipe_flow_m3s[0];
            assert!(
                (got - expected).abs() < 1e-8 * expected.abs(),
                "{got} vs {expected}"
            );
            assert!((solution.fixed_head_outflow_m3s[0] - q_a_to_b).abs() < 1e-8 * q_a_to_b.abs());
        }
    }

    #[test]
    fn branched_network_needs_no_iteration() {
        let net = synthetic::tree(40, 3);
        let solution = solve_loops(&net, &net.c_factors(), LoopOptions::default()).expect("tree");
        assert!(solution.loops.is_empty() && solution.iterations.is_empty());
        // The feed main carries the whole demand (continuity).
        let total: f64 = net.junctions.iter().map(|j| j.demand_m3s).sum();
        assert!((solution.fixed_head_outflow_m3s[0] - total).abs() < 1e-12);
        assert_energy_balance(&net, &solution, 1e-9);
    }

    #[test]
    fn loop_count_is_pipes_less_junctions() {
        // Common practice, no source: a connected pipe network has P - J independent energy equations.
        for net in [synthetic::grid(4, 5, 1), synthetic::two_sources(3, 4, 2)] {
            let solution = solve_loops(&net, &net.c_factors(), tight()).expect("balances");
            assert_eq!(solution.loops.len(), net.pipes.len() - net.junctions.len());
        }
    }

    #[test]
    fn closed_pipes_are_left_out() {
        let mut net = synthetic::grid(3, 3, 4);
        net.pipes[2].closed = true;
        net.pipes[2].check_valve = true;
        let solution = solve_loops(&net, &net.c_factors(), tight()).expect("balances");
        assert_eq!(solution.pipe_flow_m3s[2], 0.0);
        assert!(
            solution
                .loops
                .iter()
                .all(|l| l.pipes.iter().all(|m| m.pipe != 2))
        );
        assert_eq!(
            solution.loops.len(),
            net.pipes.len() - 1 - net.junctions.len()
        );
        assert_mass_balance(&net, &solution);
        assert_energy_balance(&net, &solution, 1e-8);
    }

    #[test]
    fn unsupported_and_malformed_networks_are_errors() {
        let mut net = synthetic::grid(2, 2, 1);
        net.pipes[0].check_valve = true;
        let c = net.c_factors();
        assert_eq!(
            solve_loops(&net, &c, LoopOptions::default()),
            Err(LoopError::Unsupported {
                elements: vec![UnsupportedElement::CheckValve { id: "P1".into() }]
            })
        );
        net.pipes[0].check_valve = false;
        net.pumps.push(Pump {
            id: "PU1".into(),
            from: NodeRef::Junction(0),
            to: NodeRef::Junction(1),
            curve: PumpCurve {
                points: vec![(0.0, 30.0)],
                a: 30.0,
                b: 0.0,
                c: -100.0,
            },
            off: false,
        });
        net.pipes[1].minor_loss = 2.5;
        net.pipes[2].check_valve = true;
        // Every element it cannot model is named, not only the first.
        match solve_loops(&net, &c, LoopOptions::default()) {
            Err(LoopError::Unsupported { elements }) => assert_eq!(
                elements,
                vec![
                    UnsupportedElement::RunningPump { id: "PU1".into() },
                    UnsupportedElement::CheckValve { id: "P3".into() },
                    UnsupportedElement::MinorLoss {
                        id: "P2".into(),
                        k: 2.5
                    },
                ]
            ),
            other => panic!("{other:?}"),
        }
        net.pipes[1].minor_loss = 0.0;
        net.pipes[2].check_valve = false;
        net.pumps[0].off = true;
        assert!(solve_loops(&net, &c, LoopOptions::default()).is_ok());
        assert!(matches!(
            solve_loops(&net, &c[1..], LoopOptions::default()),
            Err(LoopError::CFactorCount { given: 4, pipes: 5 })
        ));
        let mut bad = c.clone();
        bad[3] = f64::NAN;
        assert!(matches!(
            solve_loops(&net, &bad, LoopOptions::default()),
            Err(LoopError::BadPipe {
                field: "C-factor",
                ..
            })
        ));
        // Cut junction J4 (the far corner) off: its two pipes closed.
        for p in &mut net.pipes {
            if p.from == NodeRef::Junction(3) || p.to == NodeRef::Junction(3) {
                p.closed = true;
            }
        }
        assert!(matches!(
            solve_loops(&net, &c, LoopOptions::default()),
            Err(LoopError::Unsupplied { id, others: 0 }) if id == "J4"
        ));
    }

    #[test]
    fn running_out_of_iterations_is_an_error_with_the_history() {
        let net = synthetic::grid(5, 5, 8);
        let options = LoopOptions {
            max_iterations: 2,
            tolerance_m: 1e-12,
            ..LoopOptions::default()
        };
        match solve_loops(&net, &net.c_factors(), options) {
            Err(LoopError::NotConverged {
                iterations,
                max_imbalance_m,
                partial,
            }) => {
                assert_eq!(iterations, 2);
                assert_eq!(partial.iterations.len(), 2);
                assert_eq!(partial.max_imbalance_m(), max_imbalance_m);
                assert!(max_imbalance_m >= 1e-12);
                assert_eq!(
                    partial.iterations[1].corrections_m3s.len(),
                    partial.loops.len()
                );
                // Corrections keep continuity even before balance.
                assert_mass_balance(&net, &partial);
            }
            other => panic!("expected no convergence, got {other:?}"),
        }
    }

    #[test]
    fn imbalance_falls_over_the_iterations() {
        let net = synthetic::grid(6, 6, 11);
        let solution = solve_loops(&net, &net.c_factors(), tight()).expect("balances");
        let history: Vec<f64> = solution
            .iterations
            .iter()
            .map(|r| r.max_imbalance_m)
            .collect();
        assert!(history.len() >= 2);
        assert!(history[history.len() - 1] < 1e-8);
        assert!(
            history[history.len() - 1] < history[0] * 1e-3,
            "{history:?}"
        );
    }

    /// A generated network of one of four shapes, small enough for many cases.
    fn shape(kind: usize, a: usize, b: usize, seed: u64) -> Network {
        let settings = Synthetic::new(seed);
        match kind {
            0 => settings.tree(a * b + 1),
            1 => settings.grid(a, b, 1 + (a + b) % 2),
            2 => settings.ring_with_branches(a + 2, b, a.min(4)),
            _ => settings.two_sources(a, b),
        }
    }

    /// Largest difference between the loop solver's pipe flows and the gradient solver's, as a share
    /// of the total demand.
    fn gap_to_gradient_solver(net: &Network, loops: &LoopSolution) -> f64 {
        use crate::hydraulics::{GradientSolver, OperatingState};
        let gradient = GradientSolver::new(net)
            .and_then(|s| s.solve(net, &OperatingState::base(net), &net.c_factors(), None))
            .expect("gradient solution");
        let total: f64 = net.junctions.iter().map(|j| j.demand_m3s).sum();
        loops
            .pipe_flow_m3s
            .iter()
            .zip(&gradient.pipe_flow_m3s)
            .map(|(a, b)| (a - b).abs() / total)
            .fold(0.0, f64::max)
    }

    #[test]
    fn agrees_with_the_gradient_solver_on_looped_networks() {
        // Two independent methods (Hardy Cross 1936 loop corrections and the global gradient method)
        // solve the same equations, so their flows must agree.
        for net in [
            synthetic::grid(6, 6, 1),
            Synthetic::new(2).grid(5, 7, 2),
            synthetic::two_sources(6, 5, 3),
            synthetic::ring_with_branches(10, 3, 2, 4),
            synthetic::looped_city(150, 5),
        ] {
            let options = LoopOptions {
                max_iterations: 50_000,
                tolerance_m: 1e-9,
                ..LoopOptions::default()
            };
            let loops = solve_loops(&net, &net.c_factors(), options).expect("balances");
            let gap = gap_to_gradient_solver(&net, &loops);
            assert!(gap < 1e-5, "{}: {gap}", net.title);
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(32))]

        #[test]
        fn generated_networks_balance_and_match_the_gradient_solver(
            kind in 0usize..4,
            a in 1usize..7,
            b in 1usize..7,
            seed in any::<u64>(),
        ) {
            let net = shape(kind, a, b, seed);
            let options = LoopOptions { max_iterations: 20_000, tolerance_m: 1e-7, ..LoopOptions::default() };
            let solution = solve_loops(&net, &net.c_factors(), options).expect("balances");
            prop_assert_eq!(solution.loops.len(), net.pipes.len() - net.junctions.len());
            assert_mass_balance(&net, &solution);
            assert_energy_balance(&net, &solution, 1e-7);
            // Same equations, other method (the gradient solver): same flows.
            let gap = gap_to_gradient_solver(&net, &solution);
            prop_assert!(gap < 1e-4, "{}: {}", net.title, gap);
        }
    }
}
