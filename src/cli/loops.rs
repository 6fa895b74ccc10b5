//! `roughcal loops`: balance a network by Hardy Cross loop corrections and show every iteration, in the
//! network's own units.

use std::fmt::Write as _;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context as _;
use roughcal::calibrate::CAUTION;
use roughcal::hydraulics::gradient::{MASS_BALANCE_TOLERANCE, named_condition};
use roughcal::hydraulics::loops::{LoopError, LoopKind, LoopOptions, LoopSolution, solve_loops};
use roughcal::network::file::load_network_file;
use roughcal::network::{Network, NodeRef};
use roughcal::report::table::{Align, TextTable};
use serde_json::{Value, json};

use super::network_or_report;

/// Loop corrections printed on one line of the iteration table.
const CORRECTIONS_PER_LINE: usize = 6;

pub fn run(
    network: &Path,
    iterations: usize,
    condition: Option<&str>,
    json: bool,
) -> anyhow::Result<ExitCode> {
    let Some(loaded) = network_or_report(network, load_network_file(network))? else {
        return Ok(ExitCode::from(1));
    };
    let mut net = loaded.network;
    if let Some(name) = condition {
        let found =
            named_condition(&net, name).with_context(|| format!("{}", network.display()))?;
        net = net.under_condition(found);
        net.title = format!("{} under condition `{name}`", net.title);
    }
    let options = LoopOptions {
        max_iterations: iterations,
        ..LoopOptions::default()
    };
    let (solution, converged) = match solve_loops(&net, &net.c_factors(), options) {
        Ok(solution) => (solution, true),
        Err(LoopError::NotConverged { partial, .. }) => (*partial, false),
        Err(error) => {
            return Err(error).with_context(|| format!("balancing {}", network.display()));
        }
    };
    let imbalance_m3s = max_junction_imbalance_m3s(&net, &solution);
    let total_demand_m3s: f64 = net.junctions.iter().map(|j| j.demand_m3s.abs()).sum();
    let allowed_m3s = MASS_BALANCE_TOLERANCE * total_demand_m3s.max(1e-3);
    if converged && (imbalance_m3s > allowed_m3s || !imbalance_m3s.is_finite()) {
        anyhow::bail!(
            "{}: the loop solution fails the mass-balance check: a junction is out of balance by \
             {imbalance_m3s:.3e} m^3/s (allowed {allowed_m3s:.3e})",
            network.display()
        );
    }
    if json {
        let mut report = render_json(&net, &solution, converged);
        if converged {
            report["max_imbalance"] = json!(net.flows().from_m3s(imbalance_m3s));
        }
        println!("{report:#}");
    } else {
        print!("{}", render_text(&net, &solution, converged, options));
    }
    if !converged {
        anyhow::bail!(
            "{}: no balance within {iterations} iterations; raise --iterations or check the network",
            network.display()
        );
    }
    Ok(ExitCode::SUCCESS)
}

/// Largest continuity miss (inflow - outflow - demand) over the junctions, from the printed pipe
/// flows: the loop method keeps continuity by construction, and this proves it for every answer shown.
fn max_junction_imbalance_m3s(net: &Network, solution: &LoopSolution) -> f64 {
    let mut balance: Vec<f64> = net.junctions.iter().map(|j| -j.demand_m3s).collect();
    for (pipe, &q) in net.pipes.iter().zip(&solution.pipe_flow_m3s) {
        for (end, signed) in [(pipe.from, -q), (pipe.to, q)] {
            if let NodeRef::Junction(j) = end
                && let Some(slot) = balance.get_mut(j)
            {
                *slot += signed;
            }
        }
    }
    balance.iter().map(|b| b.abs()).fold(0.0, f64::max)
}

/// Label of loop `index` (0-based) as shown on screen and in JSON.
fn loop_label(index: usize) -> String {
    format!("L{}", index + 1)
}

fn loop_description(net: &Network, kind: LoopKind) -> String {
    match kind {
        LoopKind::Closed { cotree_pipe } => format!("closed by {}", net.pipes[cotree_pipe].id),
        LoopKind::BetweenFixedHeads {
            from_fixed_head,
            to_fixed_head,
            ..
        } => format!(
            "{} to {}",
            net.node_id(NodeRef::FixedHead(from_fixed_head)),
            net.node_id(NodeRef::FixedHead(to_fixed_head))
        ),
    }
}

/// The readable report: loops, one block per iteration, then the balanced flows and heads. An unbalanced
/// run shows its history only: flows that do not balance are no result.
pub fn render_text(
    net: &Network,
    solution: &LoopSolution,
    converged: bool,
    options: LoopOptions,
) -> String {
    let units = net.units;
    let (flow_unit, head_unit) = (net.flows().label(), units.length_label());
    let mut out = String::new();
    let _ = writeln!(out, "Loop corrections (Hardy Cross, 1936): {}", net.title);
    let _ = writeln!(
        out,
        "{} loops; corrections in {flow_unit} along each loop, imbalances in {head_unit}\n",
        solution.loops.len()
    );
    if !solution.loops.is_empty() {
        let _ = writeln!(out, "Loops (+ along the pipe's direction, - against it)");
        for (i, lp) in solution.loops.iter().enumerate() {
            let pipes: Vec<String> = lp
                .pipes
                .iter()
                .map(|m| {
                    format!(
                        "{}{}",
                        if m.forward { '+' } else { '-' },
                        net.pipes[m.pipe].id
                    )
                })
                .collect();
            let _ = writeln!(
                out,
                "  {:<6} {:<20} {}",
                loop_label(i),
                loop_description(net, lp.kind),
                pipes.join(" ")
            );
        }
        let _ = writeln!(out);
    }
    if !solution.iterations.is_empty() {
        let mut history = TextTable::new(&[
            ("iter", Align::Right),
            (&format!("max imbalance ({head_unit})"), Align::Right),
            (&format!("corrections ({flow_unit})"), Align::Left),
        ])
        .free_text_last();
        for record in &solution.iterations {
            let cells: Vec<String> = record
                .corrections_m3s
                .iter()
                .enumerate()
                .map(|(i, &dq)| format!("{} {:+.4}", loop_label(i), net.flows().from_m3s(dq)))
                .collect();
            for (line, chunk) in cells.chunks(CORRECTIONS_PER_LINE).enumerate() {
                // A long list of corrections goes on under the first line of its iteration.
                let (iteration, imbalance) = if line == 0 {
                    (
                        record.iteration.to_string(),
                        format!("{:.6}", units.length_from_m(record.max_imbalance_m)),
                    )
                } else {
                    (String::new(), String::new())
                };
                history.row(vec![iteration, imbalance, chunk.join("  ")]);
            }
        }
        let _ = writeln!(out, "{}", history.text(""));
    }
    let imbalance = units.length_from_m(solution.max_imbalance_m());
    let tolerance = units.length_from_m(options.tolerance_m);
    let count = solution.iterations.len();
    if !converged {
        let _ = writeln!(
            out,
            "NOT BALANCED after {count} iteration(s): largest loop imbalance {imbalance:.6} {head_unit} \
             (tolerance {tolerance:.6} {head_unit}); no flows or heads are shown"
        );
        return out;
    }
    let _ = writeln!(
        out,
        "Balanced after {count} iteration(s): largest loop imbalance {imbalance:.6} {head_unit} \
         (tolerance {tolerance:.6} {head_unit})\n"
    );
    let mut pipes = TextTable::new(&[
        ("pipe", Align::Left),
        (&format!("flow ({flow_unit})"), Align::Right),
        (&format!("head loss ({head_unit})"), Align::Right),
    ]);
    for (i, pipe) in net.pipes.iter().enumerate() {
        pipes.row(vec![
            pipe.id.clone(),
            format!("{:.3}", net.flows().from_m3s(solution.pipe_flow_m3s[i])),
            format!("{:.4}", units.length_from_m(solution.pipe_head_loss_m[i])),
        ]);
    }
    let _ = write!(out, "{}", pipes.text(""));
    let pressure_unit = units.pressure_label();
    let mut junctions = TextTable::new(&[
        ("junction", Align::Left),
        (&format!("head ({head_unit})"), Align::Right),
        (&format!("pressure ({pressure_unit})"), Align::Right),
        ("", Align::Left),
    ]);
    let mut negative = Vec::new();
    for (j, junction) in net.junctions.iter().enumerate() {
        let head_m = solution.junction_head_m[j];
        let pressure_head_m = head_m - junction.elevation_m;
        if pressure_head_m < 0.0 {
            negative.push(junction.id.as_str());
        }
        junctions.row(vec![
            junction.id.clone(),
            format!("{:.3}", units.length_from_m(head_m)),
            format!("{:.2}", units.pressure_from_head_m(pressure_head_m)),
            if pressure_head_m < 0.0 {
                "NEGATIVE"
            } else {
                ""
            }
            .to_string(),
        ]);
    }
    let _ = write!(out, "\n{}", junctions.text(""));
    if !negative.is_empty() {
        let _ = writeln!(
            out,
            "\nwarning: negative pressure (grade below ground): {}",
            negative.join(", ")
        );
    }
    let _ = writeln!(out, "\nCaution: {CAUTION}");
    out
}

/// The machine-readable report: the same content as [`render_text`], in the network's units; an
/// unbalanced run has `"converged": false` and no `pipes` or `junctions`.
pub fn render_json(net: &Network, solution: &LoopSolution, converged: bool) -> Value {
    let units = net.units;
    let iterations: Vec<Value> = solution
        .iterations
        .iter()
        .map(|record| {
            let corrections: Vec<Value> = record
                .corrections_m3s
                .iter()
                .enumerate()
                .map(|(i, &dq)| json!({"loop": loop_label(i), "correction": net.flows().from_m3s(dq)}))
                .collect();
            json!({
                "iteration": record.iteration,
                "corrections": corrections,
                "max_loop_head_imbalance": units.length_from_m(record.max_imbalance_m),
            })
        })
        .collect();
    let loops: Vec<Value> = solution
        .loops
        .iter()
        .enumerate()
        .map(|(i, lp)| {
            let pipes: Vec<Value> = lp
                .pipes
                .iter()
                .map(
                    |m| json!({"id": net.pipes[m.pipe].id, "sign": if m.forward { 1 } else { -1 }}),
                )
                .collect();
            let mut entry = json!({"loop": loop_label(i), "pipes": pipes});
            match lp.kind {
                LoopKind::Closed { cotree_pipe } => {
                    entry["closed_by"] = json!(net.pipes[cotree_pipe].id);
                }
                LoopKind::BetweenFixedHeads {
                    from_fixed_head,
                    to_fixed_head,
                    head_difference_m,
                } => {
                    entry["from"] = json!(net.node_id(NodeRef::FixedHead(from_fixed_head)));
                    entry["to"] = json!(net.node_id(NodeRef::FixedHead(to_fixed_head)));
                    entry["head_difference"] = json!(units.length_from_m(head_difference_m));
                }
            }
            entry
        })
        .collect();
    let pipes: Vec<Value> = net
        .pipes
        .iter()
        .enumerate()
        .map(|(i, pipe)| {
            json!({
                "id": pipe.id,
                "flow": net.flows().from_m3s(solution.pipe_flow_m3s[i]),
                "headloss": units.length_from_m(solution.pipe_head_loss_m[i]),
            })
        })
        .collect();
    let junctions: Vec<Value> = net
        .junctions
        .iter()
        .enumerate()
        .map(|(j, junction)| {
            let head_m = solution.junction_head_m[j];
            json!({
                "id": junction.id,
                "head": units.length_from_m(head_m),
                "pressure": units.pressure_from_head_m(head_m - junction.elevation_m),
                "negative_pressure": head_m < junction.elevation_m,
            })
        })
        .collect();
    let mut report = json!({
        "converged": converged,
        "units": net.unit_labels(),
        "caution": CAUTION,
        "iterations": iterations,
        "loops": loops,
    });
    if converged {
        report["pipes"] = json!(pipes);
        report["junctions"] = json!(junctions);
    }
    report
}

#[cfg(test)]
mod tests {
    use roughcal::network::UnitSystem;
    use roughcal::network::synthetic::Synthetic;

    use super::*;

    fn solved(units: UnitSystem, max_iterations: usize) -> (Network, LoopSolution, bool) {
        let mut settings = Synthetic::new(21);
        settings.units = units;
        let net = settings.two_sources(3, 3);
        let options = LoopOptions {
            max_iterations,
            ..LoopOptions::default()
        };
        match solve_loops(&net, &net.c_factors(), options) {
            Ok(solution) => (net, solution, true),
            Err(LoopError::NotConverged { partial, .. }) => (net, *partial, false),
            Err(other) => panic!("{other}"),
        }
    }

    #[test]
    fn json_carries_every_iteration_loop_and_pipe_in_network_units() {
        let (net, solution, converged) = solved(UnitSystem::Us, 200);
        assert!(converged);
        let report = render_json(&net, &solution, converged);
        assert_eq!(report["converged"], json!(true));
        assert_eq!(report["units"]["flow"], json!("gpm"));
        let iterations = report["iterations"].as_array().map_or(0, Vec::len);
        assert_eq!(iterations, solution.iterations.len());
        let first = &report["iterations"][0];
        assert_eq!(first["iteration"], json!(1));
        let dq_m3s = solution.iterations[0].corrections_m3s[0];
        let dq_gpm = first["corrections"][0]["correction"]
            .as_f64()
            .unwrap_or(f64::NAN);
        // 1 gpm = 6.309e-5 m^3/s (NIST SP 811 Appendix B, US gallon 3.785412 L).
        assert!((dq_gpm * 6.309_02e-5 - dq_m3s).abs() < 1e-6 * dq_m3s.abs().max(1e-9));
        assert_eq!(
            report["loops"].as_array().map_or(0, Vec::len),
            solution.loops.len()
        );
        assert_eq!(
            report["loops"][solution.loops.len() - 1]["from"],
            json!("S2")
        );
        let pipes = report["pipes"].as_array().map_or(0, Vec::len);
        assert_eq!(pipes, net.pipes.len());
        let flow_gpm = report["pipes"][0]["flow"].as_f64().unwrap_or(f64::NAN);
        assert!((UnitSystem::Us.flow_to_m3s(flow_gpm) - solution.pipe_flow_m3s[0]).abs() < 1e-12);
        assert!(report["pipes"][0]["headloss"].is_number());
    }

    #[test]
    fn a_network_in_mgd_is_reported_in_mgd() {
        let (mut net, solution, converged) = solved(UnitSystem::Us, 200);
        net.flow_unit = Some(roughcal::network::FlowUnit::Mgd);
        let report = render_json(&net, &solution, converged);
        assert_eq!(report["units"]["flow"], json!("MGD"));
        assert_eq!(report["units"]["length"], json!("ft"));
        // 1 MGD = 1e6 US gal / 86 400 s = 0.0438126 m^3/s (NIST SP 811 Appendix B).
        let flow_mgd = report["pipes"][0]["flow"].as_f64().unwrap_or(f64::NAN);
        let expected = solution.pipe_flow_m3s[0] / 0.043_812_636_4;
        assert!(
            (flow_mgd - expected).abs() < 1e-9 * expected.abs().max(1.0),
            "{flow_mgd}"
        );
        let text = render_text(&net, &solution, converged, LoopOptions::default());
        assert!(text.contains("corrections (MGD)"), "{text}");
    }

    #[test]
    fn text_shows_loops_iterations_and_results() {
        let (net, solution, converged) = solved(UnitSystem::Si, 200);
        let text = render_text(&net, &solution, converged, LoopOptions::default());
        assert!(text.contains("corrections (L/s)"), "{text}");
        assert!(text.contains("closed by P"), "{text}");
        assert!(text.contains("S2 to S1"), "{text}");
        assert!(text.contains("Balanced after"), "{text}");
        assert!(text.contains("licensed engineer"));
        let iteration_rows = text
            .lines()
            .filter(|l| {
                l.trim_start().starts_with(|c: char| c.is_ascii_digit()) && l.contains(" L1 ")
            })
            .count();
        assert_eq!(iteration_rows, solution.iterations.len(), "{text}");
    }

    #[test]
    fn unbalanced_runs_say_so() {
        let (net, solution, converged) = solved(UnitSystem::Us, 1);
        assert!(!converged);
        let text = render_text(&net, &solution, converged, LoopOptions::default());
        assert!(text.contains("NOT BALANCED after 1 iteration"), "{text}");
        assert!(!text.contains("head loss ("), "{text}");
        assert!(
            render_json(&net, &solution, converged)
                .get("pipes")
                .is_none()
        );
        assert_eq!(
            render_json(&net, &solution, converged)["converged"],
            json!(false)
        );
    }
}
