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
use roughcal::fieldtest::pitot::pitot_pressure_for_flow;
use roughcal::fieldtest::{FieldSheet, SheetColumn};
use roughcal::fieldtest::{StaticHeads, load_sheet};
use roughcal::network::{Network, read_network};
use roughcal::report::table::{Align, TextTable};
use roughcal::storage;
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
    /// The printable plan (markdown); the field sheet of planned tests goes beside it as `.csv`.
    pub out: Option<PathBuf>,
    pub force: bool,
    pub json: bool,
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let Some(read) = network_or_report(&args.network, read_network(&args.network))? else {
        return Ok(ExitCode::from(1));
    };
    let net = read.loaded.network;
    let options = plan_options(&args, &net)?;
    let out_files = args
        .out
        .as_ref()
        .map(|md| (md.clone(), md.with_extension("csv")));
    // Refuse before the fit and the ranking rather than after them.
    if let Some((md, csv)) = &out_files
        && !args.force
    {
        for path in [md, csv] {
            if path.exists() {
                bail!(
                    "{} already exists; pass --force to replace it",
                    path.display()
                );
            }
        }
    }
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
    if let Some((md, csv)) = &out_files {
        let context = PlanFiles {
            network_file: &args.network.display().to_string(),
            sheet_file: &args.sheet.display().to_string(),
            run_date: &super::today_utc(),
        };
        let files = [
            (md, plan_markdown(net, &plan, &options, &context)),
            (csv, plan_sheet(net, &plan, &options)?),
        ];
        for (path, text) in files {
            storage::write_new(path, text.as_bytes(), args.force)?;
            // Keep stdout a single JSON document under --json.
            if args.json {
                eprintln!("wrote {}", path.display());
            } else {
                println!("wrote {}", path.display());
            }
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// Where a printable plan came from.
struct PlanFiles<'a> {
    network_file: &'a str,
    sheet_file: &'a str,
    run_date: &'a str,
}

/// The id a planned test gets on the printed plan and in the planned sheet: `P-01`, `P-02`, ...
fn planned_id(rank: usize) -> String {
    format!("P-{rank:02}")
}

/// The pitot reading a crew should expect at each outlet while the plan's flow runs (sheet units),
/// from the pitot formula solved for the pressure (NFPA 291).
fn expected_pitot(net: &Network, options: &PlanOptions, flow_per_hydrant: f64) -> f64 {
    pitot_pressure_for_flow(
        net.units,
        options.outlet_coefficient,
        options.outlet,
        flow_per_hydrant,
    )
}

/// The printable plan: one section per planned test with the hydrants, the flow to run, what the
/// model expects and what to record, after a summary table.
fn plan_markdown(
    net: &Network,
    plan: &TestPlan,
    options: &PlanOptions,
    files: &PlanFiles<'_>,
) -> String {
    let units = net.units;
    let (p, q, d) = (
        units.pressure_label(),
        units.flow_label(),
        units.diameter_label(),
    );
    let pressure = |m: f64| format!("{:.1}", units.pressure_from_head_m(m));
    let count = plan.candidates.len();
    let mut out = String::new();
    let _ = writeln!(
        out,
        "# Test plan: {}
",
        net.title
    );
    let _ = writeln!(
        out,
        "> **Caution.** {CAUTION}
"
    );
    let _ = writeln!(out, "- Network: `{}`", files.network_file);
    let _ = writeln!(
        out,
        "- Field sheet the fit started from: `{}`",
        files.sheet_file
    );
    let _ = writeln!(
        out,
        "- Made on {} by roughcal {}",
        files.run_date,
        env!("CARGO_PKG_VERSION")
    );
    let _ = writeln!(
        out,
        "- Limits: drop at least {} {p} at the gauge; every junction at least {} {p} while the hydrants \
         flow; flow hydrants within {:.0} {} of the gauge along the mains",
        pressure(options.min_drop_m),
        pressure(options.min_zone_residual_m),
        units.length_from_m(options.max_distance_m),
        units.length_label(),
    );
    let _ = writeln!(
        out,
        "- Outlets assumed: {} {d}, coefficient {:.2}",
        options.outlet, options.outlet_coefficient
    );
    let _ = writeln!(
        out,
        "- {count} planned test{} of {} candidates meeting the limits ({} examined), ranked by the \
         information each adds to the fit given the ones before it\n",
        if count == 1 { "" } else { "s" },
        plan.feasible,
        plan.examined,
    );
    let mut summary = TextTable::new(&[
        ("test", Align::Left),
        ("residual hydrant", Align::Left),
        ("flow hydrants", Align::Left),
        ("flow", Align::Right),
        ("expected drop", Align::Right),
        ("informs", Align::Left),
    ]);
    for c in &plan.candidates {
        summary.row(vec![
            planned_id(c.rank),
            net.junctions[c.residual_junction].id.clone(),
            flow_ids(net, &c.flow_junctions, ", "),
            format!("{:.0} {q}", units.flow_from_m3s(c.flow_m3s)),
            format!("{} {p}", pressure(c.predicted_drop_m)),
            c.informs.join(", "),
        ]);
    }
    out.push_str(&summary.markdown());
    let _ = writeln!(
        out,
        "\nStandard error of each fitted group's C now: {}.\n",
        group_errors(&plan.groups, &plan.current_std_error)
    );
    for c in &plan.candidates {
        let hydrants = c.flow_junctions.len().max(1);
        let total = units.flow_from_m3s(c.flow_m3s);
        let each = total / hydrants as f64;
        let _ = writeln!(out, "## {}\n", planned_id(c.rank));
        let _ = writeln!(
            out,
            "- Residual hydrant (gauge): **{}**",
            net.junctions[c.residual_junction].id
        );
        let _ = writeln!(
            out,
            "- Flow hydrant{}: **{}**",
            if hydrants == 1 { "" } else { "s" },
            flow_ids(net, &c.flow_junctions, ", ")
        );
        let per_hydrant = if hydrants == 1 {
            String::new()
        } else {
            format!(", {each:.0} {q} from each hydrant")
        };
        let _ = writeln!(
            out,
            "- Flow to run: about {total:.0} {q}{per_hydrant}; expect a pitot reading of about {:.1} {p} at \
             each {} {d} outlet",
            expected_pitot(net, options, each),
            options.outlet,
        );
        let _ = writeln!(
            out,
            "- The model expects: static {} {p}, residual {} {p}, drop {} {p}",
            pressure(c.predicted_static_m),
            pressure(c.predicted_residual_m),
            pressure(c.predicted_drop_m),
        );
        let _ = writeln!(
            out,
            "- Informs: {}; standard error of C after it (and the tests above): {}",
            if c.informs.is_empty() {
                "-".to_string()
            } else {
                c.informs.join(", ")
            },
            group_errors(&plan.groups, &c.expected_std_error)
        );
        let _ = writeln!(
            out,
            "- Record: date and time; static ({p}) with no hydrant open; residual ({p}) while flowing; \
             the pitot reading ({p}) or metered flow ({q}) at each outlet, its size ({d}) and \
             coefficient; the system condition (tank levels, pumps, closed valves); anything odd\n"
        );
    }
    let _ = writeln!(
        out,
        "The planned tests are also in the field sheet written beside this plan (`.csv`), readings \
         blank, for the crew to fill in and for `roughcal calibrate` to read back.\n"
    );
    let _ = writeln!(out, "---\n\n**Caution.** {CAUTION}");
    out
}

/// The flow hydrants of a candidate by node id.
fn flow_ids(net: &Network, junctions: &[usize], separator: &str) -> String {
    junctions
        .iter()
        .map(|&j| net.junctions[j].id.as_str())
        .collect::<Vec<_>>()
        .join(separator)
}

/// `group 1.2, other 3.4`: each group's standard error of C.
fn group_errors(groups: &[String], errors: &[f64]) -> String {
    if groups.is_empty() {
        return "no fitted group".into();
    }
    groups
        .iter()
        .zip(errors)
        .map(|(g, se)| format!("{g} {se:.1}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The planned tests as a field sheet in the network's units (the template's columns): ids, hydrants,
/// outlet and coefficient filled in, readings blank, the flow to run and the expected drop in the note.
fn plan_sheet(net: &Network, plan: &TestPlan, options: &PlanOptions) -> anyhow::Result<String> {
    let units = net.units;
    let mut sheet = FieldSheet::empty(units);
    for (at, c) in plan.candidates.iter().enumerate() {
        let hydrants = c.flow_junctions.len().max(1);
        let total = units.flow_from_m3s(c.flow_m3s);
        let mut cells = vec![String::new(); SheetColumn::ALL.len()];
        let mut put = |column: SheetColumn, value: String| {
            if let Some(cell) = SheetColumn::ALL
                .iter()
                .position(|&k| k == column)
                .and_then(|i| cells.get_mut(i))
            {
                *cell = value;
            }
        };
        put(SheetColumn::Test, planned_id(c.rank));
        put(
            SheetColumn::ResidualNode,
            net.junctions[c.residual_junction].id.clone(),
        );
        put(SheetColumn::FlowNode, flow_ids(net, &c.flow_junctions, ";"));
        put(SheetColumn::Outlet, format!("{}", options.outlet));
        put(
            SheetColumn::Coefficient,
            format!("{:.2}", options.outlet_coefficient),
        );
        put(
            SheetColumn::Note,
            format!(
                "planned: run about {total:.0} {}{}; expect a drop of about {:.1} {}",
                units.flow_label(),
                if hydrants == 1 { "" } else { " in all" },
                units.pressure_from_head_m(c.predicted_drop_m),
                units.pressure_label()
            ),
        );
        sheet.insert_row_cells(at, cells)?;
    }
    Ok(sheet.to_csv_string())
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
