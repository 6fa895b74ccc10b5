//! `roughcal apply NETWORK COEFFICIENTS --out FILE [--force]`: write a copy of a network with each
//! group's C taken from a coefficient set (`coefficients.toml` or `coefficients.csv`).

use std::path::Path;
use std::process::ExitCode;

use anyhow::Context as _;
use roughcal::network::edit::apply_group_c;
use roughcal::network::read_network;

use super::network_or_report;
use roughcal::report::coefficients::{group_changes, group_changes_text};
use roughcal::report::load_coefficients;
use roughcal::storage::write_new;

pub fn run(
    network: &Path,
    coefficients: &Path,
    out: &Path,
    force: bool,
) -> anyhow::Result<ExitCode> {
    let Some(read) = network_or_report(network, read_network(network))? else {
        return Ok(ExitCode::from(1));
    };
    let (text, loaded) = (read.text, read.loaded);
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
