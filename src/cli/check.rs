//! `roughcal check NETWORK [--json | --quiet]`: load a network file, print a summary or every defect
//! with its place.

use std::fmt::Write as _;
use std::io::Write as _;
use std::path::Path;
use std::process::ExitCode;

use roughcal::calibrate::CAUTION;
use roughcal::network::UnitLabels;
use roughcal::network::file::{Diagnostic, NetworkFileError, load_network_file};
use roughcal::network::summary::NetworkSummary;
use roughcal::report::table::{Align, TextTable};
use serde::Serialize;

/// What `check` prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Output {
    /// The summary, or every defect on stderr.
    Text,
    /// One JSON report on stdout, whatever the verdict.
    Json,
    /// Nothing on a good file (the exit status says it); the defects on stderr otherwise.
    Quiet,
}

pub fn run(network: &Path, output: Output) -> anyhow::Result<ExitCode> {
    let loaded = match load_network_file(network) {
        Ok(loaded) => Ok(loaded),
        Err(NetworkFileError::Invalid { diagnostics }) => Err(diagnostics),
        Err(error @ NetworkFileError::Unreadable { .. }) => return Err(error.into()),
    };
    if output == Output::Json {
        let summary = loaded
            .as_ref()
            .ok()
            .map(|loaded| NetworkSummary::of(&loaded.network));
        let report = match (&loaded, &summary) {
            (Ok(loaded), Some(summary)) => JsonReport {
                caution: CAUTION,
                file: &loaded.sources.file,
                problems: Vec::new(),
                summary: Some(JsonSummary::of(summary)),
                units: Some(summary.units.labels_with_flow(summary.flows)),
                valid: true,
            },
            (Err(diagnostics), _) => JsonReport {
                caution: CAUTION,
                file: diagnostics.first().map_or("", |d| d.file.as_str()),
                problems: diagnostics.iter().map(JsonProblem::of).collect(),
                summary: None,
                units: None,
                valid: false,
            },
            (Ok(loaded), None) => JsonReport {
                caution: CAUTION,
                file: &loaded.sources.file,
                problems: Vec::new(),
                summary: None,
                units: None,
                valid: true,
            },
        };
        let mut out = std::io::BufWriter::new(std::io::stdout().lock());
        serde_json::to_writer_pretty(&mut out, &report)?;
        writeln!(out)?;
        out.flush()?;
        return Ok(if loaded.is_ok() {
            ExitCode::SUCCESS
        } else {
            ExitCode::from(1)
        });
    }
    match loaded {
        Ok(loaded) => {
            if output == Output::Text {
                print!(
                    "{}",
                    render(&NetworkSummary::of(&loaded.network), &loaded.sources.file)
                );
            }
            Ok(ExitCode::SUCCESS)
        }
        Err(diagnostics) => {
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
    }
}

/// `check --json`: keys in alphabetical order, like every JSON report of roughcal. A file with
/// problems has no `summary` and no `units` (nothing was read to count or to measure).
#[derive(Serialize)]
struct JsonReport<'a> {
    caution: &'static str,
    file: &'a str,
    /// Every defect, in file order.
    problems: Vec<JsonProblem<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    summary: Option<JsonSummary<'a>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    units: Option<UnitLabels>,
    valid: bool,
}

#[derive(Serialize)]
struct JsonProblem<'a> {
    column: usize,
    field: Option<&'a str>,
    id: Option<&'a str>,
    line: usize,
    message: &'a str,
}

impl<'a> JsonProblem<'a> {
    fn of(diagnostic: &'a Diagnostic) -> Self {
        Self {
            column: diagnostic.column,
            field: diagnostic.field.as_deref(),
            id: diagnostic.id.as_deref(),
            line: diagnostic.line,
            message: &diagnostic.message,
        }
    }
}

/// The summary's counts, lengths (`units.length`), heads (`units.length`) and demand (`units.flow`).
#[derive(Serialize)]
struct JsonSummary<'a> {
    closed_pipes: usize,
    conditions: usize,
    fixed_heads: usize,
    groups: Vec<JsonGroupLength<'a>>,
    junctions: usize,
    pipes: usize,
    pumps: usize,
    sources: Vec<JsonSource<'a>>,
    title: &'a str,
    total_base_demand: f64,
    total_length: f64,
    /// Pipes in no group (also counted in `pipes`).
    ungrouped: JsonGroupLength<'a>,
    valves: usize,
}

#[derive(Serialize)]
struct JsonGroupLength<'a> {
    length: f64,
    name: &'a str,
    pipes: usize,
}

#[derive(Serialize)]
struct JsonSource<'a> {
    head: f64,
    id: &'a str,
}

impl<'a> JsonSummary<'a> {
    fn of(summary: &'a NetworkSummary) -> Self {
        let group = |g: &'a roughcal::network::summary::GroupLength| JsonGroupLength {
            length: g.length,
            name: &g.group,
            pipes: g.pipes,
        };
        Self {
            closed_pipes: summary.closed_pipes,
            conditions: summary.conditions,
            fixed_heads: summary.fixed_heads,
            groups: summary.length_by_group.iter().map(group).collect(),
            junctions: summary.junctions,
            pipes: summary.pipes,
            pumps: summary.pumps,
            valves: summary.valves,
            sources: summary
                .sources
                .iter()
                .map(|s| JsonSource {
                    head: s.head,
                    id: &s.id,
                })
                .collect(),
            title: &summary.title,
            total_base_demand: summary.total_base_demand,
            total_length: summary.total_length(),
            ungrouped: group(&summary.ungrouped),
        }
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
        summary.flows.label(),
        units.pressure_label()
    );
    let _ = writeln!(
        out,
        "{}, {}, {} ({} closed), {}{}, {}, {}",
        counted(summary.junctions, "junction"),
        counted(summary.fixed_heads, "fixed head"),
        counted(summary.pipes, "pipe"),
        summary.closed_pipes,
        counted(summary.pumps, "pump"),
        // Only networks that have valves say so, keeping every other summary as it was.
        if summary.valves > 0 {
            format!(", {}", counted(summary.valves, "valve"))
        } else {
            String::new()
        },
        counted(summary.groups, "group"),
        counted(summary.conditions, "condition")
    );
    let _ = writeln!(
        out,
        "total base demand {:.2} {}",
        summary.total_base_demand,
        summary.flows.label()
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
