//! A [`Network`] written out as a network file in our TOML schema (docs/network-file.md), in the
//! network's own units: for generated models (the synthetic city of `roughcal make-city`) that must be
//! loaded back the way a user's file is.
//!
//! Numbers are written with six decimals at most (trailing zeros dropped), far finer than any survey or
//! gauge, so a written network loads back equal to the original within a relative 1e-9 or 5e-7 of the
//! file unit, whichever is larger.

use std::fmt::Write as _;

use super::model::{Network, NodeRef, ValveKind};
use super::units::{FlowUnit, UnitSystem};

/// The network file text of `net`.
pub fn network_toml(net: &Network) -> String {
    network_toml_with_comment(net, "")
}

/// The network file text of `net` under a comment block: each line of `comment` becomes a `# ` line at
/// the top (an imported network says where it came from). An empty `comment` writes none.
pub fn network_toml_with_comment(net: &Network, comment: &str) -> String {
    let units = net.units;
    let flows = net.flows();
    // About 170 bytes a pipe and 90 a junction: reserve once for a city-sized file.
    let mut out = String::with_capacity(
        net.pipes.len() * 170 + net.junctions.len() * 90 + comment.len() + 1024,
    );
    for line in comment.lines() {
        let line = line.trim_end();
        if line.is_empty() {
            out.push_str("#\n");
        } else {
            let _ = writeln!(out, "# {line}");
        }
    }
    if !comment.is_empty() {
        out.push('\n');
    }
    let _ = writeln!(
        out,
        "title = {}\nunits = \"{}\"\n",
        quoted(&net.title),
        units.key()
    );
    if let Some(k) = net.hazen_williams_constant {
        let _ = writeln!(out, "hazen_williams_constant = {}\n", number(k));
    }
    if let Some(flow_unit) = net.flow_unit {
        let _ = writeln!(out, "flow_unit = \"{}\"\n", flow_unit.key());
    }
    if let Some(origin) = net.lonlat_origin {
        // Nine decimals of a degree: about 0.1 mm on the ground.
        let _ = writeln!(
            out,
            "# x, y: east and north of this WGS84 point, in the file's length unit\norigin_lon = {}\norigin_lat = {}\n",
            degrees(origin.lon_deg),
            degrees(origin.lat_deg)
        );
    }
    for head in &net.fixed_heads {
        let _ = writeln!(
            out,
            "[[fixed_head]]\nid = {}\nhead = {}",
            quoted(&head.id),
            number(units.length_from_m(head.head_m))
        );
        position(&mut out, head.position);
        out.push('\n');
    }
    for junction in &net.junctions {
        let _ = writeln!(
            out,
            "[[junction]]\nid = {}\nelevation = {}",
            quoted(&junction.id),
            number(units.length_from_m(junction.elevation_m))
        );
        if junction.demand_m3s != 0.0 {
            let _ = writeln!(
                out,
                "demand = {}",
                number(flows.from_m3s(junction.demand_m3s))
            );
        }
        position(&mut out, junction.position);
        out.push('\n');
    }
    for group in &net.groups {
        let _ = writeln!(
            out,
            "[[group]]\nname = {}\nmin = {}\nmax = {}\nlocked = {}\n",
            quoted(&group.name),
            number(group.min_c),
            number(group.max_c),
            group.locked
        );
    }
    let node = |n: NodeRef| quoted(net.node_id(n));
    for pipe in &net.pipes {
        let _ = writeln!(
            out,
            "[[pipe]]\nid = {}\nfrom = {}\nto = {}\nlength = {}\ndiameter = {}\nc = {}",
            quoted(&pipe.id),
            node(pipe.from),
            node(pipe.to),
            number(units.length_from_m(pipe.length_m)),
            number(units.diameter_from_m(pipe.diameter_m)),
            number(pipe.c_factor)
        );
        if let Some(group) = pipe.group.and_then(|g| net.groups.get(g)) {
            let _ = writeln!(out, "group = {}", quoted(&group.name));
        }
        if pipe.closed {
            out.push_str("closed = true\n");
        }
        if pipe.check_valve {
            out.push_str("check_valve = true\n");
        }
        if pipe.minor_loss != 0.0 {
            let _ = writeln!(out, "minor_loss = {}", number(pipe.minor_loss));
        }
        out.push('\n');
    }
    for pump in &net.pumps {
        let points: Vec<String> = pump
            .curve
            .points
            .iter()
            .map(|&(q, h)| {
                format!(
                    "[{}, {}]",
                    number(flows.from_m3s(q)),
                    number(units.length_from_m(h))
                )
            })
            .collect();
        let _ = writeln!(
            out,
            "[[pump]]\nid = {}\nfrom = {}\nto = {}\ncurve = [{}]",
            quoted(&pump.id),
            node(pump.from),
            node(pump.to),
            points.join(", ")
        );
        if pump.off {
            out.push_str("off = true\n");
        }
        out.push('\n');
    }
    for valve in &net.valves {
        let _ = writeln!(
            out,
            "[[valve]]\nid = {}\nfrom = {}\nto = {}\ndiameter = {}\nkind = \"{}\"\nsetting = {}",
            quoted(&valve.id),
            node(valve.from),
            node(valve.to),
            number(units.diameter_from_m(valve.diameter_m)),
            valve.kind.keyword(),
            number(valve_setting_as_written(
                valve.kind,
                valve.setting,
                units,
                flows
            ))
        );
        if valve.minor_loss != 0.0 {
            let _ = writeln!(out, "minor_loss = {}", number(valve.minor_loss));
        }
        if valve.closed {
            out.push_str("closed = true\n");
        }
        out.push('\n');
    }
    for condition in &net.conditions {
        let _ = writeln!(
            out,
            "[[condition]]\nname = {}\ndemand_factor = {}",
            quoted(&condition.name),
            number(condition.demand_factor)
        );
        let heads: Vec<String> = condition
            .heads
            .iter()
            .filter_map(|&(f, head_m)| {
                let id = &net.fixed_heads.get(f)?.id;
                Some(format!(
                    "{} = {}",
                    quoted(id),
                    number(units.length_from_m(head_m))
                ))
            })
            .collect();
        if !heads.is_empty() {
            let _ = writeln!(out, "heads = {{ {} }}", heads.join(", "));
        }
        let list = |ids: Vec<&str>| -> String {
            let quoted: Vec<String> = ids.into_iter().map(quoted).collect();
            format!("[{}]", quoted.join(", "))
        };
        let closed: Vec<&str> = condition
            .closed_pipes
            .iter()
            .filter_map(|&k| net.pipes.get(k).map(|p| p.id.as_str()))
            .chain(
                condition
                    .closed_valves
                    .iter()
                    .filter_map(|&k| net.valves.get(k).map(|v| v.id.as_str())),
            )
            .collect();
        if !closed.is_empty() {
            let _ = writeln!(out, "closed = {}", list(closed));
        }
        let off: Vec<&str> = condition
            .pumps_off
            .iter()
            .filter_map(|&k| net.pumps.get(k).map(|p| p.id.as_str()))
            .collect();
        if !off.is_empty() {
            let _ = writeln!(out, "pumps_off = {}", list(off));
        }
        let settings: Vec<String> = condition
            .valve_settings
            .iter()
            .filter_map(|&(k, setting)| {
                let valve = net.valves.get(k)?;
                Some(format!(
                    "{} = {}",
                    quoted(&valve.id),
                    number(valve_setting_as_written(valve.kind, setting, units, flows))
                ))
            })
            .collect();
        if !settings.is_empty() {
            let _ = writeln!(out, "valve_settings = {{ {} }}", settings.join(", "));
        }
        out.push('\n');
    }
    out
}

/// A valve setting in the file's units (the inverse of the loader's conversion).
fn valve_setting_as_written(
    kind: ValveKind,
    setting: f64,
    units: UnitSystem,
    flows: FlowUnit,
) -> f64 {
    match kind {
        ValveKind::PressureReducing | ValveKind::PressureSustaining => {
            units.pressure_from_head_m(setting)
        }
        ValveKind::FlowControl => flows.from_m3s(setting),
        ValveKind::Throttle => setting,
    }
}

fn position(out: &mut String, position: Option<(f64, f64)>) {
    if let Some((x, y)) = position {
        let _ = writeln!(out, "x = {}\ny = {}", number(x), number(y));
    }
}

/// A TOML float with at most six decimals; whole numbers keep one (`12.0`), so the loader reads a
/// number either way.
fn number(value: f64) -> String {
    if !value.is_finite() {
        // The loader rejects these; writing them as TOML's own spelling keeps the defect visible.
        return if value.is_nan() {
            "nan".into()
        } else if value > 0.0 {
            "inf".into()
        } else {
            "-inf".into()
        };
    }
    let mut text = format!("{value:.6}");
    while text.ends_with('0') && !text.ends_with(".0") {
        text.pop();
    }
    if text == "-0.0" {
        text = "0.0".into();
    }
    text
}

fn degrees(value: f64) -> String {
    let mut text = format!("{value:.9}");
    while text.ends_with('0') && !text.ends_with(".0") {
        text.pop();
    }
    text
}

/// A TOML basic string (TOML 1.0: `"` and `\` escaped, control characters as `\uXXXX`).
pub(crate) fn quoted(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + 2);
    out.push('"');
    for ch in text.chars() {
        match ch {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => {
                let _ = write!(out, "\\u{:04X}", u32::from(c));
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::network::file::parse_network;
    use crate::network::synthetic::Synthetic;
    use crate::network::{Condition, UnitSystem};

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-9 * a.abs().max(b.abs()) + 5e-7
    }

    fn assert_same(original: &Network, text: &str) {
        let loaded = parse_network(text, "written.toml")
            .unwrap_or_else(|e| panic!("{e}"))
            .network;
        assert_eq!(loaded.title, original.title);
        assert_eq!(loaded.units, original.units);
        assert_eq!(loaded.flow_unit, original.flow_unit);
        assert_eq!(loaded.groups, original.groups);
        assert_eq!(loaded.junctions.len(), original.junctions.len());
        assert_eq!(loaded.pipes.len(), original.pipes.len());
        let units = original.units;
        for (a, b) in loaded.junctions.iter().zip(&original.junctions) {
            assert_eq!(a.id, b.id);
            assert!(close(
                units.length_from_m(a.elevation_m),
                units.length_from_m(b.elevation_m)
            ));
            assert!(close(
                original.flows().from_m3s(a.demand_m3s),
                original.flows().from_m3s(b.demand_m3s)
            ));
            let (pa, pb) = (a.position.unwrap(), b.position.unwrap());
            assert!(close(pa.0, pb.0) && close(pa.1, pb.1));
        }
        for (a, b) in loaded.pipes.iter().zip(&original.pipes) {
            assert_eq!(
                (&a.id, a.from, a.to, a.group),
                (&b.id, b.from, b.to, b.group)
            );
            assert_eq!((a.closed, a.check_valve), (b.closed, b.check_valve));
            assert!(close(a.c_factor, b.c_factor));
            assert!(close(
                units.length_from_m(a.length_m),
                units.length_from_m(b.length_m)
            ));
            assert!(close(
                units.diameter_from_m(a.diameter_m),
                units.diameter_from_m(b.diameter_m)
            ));
        }
        assert_eq!(loaded.conditions.len(), original.conditions.len());
        for (a, b) in loaded.conditions.iter().zip(&original.conditions) {
            assert_eq!(a.name, b.name);
            assert_eq!(a.closed_pipes, b.closed_pipes);
            assert_eq!(a.pumps_off, b.pumps_off);
            assert_eq!(a.heads.len(), b.heads.len());
            assert_eq!(a.closed_valves, b.closed_valves);
            assert_eq!(a.valve_settings.len(), b.valve_settings.len());
            for (x, y) in a.valve_settings.iter().zip(&b.valve_settings) {
                assert!(x.0 == y.0 && close(x.1, y.1));
            }
        }
        assert_eq!(
            loaded.hazen_williams_constant,
            original.hazen_williams_constant
        );
        assert_eq!(loaded.valves.len(), original.valves.len());
        for (a, b) in loaded.valves.iter().zip(&original.valves) {
            assert_eq!((&a.id, a.from, a.to, a.kind), (&b.id, b.from, b.to, b.kind));
            assert!(close(a.diameter_m, b.diameter_m) && close(a.setting, b.setting));
            assert!(close(a.minor_loss, b.minor_loss) && a.closed == b.closed);
        }
        for (a, b) in loaded.pipes.iter().zip(&original.pipes) {
            assert!(close(a.minor_loss, b.minor_loss));
        }
    }

    #[test]
    fn a_synthetic_network_loads_back_as_written() {
        for units in [UnitSystem::Us, UnitSystem::Si] {
            let mut net = Synthetic {
                units,
                ..Synthetic::new(3)
            }
            .looped_city(400);
            net.title = "a \"quoted\" title \\ with a tab\t".into();
            net.pipes[3].closed = true;
            net.pipes[5].check_valve = true;
            net.pipes[6].minor_loss = 2.5;
            net.hazen_williams_constant = Some(10.5);
            net.valves.push(crate::network::Valve {
                id: "PRV-1".into(),
                from: net.pipes[8].from,
                to: net.pipes[8].to,
                diameter_m: 0.2,
                kind: ValveKind::PressureReducing,
                setting: 40.0,
                minor_loss: 0.3,
                closed: false,
            });
            net.conditions.push(Condition {
                name: "night".into(),
                demand_factor: 0.4,
                heads: vec![(0, net.fixed_heads[0].head_m - 2.0)],
                closed_pipes: vec![7, 9],
                pumps_off: Vec::new(),
                valve_settings: vec![(0, 35.0)],
                closed_valves: Vec::new(),
            });
            assert_same(&net, &network_toml(&net));
            // The same network with its flows in every other unit: demands, the fcv setting and the
            // condition's setting come back alike.
            net.valves[0].kind = ValveKind::FlowControl;
            net.valves[0].setting = 0.012;
            for flow_unit in FlowUnit::ALL {
                net.flow_unit = Some(flow_unit);
                let text = network_toml(&net);
                assert!(text.contains(&format!("flow_unit = \"{}\"", flow_unit.key())));
                assert_same(&net, &text);
            }
        }
    }

    #[test]
    fn the_demo_district_with_its_pump_loads_back_as_written() {
        let text = crate::demo::district_network_toml();
        let net = parse_network(&text, "district.toml").unwrap().network;
        assert!(!net.pumps.is_empty());
        let written = network_toml(&net);
        assert_same(&net, &written);
        let again = parse_network(&written, "w.toml").unwrap().network;
        for (a, b) in again.pumps.iter().zip(&net.pumps) {
            assert_eq!((&a.id, a.from, a.to, a.off), (&b.id, b.from, b.to, b.off));
            for (p, q) in a.curve.points.iter().zip(&b.curve.points) {
                assert!((p.0 - q.0).abs() < 1e-9 && (p.1 - q.1).abs() < 1e-6);
            }
        }
        assert_eq!(network_toml(&again), written, "writing is stable");
    }

    #[test]
    fn numbers_are_short_and_always_floats() {
        assert_eq!(number(12.0), "12.0");
        assert_eq!(number(0.1 + 0.2), "0.3");
        assert_eq!(number(-0.0000001), "0.0");
        assert_eq!(number(1320.25), "1320.25");
        assert_eq!(quoted("a\"b\\c\n"), "\"a\\\"b\\\\c\\u000A\"");
    }
}
