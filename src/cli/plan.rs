//! `roughcal plan NETWORK SHEET [--count N] [--flow-hydrants 1|2] [--max-distance D] [--json]`: fit the
//! sheet, then rank candidate tests by the information they would add (library:
//! [`roughcal::calibrate::plan`]).

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::AtomicBool;

use anyhow::bail;
use roughcal::calibrate::plan::{PlanOptions, TestPlan, plan_tests};
use roughcal::calibrate::{CAUTION, CalibrationOptions, Job};
use roughcal::fieldtest::{StaticHeads, load_sheet};
use roughcal::network::{Network, read_network};
use roughcal::report::table::{Align, TextTable};
use serde_json::json;

use super::network_or_report;

pub struct Args {
    pub network: PathBuf,
    pub sheet: PathBuf,
    pub count: usize,
    pub flow_hydrants: usize,
    pub max_distance: Option<f64>,
    pub min_drop: Option<f64>,
    pub min_residual: Option<f64>,
    pub json: bool,
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let Some(read) = network_or_report(&args.network, read_network(&args.network))? else {
        return Ok(ExitCode::from(1));
    };
    let net = read.loaded.network;
    let options = plan_options(&args, &net)?;
    let sheet = match load_sheet(&args.sheet) {
        Ok(sheet) => sheet,
        Err(error) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    let static_heads = StaticHeads::solve(&net);
    let calibration = CalibrationOptions::for_units(net.units);
    let job = Job::new(net, read.text, &sheet, calibration, &static_heads);
    let result = job.run(&mut |_| {}, &AtomicBool::new(false))?;
    let (net, calibration) = (&job.network, &job.options);
    if !result.converged {
        eprintln!(
            "roughcal: warning: the fit the plan starts from did not converge ({}); the ranking uses its last C",
            result.termination
        );
    }
    let plan = plan_tests(net, &result, calibration, &options)?;
    if args.json {
        println!("{}", serde_json::to_string_pretty(&plan_json(net, &plan))?);
    } else {
        print!("{}", plan_text(net, &plan, &options));
    }
    Ok(ExitCode::SUCCESS)
}

/// Plan settings from the flags, in the network's units.
fn plan_options(args: &Args, net: &Network) -> anyhow::Result<PlanOptions> {
    let units = net.units;
    let mut options = PlanOptions::for_units(units);
    if args.count == 0 {
        bail!("--count must be at least 1");
    }
    options.count = args.count;
    options.flow_hydrants = args.flow_hydrants;
    let positive = |flag: &str, value: f64, unit: &str| -> anyhow::Result<f64> {
        if value.is_finite() && value > 0.0 {
            Ok(value)
        } else {
            bail!("{flag} must be a positive number ({unit}), got {value}")
        }
    };
    if let Some(d) = args.max_distance {
        options.max_distance_m =
            units.length_to_m(positive("--max-distance", d, units.length_label())?);
    }
    if let Some(p) = args.min_drop {
        options.min_drop_m =
            units.pressure_to_head_m(positive("--min-drop", p, units.pressure_label())?);
    }
    if let Some(p) = args.min_residual {
        options.min_zone_residual_m =
            units.pressure_to_head_m(positive("--min-residual", p, units.pressure_label())?);
    }
    Ok(options)
}

fn plan_json(net: &Network, plan: &TestPlan) -> serde_json::Value {
    let units = net.units;
    let pressure = |m: f64| units.pressure_from_head_m(m);
    let candidates: Vec<_> = plan
        .candidates
        .iter()
        .map(|c| {
            let se: serde_json::Map<String, serde_json::Value> = plan
                .groups
                .iter()
                .zip(&c.expected_std_error)
                .map(|(g, se)| (g.clone(), json!(se)))
                .collect();
            json!({
                "rank": c.rank,
                "residual_node": net.junctions[c.residual_junction].id,
                "flow_nodes": c.flow_junctions.iter().map(|&j| &net.junctions[j].id).collect::<Vec<_>>(),
                "flow": net.flows().from_m3s(c.flow_m3s),
                "predicted_static": pressure(c.predicted_static_m),
                "predicted_residual": pressure(c.predicted_residual_m),
                "predicted_drop": pressure(c.predicted_drop_m),
                "expected_std_error": se,
                "informs": c.informs,
                "gain": c.gain,
            })
        })
        .collect();
    let current: serde_json::Map<String, serde_json::Value> = plan
        .groups
        .iter()
        .zip(&plan.current_std_error)
        .map(|(g, se)| (g.clone(), json!(se)))
        .collect();
    json!({
        "candidates": candidates,
        "current_std_error": current,
        "candidates_examined": plan.examined,
        "candidates_feasible": plan.feasible,
        "units": net.unit_labels(),
        "caution": CAUTION,
    })
}

fn plan_text(net: &Network, plan: &TestPlan, options: &PlanOptions) -> String {
    let units = net.units;
    let (p, q) = (units.pressure_label(), net.flows().label());
    let pressure = |m: f64| format!("{:.1}", units.pressure_from_head_m(m));
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Next tests, most informative first ({} of {} candidates meet the limits: drop at least {} {p}, \
         every junction at least {} {p}, flow hydrants within {:.0} {} of the gauge)\n",
        plan.feasible,
        plan.examined,
        pressure(options.min_drop_m),
        pressure(options.min_zone_residual_m),
        units.length_from_m(options.max_distance_m),
        units.length_label(),
    );
    let mut columns: Vec<(String, Align)> = vec![
        ("rank".into(), Align::Right),
        ("gauge".into(), Align::Left),
        ("flow at".into(), Align::Left),
        (format!("flow {q}"), Align::Right),
        (format!("static {p}"), Align::Right),
        (format!("residual {p}"), Align::Right),
        (format!("drop {p}"), Align::Right),
    ];
    columns.extend(
        plan.groups
            .iter()
            .map(|g| (format!("se {g}"), Align::Right)),
    );
    columns.push(("informs".into(), Align::Left));
    let borrowed: Vec<(&str, Align)> = columns.iter().map(|(s, a)| (s.as_str(), *a)).collect();
    let mut table = TextTable::new(&borrowed);
    let mut now = vec![String::new(), "now".into(), String::new(), String::new()];
    now.extend([String::new(), String::new(), String::new()]);
    now.extend(plan.current_std_error.iter().map(|se| format!("{se:.1}")));
    now.push(String::new());
    table.row(now);
    for c in &plan.candidates {
        let mut row = vec![
            c.rank.to_string(),
            net.junctions[c.residual_junction].id.clone(),
            c.flow_junctions
                .iter()
                .map(|&j| net.junctions[j].id.as_str())
                .collect::<Vec<_>>()
                .join(" + "),
            format!("{:.0}", net.flows().from_m3s(c.flow_m3s)),
            pressure(c.predicted_static_m),
            pressure(c.predicted_residual_m),
            pressure(c.predicted_drop_m),
        ];
        row.extend(c.expected_std_error.iter().map(|se| format!("{se:.1}")));
        row.push(c.informs.join(", "));
        table.row(row);
    }
    out.push_str(&table.text("  "));
    let _ = writeln!(
        out,
        "\n  se: expected standard error of each fitted group's C once this test and those above it are \
         in the fit. The flow is shared equally by the flow hydrants."
    );
    let _ = writeln!(out, "\nCaution: {CAUTION}");
    out
}
