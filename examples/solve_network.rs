//! Solve a network file from the library API and print the lowest-pressure junctions.
//!
//! `cargo run --example solve_network -- demo-network/district.toml`
//!
//! Results are an aid to engineering judgement, reviewed by a licensed engineer; local codes and the
//! fire authority govern (see `roughcal::calibrate::CAUTION`).

use std::path::PathBuf;
use std::process::ExitCode;

use roughcal::hydraulics::{GradientSolver, OperatingState};
use roughcal::network::file::load_network_file;

fn main() -> ExitCode {
    let path = std::env::args_os()
        .nth(1)
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from("demo-network/district.toml"));
    // Every defect of the file at once, each with its file:line:col.
    let loaded = match load_network_file(&path) {
        Ok(loaded) => loaded,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::FAILURE;
        }
    };
    let net = &loaded.network;
    // The symbolic factorization is done once here and reused by every solve of this network.
    let solver = match GradientSolver::new(net) {
        Ok(solver) => solver,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::FAILURE;
        }
    };
    let state = OperatingState::base(net);
    let solution = match solver.solve(net, &state, &net.c_factors(), None) {
        Ok(solution) => solution,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::FAILURE;
        }
    };
    println!(
        "{}: {} junctions, {} pipes, converged in {} iterations",
        path.display(),
        net.junctions.len(),
        net.pipes.len(),
        solution.iterations
    );
    // The model works in SI internally; the network's own units convert at the edge.
    let units = net.units;
    let mut pressures: Vec<(f64, &str)> = (0..net.junctions.len())
        .filter_map(|j| {
            let head_m = solution.pressure_head_m(net, j)?;
            Some((
                units.pressure_from_head_m(head_m),
                net.junctions[j].id.as_str(),
            ))
        })
        .collect();
    pressures.sort_by(|a, b| a.0.total_cmp(&b.0));
    println!("lowest pressures ({}):", units.pressure_label());
    for (pressure, id) in pressures.iter().take(5) {
        println!("  {id:<12} {pressure:>8.1}");
    }
    ExitCode::SUCCESS
}
