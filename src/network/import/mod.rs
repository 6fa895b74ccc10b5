//! A utility's GIS export (GeoJSON FeatureCollections or CSV tables of pipes and nodes) turned into a
//! [`Network`], following an import mapping (IMPORT.toml, see [`config`] and docs/import.md).
//!
//! Pure: the caller reads the files and writes the result (through [`crate::network::write`]).
//! Pipe ends join the nearest node within `snap` (nodes indexed in an R-tree, `rstar`), lengths come
//! from the length attribute or the line itself (plan length, or the WGS84 geodesic length for
//! lon/lat, [`crate::network::lonlat`]), and every pipe takes the roughness group of the first
//! `[[rule]]` it matches. Every problem is collected, each naming the file, the feature (index in the
//! FeatureCollection, or CSV line), its id and the attribute; any problem refuses the whole import.

pub mod config;
pub mod export;
mod read;

use std::collections::HashMap;
use std::fmt;

use rstar::RTree;
use rstar::primitives::GeomWithData;

pub use config::{ConfigError, Coordinates, ImportConfig};
pub use read::{SourceFormat, format_number};

use self::read::{Attr, Shape, Table};
use super::graph::{cut_off_by, reachable};
use super::lonlat::{LocalProjection, LonLat, line_length_m};
use super::model::{
    Condition, DEFAULT_GROUP_MAX_C, DEFAULT_GROUP_MIN_C, FixedHead, Junction, Network, NodeRef,
    Pipe, RoughnessGroup,
};
use super::units::UnitSystem;
use super::write::network_toml_with_comment;

/// C-factors outside this range are listed as warnings (common practice, no source: new smooth pipe
/// rarely tests above 150, badly tuberculated mains rarely below 40).
pub const PLAUSIBLE_C: (f64, f64) = (40.0, 150.0);
/// Pipes shorter than this (ft for `us`, m for `si`) are listed as warnings: usually digitising slivers.
pub const SHORT_PIPE_US_FT: f64 = 1.0;
pub const SHORT_PIPE_SI_M: f64 = 0.3;
/// A `us` diameter at or above this many inches looks like millimetres (common practice, no source:
/// distribution mains stop well below 75 in, while 75 mm and up is ordinary in mm).
pub const US_DIAMETER_LOOKS_MM_IN: f64 = 75.0;
/// An `si` diameter below this many millimetres looks like inches (common practice, no source: 2 to
/// 36 are ordinary inch sizes, while mains under 40 mm are rare).
pub const SI_DIAMETER_LOOKS_IN_MM: f64 = 40.0;

/// One input file as read by the caller.
#[derive(Debug, Clone, Copy)]
pub struct Source<'a> {
    /// The file name, as messages show it.
    pub file: &'a str,
    pub text: &'a str,
    pub format: SourceFormat,
}

/// Everything an import reads.
#[derive(Debug, Clone, Copy)]
pub struct ImportInput<'a> {
    pub config_file: &'a str,
    pub config_text: &'a str,
    pub pipes: Source<'a>,
    pub nodes: Source<'a>,
}

/// Where a feature is in its file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Place {
    /// 0-based index in the FeatureCollection's `features`.
    Feature(usize),
    /// 1-based line of a CSV record.
    Line(usize),
}

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Feature(i) => write!(f, "feature {i}"),
            Self::Line(line) => write!(f, "line {line}"),
        }
    }
}

/// What is wrong with one feature (or a whole file).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ProblemKind {
    #[error("the file is not a GeoJSON FeatureCollection (found {found})")]
    NotFeatureCollection { found: String },
    #[error("the file is not valid GeoJSON: {message}")]
    BadGeoJson { message: String },
    #[error("the file is not a readable CSV table: {message}")]
    BadCsv { message: String },
    #[error("the file has no column `{column}` (named in [{section}] `{key}`)")]
    MissingColumn {
        column: String,
        section: &'static str,
        key: &'static str,
    },
    #[error("the file has no features")]
    Empty,
    #[error("no `{attribute}` value: every {what} needs an id")]
    MissingId {
        attribute: String,
        what: &'static str,
    },
    #[error("duplicate {what} id: already used by {first}")]
    DuplicateId { what: &'static str, first: Place },
    #[error("no `{attribute}` value: the {what} is required")]
    MissingValue {
        attribute: String,
        what: &'static str,
    },
    #[error("`{attribute}` must be a number (the {what}), found {found}")]
    NotANumber {
        attribute: String,
        what: &'static str,
        found: String,
    },
    #[error("the {what} `{attribute}` must be positive, found {found}")]
    NotPositive {
        attribute: String,
        what: &'static str,
        found: String,
    },
    #[error(
        "mixed units: `{attribute}` is {found}, in {written}, but units = \"{units}\" expects {expected}; convert the values or set `units`"
    )]
    MixedUnits {
        attribute: String,
        found: String,
        written: &'static str,
        units: &'static str,
        expected: &'static str,
    },
    #[error("no geometry: a {what} needs a {expected}")]
    NoGeometry {
        what: &'static str,
        expected: &'static str,
    },
    #[error("the geometry is a {found}: a {what} must be a {expected}")]
    WrongGeometry {
        what: &'static str,
        found: &'static str,
        expected: &'static str,
    },
    #[error("the line has {count} position{}: a pipe needs at least two", plural(.count))]
    TooFewPositions { count: usize },
    #[error("a coordinate is not a finite number")]
    BadCoordinate,
    #[error(
        "coordinates ({x}, {y}) are not WGS84 longitude, latitude (coordinates = \"lonlat\" needs -180..180, -90..90)"
    )]
    NotLonLat { x: f64, y: f64 },
    #[error(
        "no node within {snap} {unit} of the line's {end}{}; move the end onto its node, raise `snap`, or set new_junctions = true",
        nearest_text(.nearest, .unit)
    )]
    EndNotNearNode {
        end: &'static str,
        snap: String,
        unit: &'static str,
        nearest: Option<(String, String)>,
    },
    #[error("`{attribute}` names node `{node}`, which is not in {nodes_file}")]
    UnknownNode {
        attribute: String,
        node: String,
        nodes_file: String,
    },
    #[error("both ends join node `{node}`: a pipe must connect two different nodes")]
    SameNode { node: String },
    #[error("zero-length pipe: {why}")]
    ZeroLength { why: String },
    #[error(
        "no [[rule]] matches this pipe (material {material}, year {year}): add a rule or correct the attribute"
    )]
    NoRule { material: String, year: String },
    #[error("node `{id}` is reached by no pipe")]
    NodeUnreached { id: String },
    #[error(
        "new junction at ({x}, {y}) joins only other new junctions: no node elevation to take the mean of"
    )]
    NewJunctionElevation { x: String, y: String },
    #[error("[[condition]] `{condition}`: {message}")]
    Condition { condition: String, message: String },
    #[error("the imported network would not pass `roughcal check`: {diagnostic}")]
    Check { diagnostic: String },
}

fn plural(count: &usize) -> &'static str {
    if *count == 1 { "" } else { "s" }
}

fn nearest_text(nearest: &Option<(String, String)>, unit: &str) -> String {
    match nearest {
        Some((id, distance)) => format!(" (nearest is `{id}`, {distance} {unit} away)"),
        None => " (no node has coordinates)".into(),
    }
}

/// One refusal: the file, the feature and its id, the attribute, and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct ImportProblem {
    pub file: String,
    pub place: Option<Place>,
    /// (id attribute name, its value).
    pub id: Option<(String, String)>,
    /// The user's attribute name concerned, when one is.
    pub field: Option<String>,
    pub kind: ProblemKind,
}

impl fmt::Display for ImportProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(place) = self.place {
            write!(f, ": {place}")?;
        }
        if let Some((attribute, value)) = &self.id {
            write!(f, " ({attribute} `{value}`)")?;
        }
        write!(f, ": {}", self.kind)
    }
}

/// Why an import wrote nothing.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ImportError {
    #[error(transparent)]
    Config(#[from] ConfigError),
    #[error("{}", refused_text(.problems))]
    Refused { problems: Vec<ImportProblem> },
}

fn refused_text(problems: &[ImportProblem]) -> String {
    let mut text: Vec<String> = problems.iter().map(ToString::to_string).collect();
    text.push(format!(
        "{} problem{} found: nothing written",
        problems.len(),
        if problems.len() == 1 { "" } else { "s" }
    ));
    text.join("\n")
}

/// Something imported that deserves a look.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum WarningKind {
    #[error("short pipe: {length} {unit} (under {limit} {unit}); often a digitising sliver")]
    ShortPipe {
        length: String,
        unit: &'static str,
        limit: String,
    },
    #[error("C = {c} is outside {} to {}", PLAUSIBLE_C.0, PLAUSIBLE_C.1)]
    CoefficientOutside { c: String },
    #[error("diameter {diameter} {unit} looks like {looks}: check the units of `{attribute}`")]
    DiameterOtherUnit {
        diameter: String,
        unit: &'static str,
        looks: &'static str,
        attribute: String,
    },
    #[error(
        "new junction `{id}` at ({x}, {y}) joins {ends} pipe ends near no node, elevation {elevation} {unit} (mean of its pipes' far ends)"
    )]
    NewJunction {
        id: String,
        x: String,
        y: String,
        ends: usize,
        elevation: String,
        unit: &'static str,
    },
    #[error("[[rule]] `{group}` matched no pipe")]
    RuleUnused { group: String },
}

/// A warning with the place it concerns.
#[derive(Debug, Clone, PartialEq)]
pub struct ImportWarning {
    pub file: String,
    pub place: Option<Place>,
    pub id: Option<(String, String)>,
    pub kind: WarningKind,
}

impl fmt::Display for ImportWarning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(place) = self.place {
            write!(f, ": {place}")?;
        }
        if let Some((attribute, value)) = &self.id {
            write!(f, " ({attribute} `{value}`)")?;
        }
        write!(f, ": {}", self.kind)
    }
}

/// A network built from a GIS export, with what deserves a look.
#[derive(Debug, Clone, PartialEq)]
pub struct Imported {
    pub network: Network,
    pub warnings: Vec<ImportWarning>,
}

/// Counts for `--json` and the provenance comment.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ImportSummary {
    pub pipes: usize,
    pub junctions: usize,
    pub fixed_heads: usize,
    /// New junctions made from ends near no node (`new_junctions = true`).
    pub new_junctions: usize,
    /// (group, pipe count), in rule order.
    pub groups: Vec<GroupCount>,
    pub closed_pipes: usize,
    pub warnings: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct GroupCount {
    pub group: String,
    pub pipes: usize,
}

impl Imported {
    pub fn summary(&self) -> ImportSummary {
        let net = &self.network;
        ImportSummary {
            pipes: net.pipes.len(),
            junctions: net.junctions.len(),
            fixed_heads: net.fixed_heads.len(),
            new_junctions: self
                .warnings
                .iter()
                .filter(|w| matches!(w.kind, WarningKind::NewJunction { .. }))
                .count(),
            groups: net
                .groups
                .iter()
                .enumerate()
                .map(|(g, group)| GroupCount {
                    group: group.name.clone(),
                    pipes: net.pipes.iter().filter(|p| p.group == Some(g)).count(),
                })
                .collect(),
            closed_pipes: net.pipes.iter().filter(|p| p.closed).count(),
            warnings: self.warnings.iter().map(ToString::to_string).collect(),
        }
    }

    /// The network file text: a comment block saying where it came from (`date` as the caller knows
    /// it), then the network through [`crate::network::write`]. A network that `roughcal check` would
    /// fail (no fixed head, junctions cut off from every source) is refused with the check's reasons.
    pub fn network_toml(&self, input: &ImportInput<'_>, date: &str) -> Result<String, ImportError> {
        let net = &self.network;
        let summary = self.summary();
        let mut comment = format!(
            "Imported by `roughcal import` on {date} from a GIS export:\n  pipes:  {}\n  nodes:  {}\n  config: {}\n",
            input.pipes.file, input.nodes.file, input.config_file
        );
        comment.push_str(&format!(
            "{} pipes, {} junctions ({} new), {} fixed heads, {} groups, {} warnings.\n",
            summary.pipes,
            summary.junctions,
            summary.new_junctions,
            summary.fixed_heads,
            summary.groups.len(),
            summary.warnings.len()
        ));
        if let Some(origin) = net.lonlat_origin {
            comment.push_str(&format!(
                "Coordinates were WGS84 lon/lat; x, y are east and north of ({}, {}) in {} (local projection).\n",
                origin.lon_deg,
                origin.lat_deg,
                net.units.length_label()
            ));
        }
        comment.push_str(
            "Edit the GIS or IMPORT.toml and import again rather than editing this file by hand.\n",
        );
        comment.push_str(crate::calibrate::CAUTION);
        let problems = check_like_the_loader(net, input.pipes.file);
        if !problems.is_empty() {
            return Err(ImportError::Refused { problems });
        }
        let text = network_toml_with_comment(net, &comment);
        Ok(text)
    }
}

/// The checks of the network loader that an import can still fail (ids, ends, values and groups are
/// already checked feature by feature): a fixed head must exist, and every junction must reach one in
/// the base state and in every condition. Done on the built network rather than by reading the written
/// text back, which for a city-sized export costs more than the import itself; the writer and the
/// loader agree (network::write's tests, and tests/import.rs loads what it writes).
fn check_like_the_loader(net: &Network, file: &str) -> Vec<ImportProblem> {
    let problem = |diagnostic: String| ImportProblem {
        file: file.to_string(),
        place: None,
        id: None,
        field: None,
        kind: ProblemKind::Check { diagnostic },
    };
    if net.fixed_heads.is_empty() {
        return vec![problem(
            "the network has no [[fixed_head]]: at least one reservoir, tank or boundary of known head is needed (no node has a head value)".into(),
        )];
    }
    let ids = |junctions: &[usize]| -> String {
        let shown: Vec<&str> = junctions
            .iter()
            .take(10)
            .filter_map(|&j| net.junctions.get(j).map(|x| x.id.as_str()))
            .collect();
        let more = junctions.len().saturating_sub(shown.len());
        if more > 0 {
            format!("{} and {more} more", shown.join(", "))
        } else {
            shown.join(", ")
        }
    };
    let mut problems = Vec::new();
    let base = reachable(net, &[], &[], &[]);
    let isolated: Vec<usize> = (0..net.junctions.len())
        .filter(|&j| !base.get(j).copied().unwrap_or(false))
        .collect();
    if !isolated.is_empty() {
        problems.push(problem(format!(
            "{} junction{} not connected to any fixed head through open pipes: {}",
            isolated.len(),
            if isolated.len() == 1 { " is" } else { "s are" },
            ids(&isolated)
        )));
    }
    for condition in &net.conditions {
        let cut_off = cut_off_by(net, condition, &base);
        if !cut_off.is_empty() {
            problems.push(problem(format!(
                "condition `{}` cuts junctions off from every fixed head: {}",
                condition.name,
                ids(&cut_off)
            )));
        }
    }
    problems
}

/// What a number is, for units and messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Quantity {
    /// ft or m: lengths, elevations, heads.
    Length,
    /// in or mm.
    Diameter,
    /// gpm or L/s.
    Flow,
    /// No unit: C, years.
    Plain,
}

/// Unit words accepted after a number, per system: (us, si), lower case.
fn unit_words(quantity: Quantity) -> (&'static [&'static str], &'static [&'static str]) {
    match quantity {
        Quantity::Length => (
            &["ft", "feet", "foot", "'"],
            &["m", "metres", "meters", "metre", "meter"],
        ),
        Quantity::Diameter => (&["in", "inch", "inches", "\""], &["mm"]),
        Quantity::Flow => (&["gpm"], &["l/s", "lps"]),
        Quantity::Plain => (&[], &[]),
    }
}

fn unit_name(quantity: Quantity, units: UnitSystem) -> &'static str {
    match quantity {
        Quantity::Length => units.length_label(),
        Quantity::Diameter => units.diameter_label(),
        Quantity::Flow => units.flow_label(),
        Quantity::Plain => "",
    }
}

/// Reads a number attribute: `Ok(None)` when absent or blank. Text may carry the import's own unit
/// (`8 in`); the other system's unit is refused as mixed units.
fn quantity(
    attr: &Attr<'_>,
    attribute: &str,
    what: &'static str,
    kind: Quantity,
    units: UnitSystem,
) -> Result<Option<f64>, ProblemKind> {
    let not_a_number = || ProblemKind::NotANumber {
        attribute: attribute.to_string(),
        what,
        found: attr.shown(),
    };
    let value = match attr {
        Attr::Absent | Attr::Empty => return Ok(None),
        Attr::Number(n) => *n,
        Attr::Bool(_) | Attr::Other(_) => return Err(not_a_number()),
        Attr::Text(text) => {
            let text = text.trim();
            let split = text
                .find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E')))
                .unwrap_or(text.len());
            // `e` alone may start a unit word, not an exponent: fall back to the shortest number.
            let (number, suffix) = text.split_at(split);
            let number_value: f64 = number.trim().parse().map_err(|_| not_a_number())?;
            let suffix = suffix.trim().to_lowercase();
            if !suffix.is_empty() {
                let (us, si) = unit_words(kind);
                let (own, other, other_name) = match units {
                    UnitSystem::Us => (us, si, unit_name(kind, UnitSystem::Si)),
                    UnitSystem::Si => (si, us, unit_name(kind, UnitSystem::Us)),
                };
                if other.contains(&suffix.as_str()) {
                    return Err(ProblemKind::MixedUnits {
                        attribute: attribute.to_string(),
                        found: attr.shown(),
                        written: other_name,
                        units: units.key(),
                        expected: unit_name(kind, units),
                    });
                }
                if !own.contains(&suffix.as_str()) {
                    return Err(not_a_number());
                }
            }
            number_value
        }
    };
    if value.is_finite() {
        Ok(Some(value))
    } else {
        Err(not_a_number())
    }
}

/// A node as read.
struct RawNode {
    place: Place,
    id: String,
    elevation: Option<f64>,
    demand: f64,
    head: Option<f64>,
    /// As in the file: x, y or lon, lat.
    raw_position: Option<(f64, f64)>,
}

/// How a pipe's ends are given.
enum Ends {
    /// Positions of the line (x, y or lon, lat), parts joined in order.
    Line(Vec<(f64, f64)>, f64),
    /// Node ids from the `from` and `to` attributes.
    Ids(String, String),
}

/// A pipe as read.
struct RawPipe {
    place: Place,
    id: String,
    diameter: f64,
    length: Option<f64>,
    c: Option<f64>,
    material: Option<String>,
    year: Option<f64>,
    closed: bool,
    ends: Ends,
}

/// Collects problems as an import goes.
struct Problems {
    list: Vec<ImportProblem>,
}

impl Problems {
    fn add(
        &mut self,
        file: &str,
        place: Option<Place>,
        id: Option<(&str, &str)>,
        field: Option<&str>,
        kind: ProblemKind,
    ) {
        self.list.push(ImportProblem {
            file: file.to_string(),
            place,
            id: id.map(|(a, v)| (a.to_string(), v.to_string())),
            field: field.map(str::to_string),
            kind,
        });
    }
}

/// Imports a GIS export: every problem found is listed in the error, nothing partial is returned.
pub fn import_network(input: &ImportInput<'_>) -> Result<Imported, ImportError> {
    let (config, units) = ImportConfig::parse(input.config_text, input.config_file)?;
    let mut problems = Problems { list: Vec::new() };

    let nodes_table = Table::parse(input.nodes.text, input.nodes.format);
    let pipes_table = Table::parse(input.pipes.text, input.pipes.format);
    let (nodes_table, pipes_table) = match (nodes_table, pipes_table) {
        (Ok(n), Ok(p)) => (n, p),
        (n, p) => {
            for (result, file) in [(n, input.nodes.file), (p, input.pipes.file)] {
                if let Err(kind) = result {
                    problems.add(file, None, None, None, kind);
                }
            }
            return Err(ImportError::Refused {
                problems: problems.list,
            });
        }
    };
    check_columns(&config, input, &nodes_table, &pipes_table, &mut problems);
    for (table, file) in [
        (&nodes_table, input.nodes.file),
        (&pipes_table, input.pipes.file),
    ] {
        if table.is_empty() {
            problems.add(file, None, None, None, ProblemKind::Empty);
        }
    }
    if !problems.list.is_empty() {
        return Err(ImportError::Refused {
            problems: problems.list,
        });
    }

    let nodes = read_nodes(&config, units, input.nodes, &nodes_table, &mut problems);
    let pipes = read_pipes(&config, units, input.pipes, &pipes_table, &mut problems);
    let builder = Builder {
        config: &config,
        units,
        input,
    };
    let built = builder.build(&nodes, &pipes, &mut problems);
    if !problems.list.is_empty() {
        return Err(ImportError::Refused {
            problems: problems.list,
        });
    }
    built.ok_or(ImportError::Refused {
        problems: Vec::new(),
    })
}

/// CSV tables must have every configured column; CSV pipes need `from` and `to`.
fn check_columns(
    config: &ImportConfig,
    input: &ImportInput<'_>,
    nodes: &Table,
    pipes: &Table,
    problems: &mut Problems,
) {
    let pf = &config.pipe_fields;
    let nf = &config.node_fields;
    let need = |problems: &mut Problems,
                table: &Table,
                file: &str,
                section: &'static str,
                key: &'static str,
                column: Option<&String>| {
        if let Some(column) = column
            && !table.has_column(column)
        {
            problems.add(
                file,
                None,
                None,
                Some(column),
                ProblemKind::MissingColumn {
                    column: column.clone(),
                    section,
                    key,
                },
            );
        }
    };
    let p = input.pipes.file;
    need(problems, pipes, p, "pipe_fields", "id", Some(&pf.id));
    need(
        problems,
        pipes,
        p,
        "pipe_fields",
        "diameter",
        Some(&pf.diameter),
    );
    if input.pipes.format == SourceFormat::Csv {
        for (key, column) in [("from", &pf.from), ("to", &pf.to)] {
            match column {
                Some(column) => need(problems, pipes, p, "pipe_fields", key, Some(column)),
                None => problems.add(
                    p,
                    None,
                    None,
                    None,
                    ProblemKind::MissingColumn {
                        column: format!("(none: [pipe_fields] `{key}` is not set)"),
                        section: "pipe_fields",
                        key,
                    },
                ),
            }
        }
    }
    let n = input.nodes.file;
    need(problems, nodes, n, "node_fields", "id", Some(&nf.id));
    if input.nodes.format == SourceFormat::Csv && nf.head.is_none() {
        need(
            problems,
            nodes,
            n,
            "node_fields",
            "elevation",
            Some(&nf.elevation),
        );
    }
}

fn read_nodes(
    config: &ImportConfig,
    units: UnitSystem,
    source: Source<'_>,
    table: &Table,
    problems: &mut Problems,
) -> Vec<RawNode> {
    let nf = &config.node_fields;
    let file = source.file;
    let mut nodes = Vec::with_capacity(table.len());
    for (place, attrs, shape) in table.features() {
        let Some(id) = attrs.get(&nf.id).text().filter(|id| !id.is_empty()) else {
            problems.add(
                file,
                Some(place),
                None,
                Some(&nf.id),
                ProblemKind::MissingId {
                    attribute: nf.id.clone(),
                    what: "node",
                },
            );
            continue;
        };
        let who = Some((nf.id.as_str(), id.as_str()));
        let mut ok = true;
        let mut number = |attribute: Option<&String>, what: &'static str, kind: Quantity| {
            let attribute = attribute?;
            match quantity(&attrs.get(attribute), attribute, what, kind, units) {
                Ok(value) => value,
                Err(problem) => {
                    problems.add(file, Some(place), who, Some(attribute), problem);
                    ok = false;
                    None
                }
            }
        };
        let head = number(nf.head.as_ref(), "head", Quantity::Length);
        let elevation = number(Some(&nf.elevation), "elevation", Quantity::Length);
        let demand = number(nf.demand.as_ref(), "demand", Quantity::Flow).unwrap_or(0.0);
        let raw_position = match shape {
            Shape::Point(p) => Some(p),
            Shape::None if source.format == SourceFormat::Csv => {
                let x = number(Some(&nf.x), "x coordinate", Quantity::Plain);
                let y = number(Some(&nf.y), "y coordinate", Quantity::Plain);
                x.zip(y)
            }
            Shape::None => {
                problems.add(
                    file,
                    Some(place),
                    who,
                    None,
                    ProblemKind::NoGeometry {
                        what: "node",
                        expected: "Point",
                    },
                );
                ok = false;
                None
            }
            Shape::Lines(_) | Shape::Other(_) => {
                let found = match shape {
                    Shape::Other(name) => name,
                    _ => "LineString",
                };
                problems.add(
                    file,
                    Some(place),
                    who,
                    None,
                    ProblemKind::WrongGeometry {
                        what: "node",
                        found,
                        expected: "Point",
                    },
                );
                ok = false;
                None
            }
        };
        if let Some(p) = raw_position
            && let Err(problem) = check_position(p, config.coordinates)
        {
            problems.add(file, Some(place), who, None, problem);
            ok = false;
        }
        if head.is_none() && elevation.is_none() && ok {
            problems.add(
                file,
                Some(place),
                who,
                Some(&nf.elevation),
                ProblemKind::MissingValue {
                    attribute: nf.elevation.clone(),
                    what: "elevation",
                },
            );
            ok = false;
        }
        if ok {
            nodes.push(RawNode {
                place,
                id,
                elevation,
                demand,
                head,
                raw_position,
            });
        }
    }
    nodes
}

fn check_position((x, y): (f64, f64), coordinates: Coordinates) -> Result<(), ProblemKind> {
    if !(x.is_finite() && y.is_finite()) {
        return Err(ProblemKind::BadCoordinate);
    }
    if coordinates == Coordinates::Lonlat && !(x.abs() <= 180.0 && y.abs() <= 90.0) {
        return Err(ProblemKind::NotLonLat { x, y });
    }
    Ok(())
}

fn read_pipes(
    config: &ImportConfig,
    units: UnitSystem,
    source: Source<'_>,
    table: &Table,
    problems: &mut Problems,
) -> Vec<RawPipe> {
    let pf = &config.pipe_fields;
    let file = source.file;
    let mut pipes = Vec::with_capacity(table.len());
    for (place, attrs, shape) in table.features() {
        let Some(id) = attrs.get(&pf.id).text().filter(|id| !id.is_empty()) else {
            problems.add(
                file,
                Some(place),
                None,
                Some(&pf.id),
                ProblemKind::MissingId {
                    attribute: pf.id.clone(),
                    what: "pipe",
                },
            );
            continue;
        };
        let who = Some((pf.id.as_str(), id.as_str()));
        let mut ok = true;
        let mut report = |field: Option<&str>, problem: ProblemKind| {
            problems.add(file, Some(place), who, field, problem);
        };
        let number = |attribute: Option<&String>,
                      what: &'static str,
                      kind: Quantity,
                      report: &mut dyn FnMut(Option<&str>, ProblemKind)|
         -> Option<f64> {
            let attribute = attribute?;
            match quantity(&attrs.get(attribute), attribute, what, kind, units) {
                Ok(Some(value)) if value <= 0.0 && kind != Quantity::Plain => {
                    // Zero length has its own refusal below; other non-positive sizes here.
                    if what == "length" && value == 0.0 {
                        return Some(0.0);
                    }
                    report(
                        Some(attribute),
                        ProblemKind::NotPositive {
                            attribute: attribute.clone(),
                            what,
                            found: format_number(value),
                        },
                    );
                    None
                }
                Ok(value) => value,
                Err(problem) => {
                    report(Some(attribute), problem);
                    None
                }
            }
        };
        let diameter = match attrs.get(&pf.diameter) {
            Attr::Absent | Attr::Empty => {
                report(
                    Some(&pf.diameter),
                    ProblemKind::MissingValue {
                        attribute: pf.diameter.clone(),
                        what: "diameter",
                    },
                );
                None
            }
            _ => number(
                Some(&pf.diameter),
                "diameter",
                Quantity::Diameter,
                &mut report,
            ),
        };
        let length = number(pf.length.as_ref(), "length", Quantity::Length, &mut report);
        let length_bad = pf
            .length
            .as_ref()
            .is_some_and(|a| !matches!(attrs.get(a), Attr::Absent | Attr::Empty))
            && length.is_none();
        let c = match pf.c.as_ref() {
            Some(attribute) => match quantity(
                &attrs.get(attribute),
                attribute,
                "C-factor",
                Quantity::Plain,
                units,
            ) {
                Ok(Some(c)) if c > 0.0 => Some(c),
                Ok(Some(c)) => {
                    report(
                        Some(attribute),
                        ProblemKind::NotPositive {
                            attribute: attribute.clone(),
                            what: "C-factor",
                            found: format_number(c),
                        },
                    );
                    ok = false;
                    None
                }
                Ok(None) => None,
                Err(problem) => {
                    report(Some(attribute), problem);
                    ok = false;
                    None
                }
            },
            None => None,
        };
        let year = match pf.year.as_ref() {
            Some(attribute) => {
                match quantity(
                    &attrs.get(attribute),
                    attribute,
                    "install year",
                    Quantity::Plain,
                    units,
                ) {
                    Ok(year) => year,
                    Err(problem) => {
                        report(Some(attribute), problem);
                        ok = false;
                        None
                    }
                }
            }
            None => None,
        };
        let material = pf.material.as_ref().and_then(|a| attrs.get(a).text());
        let closed = pf.closed.as_ref().is_some_and(|a| match attrs.get(a) {
            Attr::Bool(b) => b,
            other => other.text().is_some_and(|value| {
                let value = value.trim().to_lowercase();
                pf.closed_values
                    .iter()
                    .any(|v| v.trim().to_lowercase() == value)
            }),
        });
        let ends = match shape {
            Shape::Lines(parts) => {
                let count: usize = parts.iter().map(Vec::len).sum();
                if parts.iter().any(|part| part.len() < 2) || count < 2 {
                    report(
                        None,
                        ProblemKind::TooFewPositions {
                            count: parts.iter().map(Vec::len).min().unwrap_or(0),
                        },
                    );
                    None
                } else if let Some(problem) = parts
                    .iter()
                    .flatten()
                    .find_map(|&p| check_position(p, config.coordinates).err())
                {
                    report(None, problem);
                    None
                } else {
                    let line_length = line_length(&parts, config.coordinates, units);
                    Some(Ends::Line(parts.concat(), line_length))
                }
            }
            Shape::None => {
                let from = pf.from.as_ref().and_then(|a| attrs.get(a).text());
                let to = pf.to.as_ref().and_then(|a| attrs.get(a).text());
                match (from, to) {
                    (Some(from), Some(to)) => Some(Ends::Ids(from, to)),
                    (from, _) if source.format == SourceFormat::Csv => {
                        let attribute = if from.is_none() { &pf.from } else { &pf.to };
                        let attribute = attribute.clone().unwrap_or_default();
                        report(
                            Some(&attribute),
                            ProblemKind::MissingValue {
                                attribute: attribute.clone(),
                                what: if from.is_none() {
                                    "from node"
                                } else {
                                    "to node"
                                },
                            },
                        );
                        None
                    }
                    _ => {
                        report(
                            None,
                            ProblemKind::NoGeometry {
                                what: "pipe",
                                expected: "LineString or MultiLineString",
                            },
                        );
                        None
                    }
                }
            }
            Shape::Point(_) | Shape::Other(_) => {
                let found = match shape {
                    Shape::Other(name) => name,
                    _ => "Point",
                };
                report(
                    None,
                    ProblemKind::WrongGeometry {
                        what: "pipe",
                        found,
                        expected: "LineString or MultiLineString",
                    },
                );
                None
            }
        };
        if let (Some(diameter), Some(ends), true, false) = (diameter, ends, ok, length_bad) {
            pipes.push(RawPipe {
                place,
                id,
                diameter,
                length,
                c,
                material,
                year,
                closed,
                ends,
            });
        }
    }
    pipes
}

/// Length of a line in the import's length unit: the plan length of projected coordinates, the
/// WGS84 geodesic length of lon/lat.
fn line_length(parts: &[Vec<(f64, f64)>], coordinates: Coordinates, units: UnitSystem) -> f64 {
    match coordinates {
        Coordinates::Projected => parts
            .iter()
            .map(|part| {
                part.windows(2)
                    .map(|w| match w {
                        [a, b] => (b.0 - a.0).hypot(b.1 - a.1),
                        _ => 0.0,
                    })
                    .sum::<f64>()
            })
            .sum(),
        Coordinates::Lonlat => {
            let metres: f64 = parts
                .iter()
                .map(|part| {
                    let points: Vec<LonLat> = part
                        .iter()
                        .map(|&(lon_deg, lat_deg)| LonLat { lon_deg, lat_deg })
                        .collect();
                    line_length_m(&points)
                })
                .sum();
            units.length_from_m(metres)
        }
    }
}

type IndexedPoint = GeomWithData<[f64; 2], usize>;

/// Where a pipe end was joined.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Joined {
    Node(usize),
    New(usize),
}

struct Builder<'c> {
    config: &'c ImportConfig,
    units: UnitSystem,
    input: &'c ImportInput<'c>,
}

impl Builder<'_> {
    fn build(
        &self,
        nodes: &[RawNode],
        pipes: &[RawPipe],
        problems: &mut Problems,
    ) -> Option<Imported> {
        let config = self.config;
        let units = self.units;
        let pf = &config.pipe_fields;
        let nf = &config.node_fields;
        let (pipes_file, nodes_file) = (self.input.pipes.file, self.input.nodes.file);
        let mut warnings = Vec::new();

        // Ids, unique within nodes and within pipes.
        let mut node_index: HashMap<&str, usize> = HashMap::with_capacity(nodes.len());
        for (k, node) in nodes.iter().enumerate() {
            if let Some(&first) = node_index.get(node.id.as_str()) {
                let first = nodes.get(first).map_or(node.place, |n| n.place);
                problems.add(
                    nodes_file,
                    Some(node.place),
                    Some((&nf.id, &node.id)),
                    Some(&nf.id),
                    ProblemKind::DuplicateId {
                        what: "node",
                        first,
                    },
                );
            } else {
                node_index.insert(&node.id, k);
            }
        }
        let mut pipe_index: HashMap<&str, Place> = HashMap::with_capacity(pipes.len());
        for pipe in pipes {
            if let Some(&first) = pipe_index.get(pipe.id.as_str()) {
                problems.add(
                    pipes_file,
                    Some(pipe.place),
                    Some((&pf.id, &pipe.id)),
                    Some(&pf.id),
                    ProblemKind::DuplicateId {
                        what: "pipe",
                        first,
                    },
                );
            } else {
                pipe_index.insert(&pipe.id, pipe.place);
            }
        }

        // Plan positions in the import's length unit.
        let projection = (config.coordinates == Coordinates::Lonlat)
            .then(|| {
                let points =
                    nodes
                        .iter()
                        .filter_map(|n| n.raw_position)
                        .chain(pipes.iter().flat_map(|p| match &p.ends {
                            Ends::Line(points, _) => points.clone(),
                            Ends::Ids(..) => Vec::new(),
                        }));
                bounding_centre(points)
                    .map(|(lon_deg, lat_deg)| LocalProjection::new(LonLat { lon_deg, lat_deg }))
            })
            .flatten();
        let plan = |(x, y): (f64, f64)| -> (f64, f64) {
            match &projection {
                Some(projection) => {
                    let (east, north) = projection.forward_m(LonLat {
                        lon_deg: x,
                        lat_deg: y,
                    });
                    (units.length_from_m(east), units.length_from_m(north))
                }
                None => (x, y),
            }
        };
        let node_plan: Vec<Option<(f64, f64)>> =
            nodes.iter().map(|n| n.raw_position.map(plan)).collect();
        let tree: RTree<IndexedPoint> = RTree::bulk_load(
            node_plan
                .iter()
                .enumerate()
                .filter_map(|(k, p)| p.map(|(x, y)| IndexedPoint::new([x, y], k)))
                .collect(),
        );

        // Ends.
        let snap = config.snap;
        let mut new_tree: RTree<IndexedPoint> = RTree::new();
        let mut new_positions: Vec<(f64, f64)> = Vec::new();
        let mut new_ends: Vec<usize> = Vec::new();
        let mut joined: Vec<Option<(Joined, Joined)>> = Vec::with_capacity(pipes.len());
        for pipe in pipes {
            let who = Some((pf.id.as_str(), pipe.id.as_str()));
            let ends = match &pipe.ends {
                Ends::Line(points, _) => {
                    let (Some(&first), Some(&last)) = (points.first(), points.last()) else {
                        joined.push(None);
                        continue;
                    };
                    let mut join = |end: &'static str, point: (f64, f64)| -> Option<Joined> {
                        let (x, y) = plan(point);
                        let nearest = tree.nearest_neighbor([x, y]);
                        let distance = nearest.map(|n| (n.geom()[0] - x).hypot(n.geom()[1] - y));
                        if let (Some(n), Some(d)) = (nearest, distance)
                            && d <= snap
                        {
                            return Some(Joined::Node(n.data));
                        }
                        if config.new_junctions {
                            if let Some(existing) = new_tree.nearest_neighbor([x, y])
                                && (existing.geom()[0] - x).hypot(existing.geom()[1] - y) <= snap
                            {
                                let k = existing.data;
                                if let Some(count) = new_ends.get_mut(k) {
                                    *count += 1;
                                }
                                return Some(Joined::New(k));
                            }
                            let k = new_positions.len();
                            new_positions.push((x, y));
                            new_ends.push(1);
                            new_tree.insert(IndexedPoint::new([x, y], k));
                            return Some(Joined::New(k));
                        }
                        let nearest = nearest.zip(distance).and_then(|(n, d)| {
                            nodes.get(n.data).map(|node| (node.id.clone(), short(d)))
                        });
                        problems.add(
                            pipes_file,
                            Some(pipe.place),
                            who,
                            None,
                            ProblemKind::EndNotNearNode {
                                end,
                                snap: format_number(snap),
                                unit: units.length_label(),
                                nearest,
                            },
                        );
                        None
                    };
                    let start = join("start", first);
                    let end = join("end", last);
                    start.zip(end)
                }
                Ends::Ids(from, to) => {
                    let mut find = |attribute: &Option<String>, id: &str| -> Option<Joined> {
                        match node_index.get(id) {
                            Some(&k) => Some(Joined::Node(k)),
                            None => {
                                let attribute = attribute.clone().unwrap_or_default();
                                problems.add(
                                    pipes_file,
                                    Some(pipe.place),
                                    who,
                                    Some(&attribute),
                                    ProblemKind::UnknownNode {
                                        attribute: attribute.clone(),
                                        node: id.to_string(),
                                        nodes_file: nodes_file.to_string(),
                                    },
                                );
                                None
                            }
                        }
                    };
                    let start = find(&pf.from, from);
                    let end = find(&pf.to, to);
                    start.zip(end)
                }
            };
            joined.push(ends);
        }

        // Groups by rule, lengths, and the per-pipe checks.
        let mut group_names: Vec<&str> = Vec::new();
        let mut pipe_groups: Vec<Option<usize>> = Vec::with_capacity(pipes.len());
        let mut rule_used = vec![false; config.rules.len()];
        let mut lengths: Vec<f64> = Vec::with_capacity(pipes.len());
        let name_of = |j: Joined| -> String {
            match j {
                Joined::Node(k) => nodes.get(k).map_or_else(String::new, |n| n.id.clone()),
                Joined::New(k) => format!("new junction {}", k + 1),
            }
        };
        for (pipe, ends) in pipes.iter().zip(&joined) {
            let who = Some((pf.id.as_str(), pipe.id.as_str()));
            let rule = config
                .rules
                .iter()
                .position(|r| r.matches(pipe.material.as_deref(), pipe.year));
            let group = match rule {
                Some(r) => {
                    if let Some(used) = rule_used.get_mut(r) {
                        *used = true;
                    }
                    let name = config.rules.get(r).map_or("", |rule| rule.group.as_str());
                    Some(match group_names.iter().position(|g| *g == name) {
                        Some(g) => g,
                        None => {
                            group_names.push(name);
                            group_names.len() - 1
                        }
                    })
                }
                None => {
                    problems.add(
                        pipes_file,
                        Some(pipe.place),
                        who,
                        pf.material.as_deref(),
                        ProblemKind::NoRule {
                            material: pipe
                                .material
                                .as_ref()
                                .map_or("(none)".into(), |m| format!("`{m}`")),
                            year: pipe.year.map_or("(none)".into(), format_number),
                        },
                    );
                    None
                }
            };
            pipe_groups.push(group);
            let length = match (&pipe.length, &pipe.ends) {
                (Some(length), _) => *length,
                (None, Ends::Line(_, line_length)) => *line_length,
                (None, Ends::Ids(..)) => {
                    let attribute = pf.length.clone().unwrap_or_else(|| "(length)".into());
                    problems.add(
                        pipes_file,
                        Some(pipe.place),
                        who,
                        Some(&attribute),
                        ProblemKind::MissingValue {
                            attribute: attribute.clone(),
                            what: "length (a pipe from a table has no line to measure)",
                        },
                    );
                    f64::NAN
                }
            };
            lengths.push(length);
            if length == 0.0 {
                let why = if pipe.length.is_some() {
                    format!("`{}` is 0", pf.length.as_deref().unwrap_or("length"))
                } else {
                    "the line's positions all coincide".to_string()
                };
                problems.add(
                    pipes_file,
                    Some(pipe.place),
                    who,
                    None,
                    ProblemKind::ZeroLength { why },
                );
            }
            if let Some((a, b)) = ends
                && a == b
            {
                problems.add(
                    pipes_file,
                    Some(pipe.place),
                    who,
                    None,
                    ProblemKind::SameNode { node: name_of(*a) },
                );
            }
        }

        // Every node must be reached.
        let mut reached = vec![false; nodes.len()];
        let mut new_far_ends: Vec<Vec<usize>> = vec![Vec::new(); new_positions.len()];
        for (a, b) in joined.iter().flatten() {
            for (here, there) in [(a, b), (b, a)] {
                match (here, there) {
                    (Joined::Node(k), _) => {
                        if let Some(r) = reached.get_mut(*k) {
                            *r = true;
                        }
                    }
                    (Joined::New(k), Joined::Node(far)) => {
                        if let Some(list) = new_far_ends.get_mut(*k) {
                            list.push(*far);
                        }
                    }
                    (Joined::New(_), Joined::New(_)) => {}
                }
            }
        }
        for (node, reached) in nodes.iter().zip(&reached) {
            if !reached {
                problems.add(
                    nodes_file,
                    Some(node.place),
                    Some((&nf.id, &node.id)),
                    None,
                    ProblemKind::NodeUnreached {
                        id: node.id.clone(),
                    },
                );
            }
        }

        // New junctions: elevation the mean of the nodes at the far ends of their pipes.
        let mut new_ids: Vec<String> = Vec::with_capacity(new_positions.len());
        let mut new_elevations: Vec<f64> = Vec::with_capacity(new_positions.len());
        let mut serial = 0usize;
        for (k, &(x, y)) in new_positions.iter().enumerate() {
            let id = loop {
                serial += 1;
                let id = format!("new-{serial}");
                if !node_index.contains_key(id.as_str()) {
                    break id;
                }
            };
            let far: Vec<f64> = new_far_ends
                .get(k)
                .into_iter()
                .flatten()
                .filter_map(|&n| nodes.get(n))
                .filter_map(|n| n.elevation)
                .collect();
            if far.is_empty() {
                problems.add(
                    pipes_file,
                    None,
                    None,
                    None,
                    ProblemKind::NewJunctionElevation {
                        x: short(x),
                        y: short(y),
                    },
                );
                new_elevations.push(0.0);
            } else {
                let elevation = far.iter().sum::<f64>() / far.len() as f64;
                warnings.push(ImportWarning {
                    file: pipes_file.to_string(),
                    place: None,
                    id: None,
                    kind: WarningKind::NewJunction {
                        id: id.clone(),
                        x: short(x),
                        y: short(y),
                        ends: new_ends.get(k).copied().unwrap_or(0),
                        elevation: short(elevation),
                        unit: units.length_label(),
                    },
                });
                new_elevations.push(elevation);
            }
            new_ids.push(id);
        }

        // The network.
        let mut junction_of = vec![None; nodes.len()];
        let mut head_of = vec![None; nodes.len()];
        let mut junctions = Vec::new();
        let mut fixed_heads = Vec::new();
        for (k, (node, position)) in nodes.iter().zip(&node_plan).enumerate() {
            match node.head {
                Some(head) => {
                    head_of[k] = Some(fixed_heads.len());
                    fixed_heads.push(FixedHead {
                        id: node.id.clone(),
                        head_m: units.length_to_m(head),
                        position: *position,
                    });
                }
                None => {
                    junction_of[k] = Some(junctions.len());
                    junctions.push(Junction {
                        id: node.id.clone(),
                        elevation_m: units.length_to_m(node.elevation.unwrap_or(0.0)),
                        demand_m3s: units.flow_to_m3s(node.demand),
                        position: *position,
                    });
                }
            }
        }
        let first_new = junctions.len();
        for ((id, &position), &elevation) in new_ids.iter().zip(&new_positions).zip(&new_elevations)
        {
            junctions.push(Junction {
                id: id.clone(),
                elevation_m: units.length_to_m(elevation),
                demand_m3s: 0.0,
                position: Some(position),
            });
        }
        let node_ref = |j: Joined| -> NodeRef {
            match j {
                Joined::Node(k) => match (
                    head_of.get(k).copied().flatten(),
                    junction_of.get(k).copied().flatten(),
                ) {
                    (Some(f), _) => NodeRef::FixedHead(f),
                    (None, Some(i)) => NodeRef::Junction(i),
                    (None, None) => NodeRef::Junction(0),
                },
                Joined::New(k) => NodeRef::Junction(first_new + k),
            }
        };
        let groups: Vec<RoughnessGroup> = group_names
            .iter()
            .filter_map(|name| config.rules.iter().find(|r| r.group == *name))
            .map(|rule| RoughnessGroup {
                name: rule.group.clone(),
                min_c: rule.min.unwrap_or(DEFAULT_GROUP_MIN_C),
                max_c: rule.max.unwrap_or(DEFAULT_GROUP_MAX_C),
                locked: rule.locked,
            })
            .collect();
        let short_limit = match units {
            UnitSystem::Us => SHORT_PIPE_US_FT,
            UnitSystem::Si => SHORT_PIPE_SI_M,
        };
        let mut network_pipes = Vec::with_capacity(pipes.len());
        for (((pipe, ends), group), &length) in
            pipes.iter().zip(&joined).zip(&pipe_groups).zip(&lengths)
        {
            let (Some((a, b)), Some(g)) = (ends, group) else {
                continue;
            };
            let rule_c = group_names
                .get(*g)
                .and_then(|name| config.rules.iter().find(|r| r.group == *name))
                .map_or(0.0, |r| r.c);
            let c = pipe.c.unwrap_or(rule_c);
            let who = Some((pf.id.clone(), pipe.id.clone()));
            let mut warn = |kind: WarningKind| {
                warnings.push(ImportWarning {
                    file: pipes_file.to_string(),
                    place: Some(pipe.place),
                    id: who.clone(),
                    kind,
                });
            };
            if length > 0.0 && length < short_limit {
                warn(WarningKind::ShortPipe {
                    length: short(length),
                    unit: units.length_label(),
                    limit: format_number(short_limit),
                });
            }
            if !(PLAUSIBLE_C.0..=PLAUSIBLE_C.1).contains(&c) {
                warn(WarningKind::CoefficientOutside {
                    c: format_number(c),
                });
            }
            let looks = match units {
                UnitSystem::Us if pipe.diameter >= US_DIAMETER_LOOKS_MM_IN => Some("millimetres"),
                UnitSystem::Si if pipe.diameter < SI_DIAMETER_LOOKS_IN_MM => Some("inches"),
                _ => None,
            };
            if let Some(looks) = looks {
                warn(WarningKind::DiameterOtherUnit {
                    diameter: format_number(pipe.diameter),
                    unit: units.diameter_label(),
                    looks,
                    attribute: pf.diameter.clone(),
                });
            }
            network_pipes.push(Pipe {
                id: pipe.id.clone(),
                from: node_ref(*a),
                to: node_ref(*b),
                length_m: units.length_to_m(length),
                diameter_m: units.diameter_to_m(pipe.diameter),
                c_factor: c,
                group: Some(*g),
                closed: pipe.closed,
                check_valve: false,
                minor_loss: 0.0,
            });
        }
        for (rule, used) in config.rules.iter().zip(&rule_used) {
            let group_used = group_names.contains(&rule.group.as_str());
            if !used && !group_used {
                warnings.push(ImportWarning {
                    file: self.input.config_file.to_string(),
                    place: None,
                    id: None,
                    kind: WarningKind::RuleUnused {
                        group: rule.group.clone(),
                    },
                });
            }
        }

        let mut network = Network {
            title: config
                .title
                .clone()
                .unwrap_or_else(|| format!("imported from {pipes_file}")),
            units,
            junctions,
            fixed_heads,
            pipes: network_pipes,
            pumps: Vec::new(),
            flow_unit: None,
            valves: Vec::new(),
            groups,
            conditions: Vec::new(),
            hazen_williams_constant: None,
            lonlat_origin: projection.map(|p| p.origin),
        };
        network.conditions = self.conditions(&network, problems);
        problems
            .list
            .is_empty()
            .then_some(Imported { network, warnings })
    }

    /// The `[[condition]]` entries of the config, resolved against the imported network.
    fn conditions(&self, network: &Network, problems: &mut Problems) -> Vec<Condition> {
        let units = self.units;
        let file = self.input.config_file;
        let mut conditions = Vec::new();
        for entry in &self.config.conditions {
            let mut fail = |message: String| {
                problems.add(
                    file,
                    None,
                    None,
                    None,
                    ProblemKind::Condition {
                        condition: entry.name.clone(),
                        message,
                    },
                );
            };
            let mut heads = Vec::new();
            for (id, &head) in &entry.heads {
                match network.fixed_heads.iter().position(|f| f.id == *id) {
                    Some(f) if head.is_finite() => heads.push((f, units.length_to_m(head))),
                    Some(_) => fail(format!("`heads` gives `{id}` a head that is not finite")),
                    None => fail(format!(
                        "`heads` names `{id}`, which is not a node with a head in the nodes file"
                    )),
                }
            }
            let mut closed_pipes = Vec::new();
            for id in &entry.closed {
                match network.pipes.iter().position(|p| p.id == *id) {
                    Some(k) => closed_pipes.push(k),
                    None => fail(format!(
                        "`closed` names `{id}`, which is not an imported pipe"
                    )),
                }
            }
            conditions.push(Condition {
                name: entry.name.clone(),
                demand_factor: entry.demand_factor.unwrap_or(1.0),
                heads,
                closed_pipes,
                pumps_off: Vec::new(),
                valve_settings: Vec::new(),
                closed_valves: Vec::new(),
            });
        }
        conditions
    }
}

/// The centre of the bounding box of `points`, if there are any.
fn bounding_centre(points: impl Iterator<Item = (f64, f64)>) -> Option<(f64, f64)> {
    let mut bounds: Option<(f64, f64, f64, f64)> = None;
    for (x, y) in points {
        bounds = Some(match bounds {
            None => (x, y, x, y),
            Some((x0, y0, x1, y1)) => (x0.min(x), y0.min(y), x1.max(x), y1.max(y)),
        });
    }
    bounds.map(|(x0, y0, x1, y1)| ((x0 + x1) / 2.0, (y0 + y1) / 2.0))
}

/// A distance or coordinate for messages: two decimals.
fn short(value: f64) -> String {
    format!("{value:.2}")
}
