//! The command line: argument definitions and dispatch. Each command lives in `cli/<command>.rs`, loads
//! files, calls into the library and prints; none of the engineering is done here.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use roughcal::calibrate::FitTarget;

mod apply;
mod calibrate;
mod check;
mod fireflow;
mod import;
mod loops;
mod plan;
mod solve;
mod tests;
mod ui;

/// Calibrate Hazen-Williams roughness of a water distribution model from hydrant flow tests.
///
/// With no command, opens the terminal workbench on the bundled demo district.
#[derive(Debug, Parser)]
#[command(
    name = "roughcal",
    version,
    about,
    long_about = None,
    after_help = "Run `roughcal` with no command to open the terminal workbench on the bundled demo district."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Option<Command>,
}

/// `--fit`: the library's [`FitTarget`] by its label, with a line of help for each.
fn fit_target() -> impl clap::builder::TypedValueParser<Value = FitTarget> {
    use clap::builder::{PossibleValue, PossibleValuesParser, TypedValueParser as _};
    PossibleValuesParser::new([
        PossibleValue::new(FitTarget::Pressures.label()).help("Static and residual pressures."),
        PossibleValue::new(FitTarget::Drop.label())
            .help("The pressure drop alone (cancels elevation and boundary errors)."),
    ])
    .map(|label| {
        if label == FitTarget::Drop.label() {
            FitTarget::Drop
        } else {
            FitTarget::Pressures
        }
    })
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Check a network file and print a summary, or every defect with its location.
    Check {
        /// Network file (TOML).
        network: PathBuf,
        /// Machine-readable output: the summary, or every defect with its place, on stdout.
        #[arg(long, conflicts_with = "quiet")]
        json: bool,
        /// Print nothing for a good file (for scripts: the exit status says it); defects still go to
        /// stderr.
        #[arg(long, short = 'q')]
        quiet: bool,
    },
    /// Solve the steady state of a network (global gradient algorithm).
    Solve {
        /// Network file (TOML).
        network: PathBuf,
        /// Boundary state to apply (a `[[condition]]` of the network).
        #[arg(long)]
        condition: Option<String>,
        /// Extra demand on a junction, e.g. a flowing hydrant: NODE=FLOW in the network's flow unit.
        #[arg(long = "demand", value_name = "NODE=FLOW")]
        demands: Vec<String>,
        /// Machine-readable output.
        #[arg(long)]
        json: bool,
    },
    /// Solve by loop corrections (Hardy Cross) and show each iteration.
    Loops {
        /// Network file (TOML).
        network: PathBuf,
        /// Iteration limit (loop corrections converge slowly on large grids).
        #[arg(long, default_value_t = 500)]
        iterations: usize,
        /// Balance the network under this `[[condition]]` of the file.
        #[arg(long)]
        condition: Option<String>,
        /// Machine-readable output (JSON on stdout).
        #[arg(long)]
        json: bool,
    },
    /// Compare every field test of a sheet with the model.
    Tests {
        /// Network file (TOML).
        network: PathBuf,
        /// Field sheet (CSV).
        sheet: PathBuf,
        /// Target residual pressure for available flow (psi or kPa, the sheet's unit).
        // A negative value reaches the command's own message instead of being taken for a flag.
        #[arg(long, allow_negative_numbers = true)]
        target: Option<f64>,
        /// The `coefficients.toml` of the fit that made NETWORK: its covariance gives each model
        /// available flow a 95 % interval.
        #[arg(long)]
        coefficients: Option<PathBuf>,
        /// Machine-readable output (JSON on stdout).
        #[arg(long)]
        json: bool,
    },
    /// Fire flow available at a target residual, from the sheet alone.
    Fireflow {
        /// Field sheet (CSV).
        sheet: PathBuf,
        /// Target residual pressure (psi or kPa, the sheet's unit); default 20 psi / 140 kPa.
        #[arg(long, allow_negative_numbers = true)]
        target: Option<f64>,
        /// Machine-readable output (JSON on stdout).
        #[arg(long)]
        json: bool,
    },
    /// Fit the C-factor of each roughness group to the field sheet.
    Calibrate {
        /// Network file (TOML).
        network: PathBuf,
        /// Field sheet (CSV).
        sheet: PathBuf,
        /// Folder to write the coefficient set, calibrated network, report and plot into.
        #[arg(long)]
        out: Option<PathBuf>,
        /// Overwrite outputs already in the folder.
        #[arg(long)]
        force: bool,
        /// What the fit compares: static and residual pressures, or the drop alone.
        #[arg(long, value_parser = fit_target(), default_value = "pressures")]
        fit: FitTarget,
        /// Gauge accuracy, one standard deviation (psi or kPa); default 1 psi / 7 kPa.
        #[arg(long = "gauge-sd", allow_negative_numbers = true)]
        gauge_sd: Option<f64>,
        /// Prior standard deviation of each group's C around its start value (off when absent).
        #[arg(long = "prior-sd", allow_negative_numbers = true)]
        prior_sd: Option<f64>,
        /// Share-within thresholds of the fit statistics (psi or kPa), two values.
        #[arg(long = "within", num_args = 2, value_names = ["TIGHT", "LOOSE"], allow_negative_numbers = true)]
        within: Option<Vec<f64>>,
        /// Iteration limit of the optimizer.
        #[arg(long = "max-iterations", default_value_t = 50)]
        max_iterations: u64,
        /// Machine-readable output (JSON on stdout).
        #[arg(long)]
        json: bool,
    },
    /// Rank candidate flow tests by the information they would add to the fit of the sheet.
    Plan {
        /// Network file (TOML).
        network: PathBuf,
        /// Field sheet (CSV).
        sheet: PathBuf,
        /// Number of tests to plan (chosen greedily, each given the ones before).
        #[arg(long, default_value_t = 5)]
        count: usize,
        /// Flow hydrants per test: 1 or 2.
        #[arg(long = "flow-hydrants", default_value_t = 1, value_parser = clap::value_parser!(u8).range(1..=2))]
        flow_hydrants: u8,
        /// Largest distance along the mains from the gauge to a flow hydrant (ft or m); default 1000 ft
        /// / 300 m.
        #[arg(long = "max-distance", allow_negative_numbers = true)]
        max_distance: Option<f64>,
        /// Smallest predicted drop at the gauge (psi or kPa); default 10 psi / 70 kPa.
        #[arg(long = "min-drop", allow_negative_numbers = true)]
        min_drop: Option<f64>,
        /// No junction may fall below this while the hydrants flow (psi or kPa); default 20 psi / 140 kPa.
        #[arg(long = "min-residual", allow_negative_numbers = true)]
        min_residual: Option<f64>,
        /// Write a printable plan to this markdown file and, beside it with the extension .csv, a field
        /// sheet of the planned tests with the readings left blank for the crew.
        #[arg(long, value_name = "PLAN.md")]
        out: Option<PathBuf>,
        /// Overwrite the plan files if they exist.
        #[arg(long, requires = "out")]
        force: bool,
        /// Machine-readable output (JSON on stdout).
        #[arg(long)]
        json: bool,
    },
    /// Write a network with a coefficient set applied.
    Apply {
        /// Network file (TOML).
        network: PathBuf,
        /// A `coefficients.toml` or `coefficients.csv` from `calibrate`.
        coefficients: PathBuf,
        /// The network file to write.
        #[arg(long)]
        out: PathBuf,
        /// Overwrite the output if it exists.
        #[arg(long)]
        force: bool,
    },
    /// Build a network file from a GIS export (GeoJSON or CSV pipes and nodes) and an import mapping.
    Import {
        /// The import mapping (IMPORT.toml): attribute names, units, snapping, group rules.
        #[arg(long)]
        config: PathBuf,
        /// Pipes: a GeoJSON FeatureCollection of lines, or a CSV table with from/to node ids.
        #[arg(long)]
        pipes: PathBuf,
        /// Nodes: a GeoJSON FeatureCollection of points, or a CSV table.
        #[arg(long)]
        nodes: PathBuf,
        /// The network file to write.
        #[arg(long)]
        out: PathBuf,
        /// Overwrite OUT if it exists.
        #[arg(long)]
        force: bool,
        /// Print the summary as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Open the terminal workbench on a network and a field sheet (edits are saved to SHEET).
    Open {
        /// Network file (TOML).
        network: PathBuf,
        /// Field sheet (CSV); edits are saved to it.
        sheet: PathBuf,
    },
    /// Start a new, empty field sheet from the template and open the workbench on it.
    New {
        /// Network file (TOML).
        network: PathBuf,
        /// The field sheet to start (CSV).
        sheet: PathBuf,
    },
    /// Regenerate the bundled demo district, its true C-factors and its field sheet (for maintainers).
    #[command(hide = true)]
    MakeDemo {
        /// The repository folder holding demo-network/ and field-sheets/.
        #[arg(long, default_value = ".")]
        root: PathBuf,
    },
    /// Write a synthetic city (network and field sheet) for trying and measuring at scale.
    #[command(hide = true)]
    MakeCity {
        /// The folder to write `city.toml` and `city.csv` into (created if needed).
        #[arg(long)]
        out: PathBuf,
        /// Number of junctions.
        #[arg(long, default_value_t = 90_000)]
        junctions: usize,
        /// Number of roughness groups.
        #[arg(long, default_value_t = 8)]
        groups: usize,
        /// Number of field tests on the sheet.
        #[arg(long, default_value_t = 20)]
        tests: usize,
    },
}

fn make_city(out: &std::path::Path, plan: roughcal::city::CityPlan) -> anyhow::Result<ExitCode> {
    use roughcal::city;
    let built = city::city(&plan)?;
    std::fs::create_dir_all(out)?;
    let files = [
        (
            out.join("city.toml"),
            roughcal::network::write::network_toml(&built.model),
        ),
        (
            out.join("city.csv"),
            city::sheet_csv(&built.model, &built.tests),
        ),
    ];
    for (path, text) in files {
        roughcal::storage::write_atomic(&path, text.as_bytes())?;
        println!("wrote {}", path.display());
    }
    Ok(ExitCode::SUCCESS)
}

fn make_demo(root: &std::path::Path) -> anyhow::Result<ExitCode> {
    use roughcal::demo;
    let files = [
        (
            root.join("demo-network/district.toml"),
            demo::district_network_toml(),
        ),
        (root.join("demo-network/true-c.toml"), demo::true_c_toml()),
        (root.join("field-sheets/demo.csv"), demo::demo_sheet_csv()?),
    ];
    let gis = demo::gis_district()?;
    std::fs::create_dir_all(root.join("demo-network/gis"))?;
    let files = files.into_iter().chain([
        (
            root.join("demo-network/gis/pipes.geojson"),
            gis.pipes_geojson,
        ),
        (
            root.join("demo-network/gis/nodes.geojson"),
            gis.nodes_geojson,
        ),
        (root.join("demo-network/gis/IMPORT.toml"), gis.import_toml),
    ]);
    for (path, text) in files {
        roughcal::storage::write_atomic(&path, text.as_bytes())?;
        println!("wrote {}", path.display());
    }
    Ok(ExitCode::SUCCESS)
}

/// Today's UTC date as YYYY-MM-DD ([`roughcal::storage::today_utc`]).
pub fn today_utc() -> String {
    roughcal::storage::today_utc()
}

/// A network file's load result for a command: an invalid file has every diagnostic printed to stderr
/// and yields `None` (the caller exits 1), an unreadable one is an error.
pub fn network_or_report<T>(
    path: &std::path::Path,
    loaded: Result<T, roughcal::network::file::NetworkFileError>,
) -> anyhow::Result<Option<T>> {
    use roughcal::network::file::NetworkFileError;
    match loaded {
        Ok(loaded) => Ok(Some(loaded)),
        Err(NetworkFileError::Invalid { diagnostics }) => {
            for diagnostic in &diagnostics {
                eprintln!("roughcal: {diagnostic}");
            }
            eprintln!(
                "roughcal: {}: {} problem{} found; run `roughcal check` for a summary",
                path.display(),
                diagnostics.len(),
                if diagnostics.len() == 1 { "" } else { "s" }
            );
            Ok(None)
        }
        Err(error) => Err(error.into()),
    }
}

/// Runs the parsed command line; errors are printed by `main`.
pub fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        None => ui::run_demo(),
        Some(Command::Check {
            network,
            json,
            quiet,
        }) => check::run(
            &network,
            match (json, quiet) {
                (true, _) => check::Output::Json,
                (false, true) => check::Output::Quiet,
                (false, false) => check::Output::Text,
            },
        ),
        Some(Command::Solve {
            network,
            condition,
            demands,
            json,
        }) => solve::run(&network, condition.as_deref(), &demands, json),
        Some(Command::Loops {
            network,
            iterations,
            condition,
            json,
        }) => loops::run(&network, iterations, condition.as_deref(), json),
        Some(Command::Tests {
            network,
            sheet,
            target,
            coefficients,
            json,
        }) => tests::run(&network, &sheet, target, coefficients.as_deref(), json),
        Some(Command::Fireflow {
            sheet,
            target,
            json,
        }) => fireflow::run(&sheet, target, json),
        Some(Command::Calibrate {
            network,
            sheet,
            out,
            force,
            fit,
            gauge_sd,
            prior_sd,
            within,
            max_iterations,
            json,
        }) => calibrate::run(calibrate::Args {
            network,
            sheet,
            out,
            force,
            fit,
            gauge_sd,
            prior_sd,
            within,
            max_iterations,
            json,
        }),
        Some(Command::Plan {
            network,
            sheet,
            count,
            flow_hydrants,
            max_distance,
            min_drop,
            min_residual,
            out,
            force,
            json,
        }) => plan::run(plan::Args {
            network,
            sheet,
            count,
            flow_hydrants: usize::from(flow_hydrants),
            max_distance,
            min_drop,
            min_residual,
            out,
            force,
            json,
        }),
        Some(Command::Apply {
            network,
            coefficients,
            out,
            force,
        }) => apply::run(&network, &coefficients, &out, force),
        Some(Command::Import {
            config,
            pipes,
            nodes,
            out,
            force,
            json,
        }) => import::run(import::Args {
            config: &config,
            pipes: &pipes,
            nodes: &nodes,
            out: &out,
            force,
            json,
        }),
        Some(Command::Open { network, sheet }) => ui::run_open(&network, &sheet),
        Some(Command::New { network, sheet }) => ui::run_new(&network, &sheet),
        Some(Command::MakeDemo { root }) => make_demo(&root),
        Some(Command::MakeCity {
            out,
            junctions,
            groups,
            tests,
        }) => make_city(
            &out,
            roughcal::city::CityPlan {
                junctions,
                groups,
                tests,
                ..Default::default()
            },
        ),
    }
}
