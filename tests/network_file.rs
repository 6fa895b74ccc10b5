//! The network file: every validation rule with its message and place, unit conversion, the pump
//! curve fit, write-back of C values, and the exit codes of `roughcal check`.

use std::collections::BTreeMap;
use std::process::Command;

use proptest::prelude::*;
use roughcal::network::edit::{
    GroupUpdate, NetworkEditError, apply_c_factors, apply_group_c, update_groups,
};
use roughcal::network::file::{
    LoadedNetwork, NetworkFileError, SourceLocation, load_network_file, parse_network,
};
use roughcal::network::summary::NetworkSummary;
use roughcal::network::{NodeRef, UnitSystem};

const DEMO: &str = include_str!("../demo-network/small.toml");

/// A valid network of 14 lines; tests append entries from line 15 on.
const HEAD: &str = r#"units = "us"
[[fixed_head]]
id = "T-1"
head = 600.0
[[junction]]
id = "J-1"
elevation = 400.0
[[pipe]]
id = "P-1"
from = "T-1"
to = "J-1"
length = 100.0
diameter = 8.0
c = 120.0
"#;

fn with(extra: &str) -> String {
    format!("{HEAD}{extra}")
}

/// Every diagnostic of an invalid file, as displayed.
fn diagnostics(text: &str) -> Vec<String> {
    match parse_network(text, "t.toml") {
        Ok(_) => Vec::new(),
        Err(error) => error
            .diagnostics()
            .iter()
            .map(ToString::to_string)
            .collect(),
    }
}

fn load(text: &str) -> LoadedNetwork {
    match parse_network(text, "t.toml") {
        Ok(loaded) => loaded,
        Err(error) => panic!("expected a valid file, got:\n{error}"),
    }
}

/// Asserts that the diagnostics are exactly these, in this order.
fn assert_exactly(text: &str, expected: &[&str]) {
    let found = diagnostics(text);
    assert_eq!(found, expected, "found:\n  {}", found.join("\n  "));
}

#[test]
fn head_and_demo_are_valid() {
    load(HEAD);
    let demo = load(DEMO);
    assert_eq!(demo.network.junctions.len(), 10);
    assert_eq!(demo.network.fixed_heads.len(), 1);
    assert_eq!(demo.network.pumps.len(), 1);
    assert_eq!(demo.network.groups.len(), 2);
    assert_eq!(demo.network.conditions.len(), 1);
}

#[test]
fn syntax_error_is_one_diagnostic_with_its_place() {
    // The string opened at column 9 of line 2 runs to the end of the line (column 22).
    assert_exactly(
        "units = \"us\"\ntitle = \"unterminated\n[[pipe]]\nlength = -1\n",
        &["t.toml:2:22: TOML syntax error: invalid basic string, expected `\"`"],
    );
}

#[test]
fn empty_file_lacks_units_and_a_fixed_head() {
    assert_exactly(
        "",
        &[
            "t.toml:1:1: missing required key `units` (units)",
            "t.toml:1:1: the network has no [[fixed_head]]: at least one reservoir, tank or boundary \
             of known head is needed (fixed_head)",
        ],
    );
}

#[test]
fn flow_unit_reads_every_flow_of_the_file_in_that_unit() {
    // 36 m3/h = 0.01 m^3/s (3600 s in an hour, 1 m^3 = 1000 L: definitions of the units).
    let text =
        with("demand = 36.0\n").replace("units = \"us\"", "units = \"si\"\nflow_unit = \"m3h\"");
    let text = move_demand_to_junction(&text);
    let net = load(&text).network;
    assert_eq!(net.flows().label(), "m3/h");
    assert!((net.junctions[0].demand_m3s - 0.01).abs() < 1e-15);
    // 1 MGD = 1e6 US gal / 86 400 s = 0.043812636 m^3/s (NIST SP 811 Appendix B: 1 gal = 3.785412 L).
    let text = move_demand_to_junction(
        &with("demand = 1.0\n").replace("units = \"us\"", "units = \"us\"\nflow_unit = \"mgd\""),
    );
    let net = load(&text).network;
    assert!((net.junctions[0].demand_m3s - 0.043_812_636).abs() < 1e-9);
    // Lengths and heads stay in the unit system's units: 400 ft.
    assert!((net.junctions[0].elevation_m - 121.92).abs() < 1e-9);
}

/// Moves a `demand` line appended after the pipe up into the junction.
fn move_demand_to_junction(text: &str) -> String {
    let (body, demand) = text.trim_end().rsplit_once('\n').unwrap();
    body.replacen(
        "elevation = 400.0\n",
        &format!("elevation = 400.0\n{demand}\n"),
        1,
    ) + "\n"
}

#[test]
fn wrong_flow_unit() {
    assert_exactly(
        &HEAD.replace("units = \"us\"", "units = \"us\"\nflow_unit = \"m3/h\""),
        &[
            "t.toml:2:13: `flow_unit` must be one of \"gpm\", \"lps\", \"m3h\", \"mgd\", found \"m3/h\"; \
           did you mean `m3h`? (flow_unit)",
        ],
    );
    assert_exactly(
        &HEAD.replace("units = \"us\"", "units = \"us\"\nflow_unit = 3"),
        &["t.toml:2:13: `flow_unit` must be a string, found integer `3` (flow_unit)"],
    );
}

#[test]
fn wrong_units() {
    assert_exactly(
        &HEAD.replace("units = \"us\"", "units = \"SI\""),
        &["t.toml:1:9: `units` must be \"us\" or \"si\", found \"SI\"; did you mean `si`? (units)"],
    );
    assert_exactly(
        &HEAD.replace("units = \"us\"", "units = 1"),
        &["t.toml:1:9: `units` must be a string, found integer `1` (units)"],
    );
}

#[test]
fn duplicate_node_ids_across_junctions_and_fixed_heads() {
    let text = with(
        r#"[[junction]]
id = "T-1"
elevation = 400.0
[[fixed_head]]
id = "J-1"
head = 500.0
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:16:6: duplicate node id `T-1`: already used by the fixed head on line 3 (T-1 / id)",
            "t.toml:19:6: duplicate node id `J-1`: already used by the junction on line 6 (J-1 / id)",
        ],
    );
}

#[test]
fn duplicate_link_ids_across_pipes_and_pumps() {
    let text = with(
        r#"[[pump]]
id = "P-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0, 90.0], [900.0, 70.0]]
"#,
    );
    assert_exactly(
        &text,
        &["t.toml:16:6: duplicate link id `P-1`: already used by the pipe on line 9 (P-1 / id)"],
    );
}

#[test]
fn duplicate_group_and_condition_names() {
    let text = with(
        r#"[[group]]
name = "g"
[[group]]
name = "g"
[[condition]]
name = "a"
[[condition]]
name = "a"
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:18:8: duplicate group name `g`: already used by the group on line 16 (g / name)",
            "t.toml:22:8: duplicate condition name `a`: already used by the condition on line 20 \
             (a / name)",
        ],
    );
}

#[test]
fn empty_ids() {
    let text = with(
        r#"[[group]]
name = ""
[[fixed_head]]
id = "   "
head = 1.0
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:16:8: group `name` must not be empty (name)",
            "t.toml:18:6: fixed head `id` must not be empty (id)",
        ],
    );
}

#[test]
fn unknown_node_suggests_the_closest_id() {
    let text = HEAD.replace("to = \"J-1\"", "to = \"J-2\"");
    assert_exactly(
        &text,
        &[
            "t.toml:11:6: pipe `to` names `J-2`, which is not a junction or fixed head of this file; \
           did you mean `J-1`? (P-1 / to)",
        ],
    );
    let text = HEAD.replace("from = \"T-1\"", "from = \"reservoir\"");
    assert_exactly(
        &text,
        &[
            "t.toml:10:8: pipe `from` names `reservoir`, which is not a junction or fixed head of this \
           file (P-1 / from)",
        ],
    );
}

#[test]
fn link_from_equals_to() {
    let text = with(
        r#"[[pipe]]
id = "P-2"
from = "J-1"
to = "J-1"
length = 10.0
diameter = 6.0
c = 100.0
"#,
    );
    assert_exactly(
        &text,
        &["t.toml:18:6: pipe connects `J-1` to itself: `from` and `to` must differ (P-2 / to)"],
    );
}

#[test]
fn pipe_numbers_must_be_positive_and_finite() {
    let text = with(
        r#"[[pipe]]
id = "P-2"
from = "T-1"
to = "J-1"
length = -5.0
diameter = 0
c = nan
[[pipe]]
id = "P-3"
from = "T-1"
to = "J-1"
length = inf
diameter = "eight"
c = 0.0
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:19:10: pipe `length` must be a positive finite number, found `-5.0` (P-2 / length)",
            "t.toml:20:12: pipe `diameter` must be a positive finite number, found `0` (P-2 / diameter)",
            "t.toml:21:5: pipe `c` must be a positive finite number, found `nan` (P-2 / c)",
            "t.toml:26:10: pipe `length` must be a positive finite number, found `inf` (P-3 / length)",
            "t.toml:27:12: pipe `diameter` must be a number, found string `\"eight\"` (P-3 / diameter)",
            "t.toml:28:5: pipe `c` must be a positive finite number, found `0.0` (P-3 / c)",
        ],
    );
}

#[test]
fn elevation_head_and_demand_must_be_finite() {
    let text = HEAD
        .replace("head = 600.0", "head = inf")
        .replace("elevation = 400.0", "elevation = nan\ndemand = -inf");
    assert_exactly(
        &text,
        &[
            "t.toml:4:8: fixed head `head` must be a finite number, found `inf` (T-1 / head)",
            "t.toml:7:13: junction `elevation` must be a finite number, found `nan` (J-1 / elevation)",
            "t.toml:8:10: junction `demand` must be a finite number, found `-inf` (J-1 / demand)",
        ],
    );
}

#[test]
fn undeclared_group() {
    let text = with(
        r#"group = "ci-1950"
[[group]]
name = "ci-1905"
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:15:9: pipe `group` names `ci-1950`, which is not declared in any [[group]]; did you \
           mean `ci-1905`? (P-1 / group)",
        ],
    );
}

#[test]
fn group_bounds() {
    let text = with(
        r#"[[group]]
name = "a"
min = 130.0
max = 120.0
[[group]]
name = "b"
min = 0
[[group]]
name = "c"
max = -10.0
[[group]]
name = "d"
max = 30.0
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:17:7: group `min` (130) must be below `max` (120) (a / min)",
            "t.toml:21:7: group `min` must be a positive finite number, found `0` (b / min)",
            "t.toml:24:7: group `max` must be a positive finite number, found `-10.0` (c / max)",
            // The absent min defaults to DEFAULT_GROUP_MIN_C = 40.
            "t.toml:27:7: group `min` (40) must be below `max` (30) (d / max)",
        ],
    );
}

#[test]
fn isolated_junctions_are_listed_in_one_diagnostic() {
    let text = with(
        r#"[[junction]]
id = "J-2"
elevation = 400.0
[[junction]]
id = "J-3"
elevation = 400.0
[[pipe]]
id = "P-2"
from = "J-2"
to = "J-3"
length = 10.0
diameter = 6.0
c = 100.0
[[pipe]]
id = "P-3"
from = "J-1"
to = "J-2"
length = 10.0
diameter = 6.0
c = 100.0
closed = true
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:16:6: 2 junctions are not connected to any fixed head through open pipes or pumps: \
           J-2, J-3",
        ],
    );
    let text = HEAD.replace("c = 120.0", "c = 120.0\nclosed = true");
    assert_exactly(
        &text,
        &[
            "t.toml:6:6: junction J-1 is not connected to any fixed head through open pipes or pumps \
           (J-1)",
        ],
    );
}

#[test]
fn condition_that_cuts_junctions_off() {
    let text = with(
        r#"[[condition]]
name = "shut"
closed = ["P-1"]
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:16:8: condition `shut` cuts junctions off from every fixed head: J-1 (shut / closed)",
        ],
    );
}

#[test]
fn pump_curve_with_too_few_points() {
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0, 90.0]]
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:19:9: pump `curve` needs at least 3 [flow, head gain] points, found 2 (BP-1 / curve)",
        ],
    );
}

#[test]
fn pump_curve_points_that_rise() {
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0, 110.0], [900.0, 90.0]]
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:19:24: pump head gain must fall as flow rises: 110 at flow 500 is not below 100 at \
           flow 0 (BP-1 / curve)",
        ],
    );
}

#[test]
fn pump_curve_whose_fit_rises() {
    // Points fall, but the parabola through them rises near shutoff: through (0, 180), (100, 179.9),
    // (1500, 100) the secant slopes are -0.001 and -0.0571 ft/gpm at the chord midpoints 50 and 800,
    // so dh/dQ = -0.001 + 50 * (0.0561 / 750) = +0.0027 at Q = 0 (hand computation).
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 180.0], [100.0, 179.9], [1500.0, 100.0]]
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:19:9: the least-squares curve h = a + bQ + cQ^2 through pump `curve` rises with flow \
           near 0 gpm: head gain must fall as flow rises over the whole range; correct or add points \
           (BP-1 / curve)",
        ],
    );
}

#[test]
fn pump_curve_point_shapes() {
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0], [-1.0, 90.0], [900.0, nan]]
[[pump]]
id = "BP-2"
from = "T-1"
to = "J-1"
curve = "steep"
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:19:24: pump `curve` point must be a pair [flow, head gain] of numbers, found \
             `[500.0]` (BP-1 / curve)",
            "t.toml:19:33: pump `curve` point must not have a negative flow, found `[-1.0, 90.0]` \
             (BP-1 / curve)",
            "t.toml:19:47: pump `curve` point must hold finite numbers, found `[900.0, nan]` \
             (BP-1 / curve)",
            "t.toml:24:9: pump `curve` must be an array of [flow, head gain] pairs, found string \
             `\"steep\"` (BP-2 / curve)",
        ],
    );
}

#[test]
fn pump_curve_with_two_points_at_one_flow_or_negative_head() {
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[900.0, 70.0], [0.0, 100.0], [900.0, 60.0]]
[[pump]]
id = "BP-2"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0, 90.0], [900.0, -1.0]]
"#,
    );
    assert_exactly(
        &text,
        &[
            // Sorted by flow (a stable sort), the second point at 900 is the one written last.
            "t.toml:19:39: pump `curve` has two points at flow 900 (BP-1 / curve)",
            "t.toml:24:39: pump `curve` point must not have a negative head gain, found \
             `[900.0, -1.0]` (BP-2 / curve)",
        ],
    );
}

#[test]
fn unknown_keys_everywhere_with_suggestions() {
    let text = with(
        r#"diamter = 8.0
[[junctions]]
id = "J-9"
[[group]]
name = "g"
lock = true
colour = "red"
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:15:1: unknown key `diamter` in [[pipe]]; did you mean `diameter`? (P-1 / diamter)",
            "t.toml:16:3: unknown key `junctions` in the top level; did you mean `junction`? \
             (junctions)",
            "t.toml:20:1: unknown key `lock` in [[group]]; did you mean `locked`? (g / lock)",
            "t.toml:21:1: unknown key `colour` in [[group]]; expected one of: name, min, max, locked \
             (g / colour)",
        ],
    );
}

#[test]
fn missing_required_keys() {
    let text = with(
        r#"[[junction]]
id = "J-2"
[[pipe]]
id = "P-2"
from = "T-1"
to = "J-2"
length = 10.0
c = 100.0
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:15:1: junction is missing required key `elevation` (J-2 / elevation)",
            "t.toml:17:1: pipe is missing required key `diameter` (P-2 / diameter)",
        ],
    );
    assert_exactly(
        &with("[[fixed_head]]\nhead = 3.0\n"),
        &["t.toml:15:1: fixed head is missing required key `id` (id)"],
    );
}

#[test]
fn section_that_is_not_an_array_of_tables() {
    let text = with("[group]\nname = \"g\"\n");
    assert_exactly(
        &text,
        &[
            "t.toml:15:1: `group` must be an array of tables: write `[[group]]` above each entry, found \
           table (group)",
        ],
    );
}

#[test]
fn plan_position_needs_both_coordinates() {
    let text = HEAD.replace("elevation = 400.0", "elevation = 400.0\nx = 5.0");
    assert_exactly(
        &text,
        &[
            "t.toml:8:5: junction has `x` but no `y`: give both plan coordinates or neither (J-1 / y)",
        ],
    );
}

#[test]
fn boolean_keys_must_be_booleans() {
    let text = HEAD.replace("c = 120.0", "c = 120.0\nclosed = \"no\"");
    assert_exactly(
        &text,
        &[
            "t.toml:15:10: pipe `closed` must be true or false, found string `\"no\"` (P-1 / closed)",
        ],
    );
}

#[test]
fn conditions_must_name_existing_ids_of_the_right_kind() {
    let text = with(
        r#"[[pump]]
id = "BP-1"
from = "T-1"
to = "J-1"
curve = [[0.0, 100.0], [500.0, 90.0], [900.0, 70.0]]
[[condition]]
name = "c1"
demand_factor = 0.0
heads = { "J-1" = 500.0, "T-2" = 500.0, "T-1" = "high" }
closed = ["BP-1", "P-9", 7]
pumps_off = ["P-1", "BP-2"]
[[condition]]
name = "c2"
demand_factor = nan
"#,
    );
    assert_exactly(
        &text,
        &[
            "t.toml:22:17: condition `demand_factor` must be a positive finite number, found `0.0` \
             (c1 / demand_factor)",
            "t.toml:23:11: condition `heads` names `J-1`, which is a junction: only fixed heads can be \
             given a head (c1 / heads)",
            "t.toml:23:26: condition `heads` names `T-2`, which is not a fixed head of this file; did \
             you mean `T-1`? (c1 / heads)",
            "t.toml:23:49: condition `heads` value for `T-1` must be a finite number, found \
             `\"high\"` (c1 / heads)",
            "t.toml:24:11: `BP-1` is a pump: list it in `pumps_off`, not `closed` (c1 / closed)",
            "t.toml:24:19: condition `closed` names `P-9`, which is not a pipe of this file; did you \
             mean `P-1`? (c1 / closed)",
            "t.toml:24:26: condition `closed` must list ids as strings, found integer `7` (c1 / closed)",
            "t.toml:25:14: `P-1` is a pipe: list it in `closed`, not `pumps_off` (c1 / pumps_off)",
            "t.toml:25:21: condition `pumps_off` names `BP-2`, which is not a pump of this file; did \
             you mean `BP-1`? (c1 / pumps_off)",
            "t.toml:28:17: condition `demand_factor` must be a positive finite number, found `nan` \
             (c2 / demand_factor)",
        ],
    );
}

#[test]
fn every_defect_is_collected_in_file_order() {
    let text = r#"units = "metric"
[[fixed_head]]
id = "T-1"
head = "high"
[[junction]]
id = "J-1"
elevaton = 400.0
[[pipe]]
id = "P-1"
from = "T-1"
to = "J-9"
length = 0
diameter = 8.0
c = -1
"#;
    let found = diagnostics(text);
    let places: Vec<&str> = found
        .iter()
        .map(|d| d.split(": ").next().unwrap_or(""))
        .collect();
    assert_eq!(
        places,
        [
            "t.toml:1:9",
            "t.toml:4:8",
            "t.toml:5:1",
            "t.toml:7:1",
            "t.toml:11:6",
            "t.toml:12:10",
            "t.toml:14:5"
        ],
        "{found:#?}"
    );
}

#[test]
fn columns_count_characters_not_bytes() {
    // `"Ø" = 1.0, ` is 11 characters but 12 bytes: the second key is at character column 22.
    let text = with("[[condition]]\nname = \"c\"\nheads = { \"Ø\" = 1.0, \"Å\" = 2.0 }\n");
    assert_exactly(
        &text,
        &[
            "t.toml:17:11: condition `heads` names `Ø`, which is not a fixed head of this file \
             (c / heads)",
            "t.toml:17:22: condition `heads` names `Å`, which is not a fixed head of this file \
             (c / heads)",
        ],
    );
}

#[test]
fn inline_array_of_tables_is_accepted() {
    let text = r#"units = "si"
fixed_head = [{ id = "R", head = 100.0 }]
junction = [{ id = "A", elevation = 10.0 }]
pipe = [{ id = "1", from = "R", to = "A", length = 50.0, diameter = 150.0, c = 130.0 }]
"#;
    let loaded = load(text);
    assert_eq!(loaded.network.pipes[0].diameter_m, 0.15);
    assert_exactly(
        &text.replace("c = 130.0", "c = -1.0"),
        &["t.toml:4:80: pipe `c` must be a positive finite number, found `-1.0` (1 / c)"],
    );
}

#[test]
fn same_pipe_in_us_and_si_units_loads_to_the_same_model() {
    // Exact definitions (NIST SP 811, Appendix B): 1 ft = 0.3048 m, 1 in = 25.4 mm,
    // 1 US gal = 3.785411784 L, so 100 gpm = 6.30901964 L/s.
    let us = r#"units = "us"
[[fixed_head]]
id = "R"
head = 200.0
[[junction]]
id = "A"
elevation = 100.0
demand = 100.0
[[pipe]]
id = "1"
from = "R"
to = "A"
length = 1000.0
diameter = 12.0
c = 120.0
[[pump]]
id = "B"
from = "A"
to = "R"
curve = [[0.0, 100.0], [1000.0, 80.0], [2000.0, 20.0]]
off = true
"#;
    let si = r#"units = "si"
[[fixed_head]]
id = "R"
head = 60.96
[[junction]]
id = "A"
elevation = 30.48
demand = 6.30901964
[[pipe]]
id = "1"
from = "R"
to = "A"
length = 304.8
diameter = 304.8
c = 120.0
[[pump]]
id = "B"
from = "A"
to = "R"
curve = [[0.0, 30.48], [63.0901964, 24.384], [126.1803928, 6.096]]
off = true
"#;
    let us = load(us).network;
    let si = load(si).network;
    assert_eq!(us.units, UnitSystem::Us);
    assert_eq!(si.units, UnitSystem::Si);
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1.0);
    assert!(close(us.fixed_heads[0].head_m, 60.96));
    assert!(close(si.fixed_heads[0].head_m, 60.96));
    assert!(close(
        us.junctions[0].elevation_m,
        si.junctions[0].elevation_m
    ));
    assert!(close(us.junctions[0].demand_m3s, 6.309_019_64e-3));
    assert!(close(si.junctions[0].demand_m3s, 6.309_019_64e-3));
    assert!(close(us.pipes[0].length_m, 304.8));
    assert!(close(si.pipes[0].length_m, 304.8));
    assert!(close(us.pipes[0].diameter_m, 0.3048));
    assert!(close(si.pipes[0].diameter_m, 0.3048));
    assert_eq!(us.pipes[0].c_factor, si.pipes[0].c_factor);
    let (cu, cs) = (&us.pumps[0].curve, &si.pumps[0].curve);
    assert!((cu.a - cs.a).abs() < 1e-9 && (cu.b - cs.b).abs() < 1e-6);
    assert!((cu.c - cs.c).abs() < 1e-3 * cu.c.abs());
    assert!(us.pumps[0].off);
    assert_eq!(us.pumps[0].from, NodeRef::Junction(0));
    assert_eq!(us.pumps[0].to, NodeRef::FixedHead(0));
}

#[test]
fn pump_curve_fit_matches_the_hand_computed_parabola() {
    // Hand computation: h = 100 - 2000 q^2 (q in m^3/s, h in m) passes exactly through
    // (0, 100), (0.1, 80) and (0.2, 20), i.e. (0, 100), (100 L/s, 80), (200 L/s, 20) in an si file.
    let text = r#"units = "si"
[[fixed_head]]
id = "R"
head = 100.0
[[junction]]
id = "A"
elevation = 10.0
[[pump]]
id = "B"
from = "R"
to = "A"
curve = [[200.0, 20.0], [0.0, 100.0], [100.0, 80.0]]
"#;
    let network = load(text).network;
    let curve = &network.pumps[0].curve;
    assert!((curve.a - 100.0).abs() < 1e-9, "{curve:?}");
    assert!(curve.b.abs() < 1e-7, "{curve:?}");
    assert!((curve.c + 2000.0).abs() < 1e-6, "{curve:?}");
    assert!((curve.head_gain_m(0.15) - 55.0).abs() < 1e-9);
    // The points are kept converted, in flow order.
    assert_eq!(curve.points.len(), 3);
    assert!((curve.points[2].0 - 0.2).abs() < 1e-15);
}

#[test]
fn loaded_values_and_defaults() {
    let loaded = load(DEMO);
    let network = &loaded.network;
    assert_eq!(network.title, "Larkspur Rise (demo)");
    let j101 = &network.junctions[0];
    assert_eq!(j101.id, "J-101");
    assert!((j101.elevation_m - 480.0 * 0.3048).abs() < 1e-12);
    assert_eq!(j101.position, Some((1020.0, 330.0)));
    let m12 = network.pipes.iter().find(|p| p.id == "M-12").unwrap();
    assert_eq!(m12.group, None);
    assert!(!m12.closed && !m12.check_valve);
    let ci = network.find_group("ci-1950").unwrap();
    assert_eq!(network.pipes[0].group, Some(ci));
    assert_eq!(network.groups[ci].min_c, 40.0);
    assert_eq!(network.groups[ci].max_c, 130.0);
    let condition = network.find_condition("tue-am").unwrap();
    assert_eq!(condition.demand_factor, 1.15);
    assert_eq!(condition.heads, vec![(0, 608.5 * 0.3048)]);
    let m5 = network.pipes.iter().position(|p| p.id == "M-5").unwrap();
    assert_eq!(condition.closed_pipes, vec![m5]);
    assert!(condition.pumps_off.is_empty());
    assert_eq!(
        loaded.sources.pipes[0],
        SourceLocation {
            line: 92,
            column: 1
        }
    );
    assert_eq!(DEMO.lines().nth(91), Some("[[pipe]]"));

    // Defaults: demand 0, group bounds 40..150, demand factor 1.
    let text = with("[[group]]\nname = \"g\"\n[[condition]]\nname = \"n\"\n");
    let network = load(&text).network;
    assert_eq!(network.junctions[0].demand_m3s, 0.0);
    assert_eq!(
        (network.groups[0].min_c, network.groups[0].max_c),
        (40.0, 150.0)
    );
    assert!(!network.groups[0].locked);
    assert_eq!(network.conditions[0].demand_factor, 1.0);
}

#[test]
fn summary_of_the_demo() {
    let summary = NetworkSummary::of(&load(DEMO).network);
    assert_eq!(
        (
            summary.junctions,
            summary.fixed_heads,
            summary.pipes,
            summary.pumps
        ),
        (10, 1, 12, 1)
    );
    assert_eq!((summary.groups, summary.conditions), (2, 1));
    // Sums of the lengths written in the demo file, by hand.
    let ci = &summary.length_by_group[0];
    assert_eq!((ci.group.as_str(), ci.pipes), ("ci-1950", 5));
    assert!((ci.length - 4180.0).abs() < 1e-9);
    assert!((summary.length_by_group[1].length - 3780.0).abs() < 1e-9);
    assert!((summary.ungrouped.length - 560.0).abs() < 1e-9);
    assert!((summary.total_length() - 8520.0).abs() < 1e-9);
    assert_eq!(summary.sources.len(), 1);
    assert!((summary.sources[0].head - 612.0).abs() < 1e-9);
    assert!((summary.total_base_demand - 153.0).abs() < 1e-9);
}

#[test]
fn unreadable_and_non_utf8_files() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("absent.toml");
    assert!(matches!(
        load_network_file(&missing),
        Err(NetworkFileError::Unreadable { .. })
    ));
    let junk = dir.path().join("junk.toml");
    std::fs::write(&junk, b"units = \"us\"\nti\xfftle = 1\n").unwrap();
    let error = load_network_file(&junk).unwrap_err();
    let found: Vec<String> = error
        .diagnostics()
        .iter()
        .map(ToString::to_string)
        .collect();
    assert_eq!(
        found,
        [format!(
            "{}:2:3: the file is not UTF-8 text (invalid byte at offset 15)",
            junk.display()
        )]
    );
}

// ---- no input makes the loader panic ----

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    #[test]
    fn arbitrary_text_never_panics(text in "\\PC*") {
        let _ = parse_network(&text, "x.toml");
    }

    #[test]
    fn damaged_demo_never_panics(start in 0usize..4000, len in 0usize..60, junk in "[\\[\\]=\"#a-z0-9.\\n ,{}-]{0,8}") {
        let mut text = DEMO.to_string();
        let start = start.min(text.len());
        let end = (start + len).min(text.len());
        if text.is_char_boundary(start) && text.is_char_boundary(end) {
            text.replace_range(start..end, &junk);
        }
        let _ = parse_network(&text, "x.toml");
    }
}

#[test]
fn odd_inputs_are_diagnosed_not_panicked() {
    for text in [
        "\u{feff}units = \"us\"",
        "units = \"us\"\nlength = 1e308\n[[pipe]]\nlength = 1e308\nc = 9223372036854775807\n",
        "[[pipe]]\n[[pipe]]\n[[pump]]\ncurve = []\n[[pump]]\ncurve = [[1e308, 1e308], [-0.0, 0], [1e-308, 5]]\n",
        "a.b.c.d = 1\n\"\" = 2\n\"\u{202e}\" = 3",
        "[[junction]]\nid = \"\u{0}\"\n",
        "[[condition]]\nheads = 5\nclosed = \"x\"\npumps_off = [[]]\n",
    ] {
        let result = parse_network(text, "x.toml");
        assert!(result.is_err(), "{text:?}");
    }
}

// ---- writing C values back ----

#[test]
fn unchanged_edits_keep_the_file_byte_identical() {
    assert_eq!(apply_c_factors(DEMO, &BTreeMap::new()).unwrap(), DEMO);
    let same: BTreeMap<String, f64> = [("M-1".to_string(), 110.0)].into();
    assert_eq!(apply_c_factors(DEMO, &same).unwrap(), DEMO);
    let crlf = DEMO.replace('\n', "\r\n");
    assert_eq!(apply_group_c(&crlf, &BTreeMap::new()).unwrap(), crlf);
    // An integer C set to the same value stays written as an integer.
    let text = HEAD.replace("c = 120.0", "c = 120");
    let same: BTreeMap<String, f64> = [("P-1".to_string(), 120.0)].into();
    assert_eq!(apply_c_factors(&text, &same).unwrap(), text);
}

#[test]
fn changed_c_values_touch_only_those_values() {
    let text = DEMO.replace("c = 140.0\n", "c = 140.0   # measured 2019\n");
    let new: BTreeMap<String, f64> =
        [("M-12".to_string(), 97.5), ("M-3".to_string(), 88.25)].into();
    let edited = apply_c_factors(&text, &new).unwrap();
    let expected = text
        .replace("c = 140.0   # measured 2019", "c = 97.5   # measured 2019")
        .replacen("c = 100.0", "c = 88.25", 1);
    assert_eq!(edited, expected);
    let network = load(&edited).network;
    let m3 = network.pipes.iter().find(|p| p.id == "M-3").unwrap();
    assert_eq!(m3.c_factor, 88.25);
}

#[test]
fn group_c_sets_every_pipe_of_the_group() {
    let new: BTreeMap<String, f64> = [("di-1985".to_string(), 131.0)].into();
    let edited = apply_group_c(DEMO, &new).unwrap();
    let network = load(&edited).network;
    let group = network.find_group("di-1985");
    for pipe in &network.pipes {
        if pipe.group == group {
            assert_eq!(pipe.c_factor, 131.0, "{}", pipe.id);
        } else {
            assert_ne!(pipe.c_factor, 131.0, "{}", pipe.id);
        }
    }
    // Only the six `c = 120.0` / `c = 125.0` lines of that group changed.
    let changed = DEMO
        .lines()
        .zip(edited.lines())
        .filter(|(a, b)| a != b)
        .count();
    assert_eq!(changed, 6);
    assert_eq!(DEMO.lines().count(), edited.lines().count());
}

#[test]
fn edits_report_unknown_ids_and_bad_values() {
    let new: BTreeMap<String, f64> =
        [("M-99".to_string(), 100.0), ("M-1".to_string(), 90.0)].into();
    assert_eq!(
        apply_c_factors(DEMO, &new),
        Err(NetworkEditError::UnknownPipes(vec!["M-99".to_string()]))
    );
    let new: BTreeMap<String, f64> = [("pvc".to_string(), 100.0)].into();
    assert_eq!(
        apply_group_c(DEMO, &new),
        Err(NetworkEditError::UnknownGroups(vec!["pvc".to_string()]))
    );
    let new: BTreeMap<String, f64> = [("M-1".to_string(), f64::NAN)].into();
    assert!(matches!(
        apply_c_factors(DEMO, &new),
        Err(NetworkEditError::NotPositive { .. })
    ));
    assert!(matches!(
        apply_c_factors("units = ", &BTreeMap::new()),
        Err(NetworkEditError::Syntax { line: 1, .. })
    ));
}

#[test]
fn group_bounds_update_in_place_or_add_the_key() {
    let updates: BTreeMap<String, GroupUpdate> = [
        (
            "ci-1950".to_string(),
            GroupUpdate {
                min: Some(55.0),
                max: None,
                locked: Some(true),
            },
        ),
        (
            "di-1985".to_string(),
            GroupUpdate {
                min: None,
                max: Some(150.0),
                locked: Some(false),
            },
        ),
    ]
    .into();
    let edited = update_groups(DEMO, &updates).unwrap();
    // di-1985 already had max = 150.0 and locked = false: unchanged. ci-1950 gains `locked`.
    let expected = DEMO.replace(
        "min = 40.0\nmax = 130.0\n",
        "min = 55.0\nmax = 130.0\nlocked = true\n",
    );
    assert_eq!(edited, expected);
    let network = load(&edited).network;
    let ci = &network.groups[network.find_group("ci-1950").unwrap()];
    assert_eq!((ci.min_c, ci.max_c, ci.locked), (55.0, 130.0, true));

    let crossed: BTreeMap<String, GroupUpdate> = [(
        "ci-1950".to_string(),
        GroupUpdate {
            min: Some(135.0),
            ..GroupUpdate::default()
        },
    )]
    .into();
    assert_eq!(
        update_groups(DEMO, &crossed),
        Err(NetworkEditError::BoundsCrossed {
            group: "ci-1950".to_string(),
            min: 135.0,
            max: 130.0
        })
    );
    let unknown: BTreeMap<String, GroupUpdate> =
        [("none".to_string(), GroupUpdate::default())].into();
    assert_eq!(
        update_groups(DEMO, &unknown),
        Err(NetworkEditError::UnknownGroups(vec!["none".to_string()]))
    );
}

#[test]
fn edits_of_inline_entries_and_files_without_final_newline() {
    let text = r#"units = "si"
fixed_head = [{ id = "R", head = 100.0 }]
junction = [{ id = "A", elevation = 10.0 }]
pipe = [{ id = "1", from = "R", to = "A", length = 50.0, diameter = 150.0, c = 130.0, group = "g" }]
group = [{ name = "g" }]"#;
    let new: BTreeMap<String, f64> = [("1".to_string(), 99.0)].into();
    let edited = apply_c_factors(text, &new).unwrap();
    assert_eq!(edited, text.replace("c = 130.0", "c = 99.0"));
    let updates: BTreeMap<String, GroupUpdate> = [(
        "g".to_string(),
        GroupUpdate {
            min: Some(60.0),
            max: None,
            locked: Some(true),
        },
    )]
    .into();
    let edited = update_groups(text, &updates).unwrap();
    assert_eq!(
        edited,
        text.replace(
            "{ name = \"g\" }",
            "{ name = \"g\", min = 60.0, locked = true }"
        )
    );
    let network = load(&edited).network;
    assert_eq!(network.groups[0].min_c, 60.0);
    assert!(network.groups[0].locked);

    let table_text = "units = \"us\"\n[[group]]\nname = \"g\"";
    let edited = update_groups(table_text, &updates).unwrap();
    assert_eq!(
        edited,
        "units = \"us\"\n[[group]]\nname = \"g\"\nmin = 60.0\nlocked = true"
    );
}

// ---- `roughcal check` ----

fn check(path: &std::path::Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .arg("check")
        .arg(path)
        .output()
        .unwrap()
}

#[test]
fn check_accepts_the_demo() {
    let output = check(std::path::Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/demo-network/small.toml"
    )));
    assert_eq!(output.status.code(), Some(0));
    let stdout = String::from_utf8_lossy(&output.stdout);
    assert!(
        stdout.contains("10 junctions, 1 fixed head, 12 pipes"),
        "{stdout}"
    );
    assert!(stdout.contains("ci-1950"), "{stdout}");
    assert!(stdout.contains("T-1"), "{stdout}");
}

#[test]
fn check_lists_every_defect_and_fails() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bad.toml");
    std::fs::write(&path, HEAD.replace("c = 120.0", "c = -1\nlenght = 3.0")).unwrap();
    let output = check(&path);
    assert_eq!(output.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&output.stderr);
    let name = path.display().to_string();
    assert!(
        stderr.contains(&format!(
            "{name}:14:5: pipe `c` must be a positive finite number, found `-1` (P-1 / c)"
        )),
        "{stderr}"
    );
    assert!(
        stderr.contains(&format!(
            "{name}:15:1: unknown key `lenght` in [[pipe]]; did you mean `length`? (P-1 / lenght)"
        )),
        "{stderr}"
    );
}

#[test]
fn check_fails_clearly_on_an_unreadable_file() {
    let dir = tempfile::tempdir().unwrap();
    let output = check(&dir.path().join("nowhere.toml"));
    assert_eq!(output.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(stderr.contains("cannot read network file"), "{stderr}");
    assert!(stderr.contains("nowhere.toml"), "{stderr}");
    assert_eq!(stderr.lines().count(), 1, "{stderr}");
}

#[test]
fn solve_and_check_speak_the_file_flow_unit() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("m3h.toml");
    let text = move_demand_to_junction(
        &with("demand = 36.0\n").replace("units = \"us\"", "units = \"us\"\nflow_unit = \"m3h\""),
    );
    std::fs::write(&path, text).unwrap();
    let run = |args: &[&str]| {
        let output = Command::new(env!("CARGO_BIN_EXE_roughcal"))
            .args(args)
            .arg(&path)
            .output()
            .unwrap();
        assert!(output.status.success(), "{output:?}");
        String::from_utf8_lossy(&output.stdout).into_owned()
    };
    let report: serde_json::Value = serde_json::from_str(&run(&["solve", "--json"])).unwrap();
    assert_eq!(report["units"]["flow"], "m3/h");
    assert_eq!(report["units"]["length"], "ft");
    // The one pipe carries the one demand: 36 m3/h, in the unit the file wrote it in (continuity).
    let flow = report["pipes"][0]["flow"].as_f64().unwrap();
    assert!((flow - 36.0).abs() < 1e-6, "{flow}");
    let text = run(&["solve"]);
    assert!(text.contains("m3/h"), "{text}");
    let summary = run(&["check"]);
    assert!(
        summary.contains("total base demand 36.00 m3/h"),
        "{summary}"
    );
}
