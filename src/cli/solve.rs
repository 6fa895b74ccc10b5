//! `roughcal solve NETWORK [--condition NAME] [--demand NODE=FLOW ...] [--json]`.

use std::fmt::Write as _;
use std::path::Path;
use std::process::ExitCode;

use anyhow::{Context, bail};
use roughcal::hydraulics::{GradientSolver, LinkRef, OperatingState, Solution, SolveWarning};
use roughcal::network::Network;
use roughcal::network::file::load_network_file;
use roughcal::report::table::{Align, TextTable};
use serde_json::json;

use super::load_network_or_report;

pub fn run(
    network_path: &Path,
    condition: Option<&str>,
    demands: &[String],
    json: bool,
) -> anyhow::Result<ExitCode> {
    let Some(loaded) = load_network_or_report(network_path, load_network_file)? else {
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
        println!(
            "{}",
            serde_json::to_string_pretty(&to_json(net, &state, &solution))?
        );
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
    Ok((junction, net.units.flow_to_m3s(value)))
}

fn to_json(net: &Network, state: &OperatingState, solution: &Solution) -> serde_json::Value {
    let units = net.units;
    let mut nodes: Vec<serde_json::Value> = net
        .junctions
        .iter()
        .enumerate()
        .map(|(j, junction)| {
            let pressure = solution
                .pressure_head_m(net, j)
                .map(|p| units.pressure_from_head_m(p));
            json!({
                "id": junction.id,
                "kind": "junction",
                "head": solution.pressure_head_m(net, j).map(|_| units.length_from_m(solution.head_m[j])),
                "pressure": pressure,
                "demand": units.flow_from_m3s(state.demand_m3s(net, j)),
                "isolated": solution.isolated[j],
                "negative_pressure": pressure.is_some_and(|p| p < 0.0),
            })
        })
        .collect();
    nodes.extend(net.fixed_heads.iter().enumerate().map(|(f, fixed)| {
        json!({
            "id": fixed.id,
            "kind": "fixed_head",
            "head": units.length_from_m(state.fixed_head_m[f]),
            "pressure": null,
        })
    }));
    let pipes: Vec<serde_json::Value> = net
        .pipes
        .iter()
        .enumerate()
        .map(|(k, pipe)| {
            json!({
                "id": pipe.id,
                "flow": units.flow_from_m3s(solution.pipe_flow_m3s[k]),
                "headloss": units.length_from_m(solution.pipe_headloss_m[k]),
                "status": solution.pipe_status[k].label(),
            })
        })
        .collect();
    let pumps: Vec<serde_json::Value> = net
        .pumps
        .iter()
        .enumerate()
        .map(|(k, pump)| {
            json!({
                "id": pump.id,
                "flow": units.flow_from_m3s(solution.pump_flow_m3s[k]),
                "head_gain": units.length_from_m(solution.pump_head_gain_m[k]),
                "status": solution.pump_status[k].label(),
            })
        })
        .collect();
    json!({
        "converged": true,
        "iterations": solution.iterations,
        "units": units.key(),
        "max_imbalance": units.flow_from_m3s(solution.max_imbalance_m3s),
        "nodes": nodes,
        "pipes": pipes,
        "pumps": pumps,
        "warnings": warning_lines(net, solution),
    })
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
        units.flow_label(),
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
        units.flow_from_m3s(solution.max_imbalance_m3s),
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
                    format!("{:.2}", units.flow_from_m3s(state.demand_m3s(net, j))),
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
            format!("{:.2}", units.flow_from_m3s(solution.pipe_flow_m3s[k])),
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
                format!("{:.2}", units.flow_from_m3s(solution.pump_flow_m3s[k])),
                format!("{:.2}", units.length_from_m(solution.pump_head_gain_m[k])),
                solution.pump_status[k].label().to_string(),
            ]);
        }
        let _ = write!(out, "\n{}", pumps.text(""));
    }
    for line in warning_lines(net, solution) {
        let _ = writeln!(out, "warning: {line}");
    }
    out
}
