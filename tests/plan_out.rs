//! `roughcal plan --out PLAN.md`: the printable plan and, beside it, a field sheet of the planned tests
//! that roughcal reads back, on the bundled demo district.

use std::process::Command;

use roughcal::fieldtest::{FieldSheet, SheetColumn, read_tests};

fn roughcal(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("binary runs")
}

const NETWORK: &str = "demo-network/district.toml";
const SHEET: &str = "field-sheets/demo.csv";

#[test]
fn plan_out_writes_a_printable_plan_and_a_sheet_to_fill_in() {
    let dir = tempfile::tempdir().unwrap();
    let md = dir.path().join("plan.md");
    let md_arg = md.display().to_string();
    let out = roughcal(&[
        "plan", NETWORK, SHEET, "--count", "2", "--json", "--out", &md_arg,
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // stdout stays one JSON document; the written files are named on stderr.
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let candidates = json["candidates"].as_array().unwrap();
    assert_eq!(candidates.len(), 2);
    assert!(String::from_utf8_lossy(&out.stderr).contains("plan.csv"));

    let plan = std::fs::read_to_string(&md).unwrap();
    assert!(plan.starts_with("# Test plan: "), "{plan}");
    assert!(plan.contains("licensed engineer"));
    assert!(plan.contains(&format!("roughcal {}", env!("CARGO_PKG_VERSION"))));
    for (i, c) in candidates.iter().enumerate() {
        let section = plan
            .split(&format!("## P-{:02}\n", i + 1))
            .nth(1)
            .unwrap_or_else(|| panic!("no section for test {}: {plan}", i + 1));
        let section = section.split("\n## ").next().unwrap();
        let gauge = c["residual_node"].as_str().unwrap();
        assert!(
            section.contains(&format!("Residual hydrant (gauge): **{gauge}**")),
            "{section}"
        );
        let flow = c["flow"].as_f64().unwrap();
        assert!(
            section.contains(&format!("about {flow:.0} gpm")),
            "{section}"
        );
        let drop = c["predicted_drop"].as_f64().unwrap();
        assert!(
            section.contains(&format!("drop {drop:.1} psi")),
            "{section}"
        );
        // The pitot formula solved for p (NFPA 291): p = (Q / (29.83 c d^2))^2 with the plan's
        // 2.5 in outlet and coefficient 0.90, per outlet.
        let hydrants = c["flow_nodes"].as_array().unwrap().len() as f64;
        let pitot = (flow / hydrants / (29.83 * 0.90 * 2.5 * 2.5)).powi(2);
        assert!(
            section.contains(&format!("pitot reading of about {pitot:.1} psi")),
            "{section}"
        );
        assert!(section.contains("Record: "), "{section}");
    }

    // The sheet: the template's columns, one row per planned test, readings blank.
    let csv = dir.path().join("plan.csv");
    let text = std::fs::read_to_string(&csv).unwrap();
    let sheet = FieldSheet::parse(&text, "plan.csv").unwrap();
    assert_eq!(sheet.row_count(), 2);
    for (row, c) in candidates.iter().enumerate() {
        assert_eq!(
            sheet.cell(row, SheetColumn::Test),
            Some(format!("P-{:02}", row + 1).as_str())
        );
        assert_eq!(
            sheet.cell(row, SheetColumn::ResidualNode),
            c["residual_node"].as_str()
        );
        let flow_nodes: Vec<&str> = c["flow_nodes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| n.as_str().unwrap())
            .collect();
        assert_eq!(
            sheet.cell(row, SheetColumn::FlowNode),
            Some(flow_nodes.join(";").as_str())
        );
        for blank in [
            SheetColumn::Static,
            SheetColumn::Residual,
            SheetColumn::Pitot,
        ] {
            assert_eq!(sheet.cell(row, blank), Some(""));
        }
    }
    // Read back: every planned row asks for its readings, nothing else is wrong with it.
    let reading = read_tests(&sheet);
    assert!(
        reading
            .findings
            .iter()
            .all(|f| f.column.starts_with("static")
                || f.column.starts_with("residual")
                || f.column.starts_with("flow")
                || f.column.starts_with("pitot")),
        "{:?}",
        reading.findings
    );

    // A second run refuses to replace the plan without --force, before doing the work.
    let again = roughcal(&["plan", NETWORK, SHEET, "--count", "1", "--out", &md_arg]);
    assert_eq!(again.status.code(), Some(1));
    assert!(
        String::from_utf8_lossy(&again.stderr).contains("already exists; pass --force"),
        "{}",
        String::from_utf8_lossy(&again.stderr)
    );
    assert_eq!(std::fs::read_to_string(&md).unwrap(), plan);
}
