//! `roughcal` (demo), `roughcal open NETWORK SHEET`, `roughcal new NETWORK SHEET`: the terminal
//! workbench. Needs a terminal; without one it says which commands work in scripts.

use std::io::IsTerminal;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context;
use roughcal::tui::{self, App, Theme};

const NO_TERMINAL: &str =
    "roughcal: the workbench needs a terminal (stdin and stdout must be a TTY).
For scripts and pipes use the commands instead, e.g.
  roughcal check --help
  roughcal solve --help
  roughcal tests --help
  roughcal fireflow --help
  roughcal calibrate --help";

fn has_terminal() -> bool {
    std::io::stdin().is_terminal() && std::io::stdout().is_terminal()
}

fn run(app: App) -> anyhow::Result<ExitCode> {
    tui::run_terminal(app).context("the terminal failed")?;
    Ok(ExitCode::SUCCESS)
}

fn theme() -> Theme {
    Theme {
        no_color: Theme::no_color_from_env(),
    }
}

pub fn run_demo() -> anyhow::Result<ExitCode> {
    if !has_terminal() {
        eprintln!("{NO_TERMINAL}");
        return Ok(ExitCode::from(1));
    }
    let folder = tui::demo_folder();
    let session = tui::demo_in(&folder).context("cannot set up the demo")?;
    let mut app = App::new(session, theme());
    app.message = Some(tui::app::StatusMessage {
        text: format!(
            "demo: working on a copy in {} (the shipped files stay as they are); ? shows the keys",
            folder.display()
        ),
        error: false,
    });
    let outcome = run(app);
    // The scratch copy goes with the session, unless the user made something in it.
    if let Some(message) = tui::clean_up_demo(&folder).message() {
        eprintln!("roughcal: {message}");
    }
    outcome
}

pub fn run_open(network: &Path, sheet: &Path) -> anyhow::Result<ExitCode> {
    // The files first: a missing or broken file is the more useful message, with or without a terminal.
    let session = tui::open_files(network, sheet)?;
    if !has_terminal() {
        eprintln!("{NO_TERMINAL}");
        return Ok(ExitCode::from(1));
    }
    let read_only: Vec<String> = [
        (session.sheet_file.read_only, sheet),
        (session.network_file.read_only, network),
    ]
    .iter()
    .filter(|(read_only, _)| *read_only)
    .map(|(_, path)| path.display().to_string())
    .collect();
    let mut app = App::new(session, theme());
    if !read_only.is_empty() {
        app.message = Some(tui::app::StatusMessage {
            text: format!(
                "read-only: {} cannot be written; look, fit and export, edits are refused",
                read_only.join(" and ")
            ),
            error: true,
        });
    }
    let leftovers: Vec<_> = [sheet, network]
        .iter()
        .flat_map(|path| roughcal::storage::remove_stale_temporaries(path))
        .collect();
    if !leftovers.is_empty() && read_only.is_empty() {
        app.message = Some(tui::app::StatusMessage {
            text: format!(
                "cleared {} leftover file(s) of an interrupted save; re-check your last edit",
                leftovers.len()
            ),
            error: false,
        });
    }
    run(app)
}

pub fn run_new(network: &Path, sheet: &Path) -> anyhow::Result<ExitCode> {
    if !has_terminal() {
        eprintln!("{NO_TERMINAL}");
        return Ok(ExitCode::from(1));
    }
    let session = tui::new_sheet(network, sheet)?;
    let mut app = App::new(session, theme());
    app.message = Some(tui::app::StatusMessage {
        text: format!("new sheet {}: start typing the first test", sheet.display()),
        error: false,
    });
    run(app)
}
