//! A short account of a network: what `roughcal check` prints for a valid file.

use super::model::Network;
use super::units::{FlowUnit, UnitSystem};

/// Total pipe length of one roughness group, in the network's length unit (ft or m).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupLength {
    pub group: String,
    pub pipes: usize,
    pub length: f64,
}

/// A fixed head and its head, in the network's length unit (ft or m).
#[derive(Debug, Clone, PartialEq)]
pub struct SourceHead {
    pub id: String,
    pub head: f64,
}

/// Counts and totals of a network, in the network's own units (not the internal SI).
#[derive(Debug, Clone, PartialEq)]
pub struct NetworkSummary {
    pub title: String,
    pub units: UnitSystem,
    /// The unit of flows (the network's `flow_unit`, or that of its unit system).
    pub flows: FlowUnit,
    pub junctions: usize,
    pub fixed_heads: usize,
    pub pipes: usize,
    pub closed_pipes: usize,
    pub pumps: usize,
    /// Control valves.
    pub valves: usize,
    pub groups: usize,
    pub conditions: usize,
    /// Every declared group in file order, including groups no pipe uses (length 0).
    pub length_by_group: Vec<GroupLength>,
    /// Pipes with no group.
    pub ungrouped: GroupLength,
    /// Every fixed head with its head.
    pub sources: Vec<SourceHead>,
    /// Sum of the base demands of all junctions, in [`Self::flows`].
    pub total_base_demand: f64,
}

impl NetworkSummary {
    /// Summarizes a network.
    pub fn of(network: &Network) -> Self {
        let units = network.units;
        let mut length_by_group: Vec<GroupLength> = network
            .groups
            .iter()
            .map(|group| GroupLength {
                group: group.name.clone(),
                pipes: 0,
                length: 0.0,
            })
            .collect();
        let mut ungrouped = GroupLength {
            group: String::new(),
            pipes: 0,
            length: 0.0,
        };
        for pipe in &network.pipes {
            let entry = match pipe.group.and_then(|g| length_by_group.get_mut(g)) {
                Some(entry) => entry,
                None => &mut ungrouped,
            };
            entry.pipes += 1;
            entry.length += units.length_from_m(pipe.length_m);
        }
        Self {
            title: network.title.clone(),
            units,
            junctions: network.junctions.len(),
            fixed_heads: network.fixed_heads.len(),
            pipes: network.pipes.len(),
            closed_pipes: network.pipes.iter().filter(|p| p.closed).count(),
            pumps: network.pumps.len(),
            valves: network.valves.len(),
            groups: network.groups.len(),
            conditions: network.conditions.len(),
            length_by_group,
            ungrouped,
            sources: network
                .fixed_heads
                .iter()
                .map(|f| SourceHead {
                    id: f.id.clone(),
                    head: units.length_from_m(f.head_m),
                })
                .collect(),
            flows: network.flows(),
            total_base_demand: network
                .flows()
                .from_m3s(network.junctions.iter().map(|j| j.demand_m3s).sum()),
        }
    }

    /// Total length of all pipes (ft or m).
    pub fn total_length(&self) -> f64 {
        self.length_by_group.iter().map(|g| g.length).sum::<f64>() + self.ungrouped.length
    }
}
