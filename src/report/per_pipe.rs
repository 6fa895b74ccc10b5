//! Per-pipe exports for joining the fit back onto a GIS or the model of record by pipe id:
//! [`super::PIPES_CSV`] (every pipe's group and C before and after) and [`super::RESULTS_GEOJSON`]
//! (pipes as lines, used tests as points at their residual hydrants).
//!
//! `results.geojson` is in WGS84 lon/lat (RFC 7946) when the network was imported from lon/lat (it
//! keeps the origin of its local projection); otherwise it carries the network's own plan coordinates
//! with no CRS, and the GIS user assigns the projection their x, y are in (docs/import.md).

use geojson::{GeometryValue, JsonObject, JsonValue};

use crate::calibrate::CalibrationTest;
use crate::hydraulics::headloss::HwConstant;
use crate::network::gis::{feature, feature_collection_text, json_number as number};
use crate::network::lonlat::LocalProjection;
use crate::network::{Network, NodeRef};

use super::{ReportError, RunContext};

/// Header of `pipes.csv` (a contract: GIS joins rely on it; new columns only ever go at the end).
pub const PIPES_CSV_HEADER: [&str; 6] = [
    "pipe",
    "group",
    "c_before",
    "c_after",
    "units",
    "hazen_williams_constant",
];

/// `pipes.csv`: one row per pipe (pumps are not pipes), in the network's order. C values are written
/// in full (shortest text that reads back to the same number), as in `coefficients.toml`. Every row names
/// the Hazen-Williams constant (and the unit system of its formula) the C values belong to: C scales
/// with the constant to the power 1/1.852, so a C without its constant is ambiguous.
pub fn pipes_csv(network: &Network, pipe_c_after: &[f64]) -> Result<String, ReportError> {
    if pipe_c_after.len() != network.pipes.len() {
        return Err(ReportError::PipeCount {
            result: pipe_c_after.len(),
            network: network.pipes.len(),
        });
    }
    let mut writer = csv::Writer::from_writer(Vec::with_capacity(network.pipes.len() * 40));
    let mut rows = vec![PIPES_CSV_HEADER.map(String::from)];
    let constant = HwConstant::of_network(network);
    for (pipe, c_after) in network.pipes.iter().zip(pipe_c_after) {
        let group = pipe
            .group
            .and_then(|g| network.groups.get(g))
            .map_or(String::new(), |g| g.name.clone());
        rows.push([
            pipe.id.clone(),
            group,
            pipe.c_factor.to_string(),
            c_after.to_string(),
            constant.units.key().to_string(),
            constant.k.to_string(),
        ]);
    }
    for row in &rows {
        writer
            .write_record(row)
            .map_err(|e| ReportError::Csv(e.to_string()))?;
    }
    let bytes = writer
        .into_inner()
        .map_err(|e| ReportError::Csv(e.to_string()))?;
    String::from_utf8(bytes).map_err(|e| ReportError::Csv(e.to_string()))
}

/// `results.geojson`, or `None` when the network has no plan coordinates to draw.
pub fn results_geojson(run: &RunContext<'_>) -> Option<String> {
    let network = run.network;
    let result = run.result;
    let projection = network.lonlat_origin.map(LocalProjection::new);
    let units = network.units;
    let place = |node: NodeRef| -> Option<Vec<f64>> {
        let (x, y) = network.node_position(node)?;
        Some(match &projection {
            Some(projection) => {
                let p = projection.inverse(units.length_to_m(x), units.length_to_m(y));
                vec![p.lon_deg, p.lat_deg]
            }
            None => vec![x, y],
        })
    };
    let mut features = Vec::new();
    for (pipe, c_after) in network.pipes.iter().zip(&result.pipe_c_after) {
        let (Some(a), Some(b)) = (place(pipe.from), place(pipe.to)) else {
            continue;
        };
        let mut properties = JsonObject::new();
        properties.insert("pipe".into(), pipe.id.clone().into());
        properties.insert(
            "group".into(),
            pipe.group
                .and_then(|g| network.groups.get(g))
                .map_or(JsonValue::Null, |g| g.name.clone().into()),
        );
        properties.insert("c_before".into(), number(pipe.c_factor));
        properties.insert("c_after".into(), number(*c_after));
        features.push(feature(GeometryValue::new_line_string([a, b]), properties));
    }
    if features.is_empty() {
        return None;
    }
    for comparison in &result.tests {
        let Some(test) = run.tests.iter().find(|t| t.id == comparison.id) else {
            continue;
        };
        let Some(at) = place(NodeRef::Junction(test.residual_junction)) else {
            continue;
        };
        let mut properties = JsonObject::new();
        properties.insert("test".into(), comparison.id.clone().into());
        properties.insert(
            "error_before".into(),
            number(comparison.measured_residual - comparison.modelled_residual_before),
        );
        properties.insert(
            "error_after".into(),
            number(comparison.measured_residual - comparison.modelled_residual_after),
        );
        properties.insert(
            "flow".into(),
            number(network.flows().from_m3s(total_flow_m3s(test))),
        );
        features.push(feature(GeometryValue::new_point(at), properties));
    }
    Some(feature_collection_text(features))
}

fn total_flow_m3s(test: &CalibrationTest) -> f64 {
    test.hydrant_flows_m3s.iter().map(|(_, q)| q).sum()
}
