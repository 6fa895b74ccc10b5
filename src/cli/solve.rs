//! `roughcal solve NETWORK [--condition NAME] [--demand NODE=FLOW ...] [--json]`.

use std::fmt::Write as _;
use std::io::Write as _;
use std::path::Path;
use std::process::ExitCode;

use anyhow::{Context, bail};
use roughcal::calibrate::CAUTION;
use roughcal::hydraulics::{GradientSolver, LinkRef, OperatingState, Solution, SolveWarning};
use roughcal::network::file::load_network_file;
use roughcal::network::{Network, UnitLabels};
use roughcal::report::table::{Align, TextTable};
use serde::Serialize;
use serde::ser::Serializer;

use super::network_or_report;

pub fn run(
    network_path: &Path,
    condition: Option<&str>,
    demands: &[String],
    json: bool,
) -> anyhow::Result<ExitCode> {
    let Some(loaded) = network_or_report(network_path, load_network_file(network_path))? else {
        return Ok(ExitCode::from(1));
    };
    let net = &loaded.network;
    let mut state = OperatingState::for_condition_name(net, condition)
        .with_context(|| format!("{}", network_path.display()))?;
    for demand in demands {
        let (junction, flow_m3s) = parse_demand(net, demand)?;
        state.add_demand(junction, flow_m3s);
    }
    let solver = GradientSolver::new(net)?;
    let solution = solver
        .solve(net, &state, &net.c_factors(), None)
        .with_context(|| format!("solving {}", network_path.display()))?;
    if json {
        // Streamed: a city's quarter of a million rows never sit in memory as one JSON value.
        let mut out = std::io::BufWriter::with_capacity(1 << 16, std::io::stdout().lock());
        serde_json::to_writer_pretty(&mut out, &Report::new(net, &state, &solution))?;
        writeln!(out)?;
        out.flush()?;
    } else {
        print!("{}", render(net, &state, &solution, condition));
    }
    Ok(ExitCode::SUCCESS)
}

/// `NODE=FLOW` in the network's flow unit.
fn parse_demand(net: &Network, text: &str) -> anyhow::Result<(usize, f64)> {
    let Some((id, flow)) = text.split_once('=') else {
        bail!("--demand {text}: expected NODE=FLOW, e.g. --demand J-101=1000");
    };
    let Some(junction) = net.find_junction(id.trim()) else {
        let hint = roughcal::network::suggest::did_you_mean(
            id.trim(),
            net.junctions.iter().map(|j| j.id.as_str()),
        );
        bail!(
            "--demand {text}: no junction `{}` in the network{hint}",
            id.trim()
        );
    };
    let value: f64 = flow
        .trim()
        .parse()
        .ok()
        .filter(|v: &f64| v.is_finite())
        .with_context(|| format!("--demand {text}: `{}` is not a number", flow.trim()))?;
    Ok((junction, net.flows().to_m3s(value)))
}

/// The `--json` report. Keys in alphabetical order (the order every report of roughcal prints them in),
/// rows serialized as they are written.
#[derive(Serialize)]
struct Report<'a> {
    caution: &'static str,
    converged: bool,
    iterations: usize,
    /// Largest junction continuity imbalance, in `units.flow`.
    max_imbalance: f64,
    nodes: Nodes<'a>,
    pipes: Pipes<'a>,
    pumps: Pumps<'a>,
    units: UnitLabels,
    valves: Valves<'a>,
    warnings: Vec<String>,
}

impl<'a> Report<'a> {
    fn new(net: &'a Network, state: &'a OperatingState, solution: &'a Solution) -> Self {
        let context = Solved {
            net,
            state,
            solution,
        };
        Self {
            caution: CAUTION,
            converged: true,
            iterations: solution.iterations,
            max_imbalance: net.flows().from_m3s(solution.max_imbalance_m3s),
            nodes: Nodes(context),
            pipes: Pipes(context),
            pumps: Pumps(context),
            units: net.unit_labels(),
            valves: Valves(context),
            warnings: warning_lines(net, solution),
        }
    }
}

/// What every row is made from.
#[derive(Clone, Copy)]
struct Solved<'a> {
    net: &'a Network,
    state: &'a OperatingState,
    solution: &'a Solution,
}

/// The junctions, then the fixed heads, each row built as it is written.
struct Nodes<'a>(Solved<'a>);
/// The pipes, each row built as it is written.
struct Pipes<'a>(Solved<'a>);
/// The pumps, each row built as it is written.
struct Pumps<'a>(Solved<'a>);
/// The control valves, each row built as it is written.
struct Valves<'a>(Solved<'a>);

#[derive(Serialize)]
struct ValveRow<'a> {
    flow: f64,
    /// Head across the valve, from end minus to end; absent (null) where an end is isolated.
    head_loss: Option<f64>,
    id: &'a str,
    kind: &'static str,
    /// active (holding its setting), open, closed, or closed (control).
    state: &'static str,
}

#[derive(Serialize)]
struct JunctionRow<'a> {
    demand: f64,
    /// Absent (null) for an isolated junction.
    head: Option<f64>,
    id: &'a str,
    isolated: bool,
    kind: &'static str,
    negative_pressure: bool,
    pressure: Option<f64>,
}

#[derive(Serialize)]
struct FixedHeadRow<'a> {
    head: f64,
    id: &'a str,
    kind: &'static str,
    pressure: Option<f64>,
}

#[derive(Serialize)]
struct LinkRow<'a> {
    flow: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    head_gain: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    headloss: Option<f64>,
    id: &'a str,
    status: &'static str,
}

impl Serialize for Nodes<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeSeq;
        let Solved {
            net,
            state,
            solution,
        } = self.0;
        let units = net.units;
        let mut seq =
            serializer.serialize_seq(Some(net.junctions.len() + net.fixed_heads.len()))?;
        for (j, junction) in net.junctions.iter().enumerate() {
            let pressure_head_m = solution.pressure_head_m(net, j);
            let pressure = pressure_head_m.map(|p| units.pressure_from_head_m(p));
            seq.serialize_element(&JunctionRow {
                demand: net.flows().from_m3s(state.demand_m3s(net, j)),
                head: pressure_head_m.map(|_| units.length_from_m(solution.head_m[j])),
                id: &junction.id,
                isolated: solution.isolated[j],
                kind: "junction",
                negative_pressure: pressure.is_some_and(|p| p < 0.0),
                pressure,
            })?;
        }
        for (f, fixed) in net.fixed_heads.iter().enumerate() {
            seq.serialize_element(&FixedHeadRow {
                head: units.length_from_m(state.fixed_head_m[f]),
                id: &fixed.id,
                kind: "fixed_head",
                pressure: None,
            })?;
        }
        seq.end()
    }
}

impl Serialize for Pipes<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let Solved { net, solution, .. } = self.0;
        let units = net.units;
        serializer.collect_seq(net.pipes.iter().enumerate().map(|(k, pipe)| LinkRow {
            flow: net.flows().from_m3s(solution.pipe_flow_m3s[k]),
            head_gain: None,
            headloss: Some(units.length_from_m(solution.pipe_headloss_m[k])),
            id: &pipe.id,
            status: solution.pipe_status[k].label(),
        }))
    }
}

impl Serialize for Pumps<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let Solved { net, solution, .. } = self.0;
        let units = net.units;
        serializer.collect_seq(net.pumps.iter().enumerate().map(|(k, pump)| LinkRow {
            flow: net.flows().from_m3s(solution.pump_flow_m3s[k]),
            head_gain: Some(units.length_from_m(solution.pump_head_gain_m[k])),
            headloss: None,
            id: &pump.id,
            status: solution.pump_status[k].label(),
        }))
    }
}

impl Serialize for Valves<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let Solved { net, solution, .. } = self.0;
        let units = net.units;
        serializer.collect_seq(net.valves.iter().enumerate().map(|(k, valve)| {
            let loss_m = solution.valve_head_loss_m[k];
            ValveRow {
                flow: net.flows().from_m3s(solution.valve_flow_m3s[k]),
                head_loss: loss_m.is_finite().then(|| units.length_from_m(loss_m)),
                id: &valve.id,
                kind: valve.kind.keyword(),
                state: solution.valve_status[k].label(),
            }
        }))
    }
}

/// Every warning of a solution in words.
pub fn warning_lines(net: &Network, solution: &Solution) -> Vec<String> {
    let ids = |list: &[usize]| {
        list.iter()
            .map(|&j| net.junctions[j].id.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    solution
        .warnings
        .iter()
        .map(|warning| match warning {
            SolveWarning::Isolated { junctions } => format!(
                "isolated (no open path to a fixed head; head undefined): {}",
                ids(junctions)
            ),
            SolveWarning::NegativePressure { junctions } => {
                format!("negative pressure (grade below ground): {}", ids(junctions))
            }
            SolveWarning::PumpCannotLift { pump } => format!(
                "pump {} cannot lift against the grade across it and was shut off",
                net.pumps[*pump].id
            ),
            SolveWarning::StatusOscillation { link } => format!(
                "{} kept opening and closing and was held closed",
                match link {
                    LinkRef::Pipe(k) => format!("pipe {}", net.pipes[*k].id),
                    LinkRef::Pump(k) => format!("pump {}", net.pumps[*k].id),
                    LinkRef::Valve(k) => format!("valve {}", net.valves[*k].id),
                }
            ),
        })
        .collect()
}

fn render(
    net: &Network,
    state: &OperatingState,
    solution: &Solution,
    condition: Option<&str>,
) -> String {
    let units = net.units;
    let (len, flow, pressure) = (
        units.length_label(),
        net.flows().label(),
        units.pressure_label(),
    );
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{}: converged in {} iterations{}; largest junction imbalance {:.2e} {flow}",
        if net.title.is_empty() {
            "network"
        } else {
            &net.title
        },
        solution.iterations,
        condition
            .map(|c| format!(" under condition `{c}`"))
            .unwrap_or_default(),
        net.flows().from_m3s(solution.max_imbalance_m3s),
    );
    let mut junctions = TextTable::new(&[
        ("junction", Align::Left),
        (&format!("head {len}"), Align::Right),
        (&format!("p {pressure}"), Align::Right),
        (&format!("q {flow}"), Align::Right),
        ("", Align::Left),
    ]);
    for (j, junction) in net.junctions.iter().enumerate() {
        match solution.pressure_head_m(net, j) {
            Some(p) => {
                let p = units.pressure_from_head_m(p);
                junctions.row(vec![
                    junction.id.clone(),
                    format!("{:.2}", units.length_from_m(solution.head_m[j])),
                    format!("{p:.2}"),
                    format!("{:.2}", net.flows().from_m3s(state.demand_m3s(net, j))),
                    if p < 0.0 { "NEGATIVE" } else { "" }.to_string(),
                ]);
            }
            None => junctions.row(vec![junction.id.clone(), "isolated".into(), "-".into()]),
        }
    }
    let _ = write!(out, "\n{}", junctions.text(""));
    let mut pipes = TextTable::new(&[
        ("pipe", Align::Left),
        (&format!("q {flow}"), Align::Right),
        (&format!("hf {len}"), Align::Right),
        ("status", Align::Left),
    ]);
    for (k, pipe) in net.pipes.iter().enumerate() {
        pipes.row(vec![
            pipe.id.clone(),
            format!("{:.2}", net.flows().from_m3s(solution.pipe_flow_m3s[k])),
            format!("{:.3}", units.length_from_m(solution.pipe_headloss_m[k])),
            solution.pipe_status[k].label().to_string(),
        ]);
    }
    let _ = write!(out, "\n{}", pipes.text(""));
    if !net.pumps.is_empty() {
        let mut pumps = TextTable::new(&[
            ("pump", Align::Left),
            (&format!("q {flow}"), Align::Right),
            (&format!("gain {len}"), Align::Right),
            ("status", Align::Left),
        ]);
        for (k, pump) in net.pumps.iter().enumerate() {
            pumps.row(vec![
                pump.id.clone(),
                format!("{:.2}", net.flows().from_m3s(solution.pump_flow_m3s[k])),
                format!("{:.2}", units.length_from_m(solution.pump_head_gain_m[k])),
                solution.pump_status[k].label().to_string(),
            ]);
        }
        let _ = write!(out, "\n{}", pumps.text(""));
    }
    if !net.valves.is_empty() {
        let mut valves = TextTable::new(&[
            ("valve", Align::Left),
            ("kind", Align::Left),
            (&format!("q {flow}"), Align::Right),
            (&format!("loss {len}"), Align::Right),
            ("state", Align::Left),
        ]);
        for (k, valve) in net.valves.iter().enumerate() {
            let loss_m = solution.valve_head_loss_m[k];
            valves.row(vec![
                valve.id.clone(),
                valve.kind.keyword().to_string(),
                format!("{:.2}", net.flows().from_m3s(solution.valve_flow_m3s[k])),
                if loss_m.is_finite() {
                    format!("{:.2}", units.length_from_m(loss_m))
                } else {
                    "-".to_string()
                },
                solution.valve_status[k].label().to_string(),
            ]);
        }
        let _ = write!(out, "\n{}", valves.text(""));
    }
    for line in warning_lines(net, solution) {
        let _ = writeln!(out, "warning: {line}");
    }
    out
}
