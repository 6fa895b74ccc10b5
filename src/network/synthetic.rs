//! Synthetic networks for property tests, benchmarks and calibration tests, built in code from a seed.
//!
//! Every generator is deterministic: the same arguments give the same [`Network`], bit for bit. The
//! networks are invented, never taken from a real district, and are meant to look plausible to a
//! hydraulic model rather than to a map reader:
//!
//! - junctions sit on a jittered street layout with blocks of about 120 m, pipes run a little longer
//!   than the straight line between their ends;
//! - ground elevations follow a smooth terrain within about 15 m to 46 m;
//! - base demands are 0.1 to 0.8 L/s a junction (a few dozen homes), scaled down so no fixed head has
//!   to supply more than 0.5 m^3/s on average;
//! - C-factors come in era bands, one [`RoughnessGroup`] per band: `era-1` is the oldest (nominal
//!   C 80, laid nearest the first fixed head, the old town) and the last band the newest (nominal
//!   C 140), each pipe within 5 of its band's nominal C, and 15 % of pipes placed in a random band;
//! - diameters are sized from the flow each pipe would carry in a breadth-first tree from the fixed
//!   heads: the smallest commercial size (6 in to 60 in, or 150 mm to 1500 mm) that keeps the velocity
//!   at or below 1.5 m/s and the friction slope low enough that no tree path loses more than 20 m;
//!   pipes that close loops get 6, 8 or 10 in (150, 200 or 250 mm);
//! - fixed-head grades are 45 m to 55 m above the highest junction.
//!
//! With these choices the steady state has pressures of roughly 15 m to 75 m of water, heads below the
//! highest fixed-head grade and velocities up to about 1.5 m/s (common practice, no source: the usual
//! design ranges of distribution mains).

use std::f64::consts::PI;

use super::graph::{self, Adjacency, ForestRoots, SpanningForest};
use super::model::{
    DEFAULT_GROUP_MAX_C, DEFAULT_GROUP_MIN_C, FixedHead, Junction, Network, NodeRef, Pipe,
    RoughnessGroup,
};
use super::units::UnitSystem;
use crate::hydraulics::HazenWilliams;

/// Street block spacing of the layouts.
const BLOCK_M: f64 = 120.0;
/// Range of a junction's base demand before scaling.
const DEMAND_RANGE_M3S: (f64, f64) = (0.1e-3, 0.8e-3);
/// Largest mean supply of one fixed head; demands are scaled down to respect it.
const SUPPLY_PER_FIXED_HEAD_M3S: f64 = 0.5;
/// Largest friction loss along any design-tree path from a fixed head.
const HEAD_LOSS_BUDGET_M: f64 = 20.0;
/// Largest velocity at the design flow of a tree pipe.
const DESIGN_VELOCITY_MS: f64 = 1.5;
/// Range of the fixed-head grade above the highest junction.
const STATIC_MARGIN_M: (f64, f64) = (45.0, 55.0);
/// Nominal C of the oldest and of the newest era band.
const ERA_C_RANGE: (f64, f64) = (80.0, 140.0);
/// Share of pipes placed in a random era band rather than by location.
const ERA_SCATTER: f64 = 0.15;
/// Commercial nominal sizes (common practice, no source), inches and millimetres.
const SIZES_IN: [f64; 15] = [
    6.0, 8.0, 10.0, 12.0, 14.0, 16.0, 18.0, 20.0, 24.0, 30.0, 36.0, 42.0, 48.0, 54.0, 60.0,
];
const SIZES_MM: [f64; 15] = [
    150.0, 200.0, 250.0, 300.0, 350.0, 400.0, 450.0, 500.0, 600.0, 750.0, 900.0, 1050.0, 1200.0,
    1350.0, 1500.0,
];
/// Junctions per fixed head in [`looped_city`].
const CITY_JUNCTIONS_PER_FIXED_HEAD: usize = 2500;

/// Settings shared by the generators; the free functions use [`Synthetic::new`] defaults.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Synthetic {
    /// Seed of the generator's random stream.
    pub seed: u64,
    /// Unit system the network declares (positions are stored in its length unit).
    pub units: UnitSystem,
    /// Number of roughness groups (era bands), at least one.
    pub groups: usize,
}

impl Synthetic {
    /// US units and three era bands.
    pub fn new(seed: u64) -> Self {
        Self {
            seed,
            units: UnitSystem::Us,
            groups: 3,
        }
    }

    /// A `rows` x `cols` looped grid (at least 1 x 1) fed at its corners by `fixed_heads` fixed heads
    /// (1 to 4, taken in the order: first corner, opposite corner, the remaining two), with grades
    /// within 1 m of each other. Each fixed head feeds its corner junction through one main.
    pub fn grid(&self, rows: usize, cols: usize, fixed_heads: usize) -> Network {
        let mut draft = Draft::new(self.seed);
        let offsets: Vec<f64> = (0..fixed_heads.clamp(1, 4))
            .map(|k| {
                if k == 0 {
                    0.0
                } else {
                    draft.rng.between(-1.0, 1.0)
                }
            })
            .collect();
        grid_layout(&mut draft, rows, cols, &offsets);
        draft.finish(format!("synthetic grid {rows}x{cols}"), self)
    }

    /// A grid as [`Synthetic::grid`] fed by two fixed heads at opposite corners whose grades differ by
    /// 4 m to 10 m, so that the lower one may take water in (a tank filling).
    pub fn two_sources(&self, rows: usize, cols: usize) -> Network {
        let mut draft = Draft::new(self.seed);
        let lower = -draft.rng.between(4.0, 10.0);
        grid_layout(&mut draft, rows, cols, &[0.0, lower]);
        draft.finish(format!("synthetic two-source grid {rows}x{cols}"), self)
    }

    /// A branched network of `junctions` junctions (at least one) fed from one fixed head: each new
    /// junction hangs from a random earlier one with fewer than four pipes, so depths grow like the
    /// logarithm of the size.
    pub fn tree(&self, junctions: usize) -> Network {
        let mut draft = Draft::new(self.seed);
        let n = junctions.max(1);
        let source = draft.fixed_head((-BLOCK_M, 0.0), 0.0);
        let root = draft.junction((0.0, 0.0));
        draft.pipe(source, root);
        let mut degree = vec![1usize; n];
        let mut heading = vec![0.0f64; n];
        for i in 1..n {
            let mut parent = i - 1;
            for _ in 0..8 {
                let candidate = draft.rng.below(i);
                if degree[candidate] < 4 {
                    parent = candidate;
                    break;
                }
            }
            let turn = [-0.5 * PI, 0.0, 0.5 * PI][draft.rng.below(3)];
            heading[i] = heading[parent] + turn + draft.rng.between(-0.17, 0.17);
            let step = draft.rng.between(0.7, 1.3) * BLOCK_M;
            let (px, py) = draft.junction_positions_m[parent];
            let child =
                draft.junction((px + step * heading[i].cos(), py + step * heading[i].sin()));
            draft.pipe(NodeRef::Junction(parent), child);
            degree[parent] += 1;
        }
        draft.finish(format!("synthetic tree of {n}"), self)
    }

    /// A ring main of `ring_junctions` junctions (at least three) fed from one fixed head outside the
    /// ring, with `branches` dead-end branches of `branch_junctions` junctions each running outward
    /// from evenly spaced ring junctions.
    pub fn ring_with_branches(
        &self,
        ring_junctions: usize,
        branches: usize,
        branch_junctions: usize,
    ) -> Network {
        let mut draft = Draft::new(self.seed);
        let ring = ring_junctions.max(3);
        let radius = ring as f64 * BLOCK_M / (2.0 * PI);
        let at = |radius: f64, angle: f64| (radius * angle.cos(), radius * angle.sin());
        let nodes: Vec<NodeRef> = (0..ring)
            .map(|k| draft.junction(at(radius, 2.0 * PI * k as f64 / ring as f64)))
            .collect();
        for k in 0..ring {
            draft.pipe(nodes[k], nodes[(k + 1) % ring]);
        }
        let source = draft.fixed_head(at(radius + 1.5 * BLOCK_M, 0.0), 0.0);
        draft.pipe(source, nodes[0]);
        for b in 0..branches {
            let k = ((b as f64 + 0.5) * ring as f64 / branches as f64) as usize % ring;
            let angle = 2.0 * PI * k as f64 / ring as f64;
            let mut previous = nodes[k];
            for step in 1..=branch_junctions {
                let next = draft.junction(at(radius + step as f64 * BLOCK_M, angle));
                draft.pipe(previous, next);
                previous = next;
            }
        }
        draft.finish(
            format!("synthetic ring of {ring} with {branches} branches of {branch_junctions}"),
            self,
        )
    }

    /// A looped network of `junctions` junctions for benchmarks, about two pipes a junction: a street
    /// grid close to square (the last row may be short) with 8 % of its cross links removed and
    /// diagonal links added to bring the pipe count to about twice the junction count, fed by one
    /// fixed head per 2,500 junctions spread over the grid (grades within 1.5 m). Removals spare the
    /// along-row links and the first column, so the network stays connected.
    pub fn looped_city(&self, junctions: usize) -> Network {
        let mut draft = Draft::new(self.seed);
        let n = junctions.max(1);
        let cols = (n as f64).sqrt().ceil() as usize;
        let rows = n.div_ceil(cols);
        let index = |r: usize, c: usize| r * cols + c;
        let nodes: Vec<NodeRef> = (0..n)
            .map(|i| {
                let (r, c) = (i / cols, i % cols);
                let jitter = (
                    draft.rng.between(-15.0, 15.0),
                    draft.rng.between(-15.0, 15.0),
                );
                draft.junction((c as f64 * BLOCK_M + jitter.0, r as f64 * BLOCK_M + jitter.1))
            })
            .collect();
        for r in 0..rows {
            for c in 0..cols {
                let here = index(r, c);
                if here >= n {
                    break;
                }
                if c + 1 < cols && here + 1 < n {
                    draft.pipe(nodes[here], nodes[here + 1]);
                }
                let below = index(r + 1, c);
                if below < n && (c == 0 || !draft.rng.chance(0.08)) {
                    draft.pipe(nodes[here], nodes[below]);
                }
            }
        }
        let diagonal_slots = (rows.saturating_sub(1)) * (cols.saturating_sub(1));
        let wanted = (2 * n).saturating_sub(draft.pipes.len());
        let share = if diagonal_slots == 0 {
            0.0
        } else {
            (wanted as f64 / diagonal_slots as f64).min(1.0)
        };
        for r in 0..rows.saturating_sub(1) {
            for c in 0..cols - 1 {
                let across = index(r + 1, c + 1);
                if across < n && draft.rng.chance(share) {
                    draft.pipe(nodes[index(r, c)], nodes[across]);
                }
            }
        }
        let count = n.div_ceil(CITY_JUNCTIONS_PER_FIXED_HEAD);
        let lattice_rows =
            ((count as f64 * rows as f64 / cols as f64).sqrt().round() as usize).clamp(1, count);
        let lattice_cols = count.div_ceil(lattice_rows);
        for k in 0..count {
            let (lr, lc) = (k / lattice_cols, k % lattice_cols);
            let c = ((lc as f64 + 0.5) * cols as f64 / lattice_cols as f64) as usize;
            let mut r = ((lr as f64 + 0.5) * rows as f64 / lattice_rows as f64) as usize;
            while r > 0 && index(r, c) >= n {
                r -= 1;
            }
            let feed = nodes[index(r, c).min(n - 1)];
            let (x, y) = draft.position_m(feed);
            let offset = if k == 0 {
                0.0
            } else {
                draft.rng.between(-1.5, 1.5)
            };
            let source = draft.fixed_head((x + 0.4 * BLOCK_M, y + 0.4 * BLOCK_M), offset);
            draft.pipe(source, feed);
        }
        draft.finish(format!("synthetic looped city of {n}"), self)
    }
}

/// A looped grid with one fixed head at a corner, US units and three era bands: see
/// [`Synthetic::grid`].
pub fn grid(rows: usize, cols: usize, seed: u64) -> Network {
    Synthetic::new(seed).grid(rows, cols, 1)
}

/// A branched network from one fixed head: see [`Synthetic::tree`].
pub fn tree(junctions: usize, seed: u64) -> Network {
    Synthetic::new(seed).tree(junctions)
}

/// A ring main with dead-end branches: see [`Synthetic::ring_with_branches`].
pub fn ring_with_branches(
    ring_junctions: usize,
    branches: usize,
    branch_junctions: usize,
    seed: u64,
) -> Network {
    Synthetic::new(seed).ring_with_branches(ring_junctions, branches, branch_junctions)
}

/// A grid fed by two fixed heads at different grades: see [`Synthetic::two_sources`].
pub fn two_sources(rows: usize, cols: usize, seed: u64) -> Network {
    Synthetic::new(seed).two_sources(rows, cols)
}

/// A looped network of a given size for benchmarks: see [`Synthetic::looped_city`].
pub fn looped_city(junctions: usize, seed: u64) -> Network {
    Synthetic::new(seed).looped_city(junctions)
}

/// Lays out a jittered street grid and feeds it from fixed heads at its corners, one per entry of
/// `grade_offsets_m` (up to four).
fn grid_layout(draft: &mut Draft, rows: usize, cols: usize, grade_offsets_m: &[f64]) {
    let (rows, cols) = (rows.max(1), cols.max(1));
    let mut nodes = Vec::with_capacity(rows * cols);
    for r in 0..rows {
        for c in 0..cols {
            let jitter = (
                draft.rng.between(-15.0, 15.0),
                draft.rng.between(-15.0, 15.0),
            );
            nodes.push(
                draft.junction((c as f64 * BLOCK_M + jitter.0, r as f64 * BLOCK_M + jitter.1)),
            );
        }
    }
    for r in 0..rows {
        for c in 0..cols {
            if c + 1 < cols {
                draft.pipe(nodes[r * cols + c], nodes[r * cols + c + 1]);
            }
            if r + 1 < rows {
                draft.pipe(nodes[r * cols + c], nodes[(r + 1) * cols + c]);
            }
        }
    }
    let corners = [
        (0, 0, -1.0, -1.0),
        (rows - 1, cols - 1, 1.0, 1.0),
        (0, cols - 1, 1.0, -1.0),
        (rows - 1, 0, -1.0, 1.0),
    ];
    for (&(r, c, dx, dy), &offset) in corners.iter().zip(grade_offsets_m) {
        let corner = nodes[r * cols + c];
        let (x, y) = draft.position_m(corner);
        let source = draft.fixed_head((x + dx * 0.8 * BLOCK_M, y + dy * 0.8 * BLOCK_M), offset);
        draft.pipe(source, corner);
    }
}

/// SplitMix64 (Steele, Lea and Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014;
/// constants of Vigna's public-domain reference code): a small, fast, seedable stream for invented
/// data. The field is the state; `SplitMix64(seed)` starts a stream.
#[derive(Debug, Clone)]
pub struct SplitMix64(pub u64);

impl SplitMix64 {
    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1), from the top 53 bits.
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in [low, high).
    pub fn between(&mut self, low: f64, high: f64) -> f64 {
        low + (high - low) * self.unit()
    }

    /// Uniform in 0..n (n > 0; the modulo bias is negligible for small n).
    pub fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n as u64) as usize
    }

    /// True with the given probability.
    pub fn chance(&mut self, probability: f64) -> bool {
        self.unit() < probability
    }

    /// Standard normal (Box and Muller, "A note on the generation of random normal deviates", 1958).
    pub fn normal(&mut self) -> f64 {
        let u1 = self.unit().max(1e-12);
        let u2 = self.unit();
        (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
    }
}

/// A network under construction: layout, demands and elevations; sizes, roughness and grades are
/// chosen by [`Draft::finish`] once the whole layout is known.
struct Draft {
    rng: SplitMix64,
    terrain_phases: [f64; 3],
    junctions: Vec<Junction>,
    junction_positions_m: Vec<(f64, f64)>,
    fixed_head_positions_m: Vec<(f64, f64)>,
    fixed_head_offsets_m: Vec<f64>,
    pipes: Vec<(NodeRef, NodeRef, f64)>,
}

impl Draft {
    fn new(seed: u64) -> Self {
        let mut rng = SplitMix64(seed);
        let terrain_phases = [
            rng.between(0.0, 2.0 * PI),
            rng.between(0.0, 2.0 * PI),
            rng.between(0.0, 2.0 * PI),
        ];
        Self {
            rng,
            terrain_phases,
            junctions: Vec::new(),
            junction_positions_m: Vec::new(),
            fixed_head_positions_m: Vec::new(),
            fixed_head_offsets_m: Vec::new(),
            pipes: Vec::new(),
        }
    }

    /// Smooth rolling ground, 30 m +/- 15.5 m.
    fn ground_m(&mut self, (x, y): (f64, f64)) -> f64 {
        let [a, b, c] = self.terrain_phases;
        30.0 + 7.0 * (x / 650.0 + a).sin()
            + 5.0 * (y / 900.0 + b).sin()
            + 3.0 * ((x + y) / 400.0 + c).sin()
            + self.rng.between(-0.5, 0.5)
    }

    fn junction(&mut self, position_m: (f64, f64)) -> NodeRef {
        let index = self.junctions.len();
        let elevation_m = self.ground_m(position_m);
        let demand_m3s = self.rng.between(DEMAND_RANGE_M3S.0, DEMAND_RANGE_M3S.1);
        self.junctions.push(Junction {
            id: format!("J{}", index + 1),
            elevation_m,
            demand_m3s,
            position: None,
        });
        self.junction_positions_m.push(position_m);
        NodeRef::Junction(index)
    }

    fn fixed_head(&mut self, position_m: (f64, f64), grade_offset_m: f64) -> NodeRef {
        self.fixed_head_positions_m.push(position_m);
        self.fixed_head_offsets_m.push(grade_offset_m);
        NodeRef::FixedHead(self.fixed_head_positions_m.len() - 1)
    }

    fn position_m(&self, node: NodeRef) -> (f64, f64) {
        match node {
            NodeRef::Junction(i) => self.junction_positions_m[i],
            NodeRef::FixedHead(k) => self.fixed_head_positions_m[k],
        }
    }

    /// A pipe running up to 10 % longer than the straight line (streets bend), at least 10 m.
    fn pipe(&mut self, from: NodeRef, to: NodeRef) {
        let (a, b) = (self.position_m(from), self.position_m(to));
        let straight = (a.0 - b.0).hypot(a.1 - b.1);
        let length_m = (straight * self.rng.between(1.0, 1.1)).max(10.0);
        self.pipes.push((from, to, length_m));
    }

    fn finish(mut self, title: String, settings: &Synthetic) -> Network {
        let units = settings.units;
        let groups = settings.groups.max(1);
        let total_demand: f64 = self.junctions.iter().map(|j| j.demand_m3s).sum();
        let supply_cap = SUPPLY_PER_FIXED_HEAD_M3S * self.fixed_head_offsets_m.len() as f64;
        if total_demand > supply_cap {
            let scale = supply_cap / total_demand;
            for junction in &mut self.junctions {
                junction.demand_m3s *= scale;
            }
        }

        let reference = self
            .fixed_head_positions_m
            .first()
            .copied()
            .unwrap_or((0.0, 0.0));
        let midpoints: Vec<(f64, f64)> = self
            .pipes
            .iter()
            .map(|&(a, b, _)| {
                let (pa, pb) = (self.position_m(a), self.position_m(b));
                (0.5 * (pa.0 + pb.0), 0.5 * (pa.1 + pb.1))
            })
            .collect();
        let distance = |p: (f64, f64)| (p.0 - reference.0).hypot(p.1 - reference.1);
        let farthest = midpoints.iter().map(|&p| distance(p)).fold(1.0, f64::max);
        let mut pipes: Vec<Pipe> = Vec::with_capacity(self.pipes.len());
        for (i, &(from, to, length_m)) in self.pipes.iter().enumerate() {
            let by_place =
                ((groups as f64 * distance(midpoints[i]) / farthest) as usize).min(groups - 1);
            let band = if self.rng.chance(ERA_SCATTER) {
                self.rng.below(groups)
            } else {
                by_place
            };
            let c_factor = era_nominal_c(band, groups) + self.rng.between(-5.0, 5.0);
            pipes.push(Pipe {
                id: format!("P{}", i + 1),
                from,
                to,
                length_m,
                diameter_m: 0.0,
                c_factor,
                group: Some(band),
                closed: false,
                check_valve: false,
                minor_loss: 0.0,
            });
        }

        let mut net = Network {
            title,
            units,
            junctions: std::mem::take(&mut self.junctions),
            fixed_heads: Vec::new(),
            pipes,
            pumps: Vec::new(),
            groups: (0..groups)
                .map(|k| RoughnessGroup {
                    name: format!("era-{}", k + 1),
                    min_c: DEFAULT_GROUP_MIN_C,
                    max_c: DEFAULT_GROUP_MAX_C,
                    locked: false,
                })
                .collect(),
            flow_unit: None,
            valves: Vec::new(),
            hazen_williams_constant: None,
            conditions: Vec::new(),
            lonlat_origin: None,
        };
        net.fixed_heads = self
            .fixed_head_positions_m
            .iter()
            .enumerate()
            .map(|(k, _)| FixedHead {
                id: format!("S{}", k + 1),
                head_m: 0.0,
                position: None,
            })
            .collect();
        self.size_pipes(&mut net);

        let highest = net
            .junctions
            .iter()
            .map(|j| j.elevation_m)
            .fold(f64::NEG_INFINITY, f64::max);
        let base_grade = highest + self.rng.between(STATIC_MARGIN_M.0, STATIC_MARGIN_M.1);
        let to_file = |(x, y): (f64, f64)| Some((units.length_from_m(x), units.length_from_m(y)));
        for (k, fixed) in net.fixed_heads.iter_mut().enumerate() {
            fixed.head_m = base_grade + self.fixed_head_offsets_m[k];
            fixed.position = to_file(self.fixed_head_positions_m[k]);
        }
        for (junction, &p) in net.junctions.iter_mut().zip(&self.junction_positions_m) {
            junction.position = to_file(p);
        }
        net
    }

    /// Sizes every pipe from its design flow: see the module documentation.
    fn size_pipes(&mut self, net: &mut Network) {
        let law = HazenWilliams::for_units(net.units);
        let sizes_m: Vec<f64> = match net.units {
            UnitSystem::Us => SIZES_IN
                .iter()
                .map(|d| net.units.diameter_to_m(*d))
                .collect(),
            UnitSystem::Si => SIZES_MM
                .iter()
                .map(|d| net.units.diameter_to_m(*d))
                .collect(),
        };
        let adjacency = Adjacency::of_pipes(net, |_, _| true);
        let forest = SpanningForest::grow(net, &adjacency, ForestRoots::AllFixedHeadsAtOnce);
        let nodes = graph::node_count(net);
        let mut carried_m3s = vec![0.0; nodes];
        for (i, junction) in net.junctions.iter().enumerate() {
            carried_m3s[i] = junction.demand_m3s;
        }
        let mut distance_m = vec![0.0; nodes];
        for &node in &forest.order {
            if let Some(pipe) = forest.parent_pipe[node] {
                distance_m[node] = distance_m[forest.parent[node]] + net.pipes[pipe].length_m;
            }
        }
        let longest_m = distance_m.iter().copied().fold(1.0, f64::max);
        let slope_limit = HEAD_LOSS_BUDGET_M / longest_m;
        let mut design_m3s: Vec<Option<f64>> = vec![None; net.pipes.len()];
        for &node in forest.order.iter().rev() {
            if let Some(pipe) = forest.parent_pipe[node] {
                design_m3s[pipe] = Some(carried_m3s[node]);
                carried_m3s[forest.parent[node]] += carried_m3s[node];
            }
        }
        for (pipe, design) in net.pipes.iter_mut().zip(design_m3s) {
            pipe.diameter_m = match design {
                Some(flow_m3s) => {
                    let smallest = usize::from(self.rng.chance(0.4));
                    let fits = |d: f64| {
                        let velocity = flow_m3s / (0.25 * PI * d * d);
                        let r = law.resistance(1.0, d, pipe.c_factor);
                        velocity <= DESIGN_VELOCITY_MS
                            && HazenWilliams::head_loss_m(r, flow_m3s) <= slope_limit
                    };
                    sizes_m[smallest..]
                        .iter()
                        .copied()
                        .find(|&d| fits(d))
                        .unwrap_or(sizes_m[sizes_m.len() - 1])
                }
                None => sizes_m[self.rng.below(3)],
            };
        }
    }
}

/// Nominal C of era band `band` of `groups` (oldest first).
fn era_nominal_c(band: usize, groups: usize) -> f64 {
    if groups <= 1 {
        return 0.5 * (ERA_C_RANGE.0 + ERA_C_RANGE.1);
    }
    ERA_C_RANGE.0 + (ERA_C_RANGE.1 - ERA_C_RANGE.0) * band as f64 / (groups - 1) as f64
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every junction is reached from a fixed head over the network's pipes.
    fn connected(net: &Network) -> bool {
        let adjacency = Adjacency::of_pipes(net, |_, p| !p.closed);
        let forest = SpanningForest::grow(net, &adjacency, ForestRoots::AllFixedHeadsAtOnce);
        (0..net.junctions.len()).all(|j| forest.root[j].is_some())
    }

    fn shapes(seed: u64) -> Vec<Network> {
        vec![
            grid(7, 9, seed),
            Synthetic::new(seed).grid(10, 6, 2),
            tree(120, seed),
            ring_with_branches(12, 4, 3, seed),
            two_sources(8, 7, seed),
            looped_city(500, seed),
        ]
    }

    #[test]
    fn sizes_are_as_documented() {
        let g = grid(7, 9, 1);
        assert_eq!(g.junctions.len(), 63);
        assert_eq!(g.fixed_heads.len(), 1);
        // 7 rows of 8 along-row links, 6 x 9 cross links, one feed main.
        assert_eq!(g.pipes.len(), 7 * 8 + 6 * 9 + 1);
        let g2 = Synthetic::new(1).grid(3, 3, 2);
        assert_eq!((g2.fixed_heads.len(), g2.pipes.len()), (2, 12 + 2));
        let t = tree(80, 1);
        assert_eq!(
            (t.junctions.len(), t.pipes.len(), t.fixed_heads.len()),
            (80, 80, 1)
        );
        let r = ring_with_branches(12, 4, 3, 1);
        assert_eq!(r.junctions.len(), 12 + 4 * 3);
        assert_eq!(r.pipes.len(), 12 + 1 + 4 * 3);
        let s = two_sources(6, 6, 1);
        assert_eq!((s.junctions.len(), s.fixed_heads.len()), (36, 2));
        assert!(s.fixed_heads[1].head_m < s.fixed_heads[0].head_m - 3.9);
        let city = looped_city(10_000, 1);
        assert_eq!(city.junctions.len(), 10_000);
        assert_eq!(city.fixed_heads.len(), 4);
        let per_junction = city.pipes.len() as f64 / 10_000.0;
        assert!((1.9..=2.1).contains(&per_junction), "{per_junction}");
    }

    #[test]
    fn every_shape_is_connected_and_well_formed() {
        for seed in [0, 7, 12345] {
            for net in shapes(seed) {
                assert!(connected(&net), "{}", net.title);
                assert_eq!(net.groups.len(), 3);
                for pipe in &net.pipes {
                    assert!(pipe.length_m >= 10.0 && pipe.diameter_m >= 0.15, "{pipe:?}");
                    assert!((75.0..=145.0).contains(&pipe.c_factor), "{pipe:?}");
                    assert!(pipe.group.is_some_and(|g| g < net.groups.len()));
                    assert_ne!(pipe.from, pipe.to);
                }
                for junction in &net.junctions {
                    assert!(junction.demand_m3s > 0.0 && junction.position.is_some());
                }
            }
        }
    }

    #[test]
    fn same_seed_same_network_other_seed_other_network() {
        for (a, b) in shapes(42).iter().zip(shapes(42)) {
            assert_eq!(*a, b);
        }
        for (a, b) in shapes(42).iter().zip(shapes(43)) {
            assert_ne!(*a, b);
        }
    }

    #[test]
    fn era_bands_follow_the_group_count() {
        let mut settings = Synthetic::new(3);
        settings.groups = 5;
        let net = settings.grid(10, 10, 1);
        assert_eq!(net.groups.len(), 5);
        let mut used = [false; 5];
        for pipe in &net.pipes {
            used[pipe.group.unwrap_or(0)] = true;
        }
        assert!(used.iter().all(|&u| u), "{used:?}");
        // Oldest band nearest the source is roughest on average.
        let mean_c = |band: usize| {
            let cs: Vec<f64> = net
                .pipes
                .iter()
                .filter(|p| p.group == Some(band))
                .map(|p| p.c_factor)
                .collect();
            cs.iter().sum::<f64>() / cs.len() as f64
        };
        assert!(mean_c(0) < mean_c(4) - 40.0);
    }

    #[test]
    fn si_networks_use_metric_sizes_and_positions() {
        let mut settings = Synthetic::new(9);
        settings.units = UnitSystem::Si;
        let net = settings.grid(4, 4, 1);
        assert_eq!(net.units, UnitSystem::Si);
        for pipe in &net.pipes {
            let mm = pipe.diameter_m * 1000.0;
            assert!(SIZES_MM.iter().any(|s| (s - mm).abs() < 1e-9), "{mm}");
        }
        let us = Synthetic::new(9).grid(4, 4, 1);
        // Same layout in metres, stated in feet for the US network.
        let (si_x, us_x) = (
            net.junctions[5].position.map(|p| p.0),
            us.junctions[5].position.map(|p| p.0 * 0.3048),
        );
        assert!((si_x.unwrap_or(0.0) - us_x.unwrap_or(1.0)).abs() < 1e-9);
    }

    #[test]
    fn steady_states_look_like_a_distribution_system() {
        use crate::hydraulics::loops::{LoopOptions, solve_loops};
        // Common practice, no source: service pressures of about 20 to 100 psi (14 m to 70 m) and main
        // velocities of order 0.3 m/s to 3 m/s; no junction above the highest fixed-head grade.
        let options = LoopOptions {
            max_iterations: 20_000,
            tolerance_m: 1e-6,
            ..LoopOptions::default()
        };
        for seed in [1, 2, 3] {
            for net in shapes(seed) {
                let solution = solve_loops(&net, &net.c_factors(), options).expect("balances");
                let top = net
                    .fixed_heads
                    .iter()
                    .map(|f| f.head_m)
                    .fold(f64::MIN, f64::max);
                let pressures: Vec<f64> = net
                    .junctions
                    .iter()
                    .zip(&solution.junction_head_m)
                    .map(|(j, h)| h - j.elevation_m)
                    .collect();
                let lowest = pressures.iter().copied().fold(f64::MAX, f64::min);
                let highest = pressures.iter().copied().fold(f64::MIN, f64::max);
                let velocities: Vec<f64> = net
                    .pipes
                    .iter()
                    .zip(&solution.pipe_flow_m3s)
                    .map(|(p, q)| q.abs() / (0.25 * PI * p.diameter_m * p.diameter_m))
                    .collect();
                let fastest = velocities.iter().copied().fold(0.0, f64::max);
                let summary = format!(
                    "{}: pressures {lowest:.1}..{highest:.1} m, fastest {fastest:.2} m/s",
                    net.title
                );
                assert!(lowest > 14.0 && highest < 80.0, "{summary}");
                assert!((0.3..=3.0).contains(&fastest), "{summary}");
                assert!(
                    solution.junction_head_m.iter().all(|&h| h < top),
                    "{summary}"
                );
            }
        }
    }

    #[test]
    fn large_networks_build() {
        let city = looped_city(90_000, 5);
        assert_eq!(city.junctions.len(), 90_000);
        assert!(
            (175_000..=185_000).contains(&city.pipes.len()),
            "{}",
            city.pipes.len()
        );
        assert!(connected(&city));
        let big_grid = grid(320, 320, 5);
        assert_eq!(big_grid.junctions.len(), 102_400);
        assert!(connected(&big_grid));
    }
}
