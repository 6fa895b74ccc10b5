//! The network as the core sees it: every quantity in internal units (metres, m^3/s), every reference
//! resolved to an index. Built by the loader from a network file; never read from disk here.

use super::units::{FlowUnit, UnitLabels, UnitSystem};

/// Default calibration bounds of a roughness group that has no `[[group]]` entry bounds (Hazen-Williams C).
pub const DEFAULT_GROUP_MIN_C: f64 = 40.0;
/// See [`DEFAULT_GROUP_MIN_C`].
pub const DEFAULT_GROUP_MAX_C: f64 = 150.0;

/// A whole water distribution network.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    pub title: String,
    /// The unit system of the file; the core computes in SI internally.
    pub units: UnitSystem,
    pub junctions: Vec<Junction>,
    pub fixed_heads: Vec<FixedHead>,
    pub pipes: Vec<Pipe>,
    pub pumps: Vec<Pump>,
    pub groups: Vec<RoughnessGroup>,
    pub conditions: Vec<Condition>,
    /// Control valves (pressure reducing, pressure sustaining, flow control, throttle).
    pub valves: Vec<Valve>,
    /// The Hazen-Williams constant K of the file, in the formula of its unit system (see
    /// [`crate::hydraulics::headloss`]); `None` for the default of the unit system (10.44 us, 10.67 si).
    pub hazen_williams_constant: Option<f64>,
    /// The file's `flow_unit`: the unit its flows are written and shown in; `None` for the flow unit of
    /// the unit system (gpm in us, L/s in si).
    pub flow_unit: Option<FlowUnit>,
    /// Where plan coordinates came from WGS84 longitude and latitude (a network imported with
    /// `coordinates = "lonlat"`): the origin of the local projection that turned them into x, y (see
    /// [`super::lonlat::LocalProjection`]), so exports can give lon/lat back. `None`: x, y are the file's
    /// own plan coordinates.
    pub lonlat_origin: Option<super::lonlat::LonLat>,
}

/// A node whose head is unknown: a pipe joint, hydrant or service point.
#[derive(Debug, Clone, PartialEq)]
pub struct Junction {
    pub id: String,
    /// Ground or gauge elevation: pressures are reported relative to it.
    pub elevation_m: f64,
    /// Base demand (withdrawal is positive).
    pub demand_m3s: f64,
    /// Plan coordinates in the file's length units, for the map.
    pub position: Option<(f64, f64)>,
}

/// A reservoir, tank or boundary at a known hydraulic grade.
#[derive(Debug, Clone, PartialEq)]
pub struct FixedHead {
    pub id: String,
    pub head_m: f64,
    pub position: Option<(f64, f64)>,
}

/// Which kind of node a link end refers to, and its index in that list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum NodeRef {
    Junction(usize),
    FixedHead(usize),
}

impl NodeRef {
    /// The junction index, if this is a junction.
    pub fn junction(self) -> Option<usize> {
        match self {
            NodeRef::Junction(i) => Some(i),
            NodeRef::FixedHead(_) => None,
        }
    }
}

/// A pipe with Hazen-Williams roughness.
#[derive(Debug, Clone, PartialEq)]
pub struct Pipe {
    pub id: String,
    pub from: NodeRef,
    pub to: NodeRef,
    pub length_m: f64,
    pub diameter_m: f64,
    /// Hazen-Williams C-factor (dimensionless in use, though the formula's constant carries the units).
    pub c_factor: f64,
    /// Index into [`Network::groups`].
    pub group: Option<usize>,
    pub closed: bool,
    /// Flow allowed only from `from` to `to`.
    pub check_valve: bool,
    /// Minor-loss coefficient K of the fittings along the pipe: an extra head loss K v^2 / 2g (0 for none).
    pub minor_loss: f64,
}

/// What a control valve regulates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ValveKind {
    /// Pressure reducing: holds the pressure at its `to` end at the setting while the upstream head allows.
    PressureReducing,
    /// Pressure sustaining: holds the pressure at its `from` end at the setting.
    PressureSustaining,
    /// Flow control: lets at most the setting through, from `from` to `to`.
    FlowControl,
    /// Throttle: a fixed loss coefficient, the setting.
    Throttle,
}

impl ValveKind {
    /// The word of the network file (`kind = "prv"`).
    pub fn keyword(self) -> &'static str {
        match self {
            Self::PressureReducing => "prv",
            Self::PressureSustaining => "psv",
            Self::FlowControl => "fcv",
            Self::Throttle => "tcv",
        }
    }

    /// The kind for a network-file word.
    pub fn from_keyword(word: &str) -> Option<Self> {
        [
            Self::PressureReducing,
            Self::PressureSustaining,
            Self::FlowControl,
            Self::Throttle,
        ]
        .into_iter()
        .find(|k| k.keyword() == word)
    }
}

/// A control valve between two nodes. Its head loss is set by its kind and setting, not by a length.
#[derive(Debug, Clone, PartialEq)]
pub struct Valve {
    pub id: String,
    pub from: NodeRef,
    pub to: NodeRef,
    pub diameter_m: f64,
    pub kind: ValveKind,
    /// In internal units: a pressure head (m of water above the controlled end's elevation) for
    /// [`ValveKind::PressureReducing`] and [`ValveKind::PressureSustaining`], a flow (m^3/s) for
    /// [`ValveKind::FlowControl`], the loss coefficient K for [`ValveKind::Throttle`].
    pub setting: f64,
    /// Loss coefficient K of the valve when fully open (0 for none).
    pub minor_loss: f64,
    pub closed: bool,
}

/// A pump adding head from `from` to `to` along a fitted quadratic curve.
#[derive(Debug, Clone, PartialEq)]
pub struct Pump {
    pub id: String,
    pub from: NodeRef,
    pub to: NodeRef,
    pub curve: PumpCurve,
    pub off: bool,
}

/// A pump head curve fitted as `head_gain_m = a + b q + c q^2` (q in m^3/s) by least squares through
/// the points given in the file.
#[derive(Debug, Clone, PartialEq)]
pub struct PumpCurve {
    /// The points as given, converted to (m^3/s, m).
    pub points: Vec<(f64, f64)>,
    pub a: f64,
    pub b: f64,
    pub c: f64,
}

impl PumpCurve {
    /// Head gain in metres at flow `q_m3s`.
    pub fn head_gain_m(&self, q_m3s: f64) -> f64 {
        self.a + self.b * q_m3s + self.c * q_m3s * q_m3s
    }

    /// d(head gain)/dq in m per m^3/s.
    pub fn slope(&self, q_m3s: f64) -> f64 {
        self.b + 2.0 * self.c * q_m3s
    }

    /// Shutoff head: the gain at zero flow.
    pub fn shutoff_head_m(&self) -> f64 {
        self.a
    }

    /// The flow at which the curve falls to zero head gain, if it does (the curve's run-out).
    pub fn max_flow_m3s(&self) -> Option<f64> {
        if self.c < 0.0 {
            let disc = self.b * self.b - 4.0 * self.c * self.a;
            if disc >= 0.0 {
                let root = (-self.b - disc.sqrt()) / (2.0 * self.c);
                return (root > 0.0).then_some(root);
            }
        } else if self.c == 0.0 && self.b < 0.0 {
            return Some(-self.a / self.b);
        }
        None
    }
}

/// A roughness group: pipes of one material and era that share one calibrated C.
#[derive(Debug, Clone, PartialEq)]
pub struct RoughnessGroup {
    pub name: String,
    pub min_c: f64,
    pub max_c: f64,
    /// A locked group keeps its C during calibration.
    pub locked: bool,
}

/// Boundary state of the network at the time of a field test.
#[derive(Debug, Clone, PartialEq)]
pub struct Condition {
    pub name: String,
    /// Multiplies every base demand.
    pub demand_factor: f64,
    /// Fixed-head overrides: (index into [`Network::fixed_heads`], head in m).
    pub heads: Vec<(usize, f64)>,
    /// Indices of pipes closed in this condition.
    pub closed_pipes: Vec<usize>,
    /// Indices of pumps off in this condition.
    pub pumps_off: Vec<usize>,
    /// Valve setting overrides: (index into [`Network::valves`], setting in internal units).
    pub valve_settings: Vec<(usize, f64)>,
    /// Indices of valves closed in this condition.
    pub closed_valves: Vec<usize>,
}

impl Network {
    /// The unit the network's flows are written and shown in: its `flow_unit`, or that of its unit
    /// system.
    pub fn flows(&self) -> FlowUnit {
        self.flow_unit
            .unwrap_or_else(|| FlowUnit::of_system(self.units))
    }

    /// The `units` object of JSON reports on this network: its unit system with its flow unit.
    pub fn unit_labels(&self) -> UnitLabels {
        self.units.labels_with_flow(self.flows())
    }

    /// Id of a node reference.
    pub fn node_id(&self, node: NodeRef) -> &str {
        match node {
            NodeRef::Junction(i) => &self.junctions[i].id,
            NodeRef::FixedHead(i) => &self.fixed_heads[i].id,
        }
    }

    /// Finds a node by id.
    pub fn find_node(&self, id: &str) -> Option<NodeRef> {
        if let Some(i) = self.junctions.iter().position(|j| j.id == id) {
            return Some(NodeRef::Junction(i));
        }
        self.fixed_heads
            .iter()
            .position(|f| f.id == id)
            .map(NodeRef::FixedHead)
    }

    /// Finds a junction index by id.
    pub fn find_junction(&self, id: &str) -> Option<usize> {
        self.junctions.iter().position(|j| j.id == id)
    }

    /// Finds a condition by name.
    pub fn find_condition(&self, name: &str) -> Option<&Condition> {
        self.conditions.iter().find(|c| c.name == name)
    }

    /// Finds a group index by name.
    pub fn find_group(&self, name: &str) -> Option<usize> {
        self.groups.iter().position(|g| g.name == name)
    }

    /// This network as it stands under `condition`: base demands scaled, fixed-head grades overridden,
    /// the condition's pipes and valves closed, its pumps off and its valve settings in force. For
    /// methods that read a network as written (the loop method); the gradient solver takes the same
    /// condition as an operating state instead.
    pub fn under_condition(&self, condition: &Condition) -> Network {
        let mut net = self.clone();
        for junction in &mut net.junctions {
            junction.demand_m3s *= condition.demand_factor;
        }
        for &(fixed, head_m) in &condition.heads {
            if let Some(f) = net.fixed_heads.get_mut(fixed) {
                f.head_m = head_m;
            }
        }
        for &pipe in &condition.closed_pipes {
            if let Some(p) = net.pipes.get_mut(pipe) {
                p.closed = true;
            }
        }
        for &pump in &condition.pumps_off {
            if let Some(p) = net.pumps.get_mut(pump) {
                p.off = true;
            }
        }
        for &(valve, setting) in &condition.valve_settings {
            if let Some(v) = net.valves.get_mut(valve) {
                v.setting = setting;
            }
        }
        for &valve in &condition.closed_valves {
            if let Some(v) = net.valves.get_mut(valve) {
                v.closed = true;
            }
        }
        net.conditions.clear();
        net
    }

    /// Current C-factor of every pipe, in pipe order.
    pub fn c_factors(&self) -> Vec<f64> {
        self.pipes.iter().map(|p| p.c_factor).collect()
    }

    /// Plan position of a node.
    pub fn node_position(&self, node: NodeRef) -> Option<(f64, f64)> {
        match node {
            NodeRef::Junction(i) => self.junctions[i].position,
            NodeRef::FixedHead(i) => self.fixed_heads[i].position,
        }
    }
}
