//! The import mapping (IMPORT.toml): the user's attribute names, the units of their values, how
//! coordinates are read, and the rules that put each pipe into a roughness group. Keys are a contract
//! (docs/import.md); unknown keys are refused.

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::network::UnitSystem;

/// How feature coordinates are read.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Coordinates {
    /// Plan coordinates in the import's length unit (ft for `us`, m for `si`).
    #[default]
    Projected,
    /// WGS84 longitude, latitude in degrees (RFC 7946 order).
    Lonlat,
}

/// `[pipe_fields]`: the user's attribute names for pipe values.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PipeFields {
    pub id: String,
    pub diameter: String,
    pub length: Option<String>,
    pub c: Option<String>,
    pub material: Option<String>,
    pub year: Option<String>,
    pub closed: Option<String>,
    /// Values of `closed` that mean the pipe is closed, compared ignoring case and surrounding spaces.
    #[serde(default = "default_closed_values")]
    pub closed_values: Vec<String>,
    pub from: Option<String>,
    pub to: Option<String>,
}

fn default_closed_values() -> Vec<String> {
    vec!["closed".into()]
}

/// `[node_fields]`: the user's attribute names for node values.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NodeFields {
    pub id: String,
    pub elevation: String,
    pub demand: Option<String>,
    pub head: Option<String>,
    /// Plan coordinate columns of a CSV node table (GeoJSON nodes take theirs from the Point).
    #[serde(default = "default_x")]
    pub x: String,
    #[serde(default = "default_y")]
    pub y: String,
}

fn default_x() -> String {
    "x".into()
}

fn default_y() -> String {
    "y".into()
}

/// One `[[rule]]`: pipes of these materials (and install years) form the roughness group `group`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Rule {
    pub group: String,
    /// Materials this rule takes, compared ignoring case and surrounding spaces; absent: any material.
    pub material: Option<Vec<String>>,
    pub year_from: Option<i64>,
    pub year_to: Option<i64>,
    /// Start C of the group, and the C of its pipes that carry no C attribute.
    pub c: f64,
    pub min: Option<f64>,
    pub max: Option<f64>,
    #[serde(default)]
    pub locked: bool,
}

/// One `[[condition]]`, as in the network file: a test-day boundary state (GIS exports carry none).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ConditionEntry {
    pub name: String,
    pub demand_factor: Option<f64>,
    /// Fixed-head node id = head (import length unit).
    #[serde(default)]
    pub heads: BTreeMap<String, f64>,
    /// Pipe ids closed in this state.
    #[serde(default)]
    pub closed: Vec<String>,
}

/// The whole IMPORT.toml.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ImportConfig {
    pub units: String,
    pub title: Option<String>,
    #[serde(default)]
    pub coordinates: Coordinates,
    /// Distance within which a pipe end joins a node (import length unit; for lon/lat measured on the
    /// ground in the local projection). Default 0: ends must sit on the node.
    #[serde(default)]
    pub snap: f64,
    /// Join ends near no node into new junctions instead of refusing them.
    #[serde(default)]
    pub new_junctions: bool,
    pub pipe_fields: PipeFields,
    pub node_fields: NodeFields,
    #[serde(default, rename = "rule")]
    pub rules: Vec<Rule>,
    #[serde(default, rename = "condition")]
    pub conditions: Vec<ConditionEntry>,
}

/// Why IMPORT.toml was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{file}:{line}:{column}: {message}")]
pub struct ConfigError {
    pub file: String,
    pub line: usize,
    pub column: usize,
    pub message: String,
}

impl ImportConfig {
    /// Reads and checks IMPORT.toml text; `file` names it in messages.
    pub fn parse(text: &str, file: &str) -> Result<(Self, UnitSystem), ConfigError> {
        let at = |offset: usize, message: String| {
            let before = text.get(..offset.min(text.len())).unwrap_or("");
            let line = before.matches('\n').count() + 1;
            let column = before
                .rsplit('\n')
                .next()
                .map_or(1, |l| l.chars().count() + 1);
            ConfigError {
                file: file.to_string(),
                line,
                column,
                message,
            }
        };
        let config: Self = toml::from_str(text).map_err(|error| {
            let offset = error.span().map_or(0, |span| span.start);
            at(offset, error.message().trim().to_string())
        })?;
        // Semantic checks name the key; the place is the key's first appearance in the text.
        let place = |key: &str| text.find(key).unwrap_or(0);
        let fail = |key: &str, message: String| Err(at(place(key), message));
        let Some(units) = UnitSystem::parse(&config.units) else {
            return fail(
                "units",
                format!(
                    "`units` must be \"us\" or \"si\", found \"{}\"",
                    config.units
                ),
            );
        };
        if !(config.snap.is_finite() && config.snap >= 0.0) {
            return fail(
                "snap",
                format!(
                    "`snap` must be a distance of zero or more ({}), found {}",
                    units.length_label(),
                    config.snap
                ),
            );
        }
        if config.rules.is_empty() {
            return fail(
                "pipe_fields",
                "no [[rule]]: every pipe must match a rule that names its roughness group".into(),
            );
        }
        for rule in &config.rules {
            let bad = |message: String| fail(&rule.group, message);
            if rule.group.trim().is_empty() {
                return fail("group", "a [[rule]] has an empty `group`".into());
            }
            if !(rule.c.is_finite() && rule.c > 0.0) {
                return bad(format!(
                    "[[rule]] `{}`: `c` must be a positive number, found {}",
                    rule.group, rule.c
                ));
            }
            let min = rule.min.unwrap_or(crate::network::DEFAULT_GROUP_MIN_C);
            let max = rule.max.unwrap_or(crate::network::DEFAULT_GROUP_MAX_C);
            if !(min.is_finite() && max.is_finite() && min > 0.0 && min < max) {
                return bad(format!(
                    "[[rule]] `{}`: `min` ({min}) must be a positive number below `max` ({max})",
                    rule.group
                ));
            }
            if let (Some(from), Some(to)) = (rule.year_from, rule.year_to)
                && from > to
            {
                return bad(format!(
                    "[[rule]] `{}`: `year_from` ({from}) is after `year_to` ({to})",
                    rule.group
                ));
            }
            if (rule.year_from.is_some() || rule.year_to.is_some())
                && config.pipe_fields.year.is_none()
            {
                return bad(format!(
                    "[[rule]] `{}` has a year range but [pipe_fields] has no `year`",
                    rule.group
                ));
            }
            if rule.material.is_some() && config.pipe_fields.material.is_none() {
                return bad(format!(
                    "[[rule]] `{}` lists materials but [pipe_fields] has no `material`",
                    rule.group
                ));
            }
        }
        // One group drawn from several rules must agree on its bounds and start.
        for (k, rule) in config.rules.iter().enumerate() {
            if let Some(first) = config.rules[..k].iter().find(|r| r.group == rule.group)
                && (first.c != rule.c
                    || first.min != rule.min
                    || first.max != rule.max
                    || first.locked != rule.locked)
            {
                return fail(
                    &rule.group,
                    format!(
                        "two [[rule]] entries for group `{}` differ in c, min, max or locked: give them the same values",
                        rule.group
                    ),
                );
            }
        }
        for condition in &config.conditions {
            if let Some(f) = condition.demand_factor
                && !(f.is_finite() && f > 0.0)
            {
                return fail(
                    &condition.name,
                    format!(
                        "[[condition]] `{}`: `demand_factor` must be a positive number, found {f}",
                        condition.name
                    ),
                );
            }
        }
        Ok((config, units))
    }
}

impl Rule {
    /// Whether a pipe of `material` and `year` falls under this rule.
    pub fn matches(&self, material: Option<&str>, year: Option<f64>) -> bool {
        if let Some(materials) = &self.material {
            let Some(material) = material else {
                return false;
            };
            let material = material.trim().to_lowercase();
            if !materials
                .iter()
                .any(|m| m.trim().to_lowercase() == material)
            {
                return false;
            }
        }
        if self.year_from.is_some() || self.year_to.is_some() {
            let Some(year) = year else {
                return false;
            };
            if self.year_from.is_some_and(|from| year < from as f64) {
                return false;
            }
            if self.year_to.is_some_and(|to| year > to as f64) {
                return false;
            }
        }
        true
    }
}
