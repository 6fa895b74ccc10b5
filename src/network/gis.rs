//! GeoJSON (RFC 7946) output pieces shared by the GIS export of a network and the per-pipe results:
//! features built with the `geojson` crate, one feature a line in the written collection.

use geojson::{Feature, Geometry, GeometryValue, JsonObject, JsonValue};

/// A JSON number, or null for a value JSON cannot hold (NaN, infinities).
pub fn json_number(value: f64) -> JsonValue {
    serde_json::Number::from_f64(value).map_or(JsonValue::Null, JsonValue::Number)
}

/// A feature with a geometry and properties, no id or bbox.
pub fn feature(value: GeometryValue, properties: JsonObject) -> Feature {
    Feature {
        bbox: None,
        geometry: Some(Geometry::new(value)),
        id: None,
        properties: Some(properties),
        foreign_members: None,
    }
}

/// A FeatureCollection as text, one feature a line (diffs and greps of large files stay readable).
pub fn feature_collection_text(features: Vec<Feature>) -> String {
    let mut out = String::from("{\"type\": \"FeatureCollection\", \"features\": [\n");
    let count = features.len();
    for (k, feature) in features.into_iter().enumerate() {
        out.push_str(&feature.to_string());
        out.push_str(if k + 1 < count { ",\n" } else { "\n" });
    }
    out.push_str("]}\n");
    out
}
