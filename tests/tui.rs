//! The workbench driven by key presses, without a terminal: keys go through the key map and
//! `update`, effects through the runner, screens into ratatui's test backend.

use std::io::Write as _;
use std::path::Path;
use std::time::Duration;

use crossterm::event::{KeyCode, KeyEvent, KeyModifiers};
use ratatui::Terminal;
use ratatui::backend::TestBackend;
use roughcal::fieldtest::SheetColumn;
use roughcal::report::{COEFFICIENTS_CSV, OUTPUT_FILES, REPORT_MD};
use roughcal::storage;
use roughcal::tui::app::{Action, View};
use roughcal::tui::keymap::action_for_key;
use roughcal::tui::views;
use roughcal::tui::{App, Runner, Theme, demo_folder, demo_in, dispatch, open_files};

const HEADER: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note\n";

/// The small invented network (Larkspur Rise) the tests work on.
const NETWORK: &str = include_str!("../demo-network/small.toml");

/// Three invented tests on it.
const SHEET: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note
D1,2024-05-07,09:05,J-102,J-103,56,41,,24,2.5,0.9,,
D2,2024-05-07,09:40,J-104,J-106,62,44,,30,2.5,0.9,,
D3,2024-05-07,10:20,J-105,J-107,71,52,640,,,,,
";

/// A workbench on a copy of the small network with `sheet` as the field sheet, in `dir`.
fn workbench(dir: &Path, sheet: &str) -> App {
    let network = dir.join("small.toml");
    let sheet_path = dir.join("sheet.csv");
    std::fs::write(&network, NETWORK).unwrap();
    std::fs::write(&sheet_path, sheet).unwrap();
    App::new(
        open_files(&network, &sheet_path).unwrap(),
        Theme { no_color: false },
    )
}

fn press(app: &mut App, runner: &mut Runner, code: KeyCode, modifiers: KeyModifiers) {
    if let Some(action) = action_for_key(app, KeyEvent::new(code, modifiers)) {
        dispatch(app, runner, action);
    }
}

fn key(app: &mut App, runner: &mut Runner, code: KeyCode) {
    press(app, runner, code, KeyModifiers::NONE);
}

fn ctrl(app: &mut App, runner: &mut Runner, c: char) {
    press(app, runner, KeyCode::Char(c), KeyModifiers::CONTROL);
}

fn type_text(app: &mut App, runner: &mut Runner, text: &str) {
    for c in text.chars() {
        let modifiers = if c.is_ascii_uppercase() {
            KeyModifiers::SHIFT
        } else {
            KeyModifiers::NONE
        };
        press(app, runner, KeyCode::Char(c), modifiers);
    }
}

fn screen(app: &App, width: u16, height: u16) -> String {
    let mut terminal = Terminal::new(TestBackend::new(width, height)).unwrap();
    terminal.draw(|frame| views::render(app, frame)).unwrap();
    let buffer = terminal.backend().buffer().clone();
    let mut text = String::new();
    for y in 0..height {
        for x in 0..width {
            text.push_str(buffer[(x, y)].symbol());
        }
        text.push('\n');
    }
    text
}

fn on_disk(app: &App) -> String {
    std::fs::read_to_string(&app.session.sheet_path).unwrap()
}

#[test]
fn typing_a_full_test_into_a_new_row_saves_exactly_what_was_typed() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), HEADER);
    let mut runner = Runner::new();
    ctrl(&mut app, &mut runner, 'n');
    // test, date, time, residual node (completed by Tab from a prefix), flow node, static, residual,
    // flow (blank), pitot, outlet.
    for (text, tab) in [
        ("T9", 1),
        ("2024-06-01", 1),
        ("08:30", 1),
        ("J-10", 2),
        ("J-103", 1),
        ("60", 1),
        ("45", 1),
        ("", 1),
        ("25", 1),
        ("2.5", 1),
    ] {
        type_text(&mut app, &mut runner, text);
        for _ in 0..tab {
            key(&mut app, &mut runner, KeyCode::Tab);
        }
    }
    // `J-10` + Tab completed to the first junction with that prefix, a second Tab committed it.
    assert_eq!(
        app.session.sheet.cell(0, SheetColumn::ResidualNode),
        Some("J-101")
    );
    let expected = format!("{HEADER}T9,2024-06-01,08:30,J-101,J-103,60,45,,25,2.5,,,\n");
    assert_eq!(on_disk(&app), expected);
    let reading = &app.readings.rows[0];
    assert!(reading.usable, "{:?}", reading.findings);
    // NFPA 291: Q = 29.83 c d^2 sqrt(p) with c = 0.9 (the default outlet) -> 29.83*0.9*6.25*5 = 839 gpm.
    let flow = reading.total_flow.unwrap();
    assert!((flow - 29.83 * 0.9 * 6.25 * 5.0).abs() < 2.0, "{flow}");
    assert!(screen(&app, 80, 24).contains("~839"));
}

#[test]
fn undo_and_redo_every_kind_of_edit() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::new();
    // Edit the static pressure: move right five columns, type, Enter.
    for _ in 0..5 {
        key(&mut app, &mut runner, KeyCode::Right);
    }
    type_text(&mut app, &mut runner, "58");
    key(&mut app, &mut runner, KeyCode::Enter);
    let edited = format!("{HEADER}A1,,,J-102,J-103,58,41,700,,,,,\n");
    assert_eq!(on_disk(&app), edited);
    ctrl(&mut app, &mut runner, 'n');
    let added = format!("{edited},,,,,,,,,,,,\n");
    assert_eq!(on_disk(&app), added);
    ctrl(&mut app, &mut runner, 'z');
    assert_eq!(on_disk(&app), edited);
    ctrl(&mut app, &mut runner, 'z');
    assert_eq!(on_disk(&app), start);
    ctrl(&mut app, &mut runner, 'y');
    assert_eq!(on_disk(&app), edited);
    ctrl(&mut app, &mut runner, 'y');
    assert_eq!(on_disk(&app), added);
    // Nothing left to redo: the state stays.
    ctrl(&mut app, &mut runner, 'y');
    assert_eq!(on_disk(&app), added);
    assert_eq!(app.readings.rows.len(), 2);
}

#[test]
fn a_bad_value_is_flagged_with_its_reason_while_typing() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::new();
    for _ in 0..6 {
        key(&mut app, &mut runner, KeyCode::Right);
    }
    // A residual above the static: flagged before Enter, from the edit preview.
    type_text(&mut app, &mut runner, "61");
    let preview = app.row_reading(0).unwrap();
    assert!(!preview.usable);
    key(&mut app, &mut runner, KeyCode::Enter);
    key(&mut app, &mut runner, KeyCode::Up);
    let text = screen(&app, 80, 24);
    assert!(text.contains("x A1"), "{text}");
    assert!(
        text.contains("residual 61 psi is not below static 56 psi"),
        "{text}"
    );
    // A node that is not in the network.
    key(&mut app, &mut runner, KeyCode::Home);
    for _ in 0..3 {
        key(&mut app, &mut runner, KeyCode::Right);
    }
    type_text(&mut app, &mut runner, "Z-9");
    key(&mut app, &mut runner, KeyCode::Esc);
    assert_eq!(
        app.session.sheet.cell(0, SheetColumn::ResidualNode),
        Some("J-102")
    );
    type_text(&mut app, &mut runner, "Z-9");
    key(&mut app, &mut runner, KeyCode::Enter);
    key(&mut app, &mut runner, KeyCode::Up);
    let text = screen(&app, 80, 24);
    assert!(text.contains("node Z-9 is not in the network"), "{text}");
}

#[test]
fn a_row_added_and_deleted_with_confirmation() {
    let dir = tempfile::tempdir().unwrap();
    let start =
        format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\nA2,,,J-104,J-106,62,44,800,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::new();
    key(&mut app, &mut runner, KeyCode::Insert);
    assert_eq!(app.readings.row, 1);
    type_text(&mut app, &mut runner, "NEW");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(
        on_disk(&app),
        format!(
            "{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\nNEW,,,,,,,,,,,,\nA2,,,J-104,J-106,62,44,800,,,,,\n"
        )
    );
    // Delete A2 (the cursor went down after Enter); `n` keeps it, `y` deletes it.
    ctrl(&mut app, &mut runner, 'd');
    assert!(screen(&app, 80, 24).contains("delete row 3 (A2)? (y/n)"));
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert_eq!(app.session.sheet.row_count(), 3);
    ctrl(&mut app, &mut runner, 'd');
    key(&mut app, &mut runner, KeyCode::Char('y'));
    assert_eq!(
        on_disk(&app),
        format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\nNEW,,,,,,,,,,,,\n")
    );
    assert_eq!(app.readings.rows.len(), 2);
}

#[test]
fn opening_real_files_keeps_the_original_on_the_first_edit() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let app = workbench(dir.path(), &start);
    let mut app = App::new(
        open_files(&app.session.network_path, &app.session.sheet_path).unwrap(),
        Theme { no_color: false },
    );
    let mut runner = Runner::new();
    type_text(&mut app, &mut runner, "B1");
    key(&mut app, &mut runner, KeyCode::Enter);
    key(&mut app, &mut runner, KeyCode::Right);
    type_text(&mut app, &mut runner, "X");
    key(&mut app, &mut runner, KeyCode::Enter);
    let original = storage::original_copy_path(&app.session.sheet_path);
    assert_eq!(std::fs::read_to_string(original).unwrap(), start);
    assert!(on_disk(&app).contains("B1,"));
}

#[test]
fn a_failing_save_keeps_the_previous_sheet_and_says_so() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::with_writer(Box::new(|path, bytes| {
        storage::write_atomic_with(path, |file| {
            file.write_all(&bytes[..bytes.len() / 2])?;
            Err(std::io::Error::other("disk full (injected)"))
        })
    }));
    type_text(&mut app, &mut runner, "B1");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(on_disk(&app), start);
    assert_eq!(app.session.sheet.cell(0, SheetColumn::Test), Some("B1"));
    let text = screen(&app, 80, 24);
    assert!(text.contains("NOT SAVED: "), "{text}");
    assert!(text.contains("disk full (injected)"), "{text}");
    // No temporary file is left beside the sheet.
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(names.iter().all(|n| !n.ends_with(".tmp")), "{names:?}");
}

#[test]
fn every_view_renders_at_80_by_24() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let readings = screen(&app, 80, 24);
    assert!(readings.contains("F2 Readings"));
    assert!(readings.contains("resid at"));
    assert!(readings.contains("D2"));
    assert!(readings.contains("^R fit"));
    key(&mut app, &mut runner, KeyCode::F(3));
    let groups = screen(&app, 80, 24);
    assert!(
        groups.contains("ci-1950") && groups.contains("di-1985"),
        "{groups}"
    );
    assert!(groups.contains("start C"));
    key(&mut app, &mut runner, KeyCode::F(4));
    assert!(screen(&app, 80, 24).contains("no fit yet"));
    key(&mut app, &mut runner, KeyCode::F(5));
    let map = screen(&app, 80, 24);
    assert!(map.contains("shading: group"), "{map}");
    assert!(map.contains("test D1 (1/3)"), "{map}");
    key(&mut app, &mut runner, KeyCode::Char('?'));
    let help = screen(&app, 80, 24);
    assert!(help.contains("Ctrl+R"), "{help}");
    assert!(help.contains("licensed engineer"), "{help}");
    key(&mut app, &mut runner, KeyCode::Esc);
    assert!(!app.help);
}

#[test]
fn no_color_draws_without_any_colour() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,61,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    app.theme = Theme { no_color: true };
    for view in View::ALL {
        app.view = view;
        let mut terminal = Terminal::new(TestBackend::new(80, 24)).unwrap();
        terminal.draw(|frame| views::render(&app, frame)).unwrap();
        let buffer = terminal.backend().buffer();
        for cell in buffer.content() {
            assert_eq!(cell.fg, ratatui::style::Color::Reset, "{view:?}");
            assert_eq!(cell.bg, ratatui::style::Color::Reset, "{view:?}");
        }
    }
}

/// In the Groups view, on ci-1950: to max (start C -> min -> max), type 125, Enter (which moves down),
/// back up, and Space locks it.
fn set_max_125_then_lock_ci_1950(app: &mut App, runner: &mut Runner) {
    key(app, runner, KeyCode::F(3));
    key(app, runner, KeyCode::Right);
    key(app, runner, KeyCode::Right);
    type_text(app, runner, "125");
    key(app, runner, KeyCode::Enter);
    key(app, runner, KeyCode::Up);
    key(app, runner, KeyCode::Char(' '));
}

#[test]
fn groups_edits_are_written_into_the_network_file() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let before = std::fs::read_to_string(&app.session.network_path).unwrap();
    set_max_125_then_lock_ci_1950(&mut app, &mut runner);
    let text = std::fs::read_to_string(&app.session.network_path).unwrap();
    assert!(text.contains("max = 125"), "{:?}", app.message);
    // The network as it was before the first edit is kept beside it, and later edits leave that copy.
    let orig = roughcal::storage::original_copy_path(&app.session.network_path);
    assert_eq!(std::fs::read_to_string(&orig).unwrap(), before);
    assert!(text.contains(
        "name = \"ci-1950\"  # unlined cast iron laid around 1950\nmin = 40.0\nmax = 125"
    ));
    assert!(app.session.network.groups[0].locked);
    assert_eq!(app.session.network.groups[0].max_c, 125.0);
    // Crossed bounds are refused with the reason, and nothing is written.
    key(&mut app, &mut runner, KeyCode::Left);
    type_text(&mut app, &mut runner, "130");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(screen(&app, 80, 24).contains("must be below max"));
    assert_eq!(
        std::fs::read_to_string(&app.session.network_path).unwrap(),
        text
    );
    assert_eq!(std::fs::read_to_string(&orig).unwrap(), before);
}

#[test]
fn groups_edits_undo_and_redo_in_the_network_file() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let original = std::fs::read_to_string(&app.session.network_path).unwrap();
    set_max_125_then_lock_ci_1950(&mut app, &mut runner);
    let edited = std::fs::read_to_string(&app.session.network_path).unwrap();
    assert!(edited.contains("max = 125") && app.session.network.groups[0].locked);

    // Undo takes the lock off, then the bound back; both the file and the model follow.
    ctrl(&mut app, &mut runner, 'z');
    assert!(!app.session.network.groups[0].locked);
    assert_eq!(app.session.network.groups[0].max_c, 125.0);
    ctrl(&mut app, &mut runner, 'z');
    assert_eq!(
        std::fs::read_to_string(&app.session.network_path).unwrap(),
        original
    );
    assert_ne!(app.session.network.groups[0].max_c, 125.0);
    ctrl(&mut app, &mut runner, 'z');
    assert!(
        app.message
            .as_ref()
            .unwrap()
            .text
            .contains("no group edit to undo")
    );

    // Redo replays both; a new edit after an undo clears what could be redone.
    ctrl(&mut app, &mut runner, 'y');
    ctrl(&mut app, &mut runner, 'y');
    assert_eq!(
        std::fs::read_to_string(&app.session.network_path).unwrap(),
        edited
    );
    assert!(
        app.message
            .as_ref()
            .unwrap()
            .text
            .contains("redid the group edit")
    );
    ctrl(&mut app, &mut runner, 'z');
    key(&mut app, &mut runner, KeyCode::Char(' '));
    ctrl(&mut app, &mut runner, 'y');
    assert!(
        app.message
            .as_ref()
            .unwrap()
            .text
            .contains("no group edit to redo")
    );
    // The sheet's own undo history is separate: nothing of the sheet was touched.
    assert!(app.readings.undo.is_empty());
}

#[test]
fn the_fit_runs_on_a_worker_and_can_be_cancelled() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    ctrl(&mut app, &mut runner, 'r');
    assert!(app.fit.running.is_some());
    assert_eq!(app.view, View::Fit);
    let actions = runner.wait_for_worker(Duration::from_secs(60));
    let progress = actions
        .iter()
        .filter(|a| matches!(a, Action::CalibrationProgress(_)))
        .count();
    assert!(progress > 0);
    assert!(matches!(
        actions.last(),
        Some(Action::CalibrationFinished(_))
    ));
    for action in actions {
        dispatch(&mut app, &mut runner, action);
    }
    assert!(app.fit.running.is_none());
    let outcome = app.fit.outcome.as_ref().expect("a result");
    assert_eq!(outcome.result.tests.len(), 3);
    assert_eq!(outcome.result.iterations.len(), progress);
    let fit = screen(&app, 80, 24);
    assert!(fit.contains("RMSE"), "{fit}");
    assert!(fit.contains("modelled vs measured"), "{fit}");

    // Cancel: the flag is set before the worker can finish, so it stops with Cancelled and the earlier
    // result stays.
    dispatch(&mut app, &mut runner, Action::RunCalibration);
    dispatch(&mut app, &mut runner, Action::CancelCalibration);
    for action in runner.wait_for_worker(Duration::from_secs(60)) {
        dispatch(&mut app, &mut runner, action);
    }
    assert!(app.fit.running.is_none());
    assert!(app.fit.outcome.is_some());
    assert!(app.message.as_ref().unwrap().text.contains("cancelled"));

    // The export writes the five outputs of `calibrate --out`, byte for byte what the command writes
    // for the same files, into a fresh numbered folder beside the sheet (the prompt left empty).
    ctrl(&mut app, &mut runner, 'e');
    assert!(screen(&app, 80, 24).contains("export to folder"));
    key(&mut app, &mut runner, KeyCode::Enter);
    let folder = app.fit.export_folder.clone().expect("exported");
    assert_eq!(folder, dir.path().join("roughcal-export-1"));
    assert!(app.message.as_ref().unwrap().text.contains("exported ("));
    let command_folder = dir.path().join("command-out");
    let command = std::process::Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .arg("calibrate")
        .arg(&app.session.network_path)
        .arg(&app.session.sheet_path)
        .arg("--out")
        .arg(&command_folder)
        .output()
        .unwrap();
    assert!(command.status.success(), "{command:?}");
    for name in OUTPUT_FILES {
        let exported = std::fs::read_to_string(folder.join(name)).unwrap();
        assert!(!exported.is_empty(), "{name} is empty");
        assert_eq!(
            exported,
            std::fs::read_to_string(command_folder.join(name)).unwrap(),
            "{name} differs from what `calibrate --out` writes"
        );
    }
    let report = std::fs::read_to_string(folder.join(REPORT_MD)).unwrap();
    assert!(report.contains("licensed engineer"));

    // A second export into the same folder asks first and writes nothing until the answer is yes.
    let marked = folder.join(COEFFICIENTS_CSV);
    std::fs::write(&marked, "kept").unwrap();
    let before: Vec<(String, std::time::SystemTime)> = OUTPUT_FILES
        .iter()
        .map(|name| {
            let path = folder.join(name);
            let modified = std::fs::metadata(&path).unwrap().modified().unwrap();
            (std::fs::read_to_string(&path).unwrap(), modified)
        })
        .collect();
    let unchanged = || {
        OUTPUT_FILES
            .iter()
            .zip(&before)
            .all(|(name, (text, modified))| {
                let path = folder.join(name);
                std::fs::read_to_string(&path).unwrap() == *text
                    && std::fs::metadata(&path).unwrap().modified().unwrap() == *modified
            })
    };
    // The prompt offers this session's folder.
    ctrl(&mut app, &mut runner, 'e');
    assert_eq!(
        app.fit.export_prompt.as_ref().unwrap().buffer,
        folder.display().to_string()
    );
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(app.confirm.is_some());
    assert!(app.message.as_ref().unwrap().text.contains("overwrite"));
    assert!(unchanged());
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert!(app.confirm.is_none());
    assert!(unchanged());
    // No other folder appeared either: the network, the sheet and the two output folders.
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 4);
    ctrl(&mut app, &mut runner, 'e');
    key(&mut app, &mut runner, KeyCode::Enter);
    key(&mut app, &mut runner, KeyCode::Char('y'));
    assert!(app.confirm.is_none());
    assert!(app.message.as_ref().unwrap().text.contains("exported ("));
    assert_eq!(
        std::fs::read_to_string(&marked).unwrap(),
        std::fs::read_to_string(command_folder.join(COEFFICIENTS_CSV)).unwrap()
    );

    // A folder typed into the prompt gets the outputs; Esc gives up without writing anything.
    let chosen = dir.path().join("for-planning");
    ctrl(&mut app, &mut runner, 'e');
    for _ in 0..folder.display().to_string().chars().count() {
        key(&mut app, &mut runner, KeyCode::Backspace);
    }
    type_text(&mut app, &mut runner, &chosen.display().to_string());
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(app.fit.export_folder.as_ref(), Some(&chosen));
    for name in OUTPUT_FILES {
        assert!(chosen.join(name).exists(), "{name}");
    }
    ctrl(&mut app, &mut runner, 'e');
    key(&mut app, &mut runner, KeyCode::Esc);
    assert!(app.fit.export_prompt.is_none());
    assert!(
        app.message
            .as_ref()
            .unwrap()
            .text
            .contains("export cancelled")
    );
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 5);
}

#[test]
fn the_demo_opens_on_a_scratch_copy() {
    let dir = tempfile::tempdir().unwrap();
    let app = App::new(
        demo_in(&dir.path().join("demo")).unwrap(),
        Theme { no_color: false },
    );
    assert_eq!(app.session.sheet.row_count(), 18);
    assert!(app.session.sheet_path.starts_with(dir.path()));
    // The mistyped node of AF-18 is flagged; the weak AF-17 is kept with a warning.
    assert!(!app.readings.rows[17].usable);
    assert!(app.readings.rows[16].usable);
    assert!(app.usable_count() >= 15);
    assert!(demo_folder().ends_with(format!("roughcal-demo-{}", std::process::id())));
}

#[test]
fn a_new_sheet_refuses_an_existing_file() {
    let dir = tempfile::tempdir().unwrap();
    let app = workbench(dir.path(), SHEET);
    let refused = roughcal::tui::new_sheet(&app.session.network_path, &app.session.sheet_path);
    assert!(matches!(
        refused,
        Err(roughcal::tui::OpenError::SheetExists { .. })
    ));
    let fresh = dir.path().join("fresh.csv");
    let session = roughcal::tui::new_sheet(&app.session.network_path, &fresh).unwrap();
    assert_eq!(session.sheet.row_count(), 0);
    assert_eq!(
        std::fs::read_to_string(&fresh).unwrap(),
        std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/field-sheets/template.csv"
        ))
        .unwrap()
    );
}

/// Runs the fit and feeds its outcome back.
fn fit(app: &mut App, runner: &mut Runner) {
    ctrl(app, runner, 'r');
    for action in runner.wait_for_worker(Duration::from_secs(60)) {
        dispatch(app, runner, action);
    }
    assert!(app.fit.outcome.is_some());
}

fn message(app: &App) -> String {
    app.message
        .as_ref()
        .map(|m| m.text.clone())
        .unwrap_or_default()
}

#[test]
fn export_refuses_an_unconverged_fit_and_asks_before_exporting_an_out_of_date_one() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    fit(&mut app, &mut runner);
    let converged = app.fit.outcome.as_ref().unwrap().result.converged;
    assert!(converged);
    // As if the optimizer had stopped at its limit: nothing may be exported.
    app.fit.outcome.as_mut().unwrap().result.converged = false;
    ctrl(&mut app, &mut runner, 'e');
    assert!(app.fit.export_prompt.is_none());
    assert!(
        message(&app).contains("did NOT converge"),
        "{}",
        message(&app)
    );
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 2);

    // A converged fit, then an edit: the fit is out of date and the export asks first.
    fit(&mut app, &mut runner);
    key(&mut app, &mut runner, KeyCode::F(2));
    key(&mut app, &mut runner, KeyCode::Right);
    type_text(&mut app, &mut runner, "2024-05-08");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(screen(&app, 100, 24).contains("fit out of date"));
    ctrl(&mut app, &mut runner, 'e');
    assert!(app.fit.export_prompt.is_none());
    assert!(
        message(&app).contains("fit out of date"),
        "{}",
        message(&app)
    );
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert!(app.fit.export_prompt.is_none());
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 3); // network, sheet, SHEET.orig
    ctrl(&mut app, &mut runner, 'e');
    key(&mut app, &mut runner, KeyCode::Char('y'));
    assert!(app.fit.export_prompt.is_some());
    key(&mut app, &mut runner, KeyCode::Enter);
    let folder = app.fit.export_folder.clone().expect("exported");
    let report = std::fs::read_to_string(folder.join(REPORT_MD)).unwrap();
    assert!(report.contains("Fit out of date"), "{report}");
    assert!(report.contains("answered yes"), "{report}");
    // After a new fit the export no longer asks, and the report no longer says so.
    fit(&mut app, &mut runner);
    ctrl(&mut app, &mut runner, 'e');
    assert!(app.confirm.is_none() && app.fit.export_prompt.is_some());
}

#[cfg(unix)]
fn mode(path: &Path) -> u32 {
    use std::os::unix::fs::PermissionsExt;
    std::fs::metadata(path).unwrap().permissions().mode() & 0o7777
}

#[cfg(unix)]
fn set_mode(path: &Path, mode: u32) {
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(path, std::fs::Permissions::from_mode(mode)).unwrap();
}

#[cfg(unix)]
#[test]
fn a_read_only_sheet_opens_read_only_and_nothing_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let network = dir.path().join("small.toml");
    let sheet = dir.path().join("sheet.csv");
    std::fs::write(&network, NETWORK).unwrap();
    std::fs::write(&sheet, SHEET).unwrap();
    set_mode(&sheet, 0o444);
    set_mode(&network, 0o444);
    let mut app = App::new(
        open_files(&network, &sheet).unwrap(),
        Theme { no_color: false },
    );
    let mut runner = Runner::new();
    assert!(screen(&app, 80, 24).contains("read-only"));
    type_text(&mut app, &mut runner, "X");
    assert!(app.readings.edit.is_none());
    assert!(message(&app).contains("read-only"), "{}", message(&app));
    ctrl(&mut app, &mut runner, 'n');
    ctrl(&mut app, &mut runner, 'd');
    assert_eq!(app.session.sheet.row_count(), 3);
    assert!(app.confirm.is_none());
    // The groups of a read-only network cannot be edited either.
    key(&mut app, &mut runner, KeyCode::F(3));
    key(&mut app, &mut runner, KeyCode::Char(' '));
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(app.groups.edit.is_none());
    assert!(message(&app).contains("read-only"));
    // Looking and fitting still work.
    fit(&mut app, &mut runner);
    ctrl(&mut app, &mut runner, 'q');
    assert!(app.quit, "nothing unsaved, so quitting asks nothing");
    assert_eq!(std::fs::read_to_string(&sheet).unwrap(), SHEET);
    assert_eq!(std::fs::read_to_string(&network).unwrap(), NETWORK);
    assert_eq!((mode(&sheet), mode(&network)), (0o444, 0o444));
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names.len(), 2, "{names:?}");
}

#[cfg(unix)]
#[test]
fn saving_keeps_the_mode_and_owner_of_the_files() {
    use std::os::unix::fs::MetadataExt;
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let sheet = app.session.sheet_path.clone();
    let network = app.session.network_path.clone();
    set_mode(&sheet, 0o640);
    set_mode(&network, 0o600);
    let owner = |p: &Path| {
        let m = std::fs::metadata(p).unwrap();
        (m.uid(), m.gid())
    };
    let owners = (owner(&sheet), owner(&network));
    type_text(&mut app, &mut runner, "E1");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(on_disk(&app).contains("E1,"));
    key(&mut app, &mut runner, KeyCode::F(3));
    key(&mut app, &mut runner, KeyCode::Char(' '));
    assert!(!app.network_unsaved, "{}", message(&app));
    assert_eq!((mode(&sheet), mode(&network)), (0o640, 0o600));
    assert_eq!((owner(&sheet), owner(&network)), owners);
}

#[test]
fn a_sheet_changed_by_another_program_is_never_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let sheet = app.session.sheet_path.clone();
    // An edit of ours, saved as usual.
    key(&mut app, &mut runner, KeyCode::Right);
    type_text(&mut app, &mut runner, "2024-05-09");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(!app.unsaved);
    // Another program (a real child process) changes D3 and adds a row while the workbench is open.
    let theirs = SHEET
        .replace(
            "D3,2024-05-07,10:20,J-105,J-107,71,52,640",
            "D3,2024-05-07,10:20,J-105,J-107,71,50,640",
        )
        .replace("D1,2024-05-07,", "D1,2024-05-09,")
        + "D4,2024-05-07,11:00,J-101,J-103,60,45,600,,,,,\n";
    let status = std::process::Command::new("sh")
        .arg("-c")
        .arg("sleep 0.05; cat > \"$1\"")
        .arg("sh")
        .arg(&sheet)
        .stdin(std::process::Stdio::piped())
        .spawn()
        .and_then(|mut child| {
            child.stdin.take().unwrap().write_all(theirs.as_bytes())?;
            child.wait()
        })
        .unwrap();
    assert!(status.success());
    // Our next edit: D2's static (Enter moved the cursor down to D2). The save sees the change,
    // writes nothing into the sheet, keeps ours aside and asks.
    key(&mut app, &mut runner, KeyCode::Home);
    for _ in 0..5 {
        key(&mut app, &mut runner, KeyCode::Right);
    }
    type_text(&mut app, &mut runner, "63");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(std::fs::read_to_string(&sheet).unwrap(), theirs);
    let side = dir.path().join("sheet.roughcal-unsaved.csv");
    let ours = std::fs::read_to_string(&side).unwrap();
    assert!(
        ours.contains("D2,2024-05-07,09:40,J-104,J-106,63,"),
        "{ours}"
    );
    assert!(app.confirm.is_some());
    assert!(
        message(&app).contains("changed by another program"),
        "{}",
        message(&app)
    );
    assert!(screen(&app, 100, 24).contains("NOT SAVED"));
    // Further edits go aside too until the question is answered.
    assert!(app.has_unsaved_edits());
    // y: theirs reloaded, ours re-applied where they did not touch the row (D2), theirs kept where
    // both changed it (D1's date, already the same: no conflict).
    key(&mut app, &mut runner, KeyCode::Char('y'));
    let merged = std::fs::read_to_string(&sheet).unwrap();
    assert!(
        merged.contains("D2,2024-05-07,09:40,J-104,J-106,63,"),
        "{merged}"
    );
    assert!(merged.contains("J-105,J-107,71,50,640"), "{merged}");
    assert!(merged.contains("D4,"), "{merged}");
    assert!(merged.contains("D1,2024-05-09,"), "{merged}");
    assert!(!app.has_unsaved_edits(), "{}", message(&app));

    // Again, now answering n: both are kept and the workbench goes on in the side file.
    std::fs::write(&sheet, format!("{merged}D5,,,J-101,J-103,60,45,600,,,,,\n")).unwrap();
    let their_second = std::fs::read_to_string(&sheet).unwrap();
    key(&mut app, &mut runner, KeyCode::Up);
    type_text(&mut app, &mut runner, "D1x");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(app.confirm.is_some());
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert_eq!(std::fs::read_to_string(&sheet).unwrap(), their_second);
    // The first conflict's side file is kept; this one has a name of its own.
    assert_eq!(std::fs::read_to_string(&side).unwrap(), ours);
    let second_side = dir.path().join("sheet.roughcal-unsaved-2.csv");
    assert_eq!(app.session.sheet_path, second_side);
    type_text(&mut app, &mut runner, "D1y");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(
        std::fs::read_to_string(&second_side)
            .unwrap()
            .contains("D1y,")
    );
    assert_eq!(std::fs::read_to_string(&sheet).unwrap(), their_second);
}

#[test]
fn quitting_with_a_half_typed_cell_or_unsaved_edits_asks_first() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::new();
    type_text(&mut app, &mut runner, "B");
    ctrl(&mut app, &mut runner, 'q');
    assert!(!app.quit);
    assert!(message(&app).contains("half-typed"), "{}", message(&app));
    // n: back to the typing, nothing saved, nothing thrown away.
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert_eq!(app.readings.edit.as_ref().unwrap().input.buffer, "B");
    assert_eq!(on_disk(&app), start);
    // y: the typing is kept, saved, and the workbench quits.
    type_text(&mut app, &mut runner, "2");
    ctrl(&mut app, &mut runner, 'c');
    key(&mut app, &mut runner, KeyCode::Char('y'));
    assert!(app.quit);
    assert!(on_disk(&app).contains("B2,"));

    // A save that failed: quitting asks, n stays.
    let mut app = workbench(dir.path(), &start);
    let mut failing = Runner::with_writer(Box::new(|path, _| {
        Err(storage::WriteError::Write {
            path: path.to_path_buf(),
            cause: std::io::Error::other("disk full (injected)"),
        })
    }));
    type_text(&mut app, &mut failing, "C1");
    key(&mut app, &mut failing, KeyCode::Enter);
    ctrl(&mut app, &mut failing, 'q');
    assert!(!app.quit);
    assert!(message(&app).contains("NOT SAVED"), "{}", message(&app));
    key(&mut app, &mut failing, KeyCode::Esc);
    assert!(!app.quit);
    ctrl(&mut app, &mut failing, 'q');
    key(&mut app, &mut failing, KeyCode::Char('y'));
    assert!(app.quit);
}

#[test]
fn a_modelled_static_miss_marks_the_row_and_keeps_it_usable() {
    let dir = tempfile::tempdir().unwrap();
    // The model holds about 60 psi at J-102; 90 psi measured is a boundary or elevation problem.
    let sheet = format!("{HEADER}S1,,,J-102,J-103,90,75,700,,,,,\n");
    let app = workbench(dir.path(), &sheet);
    let row = &app.readings.rows[0];
    assert!(
        row.findings
            .iter()
            .any(|f| f.rule == roughcal::fieldtest::Rule::StaticMismatch),
        "{:?}",
        row.findings
    );
    assert!(row.usable);
}

#[test]
fn the_demo_copy_is_removed_on_exit_unless_it_holds_an_export() {
    let dir = tempfile::tempdir().unwrap();
    let folder = dir.path().join("demo");
    let mut app = App::new(demo_in(&folder).unwrap(), Theme { no_color: false });
    let mut runner = Runner::new();
    type_text(&mut app, &mut runner, "X");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert!(roughcal::tui::clean_up_demo(&folder).message().is_none());
    assert!(!folder.exists());

    let mut app = App::new(demo_in(&folder).unwrap(), Theme { no_color: false });
    fit(&mut app, &mut runner);
    ctrl(&mut app, &mut runner, 'e');
    key(&mut app, &mut runner, KeyCode::Enter);
    let kept = roughcal::tui::clean_up_demo(&folder);
    let said = kept.message().expect("says why it stays");
    assert!(said.contains("roughcal-export-1"), "{said}");
    assert!(said.contains(&folder.display().to_string()), "{said}");
    assert!(folder.join("roughcal-export-1").join(REPORT_MD).exists());
}

#[test]
fn a_network_changed_by_another_program_is_never_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let network = app.session.network_path.clone();
    let theirs = format!("{NETWORK}\n# retouched by the planning office\n");
    std::fs::write(&network, &theirs).unwrap();
    // A group edit: the lock of the first group.
    key(&mut app, &mut runner, KeyCode::F(3));
    key(&mut app, &mut runner, KeyCode::Char(' '));
    assert_eq!(std::fs::read_to_string(&network).unwrap(), theirs);
    let side = dir.path().join("small.roughcal-unsaved.toml");
    assert!(
        std::fs::read_to_string(&side)
            .unwrap()
            .contains("locked = true")
    );
    assert!(matches!(
        app.confirm,
        Some(roughcal::tui::app::Confirm::ExternalChange(_))
    ));
    // n: both kept, the group edits go on in the side file.
    key(&mut app, &mut runner, KeyCode::Char('n'));
    assert_eq!(app.session.network_path, side);
    key(&mut app, &mut runner, KeyCode::Char(' '));
    assert!(!app.network_unsaved, "{}", message(&app));
    assert!(
        !std::fs::read_to_string(&side)
            .unwrap()
            .contains("locked = true")
    );
    assert_eq!(std::fs::read_to_string(&network).unwrap(), theirs);
}

#[test]
fn typing_h_j_k_l_into_a_readings_cell_types_them_and_backspace_clears_with_undo() {
    let dir = tempfile::tempdir().unwrap();
    let start = format!("{HEADER}A1,,,J-102,J-103,56,41,700,,,,,\n");
    let mut app = workbench(dir.path(), &start);
    let mut runner = Runner::new();
    // The note column is the last one: End goes there, then every letter is typed, none moves.
    key(&mut app, &mut runner, KeyCode::End);
    let column = app.readings.column;
    type_text(&mut app, &mut runner, "hjkl valve");
    assert_eq!(app.readings.column, column);
    assert!(screen(&app, 100, 24).contains("hjkl valve"));
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(
        app.session.sheet.cell(0, SheetColumn::Note),
        Some("hjkl valve")
    );
    // A test id starting with h: the first letter is not lost.
    key(&mut app, &mut runner, KeyCode::Home);
    type_text(&mut app, &mut runner, "h7");
    key(&mut app, &mut runner, KeyCode::Enter);
    assert_eq!(app.session.sheet.cell(0, SheetColumn::Test), Some("h7"));
    // Backspace on a cell (not typing) clears it; Ctrl+Z brings it back; the row stays.
    key(&mut app, &mut runner, KeyCode::Up);
    key(&mut app, &mut runner, KeyCode::Backspace);
    assert_eq!(app.session.sheet.cell(0, SheetColumn::Test), Some(""));
    assert_eq!(app.session.sheet.row_count(), 1);
    assert!(app.confirm.is_none());
    ctrl(&mut app, &mut runner, 'z');
    assert_eq!(app.session.sheet.cell(0, SheetColumn::Test), Some("h7"));
    // Delete clears too; deleting the row stays on Ctrl+D with a question.
    key(&mut app, &mut runner, KeyCode::Delete);
    assert_eq!(app.session.sheet.cell(0, SheetColumn::Test), Some(""));
    ctrl(&mut app, &mut runner, 'd');
    assert!(app.confirm.is_some());
    key(&mut app, &mut runner, KeyCode::Char('y'));
    assert_eq!(app.session.sheet.row_count(), 0);
}

#[test]
fn vim_letters_still_move_in_groups_and_the_map() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    key(&mut app, &mut runner, KeyCode::F(3));
    assert_eq!(app.view, View::Groups);
    let row = app.groups.row;
    key(&mut app, &mut runner, KeyCode::Char('j'));
    assert_eq!(app.groups.row, (row + 1).min(app.groups.rows.len() - 1));
    assert!(app.groups.edit.is_none());
    key(&mut app, &mut runner, KeyCode::F(5));
    let before = app.map.selected;
    key(&mut app, &mut runner, KeyCode::Char('l'));
    assert_ne!(app.map.selected, before);
}

#[test]
fn the_tab_bar_shows_the_keys_that_switch_views() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    let text = screen(&app, 80, 24);
    let title = text.lines().next().unwrap();
    for (label, key_code, view) in [
        ("F2 Readings", KeyCode::F(2), View::Readings),
        ("F3 Groups", KeyCode::F(3), View::Groups),
        ("F4 Fit", KeyCode::F(4), View::Fit),
        ("F5 Map", KeyCode::F(5), View::Map),
    ] {
        assert!(title.contains(label), "{title}");
        key(&mut app, &mut runner, key_code);
        assert_eq!(app.view, view);
    }
    // The digits type into cells in Readings: they do not switch views there.
    key(&mut app, &mut runner, KeyCode::F(2));
    key(&mut app, &mut runner, KeyCode::Char('3'));
    assert_eq!(app.view, View::Readings);
}

#[test]
fn the_help_overlay_fits_80_by_24() {
    let dir = tempfile::tempdir().unwrap();
    let mut app = workbench(dir.path(), SHEET);
    let mut runner = Runner::new();
    key(&mut app, &mut runner, KeyCode::F(1));
    assert!(app.help);
    let text = screen(&app, 80, 24);
    for (_, keys) in roughcal::tui::keymap::KEY_HELP {
        for (keys, what) in keys {
            assert!(
                text.contains(&format!("{keys:<13} {what}")),
                "`{keys} {what}` not shown in\n{text}"
            );
        }
    }
}
