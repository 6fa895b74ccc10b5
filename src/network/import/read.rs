//! Reading a GIS export into features: a GeoJSON FeatureCollection (the `geojson` crate) or a CSV table
//! (the `csv` crate), each feature with its place in the file, its attributes and its geometry.

use std::collections::HashMap;

use geojson::{GeoJson, GeometryValue, JsonValue};

use super::{Place, ProblemKind};

/// The format of one input file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SourceFormat {
    /// RFC 7946 GeoJSON, a FeatureCollection (`.geojson`, `.json`).
    GeoJson,
    /// A CSV table with a header row (`.csv`).
    Csv,
}

impl SourceFormat {
    /// The format a file name's extension says, if it is one we read.
    pub fn from_file_name(name: &str) -> Option<Self> {
        let lower = name.to_ascii_lowercase();
        if lower.ends_with(".geojson") || lower.ends_with(".json") {
            Some(Self::GeoJson)
        } else if lower.ends_with(".csv") {
            Some(Self::Csv)
        } else {
            None
        }
    }
}

/// One attribute value as found.
#[derive(Debug, Clone, PartialEq)]
pub enum Attr<'a> {
    /// No such attribute (or column).
    Absent,
    /// Present but null or blank.
    Empty,
    Number(f64),
    Text(&'a str),
    Bool(bool),
    /// An array or object: shown as JSON in messages.
    Other(String),
}

impl Attr<'_> {
    /// The value as the user wrote it, for messages.
    pub fn shown(&self) -> String {
        match self {
            Self::Absent | Self::Empty => String::new(),
            Self::Number(n) => format_number(*n),
            Self::Text(t) => format!("\"{t}\""),
            Self::Bool(b) => b.to_string(),
            Self::Other(text) => text.clone(),
        }
    }

    /// The value as an id or a word: numbers without a trailing `.0`.
    pub fn text(&self) -> Option<String> {
        match self {
            Self::Number(n) => Some(format_number(*n)),
            Self::Text(t) => Some(t.trim().to_string()),
            Self::Bool(b) => Some(b.to_string()),
            Self::Absent | Self::Empty | Self::Other(_) => None,
        }
    }
}

/// A number as a person would write it: whole numbers without decimals.
pub fn format_number(value: f64) -> String {
    if value.fract() == 0.0 && value.abs() < 1e15 {
        format!("{value:.0}")
    } else {
        value.to_string()
    }
}

/// A feature's geometry, as positions (x, y or lon, lat) per part.
#[derive(Debug, Clone, PartialEq)]
pub enum Shape {
    None,
    Point((f64, f64)),
    /// A LineString is one part; a MultiLineString several.
    Lines(Vec<Vec<(f64, f64)>>),
    /// Any other geometry type, by name.
    Other(&'static str),
}

/// The attributes of one feature.
pub enum Attributes<'a> {
    Json(Option<&'a geojson::JsonObject>),
    Row {
        columns: &'a HashMap<String, usize>,
        record: &'a csv::StringRecord,
    },
}

impl Attributes<'_> {
    pub fn get(&self, name: &str) -> Attr<'_> {
        match self {
            Self::Json(properties) => match properties.and_then(|p| p.get(name)) {
                None => Attr::Absent,
                Some(JsonValue::Null) => Attr::Empty,
                Some(JsonValue::Number(n)) => n.as_f64().map_or(Attr::Empty, Attr::Number),
                Some(JsonValue::String(s)) if s.trim().is_empty() => Attr::Empty,
                Some(JsonValue::String(s)) => Attr::Text(s),
                Some(JsonValue::Bool(b)) => Attr::Bool(*b),
                Some(other) => Attr::Other(other.to_string()),
            },
            Self::Row { columns, record } => match columns.get(name).and_then(|&i| record.get(i)) {
                None => Attr::Absent,
                Some(cell) if cell.trim().is_empty() => Attr::Empty,
                Some(cell) => Attr::Text(cell),
            },
        }
    }
}

/// A parsed input file, ready to be walked feature by feature.
pub enum Table {
    Features(Vec<geojson::Feature>),
    Rows {
        columns: HashMap<String, usize>,
        /// Each record with the 1-based line it starts on.
        records: Vec<(usize, csv::StringRecord)>,
    },
}

impl Table {
    /// Parses `text` as `format`. A file that is not a FeatureCollection, not JSON, or not CSV is one
    /// problem for the whole file.
    pub fn parse(text: &str, format: SourceFormat) -> Result<Self, ProblemKind> {
        match format {
            SourceFormat::GeoJson => {
                let geojson: GeoJson = text
                    .parse()
                    .map_err(|error: geojson::Error| not_a_collection(text, &error))?;
                match geojson {
                    GeoJson::FeatureCollection(collection) => {
                        Ok(Self::Features(collection.features))
                    }
                    GeoJson::Feature(_) => Err(ProblemKind::NotFeatureCollection {
                        found: "a single Feature".into(),
                    }),
                    GeoJson::Geometry(geometry) => Err(ProblemKind::NotFeatureCollection {
                        found: format!("a bare {} geometry", geometry.value.type_name()),
                    }),
                }
            }
            SourceFormat::Csv => {
                let mut reader = csv::ReaderBuilder::new()
                    .flexible(true)
                    .trim(csv::Trim::Headers)
                    .from_reader(text.as_bytes());
                let headers = reader.headers().map_err(|e| ProblemKind::BadCsv {
                    message: e.to_string(),
                })?;
                let columns = headers
                    .iter()
                    .enumerate()
                    .map(|(i, name)| (name.trim_start_matches('\u{feff}').to_string(), i))
                    .collect();
                let mut records = Vec::new();
                for record in reader.records() {
                    let record = record.map_err(|e| ProblemKind::BadCsv {
                        message: e.to_string(),
                    })?;
                    let line = record.position().map_or(0, |p| p.line() as usize);
                    records.push((line, record));
                }
                Ok(Self::Rows { columns, records })
            }
        }
    }

    pub fn len(&self) -> usize {
        match self {
            Self::Features(features) => features.len(),
            Self::Rows { records, .. } => records.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Whether a CSV table has the column (GeoJSON: always, attributes vary by feature).
    pub fn has_column(&self, name: &str) -> bool {
        match self {
            Self::Features(_) => true,
            Self::Rows { columns, .. } => columns.contains_key(name),
        }
    }

    /// Every feature: its place, attributes and shape.
    pub fn features(&self) -> Box<dyn Iterator<Item = (Place, Attributes<'_>, Shape)> + '_> {
        match self {
            Self::Features(features) => Box::new(features.iter().enumerate().map(|(i, f)| {
                let shape = match f.geometry.as_ref().map(|g| &g.value) {
                    None => Shape::None,
                    Some(GeometryValue::Point { coordinates }) => {
                        Shape::Point(xy(coordinates.as_slice()))
                    }
                    Some(GeometryValue::LineString { coordinates }) => {
                        Shape::Lines(vec![coordinates.iter().map(|p| xy(p.as_slice())).collect()])
                    }
                    Some(GeometryValue::MultiLineString { coordinates }) => Shape::Lines(
                        coordinates
                            .iter()
                            .map(|line| line.iter().map(|p| xy(p.as_slice())).collect())
                            .collect(),
                    ),
                    Some(other) => Shape::Other(other.type_name()),
                };
                (
                    Place::Feature(i),
                    Attributes::Json(f.properties.as_ref()),
                    shape,
                )
            })),
            Self::Rows { columns, records } => {
                Box::new(records.iter().map(move |(line, record)| {
                    (
                        Place::Line(*line),
                        Attributes::Row { columns, record },
                        Shape::None,
                    )
                }))
            }
        }
    }
}

/// The first two numbers of a position (the crate guarantees at least two; NaN if not, refused later).
fn xy(position: &[f64]) -> (f64, f64) {
    match position {
        [x, y, ..] => (*x, *y),
        _ => (f64::NAN, f64::NAN),
    }
}

/// The problem for text the crate would not read: valid JSON of another type is "not a
/// FeatureCollection" (naming what it is); anything else is malformed GeoJSON with the crate's reason.
fn not_a_collection(text: &str, error: &geojson::Error) -> ProblemKind {
    let malformed = || ProblemKind::BadGeoJson {
        message: error.to_string(),
    };
    let Ok(value) = serde_json::from_str::<JsonValue>(text) else {
        return malformed();
    };
    match value.get("type").and_then(JsonValue::as_str) {
        Some("FeatureCollection") => malformed(),
        Some(other) => ProblemKind::NotFeatureCollection {
            found: format!("type \"{other}\""),
        },
        None => ProblemKind::NotFeatureCollection {
            found: "JSON without a GeoJSON \"type\"".into(),
        },
    }
}
