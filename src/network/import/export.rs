//! A network drawn as a GIS export (GeoJSON pipes and nodes and the IMPORT.toml that reads them), the
//! way a utility's GIS would hand it over: ends a little off their nodes, some lines bent and carrying
//! no length attribute, C given only where it differs from the rule's. Used by the import tests, the
//! import benchmark and the demo's `demo-network/gis/` (all invented data).
//!
//! [`GisExport::expected`] is the network an import of the export must give: the input network with
//! the bent pipes' lengths replaced by their lines' lengths, and conditions kept.

use std::fmt::Write as _;

use geojson::{GeometryValue, JsonObject, JsonValue};

use super::Coordinates;
use crate::network::gis::{feature, feature_collection_text as collection, json_number as number};
use crate::network::lonlat::{LocalProjection, LonLat, line_length_m};
use crate::network::write::quoted;
use crate::network::{Network, NodeRef};

/// How to draw the export.
#[derive(Debug, Clone, PartialEq)]
pub struct ExportPlan {
    pub coordinates: Coordinates,
    /// Where the network's (0, 0) lands for `lonlat` exports.
    pub origin: LonLat,
    /// `snap` of the written IMPORT.toml (network length unit).
    pub snap: f64,
    /// Every n-th pipe is drawn bent and without a length attribute (0: none).
    pub bend_every: usize,
    /// Every n-th other pipe has its ends a third of `snap` off its nodes (0: none).
    pub offset_every: usize,
    /// (material, install year) of each roughness group, in group order.
    pub materials: Vec<(String, i64)>,
    /// Comment lines at the top of the IMPORT.toml.
    pub header: String,
}

/// The files of an export, and the network their import must give.
#[derive(Debug, Clone, PartialEq)]
pub struct GisExport {
    pub pipes_geojson: String,
    pub nodes_geojson: String,
    pub import_toml: String,
    pub expected: Network,
}

/// Why a network cannot be exported.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ExportError {
    #[error("node `{0}` has no plan position: a GIS export needs every node drawn")]
    NoPosition(String),
    #[error("pipe `{0}` has no roughness group: every pipe must fall under a rule")]
    NoGroup(String),
    #[error("the network has pumps or valves ({0}); a GIS export carries pipes and nodes only")]
    Pumps(String),
    #[error("the plan gives {given} materials for {groups} groups")]
    Materials { given: usize, groups: usize },
}

/// Attribute names of the export (invented, as a utility's GIS might name them).
pub const PIPE_ID: &str = "pipe_no";
pub const NODE_ID: &str = "node_no";

/// Draws `net` as a GIS export.
pub fn gis_export(net: &Network, plan: &ExportPlan) -> Result<GisExport, ExportError> {
    if !net.pumps.is_empty() {
        let ids: Vec<&str> = net.pumps.iter().map(|p| p.id.as_str()).collect();
        return Err(ExportError::Pumps(ids.join(", ")));
    }
    if !net.valves.is_empty() {
        let ids: Vec<&str> = net.valves.iter().map(|v| v.id.as_str()).collect();
        return Err(ExportError::Pumps(ids.join(", ")));
    }
    if plan.materials.len() != net.groups.len() {
        return Err(ExportError::Materials {
            given: plan.materials.len(),
            groups: net.groups.len(),
        });
    }
    let units = net.units;
    let projection = LocalProjection::new(plan.origin);
    // Plan position (network length unit) to the export's coordinates.
    let to_export = |(x, y): (f64, f64)| -> (f64, f64) {
        match plan.coordinates {
            Coordinates::Projected => (tidy(x), tidy(y)),
            Coordinates::Lonlat => {
                let p = projection.inverse(units.length_to_m(x), units.length_to_m(y));
                (tidy_degrees(p.lon_deg), tidy_degrees(p.lat_deg))
            }
        }
    };
    let position = |node: NodeRef| -> Result<(f64, f64), ExportError> {
        net.node_position(node)
            .ok_or_else(|| ExportError::NoPosition(net.node_id(node).to_string()))
    };

    // Values as a GIS holds them: file units to six decimals (and coordinates to nine, for degrees);
    // the expected network takes the same rounded values.
    let mut expected = net.clone();
    let mut node_features = Vec::with_capacity(net.junctions.len() + net.fixed_heads.len());
    for (head, target) in net.fixed_heads.iter().zip(&mut expected.fixed_heads) {
        let p = head
            .position
            .ok_or_else(|| ExportError::NoPosition(head.id.clone()))?;
        let mut properties = JsonObject::new();
        properties.insert(NODE_ID.into(), head.id.clone().into());
        properties.insert("elev".into(), JsonValue::Null);
        let head_file = tidy(units.length_from_m(head.head_m));
        target.head_m = units.length_to_m(head_file);
        properties.insert("hgl".into(), number(head_file));
        node_features.push(feature(point(to_export(p)), properties));
    }
    for (junction, target) in net.junctions.iter().zip(&mut expected.junctions) {
        let p = junction
            .position
            .ok_or_else(|| ExportError::NoPosition(junction.id.clone()))?;
        let mut properties = JsonObject::new();
        properties.insert(NODE_ID.into(), junction.id.clone().into());
        let elevation = tidy(units.length_from_m(junction.elevation_m));
        let demand = tidy(units.flow_from_m3s(junction.demand_m3s));
        target.elevation_m = units.length_to_m(elevation);
        target.demand_m3s = units.flow_to_m3s(demand);
        properties.insert("elev".into(), number(elevation));
        properties.insert("dem".into(), number(demand));
        properties.insert("hgl".into(), JsonValue::Null);
        node_features.push(feature(point(to_export(p)), properties));
    }

    // The rule C of a group: its first pipe's C.
    let rule_c: Vec<f64> = (0..net.groups.len())
        .map(|g| {
            net.pipes
                .iter()
                .find(|p| p.group == Some(g))
                .map_or(100.0, |p| p.c_factor)
        })
        .collect();
    let mut pipe_features = Vec::with_capacity(net.pipes.len());
    for (k, pipe) in net.pipes.iter().enumerate() {
        let g = pipe
            .group
            .ok_or_else(|| ExportError::NoGroup(pipe.id.clone()))?;
        let (material, year) = plan
            .materials
            .get(g)
            .cloned()
            .ok_or_else(|| ExportError::NoGroup(pipe.id.clone()))?;
        let (a, b) = (position(pipe.from)?, position(pipe.to)?);
        let bent = plan.bend_every > 0 && k % plan.bend_every == plan.bend_every / 2;
        let offset = !bent && plan.offset_every > 0 && k % plan.offset_every == 0;
        let line: Vec<(f64, f64)> = if bent {
            // A kink a tenth of the pipe's length off the straight line, at its middle.
            let (dx, dy) = (b.0 - a.0, b.1 - a.1);
            let mid = (a.0 + dx / 2.0 - dy / 10.0, a.1 + dy / 2.0 + dx / 10.0);
            vec![to_export(a), to_export(mid), to_export(b)]
        } else if offset {
            let d = plan.snap / 3.0;
            vec![to_export((a.0 + d, a.1)), to_export((b.0, b.1 - d))]
        } else {
            vec![to_export(a), to_export(b)]
        };
        let mut properties = JsonObject::new();
        properties.insert(PIPE_ID.into(), pipe.id.clone().into());
        let diameter = tidy(units.diameter_from_m(pipe.diameter_m));
        if let Some(p) = expected.pipes.get_mut(k) {
            p.diameter_m = units.diameter_to_m(diameter);
        }
        properties.insert("dia".into(), number(diameter));
        if bent {
            let length = match plan.coordinates {
                Coordinates::Projected => line
                    .windows(2)
                    .map(|w| match w {
                        [p, q] => (q.0 - p.0).hypot(q.1 - p.1),
                        _ => 0.0,
                    })
                    .sum(),
                Coordinates::Lonlat => {
                    let points: Vec<LonLat> = line
                        .iter()
                        .map(|&(lon_deg, lat_deg)| LonLat { lon_deg, lat_deg })
                        .collect();
                    units.length_from_m(line_length_m(&points))
                }
            };
            if let Some(p) = expected.pipes.get_mut(k) {
                p.length_m = units.length_to_m(length);
            }
            properties.insert("len".into(), JsonValue::Null);
        } else {
            let length = tidy(units.length_from_m(pipe.length_m));
            if let Some(p) = expected.pipes.get_mut(k) {
                p.length_m = units.length_to_m(length);
            }
            properties.insert("len".into(), number(length));
        }
        let c = rule_c.get(g).copied().unwrap_or(pipe.c_factor);
        if pipe.c_factor != c {
            properties.insert("hw_c".into(), number(pipe.c_factor));
        }
        properties.insert("mat".into(), material.into());
        properties.insert("yr".into(), year.into());
        properties.insert(
            "status".into(),
            if pipe.closed { "CL" } else { "open" }.into(),
        );
        pipe_features.push(feature(
            GeometryValue::new_line_string(line.iter().map(|&(x, y)| vec![x, y])),
            properties,
        ));
    }

    let mut config = String::new();
    for line in plan.header.lines() {
        let _ = writeln!(config, "# {line}");
    }
    let _ = writeln!(
        config,
        "units = \"{}\"\ntitle = {}\ncoordinates = \"{}\"\nsnap = {}\n",
        units.key(),
        quoted(&net.title),
        match plan.coordinates {
            Coordinates::Projected => "projected",
            Coordinates::Lonlat => "lonlat",
        },
        plan.snap
    );
    let _ = writeln!(
        config,
        "[pipe_fields]\nid = \"{PIPE_ID}\"\ndiameter = \"dia\"\nlength = \"len\"\nc = \"hw_c\"\nmaterial = \"mat\"\nyear = \"yr\"\nclosed = \"status\"\nclosed_values = [\"closed\", \"CL\"]\n"
    );
    let _ = writeln!(
        config,
        "[node_fields]\nid = \"{NODE_ID}\"\nelevation = \"elev\"\ndemand = \"dem\"\nhead = \"hgl\"\n"
    );
    for (g, group) in net.groups.iter().enumerate() {
        let (material, year) = plan.materials.get(g).cloned().unwrap_or_default();
        let _ = writeln!(
            config,
            "[[rule]]\ngroup = {}\nmaterial = [{}]\nyear_from = {year}\nyear_to = {year}\nc = {}\nmin = {}\nmax = {}\nlocked = {}\n",
            quoted(&group.name),
            quoted(&material),
            rule_c.get(g).copied().unwrap_or(100.0),
            group.min_c,
            group.max_c,
            group.locked
        );
    }
    for condition in &net.conditions {
        let _ = writeln!(
            config,
            "[[condition]]\nname = {}\ndemand_factor = {}",
            quoted(&condition.name),
            condition.demand_factor
        );
        let heads: Vec<String> = condition
            .heads
            .iter()
            .filter_map(|&(f, head_m)| {
                let id = &net.fixed_heads.get(f)?.id;
                Some(format!("{} = {}", quoted(id), units.length_from_m(head_m)))
            })
            .collect();
        if !heads.is_empty() {
            let _ = writeln!(config, "heads = {{ {} }}", heads.join(", "));
        }
        let closed: Vec<String> = condition
            .closed_pipes
            .iter()
            .filter_map(|&k| net.pipes.get(k).map(|p| quoted(&p.id)))
            .collect();
        if !closed.is_empty() {
            let _ = writeln!(config, "closed = [{}]", closed.join(", "));
        }
        config.push('\n');
    }

    Ok(GisExport {
        pipes_geojson: collection(pipe_features),
        nodes_geojson: collection(node_features),
        import_toml: config,
        expected,
    })
}

fn point((x, y): (f64, f64)) -> GeometryValue {
    GeometryValue::new_point([x, y])
}

/// A value to six decimals, as a GIS attribute table would hold it.
fn tidy(value: f64) -> f64 {
    (value * 1e6).round() / 1e6
}

/// Degrees to nine decimals (about 0.1 mm on the ground).
fn tidy_degrees(value: f64) -> f64 {
    (value * 1e9).round() / 1e9
}
