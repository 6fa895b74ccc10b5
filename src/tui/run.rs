//! The thin edge: carries out effects (files, the worker thread), runs the event loop against a real
//! terminal, and puts the terminal back however the program ends.

use std::collections::VecDeque;
use std::io;
use std::path::{Path, PathBuf};
use std::time::Duration;

use crossterm::event::{self, Event};
use crossterm::execute;
use crossterm::terminal::{
    EnterAlternateScreen, LeaveAlternateScreen, disable_raw_mode, enable_raw_mode,
};
use ratatui::Terminal;
use ratatui::backend::CrosstermBackend;

use super::app::{Action, App, Effect, update};
use super::keymap::action_for_key;
use super::session::SaveTarget;
use super::state::fit::ExportJob;
use super::views;
use super::worker::CalibrationWorker;
use crate::fieldtest::load_sheet;
use crate::report::{OutputWriteError, write_outputs};
use crate::storage::{self, FileStamp, WriteError};

/// How files are written: [`storage::write_atomic`] normally; tests pass a failing one.
pub type WriteFn = Box<dyn FnMut(&Path, &[u8]) -> Result<(), WriteError>>;

/// Carries out [`Effect`]s and reports their outcomes as [`Action`]s.
pub struct Runner {
    write: WriteFn,
    worker: Option<CalibrationWorker>,
}

impl Default for Runner {
    fn default() -> Self {
        Self::new()
    }
}

impl Runner {
    /// A runner writing through [`storage::write_atomic`].
    pub fn new() -> Self {
        Self::with_writer(Box::new(storage::write_atomic))
    }

    /// A runner writing through `write`.
    pub fn with_writer(write: WriteFn) -> Self {
        Self {
            write,
            worker: None,
        }
    }

    /// Carries out one effect; returns the actions that report its outcome.
    pub fn execute(&mut self, effect: Effect) -> Vec<Action> {
        match effect {
            Effect::SaveSheet {
                path,
                text,
                keep_original,
                expected,
            } => {
                if let Some(changed) =
                    self.changed_on_disk(SaveTarget::Sheet, &path, expected, &text)
                {
                    return vec![changed];
                }
                let kept = if keep_original {
                    storage::keep_original(&path).map(|_| ())
                } else {
                    Ok(())
                };
                let result = kept
                    .and_then(|()| (self.write)(&path, text.as_bytes()))
                    .map(|()| FileStamp::of(&path).ok())
                    .map_err(|e| short_write_error(&path, &e));
                vec![Action::SaveFinished {
                    target: SaveTarget::Sheet,
                    result,
                }]
            }
            Effect::SaveNetwork {
                path,
                text,
                expected,
            } => {
                if let Some(changed) =
                    self.changed_on_disk(SaveTarget::Network, &path, expected, &text)
                {
                    return vec![changed];
                }
                // The network as it was before the first group edit is kept as NETWORK.orig, as the
                // sheet is (a later save finds the copy there and leaves it).
                let result = storage::keep_original(&path)
                    .and_then(|_| (self.write)(&path, text.as_bytes()))
                    .map(|()| FileStamp::of(&path).ok())
                    .map_err(|e| short_write_error(&path, &e));
                vec![Action::SaveFinished {
                    target: SaveTarget::Network,
                    result,
                }]
            }
            Effect::SaveSideFile { target, path, text } => {
                let result = (self.write)(&path, text.as_bytes())
                    .map(|()| FileStamp::of(&path).ok())
                    .map_err(|e| short_write_error(&path, &e));
                vec![Action::SideFileSaved { target, result }]
            }
            Effect::ReloadSheet(path) => {
                let stamp = FileStamp::of(&path).ok();
                let result = load_sheet(&path)
                    .map(|sheet| (sheet, stamp))
                    .map_err(|e| e.to_string());
                vec![Action::SheetReloaded(Box::new(result))]
            }
            Effect::ReloadNetwork(path) => {
                let stamp = FileStamp::of(&path).ok();
                let result = std::fs::read_to_string(&path)
                    .map(|text| (text, stamp))
                    .map_err(|e| e.to_string());
                vec![Action::NetworkReloaded(result)]
            }
            Effect::StartCalibration(job) => {
                self.worker = Some(CalibrationWorker::spawn(*job));
                Vec::new()
            }
            Effect::CancelCalibration => {
                if let Some(worker) = &self.worker {
                    worker.cancel();
                }
                Vec::new()
            }
            Effect::WriteExport(job) => vec![write_export(&job)],
        }
    }

    /// Before a save: when the file on disk is no longer the one last read or written (size,
    /// modification time, hash), our text goes into the side file instead and the change is reported.
    fn changed_on_disk(
        &mut self,
        target: SaveTarget,
        path: &Path,
        expected: Option<FileStamp>,
        text: &str,
    ) -> Option<Action> {
        let expected = expected?;
        if FileStamp::of(path).ok() == Some(expected) {
            return None;
        }
        let side = storage::free_unsaved_copy_path(path);
        let side_file = (self.write)(&side, text.as_bytes())
            .map(|()| {
                storage::copy_mode(path, &side);
                (side.clone(), FileStamp::of(&side).ok())
            })
            .map_err(|e| short_write_error(&side, &e));
        Some(Action::ExternalChange { target, side_file })
    }

    /// Whatever the worker has sent since the last call.
    pub fn poll(&mut self) -> Vec<Action> {
        let Some(worker) = &mut self.worker else {
            return Vec::new();
        };
        let (messages, finished) = worker.drain();
        if finished {
            self.worker = None;
        }
        messages.into_iter().map(|m| m.into_action()).collect()
    }

    /// Waits up to `timeout` for the worker to finish, collecting its messages (tests, shutdown).
    pub fn wait_for_worker(&mut self, timeout: Duration) -> Vec<Action> {
        let deadline = std::time::Instant::now() + timeout;
        let mut actions = Vec::new();
        while self.worker.is_some() && std::time::Instant::now() < deadline {
            actions.extend(self.poll());
            std::thread::sleep(Duration::from_millis(5));
        }
        actions
    }
}

/// Writes an export through [`write_outputs`] (the same files as `calibrate --out`) and reports it:
/// outputs already in the folder without `force` come back as a question, not an error.
fn write_export(job: &ExportJob) -> Action {
    let folder = if job.numbered {
        numbered_folder(&job.folder)
    } else {
        job.folder.clone()
    };
    match write_outputs(&folder, &job.outputs, job.force) {
        Ok(_) => Action::ExportFinished(Ok(folder)),
        Err(OutputWriteError::Exists { folder, .. }) => Action::ExportRefused(folder),
        Err(e) => Action::ExportFinished(Err(e.to_string())),
    }
}

/// `<stem>-<n>` for the first n from 1 that names nothing yet, so a session's first export never
/// lands on an earlier session's.
fn numbered_folder(stem: &Path) -> PathBuf {
    (1u32..)
        .map(|n| {
            let mut name = stem.as_os_str().to_owned();
            name.push(format!("-{n}"));
            PathBuf::from(name)
        })
        .find(|candidate| !candidate.exists())
        .unwrap_or_else(|| stem.to_path_buf())
}

/// A failed write in few words, cause first, for the status line.
fn short_write_error(path: &Path, error: &WriteError) -> String {
    let name = path.file_name().map_or_else(
        || path.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    match error {
        WriteError::Temporary { cause: source, .. }
        | WriteError::Write { cause: source, .. }
        | WriteError::Replace { cause: source, .. } => format!("cannot write {name}: {source}"),
        WriteError::Exists { .. } | WriteError::Keep { .. } => error.to_string(),
    }
}

/// Runs `action` and every action its effects lead to.
pub fn dispatch(app: &mut App, runner: &mut Runner, action: Action) {
    let mut queue = VecDeque::from([action]);
    while let Some(action) = queue.pop_front() {
        for effect in update(app, action) {
            queue.extend(runner.execute(effect));
        }
    }
}

/// Leaves the alternate screen and raw mode before the panic message is printed, so a crash leaves a
/// usable terminal and a readable message.
fn install_panic_hook() {
    let previous = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        let _ = restore_terminal();
        previous(info);
    }));
}

fn restore_terminal() -> io::Result<()> {
    disable_raw_mode()?;
    execute!(io::stdout(), LeaveAlternateScreen, crossterm::cursor::Show)
}

/// Runs the workbench on the real terminal until the user quits.
pub fn run_terminal(app: App) -> io::Result<()> {
    install_panic_hook();
    enable_raw_mode()?;
    if let Err(e) = execute!(io::stdout(), EnterAlternateScreen) {
        let _ = disable_raw_mode();
        return Err(e);
    }
    let result = Terminal::new(CrosstermBackend::new(io::stdout()))
        .and_then(|terminal| event_loop(terminal, app, Runner::new()));
    let restored = restore_terminal();
    result.and(restored)
}

fn event_loop(
    mut terminal: Terminal<CrosstermBackend<io::Stdout>>,
    mut app: App,
    mut runner: Runner,
) -> io::Result<()> {
    let size = terminal.size()?;
    dispatch(
        &mut app,
        &mut runner,
        Action::Resize(size.width, size.height),
    );
    let mut redraw = true;
    loop {
        if redraw {
            terminal.draw(|frame| views::render(&app, frame))?;
            redraw = false;
        }
        if app.quit {
            break;
        }
        // Wait briefly for a key, then take every event already queued before redrawing, so fast
        // typing or a paste does not redraw once per character.
        let mut timeout = Duration::from_millis(50);
        while event::poll(timeout)? {
            timeout = Duration::ZERO;
            match event::read()? {
                Event::Key(key) => {
                    if let Some(action) = action_for_key(&app, key) {
                        dispatch(&mut app, &mut runner, action);
                    }
                }
                Event::Resize(width, height) => {
                    terminal.autoresize()?;
                    dispatch(&mut app, &mut runner, Action::Resize(width, height));
                }
                _ => {}
            }
            redraw = true;
        }
        for action in runner.poll() {
            dispatch(&mut app, &mut runner, action);
            redraw = true;
        }
    }
    // A fit still running is cancelled; give it a moment to stop cleanly.
    runner.wait_for_worker(Duration::from_millis(500));
    Ok(())
}
