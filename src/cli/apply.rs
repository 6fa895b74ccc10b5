//! `roughcal apply NETWORK COEFFICIENTS --out FILE [--force]`: write a copy of a network with each
//! group's C taken from a coefficient set (`coefficients.toml` or `coefficients.csv`).

use std::path::Path;
use std::process::ExitCode;

use anyhow::Context as _;
use roughcal::network::edit::apply_group_c;
use roughcal::network::file::parse_network;

use super::load_network_or_report;
use roughcal::report::coefficients::{group_changes, group_changes_text};
use roughcal::report::load_coefficients;
use roughcal::storage::write_new;

pub fn run(
    network: &Path,
    coefficients: &Path,
    out: &Path,
    force: bool,
) -> anyhow::Result<ExitCode> {
    let text = std::fs::read_to_string(network)
        .with_context(|| format!("cannot read network file {}", network.display()))?;
    let parse = |path: &Path| parse_network(&text, &path.display().to_string());
    let Some(loaded) = load_network_or_report(network, parse)? else {
        return Ok(ExitCode::from(1));
    };
    let set = load_coefficients(coefficients)?;
    set.check_converged()?;
    set.check_against(&loaded.network)?;
    if let Some((theirs, ours, scale)) = set.constant_mismatch(&loaded.network) {
        eprintln!(
            "roughcal: warning: {} was fitted with the Hazen-Williams constant {} ({}), {} uses {} ({}): \
             the same losses would need every C multiplied by {scale:.4}; applied as written",
            coefficients.display(),
            theirs.k,
            theirs.units.key(),
            network.display(),
            ours.k,
            ours.units.key()
        );
    }
    let updated = apply_group_c(&text, &set.c_by_group()).with_context(|| {
        format!(
            "cannot apply {} to {}",
            coefficients.display(),
            network.display()
        )
    })?;
    let changes = group_changes(&loaded.network, &set);
    write_new(out, updated.as_bytes(), force)?;
    println!(
        "{}: {} with the C of {}",
        out.display(),
        network.display(),
        coefficients.display()
    );
    print!("{}", group_changes_text(&changes));
    Ok(ExitCode::SUCCESS)
}
