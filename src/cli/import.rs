//! `roughcal import --config IMPORT.toml --pipes PIPES --nodes NODES --out NETWORK.toml [--force]
//! [--json]`: a GIS export (GeoJSON or CSV) into a network file. Exit 0 written, 1 refused (every
//! problem listed, nothing written), 2 usage.

use std::path::Path;
use std::process::ExitCode;

use anyhow::Context as _;
use roughcal::calibrate::CAUTION;
use roughcal::network::import::{
    ImportError, ImportInput, Source, SourceFormat, format_number, import_network,
};
use roughcal::storage::write_new;

pub struct Args<'a> {
    pub config: &'a Path,
    pub pipes: &'a Path,
    pub nodes: &'a Path,
    pub out: &'a Path,
    pub force: bool,
    pub json: bool,
}

pub fn run(args: Args<'_>) -> anyhow::Result<ExitCode> {
    let mut formats = Vec::new();
    for (flag, path) in [("--pipes", args.pipes), ("--nodes", args.nodes)] {
        match SourceFormat::from_file_name(&path.to_string_lossy()) {
            Some(format) => formats.push(format),
            None => {
                eprintln!(
                    "roughcal: {flag} {}: give a .geojson, .json or .csv file",
                    path.display()
                );
                return Ok(ExitCode::from(2));
            }
        }
    }
    let (Some(&pipes_format), Some(&nodes_format)) = (formats.first(), formats.get(1)) else {
        return Ok(ExitCode::from(2));
    };
    // Refuse before reading a large export rather than after.
    if !args.force && args.out.exists() {
        eprintln!(
            "roughcal: {} already exists; refusing to overwrite it without --force",
            args.out.display()
        );
        return Ok(ExitCode::from(1));
    }
    let read = |path: &Path, what: &str| {
        std::fs::read_to_string(path)
            .with_context(|| format!("cannot read {what} {}", path.display()))
    };
    let config_text = read(args.config, "import config")?;
    let pipes_text = read(args.pipes, "pipes file")?;
    let nodes_text = read(args.nodes, "nodes file")?;
    let (config_file, pipes_file, nodes_file) = (
        args.config.display().to_string(),
        args.pipes.display().to_string(),
        args.nodes.display().to_string(),
    );
    let input = ImportInput {
        config_file: &config_file,
        config_text: &config_text,
        pipes: Source {
            file: &pipes_file,
            text: &pipes_text,
            format: pipes_format,
        },
        nodes: Source {
            file: &nodes_file,
            text: &nodes_text,
            format: nodes_format,
        },
    };
    let written = import_network(&input).and_then(|imported| {
        Ok((
            imported.network_toml(&input, &super::today_utc())?,
            imported,
        ))
    });
    let (text, imported) = match written {
        Ok(done) => done,
        Err(ImportError::Refused { problems }) => {
            for problem in &problems {
                eprintln!("roughcal: {problem}");
            }
            eprintln!(
                "roughcal: {} problem{} found: nothing written",
                problems.len(),
                if problems.len() == 1 { "" } else { "s" }
            );
            return Ok(ExitCode::from(1));
        }
        Err(error @ ImportError::Config(_)) => {
            eprintln!("roughcal: {error}");
            return Ok(ExitCode::from(1));
        }
    };
    write_new(args.out, text.as_bytes(), args.force)?;

    let summary = imported.summary();
    if args.json {
        let json = serde_json::json!({
            "written": args.out.display().to_string(),
            "pipes": summary.pipes,
            "junctions": summary.junctions,
            "new_junctions": summary.new_junctions,
            "fixed_heads": summary.fixed_heads,
            "closed_pipes": summary.closed_pipes,
            "groups": summary.groups,
            "warnings": summary.warnings,
            "caution": CAUTION,
        });
        println!("{}", serde_json::to_string_pretty(&json)?);
        return Ok(ExitCode::SUCCESS);
    }
    for warning in &summary.warnings {
        eprintln!("roughcal: warning: {warning}");
    }
    println!(
        "wrote {}: {} pipes, {} junctions ({} new), {} fixed heads, {} warning{}",
        args.out.display(),
        summary.pipes,
        summary.junctions,
        summary.new_junctions,
        summary.fixed_heads,
        summary.warnings.len(),
        if summary.warnings.len() == 1 { "" } else { "s" }
    );
    let width = summary
        .groups
        .iter()
        .map(|g| g.group.chars().count())
        .max()
        .unwrap_or(0);
    for group in &summary.groups {
        println!(
            "  {:<width$}  {} pipes",
            group.group,
            format_number(group.pipes as f64)
        );
    }
    println!("Caution: {CAUTION}");
    Ok(ExitCode::SUCCESS)
}
