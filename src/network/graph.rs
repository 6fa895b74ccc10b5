//! Graph views of a network: one dense numbering of all nodes, adjacency over a chosen set of pipes, and
//! breadth-first spanning forests grown from the fixed heads.
//!
//! Dense node numbering: junction `i` is node `i`, fixed head `k` is node `junctions.len() + k`.

use std::collections::VecDeque;

use super::model::{Condition, Network, NodeRef, Pipe};

/// Number of nodes (junctions and fixed heads) in the dense numbering.
pub fn node_count(net: &Network) -> usize {
    net.junctions.len() + net.fixed_heads.len()
}

/// Dense index of a node reference.
pub fn node_index(net: &Network, node: NodeRef) -> usize {
    match node {
        NodeRef::Junction(i) => i,
        NodeRef::FixedHead(k) => net.junctions.len() + k,
    }
}

/// Node reference of a dense index.
pub fn node_ref(net: &Network, index: usize) -> NodeRef {
    if index < net.junctions.len() {
        NodeRef::Junction(index)
    } else {
        NodeRef::FixedHead(index - net.junctions.len())
    }
}

/// Which pipes meet at each node, stored compactly (one offset table and one entry list).
#[derive(Debug, Clone)]
pub struct Adjacency {
    offsets: Vec<usize>,
    /// (pipe index, node at the other end).
    entries: Vec<(usize, usize)>,
}

impl Adjacency {
    /// Adjacency over the pipes for which `include(index, pipe)` holds.
    pub fn of_pipes(net: &Network, include: impl Fn(usize, &Pipe) -> bool) -> Self {
        let nodes = node_count(net);
        let mut degree = vec![0usize; nodes + 1];
        let ends: Vec<Option<(usize, usize)>> = net
            .pipes
            .iter()
            .enumerate()
            .map(|(i, pipe)| {
                include(i, pipe).then(|| (node_index(net, pipe.from), node_index(net, pipe.to)))
            })
            .collect();
        for &(a, b) in ends.iter().flatten() {
            degree[a] += 1;
            degree[b] += 1;
        }
        let mut offsets = vec![0usize; nodes + 1];
        for n in 0..nodes {
            offsets[n + 1] = offsets[n] + degree[n];
        }
        let mut fill = offsets.clone();
        let mut entries = vec![(0, 0); offsets[nodes]];
        for (pipe, end) in ends.iter().enumerate() {
            if let Some((a, b)) = *end {
                entries[fill[a]] = (pipe, b);
                fill[a] += 1;
                entries[fill[b]] = (pipe, a);
                fill[b] += 1;
            }
        }
        Self { offsets, entries }
    }

    /// (pipe, other node) of every included pipe meeting `node`.
    pub fn neighbours(&self, node: usize) -> &[(usize, usize)] {
        &self.entries[self.offsets[node]..self.offsets[node + 1]]
    }
}

/// How the searches of a [`SpanningForest`] are seeded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ForestRoots {
    /// One search from all fixed heads at once: every node hangs from its nearest fixed head (in pipes),
    /// and no fixed head lies inside another's tree.
    AllFixedHeadsAtOnce,
    /// A search from fixed head 0 over everything it reaches, then from the next fixed head not yet
    /// reached, and so on: fixed heads reached from an earlier one are ordinary tree nodes.
    FixedHeadsInTurn,
}

/// A breadth-first spanning forest over an [`Adjacency`], rooted at fixed heads.
#[derive(Debug, Clone)]
pub struct SpanningForest {
    /// Reached nodes in the order they were reached: a parent always comes before its children.
    pub order: Vec<usize>,
    /// Per node: the tree pipe to its parent (`None` for roots and for unreached nodes).
    pub parent_pipe: Vec<Option<usize>>,
    /// Per node: its parent node (meaningful only where `parent_pipe` is `Some`).
    pub parent: Vec<usize>,
    /// Per node: the root of its tree (`None` if no fixed head reaches it).
    pub root: Vec<Option<usize>>,
    /// Per node: number of tree pipes between it and its root.
    pub depth: Vec<usize>,
}

impl SpanningForest {
    /// Grows the forest from the fixed heads of `net` over `adjacency`.
    pub fn grow(net: &Network, adjacency: &Adjacency, roots: ForestRoots) -> Self {
        let nodes = node_count(net);
        let first_fixed = net.junctions.len();
        let mut forest = Self {
            order: Vec::with_capacity(nodes),
            parent_pipe: vec![None; nodes],
            parent: vec![usize::MAX; nodes],
            root: vec![None; nodes],
            depth: vec![0; nodes],
        };
        let mut queue = VecDeque::new();
        match roots {
            ForestRoots::AllFixedHeadsAtOnce => {
                for f in first_fixed..nodes {
                    forest.seed(f, &mut queue);
                }
                forest.search(adjacency, &mut queue);
            }
            ForestRoots::FixedHeadsInTurn => {
                for f in first_fixed..nodes {
                    if forest.root[f].is_none() {
                        forest.seed(f, &mut queue);
                        forest.search(adjacency, &mut queue);
                    }
                }
            }
        }
        forest
    }

    fn seed(&mut self, node: usize, queue: &mut VecDeque<usize>) {
        self.root[node] = Some(node);
        self.order.push(node);
        queue.push_back(node);
    }

    fn search(&mut self, adjacency: &Adjacency, queue: &mut VecDeque<usize>) {
        while let Some(node) = queue.pop_front() {
            for &(pipe, next) in adjacency.neighbours(node) {
                if self.root[next].is_none() {
                    self.root[next] = self.root[node];
                    self.parent[next] = node;
                    self.parent_pipe[next] = Some(pipe);
                    self.depth[next] = self.depth[node] + 1;
                    self.order.push(next);
                    queue.push_back(next);
                }
            }
        }
    }

    /// Whether `pipe` is a tree pipe of this forest.
    pub fn is_tree_pipe(&self, net: &Network, pipe: usize) -> bool {
        let p = &net.pipes[pipe];
        [p.from, p.to]
            .into_iter()
            .any(|end| self.parent_pipe[node_index(net, end)] == Some(pipe))
    }

    /// The tree pipes from node `a` to node `b` (both in one tree), each with `true` when the path runs
    /// from the pipe's `from` end to its `to` end.
    pub fn path(&self, net: &Network, mut a: usize, mut b: usize) -> Vec<(usize, bool)> {
        let mut from_a = Vec::new();
        let mut into_b = Vec::new();
        while a != b {
            if self.depth[a] >= self.depth[b] {
                let Some(pipe) = self.parent_pipe[a] else {
                    break;
                };
                from_a.push((pipe, node_index(net, net.pipes[pipe].from) == a));
                a = self.parent[a];
            } else {
                let Some(pipe) = self.parent_pipe[b] else {
                    break;
                };
                into_b.push((pipe, node_index(net, net.pipes[pipe].to) == b));
                b = self.parent[b];
            }
        }
        from_a.extend(into_b.into_iter().rev());
        from_a
    }
}

/// Which junctions reach a fixed head over `links` (the two ends of each link that connects; direction
/// ignored), by a depth-first search from every fixed head at once. The one reachability search of the
/// crate: the loader's connectivity checks ([`reachable`]) and the solver's isolated junctions use it.
/// Links naming a node the network does not have are skipped.
pub fn junctions_reaching_fixed_heads(
    net: &Network,
    links: impl Iterator<Item = (NodeRef, NodeRef)> + Clone,
) -> Vec<bool> {
    let junction_count = net.junctions.len();
    let nodes = node_count(net);
    let ends = links
        .map(|(a, b)| (node_index(net, a), node_index(net, b)))
        .filter(move |&(a, b)| a < nodes && b < nodes);
    let mut offsets = vec![0usize; nodes + 1];
    for (a, b) in ends.clone() {
        for end in [a, b] {
            if let Some(count) = offsets.get_mut(end + 1) {
                *count += 1;
            }
        }
    }
    for n in 0..nodes {
        offsets[n + 1] += offsets[n];
    }
    let mut fill = offsets.clone();
    let mut neighbours = vec![0usize; offsets[nodes]];
    for (a, b) in ends {
        for (here, there) in [(a, b), (b, a)] {
            if let Some(slot) = fill.get_mut(here) {
                if let Some(entry) = neighbours.get_mut(*slot) {
                    *entry = there;
                }
                *slot += 1;
            }
        }
    }
    let mut reached = vec![false; nodes];
    let mut stack: Vec<usize> = (junction_count..nodes).collect();
    for &node in &stack {
        reached[node] = true;
    }
    while let Some(node) = stack.pop() {
        for &next in &neighbours[offsets[node]..offsets[node + 1]] {
            if !reached[next] {
                reached[next] = true;
                stack.push(next);
            }
        }
    }
    reached.truncate(junction_count);
    reached
}

/// The junctions `condition` cuts off from every fixed head, of those `base` (the reach of the network as
/// written, from [`reachable`]) connects.
pub fn cut_off_by(network: &Network, condition: &Condition, base: &[bool]) -> Vec<usize> {
    let reached = reachable(
        network,
        &condition.closed_pipes,
        &condition.pumps_off,
        &condition.closed_valves,
    );
    (0..network.junctions.len())
        .filter(|&j| {
            base.get(j).copied().unwrap_or(false) && !reached.get(j).copied().unwrap_or(false)
        })
        .collect()
}

/// Which junctions reach a fixed head through links that are open (pipes not closed, pumps not off,
/// valves not closed, and none of the extra `closed_pipes` / `pumps_off` / `closed_valves`). Direction
/// is ignored: a check valve or a control valve still connects.
pub fn reachable(
    network: &Network,
    closed_pipes: &[usize],
    pumps_off: &[usize],
    closed_valves: &[usize],
) -> Vec<bool> {
    // Flags rather than `contains`, so a condition closing many links stays linear.
    let flags = |count: usize, listed: &[usize]| {
        let mut flag = vec![false; count];
        for &i in listed {
            if let Some(f) = flag.get_mut(i) {
                *f = true;
            }
        }
        flag
    };
    let (pipe_shut, pump_off, valve_shut) = (
        flags(network.pipes.len(), closed_pipes),
        flags(network.pumps.len(), pumps_off),
        flags(network.valves.len(), closed_valves),
    );
    let pipes = network
        .pipes
        .iter()
        .zip(&pipe_shut)
        .filter(|(p, shut)| !p.closed && !**shut)
        .map(|(p, _)| (p.from, p.to));
    let pumps = network
        .pumps
        .iter()
        .zip(&pump_off)
        .filter(|(p, off)| !p.off && !**off)
        .map(|(p, _)| (p.from, p.to));
    let valves = network
        .valves
        .iter()
        .zip(&valve_shut)
        .filter(|(v, shut)| !v.closed && !**shut)
        .map(|(v, _)| (v.from, v.to));
    junctions_reaching_fixed_heads(network, pipes.chain(pumps).chain(valves))
}
