//! The workbench state ([`App`]), what can happen to it ([`Action`]), what it asks the outside world to
//! do ([`Effect`]), and [`update`], the router: it hands each action to the view state that owns it
//! ([`super::state`]) and brings the rest of the state in line with what that changed.
//!
//! Nothing here touches a terminal, a file or a thread; the runner ([`super::run`]) carries out the
//! effects and feeds their outcomes back as actions.

use std::collections::HashMap;
use std::path::PathBuf;

use crate::calibrate::{CalibrationError, CalibrationResult, IterationReport};
use crate::fieldtest::{FieldSheet, StaticHeads};
use crate::storage::FileStamp;

use super::layout;
use super::saves;
use super::session::{Conflict, SaveTarget, Session};
use super::sheet_reading;
use super::state::fit::{ExportJob, FitState};
use super::state::groups::GroupsState;
use super::state::map::MapState;
use super::state::readings::{self, ReadingsState};
use super::state::{Changed, Ctx};
use super::theme::Theme;

pub use super::edit::{After, Move};
pub use super::state::{Confirm, StatusMessage, View};

/// The whole workbench.
#[derive(Debug, Clone)]
pub struct App {
    pub session: Session,
    pub view: View,
    pub help: bool,
    pub theme: Theme,
    pub width: u16,
    pub height: u16,
    pub readings: ReadingsState,
    pub groups: GroupsState,
    pub fit: FitState,
    pub map: MapState,
    pub confirm: Option<Confirm>,
    pub message: Option<StatusMessage>,
    /// Junction ids for completion: (lower-case id, id), sorted.
    pub node_index: Vec<(String, String)>,
    /// Junction index by id.
    pub junction_index: HashMap<String, usize>,
    /// The model's static pressures (one solve per condition, redone when the network changes), for
    /// the modelled-static warning of every row.
    pub static_heads: StaticHeads,
    /// The sheet has edits the last save did not write.
    pub unsaved: bool,
    /// The network file has edits the last save did not write.
    pub network_unsaved: bool,
    /// The sheet on disk was changed by another program: saves to it have stopped.
    pub sheet_conflict: Option<Conflict>,
    /// The same for the network file.
    pub network_conflict: Option<Conflict>,
    /// The last save of the sheet or the network failed (the edits are not on disk).
    pub save_failed: bool,
    /// Quit once the pending saves have landed (after "keep the typing and quit").
    pub quit_after_saves: bool,
    pub quit: bool,
}

/// Everything that can happen to the workbench.
#[derive(Debug, Clone)]
pub enum Action {
    MoveCursor(Move),
    /// Edit the cursor cell starting from its text.
    BeginEdit,
    /// Edit the cursor cell replacing its text with this character.
    BeginEditWith(char),
    InsertChar(char),
    DeleteBack,
    DeleteForward,
    EditCursor(Move),
    CommitEdit(After),
    /// Tab while typing: complete a node id, or commit and move right.
    CompleteOrCommit,
    CancelEdit,
    AddRow,
    DeleteRow,
    /// Readings: empty the cursor cell (undoable).
    ClearCell,
    /// The answer to the pending question.
    Confirm(bool),
    Undo,
    Redo,
    SwitchView(View),
    NextView,
    PreviousView,
    ToggleHelp,
    /// Groups: toggle the lock of the cursor group.
    ToggleLock,
    RunCalibration,
    CancelCalibration,
    CalibrationProgress(IterationReport),
    CalibrationFinished(Box<Result<CalibrationResult, CalibrationError>>),
    Export,
    /// The export folder already holds outputs.
    ExportRefused(PathBuf),
    ExportFinished(Result<PathBuf, String>),
    /// A save is done: the file's new stamp, or why nothing was written.
    SaveFinished {
        target: SaveTarget,
        result: Result<Option<FileStamp>, String>,
    },
    /// A save found the file changed on disk and wrote our version into the side file instead.
    ExternalChange {
        target: SaveTarget,
        side_file: Result<(PathBuf, Option<FileStamp>), String>,
    },
    /// The side file was written again (edits while a conflict waits for an answer).
    SideFileSaved {
        target: SaveTarget,
        result: Result<Option<FileStamp>, String>,
    },
    /// The sheet as another program left it, read back after "reload theirs".
    SheetReloaded(Box<Result<(FieldSheet, Option<FileStamp>), String>>),
    /// The network text as another program left it.
    NetworkReloaded(Result<(String, Option<FileStamp>), String>),
    ToggleMapShading,
    /// Map: select the next (+1) or previous (-1) test.
    SelectTest(i32),
    Resize(u16, u16),
    /// Escape outside an edit: close help, cancel a question or a run.
    Escape,
    Quit,
}

/// What the runner is asked to do.
#[derive(Debug, Clone)]
pub enum Effect {
    /// Write the sheet, unless the file on disk is no longer `expected` (then the side file).
    SaveSheet {
        path: PathBuf,
        text: String,
        keep_original: bool,
        expected: Option<FileStamp>,
    },
    SaveNetwork {
        path: PathBuf,
        text: String,
        expected: Option<FileStamp>,
    },
    /// Write the side file of unsaved edits (no check: it is ours).
    SaveSideFile {
        target: SaveTarget,
        path: PathBuf,
        text: String,
    },
    ReloadSheet(PathBuf),
    ReloadNetwork(PathBuf),
    StartCalibration(Box<crate::calibrate::Job>),
    CancelCalibration,
    WriteExport(Box<ExportJob>),
}

/// The view states, borrowed beside a [`Ctx`].
pub(super) struct Views<'a> {
    pub readings: &'a mut ReadingsState,
    pub groups: &'a mut GroupsState,
    pub fit: &'a mut FitState,
    pub map: &'a mut MapState,
}

impl App {
    /// A workbench on `session`, sized 80 x 24 until the first resize.
    pub fn new(session: Session, theme: Theme) -> App {
        let mut app = App {
            session,
            view: View::Readings,
            help: false,
            theme,
            width: 80,
            height: 24,
            readings: ReadingsState::default(),
            groups: GroupsState::default(),
            fit: FitState::default(),
            map: MapState::default(),
            confirm: None,
            message: None,
            node_index: Vec::new(),
            junction_index: HashMap::new(),
            static_heads: StaticHeads::default(),
            unsaved: false,
            network_unsaved: false,
            sheet_conflict: None,
            network_conflict: None,
            save_failed: false,
            quit_after_saves: false,
            quit: false,
        };
        app.network_changed();
        app.readings.read_all(&app.session, &app.static_heads);
        app.readings.header = Some(sheet_reading::header_only(&app.session.sheet));
        app.readings.widths = (0..app.session.sheet.headers().len())
            .map(|i| layout::column_width(app.session.sheet.column_at(i)))
            .collect();
        app
    }

    /// The shared part of the state as a [`Ctx`], beside the view states.
    fn split(&mut self) -> (Ctx<'_>, Views<'_>) {
        let marker_count = self.test_markers().len();
        let ctx = Ctx {
            session: &mut self.session,
            confirm: &mut self.confirm,
            message: &mut self.message,
            node_index: &self.node_index,
            junction_index: &self.junction_index,
            static_heads: &self.static_heads,
            unsaved: &mut self.unsaved,
            network_unsaved: &mut self.network_unsaved,
            sheet_conflict: &self.sheet_conflict,
            network_conflict: &self.network_conflict,
            width: self.width,
            height: self.height,
            fitted: self.fit.outcome.is_some(),
            marker_count,
            changed: Changed::default(),
        };
        let views = Views {
            readings: &mut self.readings,
            groups: &mut self.groups,
            fit: &mut self.fit,
            map: &mut self.map,
        };
        (ctx, views)
    }

    /// Runs `handle` on a view state with the shared context, then brings the rest in line.
    pub(super) fn with_view(
        &mut self,
        handle: impl FnOnce(&mut Ctx, Views) -> Vec<Effect>,
    ) -> Vec<Effect> {
        let (mut ctx, views) = self.split();
        let effects = handle(&mut ctx, views);
        let changed = ctx.changed;
        self.take_changes(changed);
        effects
    }

    fn take_changes(&mut self, changed: Changed) {
        if changed.network {
            self.network_changed();
        }
        if changed.sheet || changed.network {
            self.readings.read_all(&self.session, &self.static_heads);
            self.fit.inputs_changed();
        }
        if changed.fit {
            self.map.selected = 0;
        }
        if changed.fit || changed.map {
            self.rebuild_map();
        }
    }

    /// Saves the sheet after a change made outside a view's update.
    pub(super) fn save_sheet(&mut self) -> Vec<Effect> {
        self.with_view(|ctx, _| vec![readings::save_sheet(ctx)])
    }
}

/// Turns the state and an action into the next state and the effects to carry out.
pub fn update(app: &mut App, action: Action) -> Vec<Effect> {
    let prompt = matches!(
        action,
        Action::InsertChar(_)
            | Action::DeleteBack
            | Action::DeleteForward
            | Action::EditCursor(_)
            | Action::CommitEdit(_)
            | Action::CompleteOrCommit
            | Action::CancelEdit
            | Action::Escape
    );
    if app.fit.export_prompt.is_some() && prompt {
        return app.with_view(|ctx, v| v.fit.update(ctx, action));
    }
    let mut effects = Vec::new();
    match action {
        Action::Resize(width, height) => {
            app.width = width;
            app.height = height;
            app.scroll_readings();
            app.rebuild_map();
        }
        Action::Quit => saves::quit(app, &mut effects),
        Action::ToggleHelp => app.help = !app.help,
        Action::Escape => {
            if app.help {
                app.help = false;
            } else if app.confirm.take().is_some() {
                app.info("cancelled");
            } else if app.fit.running.is_some() {
                return update(app, Action::CancelCalibration);
            } else {
                app.message = None;
            }
        }
        Action::Confirm(yes) => saves::confirm(app, yes, &mut effects),
        Action::SwitchView(view) => {
            commit_pending(app, &mut effects);
            app.view = view;
            app.help = false;
        }
        Action::NextView | Action::PreviousView => {
            let step = if matches!(action, Action::NextView) {
                1
            } else {
                3
            };
            let next = View::ALL[(app.view.number() - 1 + step) % 4];
            return update(app, Action::SwitchView(next));
        }
        Action::RunCalibration => {
            commit_pending(app, &mut effects);
            effects.extend(app.with_view(|ctx, v| v.fit.update(ctx, action)));
            if effects
                .iter()
                .any(|e| matches!(e, Effect::StartCalibration(_)))
            {
                app.view = View::Fit;
            }
        }
        Action::CancelCalibration
        | Action::CalibrationProgress(_)
        | Action::CalibrationFinished(_)
        | Action::Export
        | Action::ExportRefused(_)
        | Action::ExportFinished(_) => return app.with_view(|ctx, v| v.fit.update(ctx, action)),
        Action::SaveFinished { target, result } => {
            saves::save_finished(app, target, result, &mut effects)
        }
        Action::ExternalChange { target, side_file } => {
            saves::external_change(app, target, side_file)
        }
        Action::SideFileSaved { target, result } => saves::side_file_saved(app, target, result),
        Action::SheetReloaded(result) => saves::sheet_reloaded(app, *result, &mut effects),
        Action::NetworkReloaded(result) => saves::network_reloaded(app, result),
        Action::ToggleMapShading | Action::SelectTest(_) => {
            return app.with_view(|ctx, v| v.map.update(ctx, action));
        }
        other => {
            let view = app.view;
            return app.with_view(|ctx, v| match view {
                View::Readings => v.readings.update(ctx, other),
                View::Groups => v.groups.update(ctx, other),
                View::Fit => v.fit.update(ctx, other),
                View::Map => v.map.update(ctx, other),
            });
        }
    }
    effects
}

/// Commits an edit in progress (before leaving a view or quitting: what was typed is kept).
pub(super) fn commit_pending(app: &mut App, effects: &mut Vec<Effect>) {
    let commit = Action::CommitEdit(After::Stay);
    if app.readings.edit.is_some() {
        effects.extend(app.with_view(|ctx, v| v.readings.update(ctx, commit.clone())));
    }
    if app.groups.edit.is_some() {
        effects.extend(app.with_view(|ctx, v| v.groups.update(ctx, commit)));
    }
}
