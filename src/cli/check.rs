//! `roughcal check NETWORK`: load a network file, print a summary or every defect with its place.

use std::fmt::Write as _;
use std::path::Path;
use std::process::ExitCode;

use roughcal::network::file::{NetworkFileError, load_network_file};
use roughcal::network::summary::NetworkSummary;
use roughcal::report::table::{Align, TextTable};

pub fn run(network: &Path) -> anyhow::Result<ExitCode> {
    match load_network_file(network) {
        Ok(loaded) => {
            print!(
                "{}",
                render(&NetworkSummary::of(&loaded.network), &loaded.sources.file)
            );
            Ok(ExitCode::SUCCESS)
        }
        Err(NetworkFileError::Invalid { diagnostics }) => {
            for diagnostic in &diagnostics {
                eprintln!("roughcal: {diagnostic}");
            }
            eprintln!(
                "roughcal: {}: {} found",
                network.display(),
                counted(diagnostics.len(), "problem")
            );
            Ok(ExitCode::from(1))
        }
        Err(error @ NetworkFileError::Unreadable { .. }) => Err(error.into()),
    }
}

/// One screen: counts, pipe length by group, sources.
fn render(summary: &NetworkSummary, file: &str) -> String {
    let units = summary.units;
    let length_unit = units.length_label();
    let mut out = String::new();
    let title = if summary.title.is_empty() {
        "(untitled)"
    } else {
        summary.title.as_str()
    };
    let _ = writeln!(out, "{file}: {title}");
    let _ = writeln!(
        out,
        "units {} ({}, {}, {}, {})",
        units.key(),
        length_unit,
        units.diameter_label(),
        units.flow_label(),
        units.pressure_label()
    );
    let _ = writeln!(
        out,
        "{}, {}, {} ({} closed), {}, {}, {}",
        counted(summary.junctions, "junction"),
        counted(summary.fixed_heads, "fixed head"),
        counted(summary.pipes, "pipe"),
        summary.closed_pipes,
        counted(summary.pumps, "pump"),
        counted(summary.groups, "group"),
        counted(summary.conditions, "condition")
    );
    let _ = writeln!(
        out,
        "total base demand {:.2} {}",
        summary.total_base_demand,
        units.flow_label()
    );
    let _ = writeln!(out);
    let mut groups = TextTable::new(&[
        ("group", Align::Left),
        ("pipes", Align::Right),
        (&format!("length ({length_unit})"), Align::Right),
    ]);
    let rows = summary
        .length_by_group
        .iter()
        .map(|g| (g.group.as_str(), g.pipes, g.length))
        .chain((summary.ungrouped.pipes > 0).then_some((
            "(no group)",
            summary.ungrouped.pipes,
            summary.ungrouped.length,
        )))
        .chain(std::iter::once((
            "total",
            summary.pipes,
            summary.total_length(),
        )));
    for (name, pipes, length) in rows {
        groups.row(vec![
            name.to_string(),
            pipes.to_string(),
            format!("{length:.1}"),
        ]);
    }
    let _ = write!(out, "pipe length by group\n{}", groups.text("  "));
    let mut sources = TextTable::new(&[
        ("id", Align::Left),
        (&format!("head ({length_unit})"), Align::Right),
    ]);
    for source in &summary.sources {
        sources.row(vec![source.id.clone(), format!("{:.2}", source.head)]);
    }
    let _ = write!(out, "\nsources (fixed heads)\n{}", sources.text("  "));
    out
}

/// "1 pipe", "3 pipes".
fn counted(count: usize, noun: &str) -> String {
    let plural = if count == 1 { "" } else { "s" };
    format!("{count} {noun}{plural}")
}
