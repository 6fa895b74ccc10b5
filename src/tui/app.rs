//! The workbench state ([`App`]), what can happen to it ([`Action`]), what it asks the outside world to
//! do ([`Effect`]), and [`update`], which turns a state and an action into the next state and effects.
//!
//! Nothing here touches a terminal, a file or a thread; the runner ([`super::run`]) carries out the
//! effects and feeds their outcomes back as actions.

use std::collections::{BTreeMap, HashMap};
use std::path::PathBuf;

use crate::calibrate::{
    CalibrationError, CalibrationOptions, CalibrationResult, IterationReport, Job,
};
use crate::fieldtest::{FieldSheet, SheetColumn, StaticHeads};
use crate::network::Network;
use crate::network::edit::{GroupUpdate, apply_group_c, update_groups};
use crate::network::file::parse_network;
use crate::report::{CalibrationOutputs, RunContext};
use crate::storage::FileStamp;

use super::layout;
use super::map_model::{MapGeometry, MapShading, Point, pipe_ends, pipe_shades};
use super::sheet_reading::{self, RowReading};
use super::theme::Theme;

/// The four views.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum View {
    #[default]
    Readings,
    Groups,
    Fit,
    Map,
}

impl View {
    pub const ALL: [View; 4] = [View::Readings, View::Groups, View::Fit, View::Map];

    pub fn title(self) -> &'static str {
        match self {
            Self::Readings => "Readings",
            Self::Groups => "Groups",
            Self::Fit => "Fit",
            Self::Map => "Map",
        }
    }

    /// 1-based number shown in the title bar and used by the view keys.
    pub fn number(self) -> usize {
        Self::ALL.iter().position(|&v| v == self).unwrap_or(0) + 1
    }
}

/// The files being worked on.
#[derive(Debug, Clone)]
pub struct Session {
    pub network_path: PathBuf,
    /// The network file's text as last written, for preserving edits.
    pub network_text: String,
    pub network: Network,
    pub sheet_path: PathBuf,
    pub sheet: FieldSheet,
    /// For the demo: the scratch folder holding the copies.
    pub scratch_folder: Option<PathBuf>,
    /// Whether the sheet's first state is kept as `SHEET.orig` on the first save.
    pub keep_original: bool,
    /// What the sheet file on disk was when last read or written, and whether it may be written.
    pub sheet_file: FileState,
    /// The same for the network file.
    pub network_file: FileState,
    /// The sheet as last read from or written to disk: the common ancestor when another program's
    /// version has to be merged with ours.
    pub sheet_base: FieldSheet,
}

/// What the workbench knows about a file it works on.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FileState {
    /// The file cannot be written: edits are refused, nothing is ever written to it.
    pub read_only: bool,
    /// Size, modification time and hash of the file as last read or written (`None`: not known, e.g.
    /// a file that does not exist yet).
    pub stamp: Option<FileStamp>,
}

impl FileState {
    /// The state of the file at `path` as it is now.
    pub fn of(path: &std::path::Path) -> FileState {
        FileState {
            read_only: !crate::storage::is_writable(path),
            stamp: FileStamp::of(path).ok(),
        }
    }
}

/// A cursor movement.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Move {
    Up,
    Down,
    Left,
    Right,
    PageUp,
    PageDown,
    /// First column (or first character in an edit).
    Home,
    /// Last column (or last character in an edit).
    End,
    Top,
    Bottom,
}

/// Where the cursor goes after a committed edit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum After {
    Up,
    Down,
    Right,
    Left,
    Stay,
}

/// A cell being typed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CellEdit {
    pub row: usize,
    /// Header index (readings) or table column (groups).
    pub column: usize,
    pub buffer: String,
    /// Cursor position in characters.
    pub cursor: usize,
}

impl CellEdit {
    fn new(row: usize, column: usize, text: &str) -> Self {
        Self {
            row,
            column,
            buffer: text.to_string(),
            cursor: text.chars().count(),
        }
    }

    fn byte_at(&self, chars: usize) -> usize {
        self.buffer
            .char_indices()
            .nth(chars)
            .map_or(self.buffer.len(), |(i, _)| i)
    }
}

/// One undoable change of the sheet.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SheetEdit {
    SetCell {
        row: usize,
        column: usize,
        before: String,
        after: String,
    },
    InsertRow {
        at: usize,
        cells: Vec<String>,
    },
    DeleteRow {
        at: usize,
        cells: Vec<String>,
    },
}

/// A question waiting for y or n.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Confirm {
    DeleteRow(usize),
    OverwriteExport(PathBuf),
    /// Export a fit although the sheet or the groups changed after it.
    ExportOutOfDate,
    /// Another program changed the file on disk: y reloads theirs (re-applying ours where rows do not
    /// conflict), n keeps both (ours goes on in the side file).
    ExternalChange(SaveTarget),
    /// Quit with a cell half-typed: y keeps the typing (saved) and quits, n goes back to it.
    QuitWithTyping,
    /// Quit with edits that are not on disk: y quits anyway, n stays.
    QuitUnsaved,
}

/// A save that found the file on disk changed by someone else, and where our version went instead.
#[derive(Debug, Clone, PartialEq)]
pub struct Conflict {
    /// `SHEET.roughcal-unsaved.csv` (or the network's), with its stamp; `Err` when it could not be
    /// written either (the edits are then only in memory).
    pub side_file: Result<(PathBuf, Option<FileStamp>), String>,
}

/// What the report of an out-of-date export says about it: the question and the answer.
pub const OUT_OF_DATE_ANSWER: &str = "The sheet or the roughness groups were edited after this fit \
     ran. Asked whether to export the old fit anyway, the user answered yes: what follows describes the \
     readings and groups as they were when the fit ran, not the files as they are now.";

/// Readings view state.
#[derive(Debug, Clone, Default)]
pub struct ReadingsState {
    pub row: usize,
    /// Header index of the cursor column.
    pub column: usize,
    pub first_row: usize,
    pub first_column: usize,
    pub edit: Option<CellEdit>,
    /// The row as it reads with the edit buffer in place, while typing.
    pub preview: Option<RowReading>,
    pub undo: Vec<SheetEdit>,
    pub redo: Vec<SheetEdit>,
    /// One reading per sheet row.
    pub rows: Vec<RowReading>,
    /// The sheet's header with no rows (for reading one row while it is typed).
    pub header: Option<FieldSheet>,
    /// Display widths of the sheet's columns.
    pub widths: Vec<u16>,
}

/// Columns of the groups table.
pub const GROUP_COLUMNS: [&str; 10] = [
    "group",
    "pipes",
    "length",
    "start C",
    "min",
    "max",
    "lock",
    "fitted",
    "95% range",
    "status",
];
/// The editable columns of the groups table (start C, min, max, lock).
pub const GROUP_START: usize = 3;
pub const GROUP_MIN: usize = 4;
pub const GROUP_MAX: usize = 5;
pub const GROUP_LOCK: usize = 6;

/// One row of the groups table, in the network's units.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupRow {
    pub name: String,
    pub pipes: usize,
    pub length: f64,
    /// Length-weighted mean C of its pipes (what the fit starts from).
    pub start_c: Option<f64>,
    pub min_c: f64,
    pub max_c: f64,
    pub locked: bool,
}

/// Groups view state.
#[derive(Debug, Clone, Default)]
pub struct GroupsState {
    pub row: usize,
    pub column: usize,
    pub edit: Option<CellEdit>,
    pub rows: Vec<GroupRow>,
    /// Network file texts before each group edit, newest last (at most [`GROUP_UNDO_DEPTH`]).
    pub undo: Vec<String>,
    /// Texts undone, for redo; cleared by a new edit.
    pub redo: Vec<String>,
}

/// How many group edits can be undone. Whole file texts are kept because an edit goes through the
/// format-preserving TOML writer; a hundred copies of a 20,000-pipe file are a few hundred MB at worst.
pub const GROUP_UNDO_DEPTH: usize = 100;

/// A calibration run in progress.
#[derive(Debug, Clone)]
pub struct RunningFit {
    pub iterations: Vec<IterationReport>,
    /// What the run was given.
    pub job: Job,
    pub cancelling: bool,
}

/// A finished fit with what it was run on.
#[derive(Debug, Clone)]
pub struct FitOutcome {
    pub result: CalibrationResult,
    /// The network, tests and options of the run: the export describes these, not later edits.
    pub job: Job,
    /// Pipe C before the fit, in pipe order.
    pub pipe_c_before: Vec<f64>,
    /// Indices into `result.tests`, largest absolute error after the fit first.
    pub by_error: Vec<usize>,
}

/// Fit view state.
#[derive(Debug, Clone, Default)]
pub struct FitState {
    pub running: Option<RunningFit>,
    pub outcome: Option<FitOutcome>,
    /// Why the last run gave no result.
    pub failure: Option<String>,
    /// The sheet or the groups changed since the outcome was computed.
    pub stale: bool,
    /// The user said yes to exporting the out-of-date outcome (cleared by the next fit).
    pub export_out_of_date: bool,
    pub first_row: usize,
}

/// Map view state.
#[derive(Debug, Clone, Default)]
pub struct MapState {
    pub shading: MapShading,
    /// Index into the map's test markers.
    pub selected: usize,
    pub geometry: MapGeometry,
    /// Plan end points of every pipe (computed once per network).
    pub ends: Vec<Option<(Point, Point)>>,
}

/// A test location on the map.
#[derive(Debug, Clone, PartialEq)]
pub struct TestMarker {
    pub id: String,
    pub position: Point,
    /// Index into the outcome's `result.tests`, when there is a fit.
    pub comparison: Option<usize>,
}

/// What the status line says.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StatusMessage {
    pub text: String,
    pub error: bool,
}

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
    /// The export folder of this session, once chosen.
    pub export_folder: Option<PathBuf>,
    /// The folder being typed after Ctrl+E; empty means a new `roughcal-export-N` beside the sheet.
    pub export_prompt: Option<CellEdit>,
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

/// Which file a save was for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SaveTarget {
    Sheet,
    Network,
}

/// An export to write.
#[derive(Debug, Clone)]
pub struct ExportJob {
    /// The folder, or with `numbered` the stem of `<folder>-<n>` (first free n).
    pub folder: PathBuf,
    pub numbered: bool,
    /// Overwrite outputs already in the folder (only after the user said yes).
    pub force: bool,
    pub outputs: CalibrationOutputs,
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
    StartCalibration(Box<Job>),
    CancelCalibration,
    WriteExport(Box<ExportJob>),
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
            groups: GroupsState {
                column: GROUP_START,
                ..GroupsState::default()
            },
            fit: FitState::default(),
            map: MapState::default(),
            confirm: None,
            message: None,
            node_index: Vec::new(),
            junction_index: HashMap::new(),
            static_heads: StaticHeads::default(),
            unsaved: false,
            network_unsaved: false,
            export_folder: None,
            export_prompt: None,
            sheet_conflict: None,
            network_conflict: None,
            save_failed: false,
            quit_after_saves: false,
            quit: false,
        };
        app.network_changed();
        app.read_all_rows();
        app.readings.header = Some(sheet_reading::header_only(&app.session.sheet));
        app.readings.widths = (0..app.session.sheet.headers().len())
            .map(|i| layout::column_width(app.session.sheet.column_at(i)))
            .collect();
        app
    }

    fn network_changed(&mut self) {
        let net = &self.session.network;
        let mut index: Vec<(String, String)> = net
            .junctions
            .iter()
            .map(|j| (j.id.to_lowercase(), j.id.clone()))
            .collect();
        index.sort();
        self.node_index = index;
        self.junction_index = net
            .junctions
            .iter()
            .enumerate()
            .map(|(i, j)| (j.id.clone(), i))
            .collect();
        self.groups.rows = group_rows(net);
        self.groups.row = self
            .groups
            .row
            .min(self.groups.rows.len().saturating_sub(1));
        self.map.ends = pipe_ends(net);
        self.static_heads = StaticHeads::solve(net);
        self.rebuild_map();
    }

    /// Reads and screens the whole sheet again (after any change of the sheet or the network: rules
    /// such as a repeated test id span rows).
    fn read_all_rows(&mut self) {
        self.readings.rows = sheet_reading::read_sheet(
            &self.session.sheet,
            &self.session.network,
            &self.static_heads,
        );
    }

    /// Number of rows calibration may use.
    pub fn usable_count(&self) -> usize {
        self.readings.rows.iter().filter(|r| r.usable).count()
    }

    /// The reading of a row, with the edit preview in place for the row being typed.
    pub fn row_reading(&self, row: usize) -> Option<&RowReading> {
        match (&self.readings.edit, &self.readings.preview) {
            (Some(edit), Some(preview)) if edit.row == row => Some(preview),
            _ => self.readings.rows.get(row),
        }
    }

    /// Whether a header index is a node column (completion applies).
    pub fn is_node_column(&self, column: usize) -> bool {
        matches!(
            self.session.sheet.column_at(column),
            Some(SheetColumn::ResidualNode | SheetColumn::FlowNode)
        )
    }

    /// Junction ids starting with the last `;`-separated part of `text` (ignoring case), at most `limit`.
    pub fn node_completions(&self, text: &str, limit: usize) -> Vec<&str> {
        let part = text.rsplit(';').next().unwrap_or("").trim().to_lowercase();
        let start = self
            .node_index
            .partition_point(|(key, _)| key.as_str() < part.as_str());
        self.node_index[start..]
            .iter()
            .take_while(|(key, _)| key.starts_with(&part))
            .take(limit)
            .map(|(_, id)| id.as_str())
            .collect()
    }

    /// Test locations for the map: the residual hydrant of each fitted test, or of each usable test
    /// before any fit.
    pub fn test_markers(&self) -> Vec<TestMarker> {
        let net = &self.session.network;
        let position = |j: usize| net.junctions.get(j).and_then(|j| j.position);
        match &self.fit.outcome {
            Some(outcome) => outcome
                .job
                .tests
                .iter()
                .enumerate()
                .filter_map(|(i, t)| {
                    Some(TestMarker {
                        id: t.id.clone(),
                        position: position(t.residual_junction)?,
                        comparison: outcome
                            .result
                            .tests
                            .get(i)
                            .filter(|c| c.id == t.id)
                            .map(|_| i),
                    })
                })
                .collect(),
            None => self
                .readings
                .rows
                .iter()
                .enumerate()
                .filter(|(_, r)| r.usable)
                .filter_map(|(row, r)| {
                    let junction = *self.junction_index.get(r.residual_node.as_deref()?)?;
                    Some(TestMarker {
                        id: self
                            .session
                            .sheet
                            .cell(row, SheetColumn::Test)?
                            .trim()
                            .to_string(),
                        position: position(junction)?,
                        comparison: None,
                    })
                })
                .collect(),
        }
    }

    fn rebuild_map(&mut self) {
        let net = &self.session.network;
        let after = self
            .fit
            .outcome
            .as_ref()
            .map(|o| o.result.pipe_c_after.as_slice());
        let shades = pipe_shades(net, self.map.shading, after);
        let canvas = layout::map_canvas(layout::body_of(self.width, self.height));
        self.map.geometry =
            MapGeometry::build(&self.map.ends, &shades, canvas.width, canvas.height);
    }

    fn info(&mut self, text: impl Into<String>) {
        self.message = Some(StatusMessage {
            text: text.into(),
            error: false,
        });
    }

    fn error(&mut self, text: impl Into<String>) {
        self.message = Some(StatusMessage {
            text: text.into(),
            error: true,
        });
    }

    /// Keeps the readings cursor inside the sheet and in sight.
    fn scroll_readings(&mut self) {
        let rows = self.session.sheet.row_count();
        let columns = self.session.sheet.headers().len();
        let r = &mut self.readings;
        r.row = r.row.min(rows.saturating_sub(1));
        r.column = r.column.min(columns.saturating_sub(1));
        let visible =
            layout::readings_visible_rows(layout::body_of(self.width, self.height).height);
        if r.row < r.first_row {
            r.first_row = r.row;
        } else if r.row >= r.first_row + visible {
            r.first_row = r.row + 1 - visible;
        }
        r.first_row = r.first_row.min(rows.saturating_sub(visible));
        if r.column < r.first_column {
            r.first_column = r.column;
        }
        let frozen = self.session.sheet.column_index(SheetColumn::Test);
        while r.first_column < r.column
            && !layout::shown_columns(&r.widths, r.first_column, self.width, frozen)
                .contains(&r.column)
        {
            r.first_column += 1;
        }
    }

    /// After a change of the sheet: read it again and save it (into the side file while another
    /// program's change waits for an answer).
    fn sheet_save(&mut self) -> Effect {
        self.read_all_rows();
        self.unsaved = true;
        self.fit.stale = self.fit.outcome.is_some();
        self.fit.export_out_of_date = false;
        let text = self.session.sheet.to_csv_string();
        if let Some(Conflict {
            side_file: Ok((side, _)),
        }) = &self.sheet_conflict
        {
            return Effect::SaveSideFile {
                target: SaveTarget::Sheet,
                path: side.clone(),
                text,
            };
        }
        let keep_original = std::mem::replace(&mut self.session.keep_original, false);
        Effect::SaveSheet {
            path: self.session.sheet_path.clone(),
            text,
            keep_original,
            expected: self.session.sheet_file.stamp,
        }
    }

    /// Whether edits exist that are not in the file they belong to.
    pub fn has_unsaved_edits(&self) -> bool {
        self.unsaved
            || self.network_unsaved
            || self.save_failed
            || self.sheet_conflict.is_some()
            || self.network_conflict.is_some()
    }

    /// Refuses an edit of a read-only file with a message; returns whether it was refused.
    fn refuse_read_only(&mut self, target: SaveTarget) -> bool {
        let (file, path) = match target {
            SaveTarget::Sheet => (&self.session.sheet_file, &self.session.sheet_path),
            SaveTarget::Network => (&self.session.network_file, &self.session.network_path),
        };
        if !file.read_only {
            return false;
        }
        let name = path.display().to_string();
        self.error(format!(
            "{name} is read-only: edits are refused and nothing is written (make it writable and \
             open it again to edit)"
        ));
        true
    }
}

/// The groups table rows of a network, in its units.
pub fn group_rows(net: &Network) -> Vec<GroupRow> {
    let units = net.units;
    net.groups
        .iter()
        .enumerate()
        .map(|(g, group)| {
            let start = crate::calibrate::group_start(net, g);
            GroupRow {
                name: group.name.clone(),
                pipes: start.pipes.len(),
                length: units.length_from_m(start.length_m),
                start_c: start.start_c,
                min_c: start.min_c,
                max_c: start.max_c,
                locked: group.locked,
            }
        })
        .collect()
}

/// Turns the state and an action into the next state and the effects to carry out.
pub fn update(app: &mut App, action: Action) -> Vec<Effect> {
    let mut effects = Vec::new();
    if app.export_prompt.is_some()
        && matches!(
            action,
            Action::InsertChar(_)
                | Action::DeleteBack
                | Action::DeleteForward
                | Action::EditCursor(_)
                | Action::CommitEdit(_)
                | Action::CompleteOrCommit
                | Action::CancelEdit
                | Action::Escape
        )
    {
        export_prompt_action(app, action, &mut effects);
        return effects;
    }
    match action {
        Action::Resize(width, height) => {
            app.width = width;
            app.height = height;
            app.scroll_readings();
            app.rebuild_map();
        }
        Action::Quit => quit(app, &mut effects),
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
        Action::Confirm(yes) => confirm(app, yes, &mut effects),
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
        Action::RunCalibration => run_calibration(app, &mut effects),
        Action::CancelCalibration => {
            if let Some(running) = &mut app.fit.running {
                running.cancelling = true;
                effects.push(Effect::CancelCalibration);
                app.info("cancelling the fit...");
            }
        }
        Action::CalibrationProgress(report) => {
            if let Some(running) = &mut app.fit.running {
                running.iterations.push(report);
            }
        }
        Action::CalibrationFinished(result) => finish_calibration(app, *result),
        Action::Export => open_export_prompt(app),
        Action::ExportRefused(folder) => {
            app.confirm = Some(Confirm::OverwriteExport(folder.clone()));
            app.info(format!(
                "overwrite the outputs in {}? (y/n)",
                folder.display()
            ));
        }
        Action::ExportFinished(Ok(folder)) => {
            app.export_folder = Some(folder.clone());
            app.info(format!(
                "exported (an aid for a licensed engineer to review) to {}",
                folder.display()
            ));
        }
        Action::ExportFinished(Err(message)) => app.error(format!("export failed: {message}")),
        Action::SaveFinished { target, result } => save_finished(app, target, result, &mut effects),
        Action::ExternalChange { target, side_file } => external_change(app, target, side_file),
        Action::SideFileSaved { target, result } => {
            let conflict = match target {
                SaveTarget::Sheet => &mut app.sheet_conflict,
                SaveTarget::Network => &mut app.network_conflict,
            };
            match (conflict, result) {
                (
                    Some(Conflict {
                        side_file: Ok((_, stamp)),
                    }),
                    Ok(new),
                ) => *stamp = new,
                (_, Err(message)) => app.error(format!("NOT SAVED, not even aside: {message}")),
                _ => {}
            }
        }
        Action::SheetReloaded(result) => sheet_reloaded(app, *result, &mut effects),
        Action::NetworkReloaded(result) => network_reloaded(app, result),
        Action::ToggleMapShading => {
            app.map.shading = match app.map.shading {
                MapShading::Group => MapShading::FittedChange,
                MapShading::FittedChange => MapShading::Group,
            };
            if app.map.shading == MapShading::FittedChange && app.fit.outcome.is_none() {
                app.info("no fit yet: every pipe shows as unchanged (Ctrl+R runs the fit)");
            }
            app.rebuild_map();
        }
        Action::SelectTest(step) => {
            let count = app.test_markers().len();
            if count > 0 {
                let current = app.map.selected.min(count - 1) as i64;
                app.map.selected = (current + i64::from(step)).rem_euclid(count as i64) as usize;
            }
        }
        other => match app.view {
            View::Readings => readings_action(app, other, &mut effects),
            View::Groups => groups_action(app, other, &mut effects),
            View::Fit => {
                if let Action::MoveCursor(m) = other {
                    let count = app.fit.outcome.as_ref().map_or(0, |o| o.by_error.len());
                    app.fit.first_row = moved(app.fit.first_row, count, m, 10);
                }
            }
            View::Map => {
                if let Action::MoveCursor(m) = other {
                    let step = match m {
                        Move::Up | Move::Left | Move::PageUp => -1,
                        _ => 1,
                    };
                    return update(app, Action::SelectTest(step));
                }
            }
        },
    }
    effects
}

/// Ctrl+Q: a half-typed cell or edits not on disk are never left without asking first.
fn quit(app: &mut App, effects: &mut Vec<Effect>) {
    if matches!(
        app.confirm,
        Some(Confirm::QuitWithTyping | Confirm::QuitUnsaved)
    ) {
        return;
    }
    app.confirm = None;
    let typing = app
        .readings
        .edit
        .as_ref()
        .or(app.groups.edit.as_ref())
        .map(|e| e.buffer.clone());
    if let Some(typed) = typing {
        app.confirm = Some(Confirm::QuitWithTyping);
        app.error(format!(
            "a cell is half-typed (`{typed}`): y keeps it (saved) and quits, n goes back to it \
             (Esc there throws it away)"
        ));
        return;
    }
    if app.has_unsaved_edits() {
        let aside = [&app.sheet_conflict, &app.network_conflict]
            .into_iter()
            .flatten()
            .filter_map(|c| c.side_file.as_ref().ok())
            .map(|(path, _)| path.display().to_string())
            .collect::<Vec<_>>();
        let kept = if aside.is_empty() {
            "they exist only here".to_string()
        } else {
            format!("they are kept in {}", aside.join(", "))
        };
        app.confirm = Some(Confirm::QuitUnsaved);
        app.error(format!(
            "edits are NOT SAVED to the files they belong to ({kept}): quit anyway? (y/n)"
        ));
        return;
    }
    finish_quit(app, effects);
}

fn finish_quit(app: &mut App, effects: &mut Vec<Effect>) {
    if app.fit.running.is_some() {
        effects.push(Effect::CancelCalibration);
    }
    app.quit = true;
}

fn save_finished(
    app: &mut App,
    target: SaveTarget,
    result: Result<Option<FileStamp>, String>,
    effects: &mut Vec<Effect>,
) {
    match result {
        Ok(stamp) => {
            app.save_failed = false;
            match target {
                SaveTarget::Sheet => {
                    app.unsaved = false;
                    app.session.sheet_file.stamp = stamp;
                    app.session.sheet_base = app.session.sheet.clone();
                }
                SaveTarget::Network => {
                    app.network_unsaved = false;
                    app.session.network_file.stamp = stamp;
                }
            }
        }
        Err(message) => {
            app.save_failed = true;
            let what = match target {
                SaveTarget::Sheet => "sheet",
                SaveTarget::Network => "network",
            };
            app.error(format!(
                "NOT SAVED: {message}; the {what} file is as before, the next edit saves again"
            ));
        }
    }
    if std::mem::take(&mut app.quit_after_saves) {
        quit(app, effects);
    }
}

/// A save found the file changed by another program: saving to it stops, our version is in the side
/// file (or only in memory), and the user is asked what to do.
fn external_change(
    app: &mut App,
    target: SaveTarget,
    side_file: Result<(PathBuf, Option<FileStamp>), String>,
) {
    app.quit_after_saves = false;
    let path = match target {
        SaveTarget::Sheet => app.session.sheet_path.display().to_string(),
        SaveTarget::Network => app.session.network_path.display().to_string(),
    };
    let kept = match &side_file {
        Ok((side, _)) => format!("yours are kept in {}", side.display()),
        Err(e) => format!("yours are only in memory ({e})"),
    };
    let reload = match target {
        SaveTarget::Sheet => "reload theirs and re-apply yours where rows do not conflict",
        SaveTarget::Network => "reload theirs (your group edits stay in the side file)",
    };
    app.error(format!(
        "{path} was changed by another program since it was read: NOT SAVED, {kept}. y: {reload}; \
         n: keep both (you go on in the side file)"
    ));
    let conflict = Some(Conflict { side_file });
    match target {
        SaveTarget::Sheet => app.sheet_conflict = conflict,
        SaveTarget::Network => app.network_conflict = conflict,
    }
    app.confirm = Some(Confirm::ExternalChange(target));
}

/// "Keep both": the other program's file stays as it is, the workbench goes on with ours in the side
/// file.
fn keep_both(app: &mut App, target: SaveTarget) {
    let conflict = match target {
        SaveTarget::Sheet => app.sheet_conflict.take(),
        SaveTarget::Network => app.network_conflict.take(),
    };
    let Some(Conflict {
        side_file: Ok((side, stamp)),
    }) = conflict
    else {
        // Nothing on disk holds our version: keep asking rather than pretend it is kept.
        app.error(
            "your edits could not be written aside: they are only in memory; free the folder and \
             edit again to retry",
        );
        return;
    };
    let file = FileState {
        read_only: false,
        stamp,
    };
    match target {
        SaveTarget::Sheet => {
            let theirs = std::mem::replace(&mut app.session.sheet_path, side.clone());
            app.session.sheet_file = file;
            app.session.sheet_base = app.session.sheet.clone();
            app.session.keep_original = false;
            app.unsaved = false;
            app.info(format!(
                "kept both: theirs in {}, yours in {} (edits now save there)",
                theirs.display(),
                side.display()
            ));
        }
        SaveTarget::Network => {
            let theirs = std::mem::replace(&mut app.session.network_path, side.clone());
            app.session.network_file = file;
            app.network_unsaved = false;
            app.info(format!(
                "kept both: theirs in {}, yours in {} (group edits now save there)",
                theirs.display(),
                side.display()
            ));
        }
    }
}

/// "Reload theirs": their sheet becomes the sheet, with our edited rows re-applied where they did not
/// touch the same row; the rows both changed keep their version (ours stays in the side file).
fn sheet_reloaded(
    app: &mut App,
    result: Result<(FieldSheet, Option<FileStamp>), String>,
    effects: &mut Vec<Effect>,
) {
    let (theirs, stamp) = match result {
        Ok(read) => read,
        Err(message) => {
            app.error(format!(
                "cannot read the sheet again ({message}): nothing changed; y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Sheet));
            return;
        }
    };
    let merged = super::merge::reapply(&app.session.sheet_base, &app.session.sheet, &theirs);
    let side = app
        .sheet_conflict
        .take()
        .and_then(|c| c.side_file.ok())
        .map(|(p, _)| p.display().to_string());
    app.session.sheet = merged.sheet;
    app.session.sheet_base = theirs;
    app.session.sheet_file.stamp = stamp;
    app.readings.undo.clear();
    app.readings.redo.clear();
    app.readings.edit = None;
    app.readings.preview = None;
    app.unsaved = false;
    app.scroll_readings();
    let mut message = format!(
        "reloaded the other program's sheet; re-applied {} of your row edits",
        merged.applied
    );
    if !merged.conflicts.is_empty() {
        message.push_str(&format!(
            "; rows changed on both sides keep theirs: {}{}",
            merged.conflicts.join(", "),
            side.map(|s| format!(" (yours are in {s})"))
                .unwrap_or_default()
        ));
    }
    if merged.applied > 0 {
        effects.push(app.sheet_save());
    } else {
        app.read_all_rows();
    }
    if merged.conflicts.is_empty() {
        app.info(message);
    } else {
        app.error(message);
    }
}

/// "Reload theirs" for the network: their text becomes the network; our group edits stay in the side
/// file (a network is not merged row by row).
fn network_reloaded(app: &mut App, result: Result<(String, Option<FileStamp>), String>) {
    let (text, stamp) = match result {
        Ok(read) => read,
        Err(message) => {
            app.error(format!(
                "cannot read the network again ({message}): nothing changed; y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Network));
            return;
        }
    };
    let name = app.session.network_path.display().to_string();
    match parse_network(&text, &name) {
        Ok(loaded) => {
            let side = app
                .network_conflict
                .take()
                .and_then(|c| c.side_file.ok())
                .map(|(p, _)| p.display().to_string());
            app.session.network = loaded.network;
            app.session.network_text = text;
            app.session.network_file.stamp = stamp;
            app.network_unsaved = false;
            app.groups.undo.clear();
            app.groups.redo.clear();
            app.network_changed();
            app.read_all_rows();
            app.fit.stale = app.fit.outcome.is_some();
            app.info(format!(
                "reloaded {name} as the other program left it{}",
                side.map(|s| format!("; your group edits are in {s}"))
                    .unwrap_or_default()
            ));
        }
        Err(e) => {
            app.error(format!(
                "their network does not read ({e}); kept yours: y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Network));
        }
    }
}

/// A row index after a vertical move in a list of `count`.
fn moved(row: usize, count: usize, m: Move, page: usize) -> usize {
    let last = count.saturating_sub(1);
    match m {
        Move::Up => row.saturating_sub(1),
        Move::Down => (row + 1).min(last),
        Move::PageUp => row.saturating_sub(page),
        Move::PageDown => (row + page).min(last),
        Move::Top => 0,
        Move::Bottom => last,
        _ => row,
    }
}

/// Commits an edit in progress (before leaving a view or quitting: what was typed is kept).
fn commit_pending(app: &mut App, effects: &mut Vec<Effect>) {
    if app.readings.edit.is_some() {
        readings_action(app, Action::CommitEdit(After::Stay), effects);
    }
    if app.groups.edit.is_some() {
        groups_action(app, Action::CommitEdit(After::Stay), effects);
    }
}

fn confirm(app: &mut App, yes: bool, effects: &mut Vec<Effect>) {
    let Some(question) = app.confirm.take() else {
        return;
    };
    if !yes {
        match question {
            Confirm::ExternalChange(target) => keep_both(app, target),
            Confirm::QuitWithTyping | Confirm::QuitUnsaved => app.info("not quitting: carry on"),
            _ => app.info("cancelled"),
        }
        return;
    }
    match question {
        Confirm::DeleteRow(row) => {
            let Ok(cells) = app.session.sheet.delete_row(row) else {
                app.error("that row is gone already");
                return;
            };
            let test = cells.first().cloned().unwrap_or_default();
            record(app, SheetEdit::DeleteRow { at: row, cells });
            app.scroll_readings();
            app.info(format!(
                "row {} ({test}) deleted; Ctrl+Z brings it back",
                row + 1
            ));
            effects.push(app.sheet_save());
        }
        Confirm::OverwriteExport(folder) => {
            // The question was about this folder: the forced export goes there and nowhere else.
            export(app, true, Some(folder), effects);
        }
        Confirm::ExportOutOfDate => {
            app.fit.export_out_of_date = true;
            ask_export_folder(app);
        }
        Confirm::ExternalChange(target) => {
            let path = match target {
                SaveTarget::Sheet => app.session.sheet_path.clone(),
                SaveTarget::Network => app.session.network_path.clone(),
            };
            app.info(format!("reading {} again...", path.display()));
            effects.push(match target {
                SaveTarget::Sheet => Effect::ReloadSheet(path),
                SaveTarget::Network => Effect::ReloadNetwork(path),
            });
        }
        Confirm::QuitWithTyping => {
            let before = effects.len();
            commit_pending(app, effects);
            if effects.len() == before {
                quit(app, effects);
            } else {
                // The typing is kept; quitting goes on once its save has landed (or asks again).
                app.quit_after_saves = true;
            }
        }
        Confirm::QuitUnsaved => finish_quit(app, effects),
    }
}

fn record(app: &mut App, edit: SheetEdit) {
    app.readings.undo.push(edit);
    app.readings.redo.clear();
}

/// Applies a sheet edit (or its inverse) and returns the cell to put the cursor on.
fn apply_sheet_edit(app: &mut App, edit: &SheetEdit, inverse: bool) -> Option<(usize, usize)> {
    let sheet = &mut app.session.sheet;
    match (edit, inverse) {
        (
            SheetEdit::SetCell {
                row,
                column,
                before,
                after,
            },
            _,
        ) => {
            let value = if inverse { before } else { after };
            sheet.set_cell_at(*row, *column, value).ok()?;
            Some((*row, *column))
        }
        (SheetEdit::InsertRow { at, cells }, false)
        | (SheetEdit::DeleteRow { at, cells }, true) => {
            sheet.insert_row_cells(*at, cells.clone()).ok()?;
            Some((*at, app.readings.column))
        }
        (SheetEdit::InsertRow { at, .. }, true) | (SheetEdit::DeleteRow { at, .. }, false) => {
            sheet.delete_row(*at).ok()?;
            Some((at.saturating_sub(1), app.readings.column))
        }
    }
}

fn undo_redo(app: &mut App, undo: bool, effects: &mut Vec<Effect>) {
    let popped = if undo {
        app.readings.undo.pop()
    } else {
        app.readings.redo.pop()
    };
    let Some(edit) = popped else {
        app.info(if undo {
            "nothing to undo"
        } else {
            "nothing to redo"
        });
        return;
    };
    match apply_sheet_edit(app, &edit, undo) {
        Some((row, column)) => {
            app.readings.row = row;
            app.readings.column = column;
            app.scroll_readings();
            let what = match &edit {
                SheetEdit::SetCell { .. } => "cell edit",
                SheetEdit::InsertRow { .. } => "row added",
                SheetEdit::DeleteRow { .. } => "row deleted",
            };
            app.info(format!("{} {what}", if undo { "undid" } else { "redid" }));
            effects.push(app.sheet_save());
        }
        None => app.error("the sheet no longer matches that edit"),
    }
    if undo {
        app.readings.redo.push(edit);
    } else {
        app.readings.undo.push(edit);
    }
}

fn update_preview(app: &mut App) {
    let r = &app.readings;
    app.readings.preview = match (&r.edit, &r.header) {
        (Some(edit), Some(header)) => Some(sheet_reading::preview_row(
            header,
            &app.session.sheet,
            &app.session.network,
            &app.static_heads,
            edit.row,
            edit.column,
            &edit.buffer,
        )),
        _ => None,
    };
}

/// Edits common to both tables: typing into a [`CellEdit`].
fn edit_text(edit: &mut CellEdit, action: &Action) -> bool {
    match action {
        Action::InsertChar(c) => {
            let at = edit.byte_at(edit.cursor);
            edit.buffer.insert(at, *c);
            edit.cursor += 1;
        }
        Action::DeleteBack => {
            if edit.cursor > 0 {
                edit.cursor -= 1;
                let at = edit.byte_at(edit.cursor);
                edit.buffer.remove(at);
            }
        }
        Action::DeleteForward => {
            if edit.cursor < edit.buffer.chars().count() {
                let at = edit.byte_at(edit.cursor);
                edit.buffer.remove(at);
            }
        }
        Action::EditCursor(m) => {
            let len = edit.buffer.chars().count();
            edit.cursor = match m {
                Move::Left => edit.cursor.saturating_sub(1),
                Move::Right => (edit.cursor + 1).min(len),
                Move::Home => 0,
                Move::End => len,
                _ => edit.cursor,
            };
        }
        _ => return false,
    }
    true
}

fn readings_action(app: &mut App, action: Action, effects: &mut Vec<Effect>) {
    if matches!(
        action,
        Action::BeginEdit
            | Action::BeginEditWith(_)
            | Action::AddRow
            | Action::DeleteRow
            | Action::Undo
            | Action::Redo
    ) && app.refuse_read_only(SaveTarget::Sheet)
    {
        return;
    }
    if let Some(edit) = &mut app.readings.edit
        && edit_text(edit, &action)
    {
        update_preview(app);
        return;
    }
    let rows = app.session.sheet.row_count();
    match action {
        Action::MoveCursor(m) => {
            let r = &mut app.readings;
            let columns = app.session.sheet.headers().len();
            let page = layout::readings_visible_rows(layout::body_of(app.width, app.height).height);
            match m {
                Move::Left => r.column = r.column.saturating_sub(1),
                Move::Right => r.column = (r.column + 1).min(columns.saturating_sub(1)),
                Move::Home => r.column = 0,
                Move::End => r.column = columns.saturating_sub(1),
                vertical => r.row = moved(r.row, rows, vertical, page),
            }
            app.scroll_readings();
            app.message = None;
        }
        Action::BeginEdit | Action::BeginEditWith(_) => {
            if rows == 0 {
                // Typing into an empty sheet starts its first row.
                readings_action(app, Action::AddRow, effects);
                if matches!(action, Action::BeginEdit) {
                    return;
                }
            }
            let (row, column) = (app.readings.row, app.readings.column);
            let text = match action {
                Action::BeginEditWith(c) => c.to_string(),
                _ => app
                    .session
                    .sheet
                    .cell_at(row, column)
                    .unwrap_or("")
                    .to_string(),
            };
            app.readings.edit = Some(CellEdit::new(row, column, &text));
            update_preview(app);
        }
        Action::CompleteOrCommit => {
            let Some(edit) = &app.readings.edit else {
                return;
            };
            if app.is_node_column(edit.column) {
                let part = edit
                    .buffer
                    .rsplit(';')
                    .next()
                    .unwrap_or("")
                    .trim()
                    .to_string();
                let exact = app.node_index.iter().any(|(_, id)| *id == part);
                let first = app
                    .node_completions(&edit.buffer, 1)
                    .first()
                    .map(|s| s.to_string());
                if let (false, false, Some(id)) = (part.is_empty(), exact, first) {
                    if let Some(edit) = &mut app.readings.edit {
                        let keep =
                            edit.buffer.len() - edit.buffer.rsplit(';').next().unwrap_or("").len();
                        edit.buffer.truncate(keep);
                        edit.buffer.push_str(&id);
                        edit.cursor = edit.buffer.chars().count();
                    }
                    update_preview(app);
                    return;
                }
            }
            readings_action(app, Action::CommitEdit(After::Right), effects);
        }
        Action::CommitEdit(after) => {
            let Some(edit) = app.readings.edit.take() else {
                return;
            };
            app.readings.preview = None;
            match app
                .session
                .sheet
                .set_cell_at(edit.row, edit.column, &edit.buffer)
            {
                Ok(before) if before != edit.buffer => {
                    record(
                        app,
                        SheetEdit::SetCell {
                            row: edit.row,
                            column: edit.column,
                            before,
                            after: edit.buffer,
                        },
                    );
                    effects.push(app.sheet_save());
                }
                Ok(_) => {}
                Err(e) => app.error(format!("cannot edit that cell: {e}")),
            }
            let m = match after {
                After::Up => Some(Move::Up),
                After::Down => Some(Move::Down),
                After::Right => Some(Move::Right),
                After::Left => Some(Move::Left),
                After::Stay => None,
            };
            if let Some(m) = m {
                readings_action(app, Action::MoveCursor(m), effects);
            }
        }
        Action::CancelEdit => {
            app.readings.edit = None;
            app.readings.preview = None;
        }
        Action::AddRow => {
            let at = if rows == 0 { 0 } else { app.readings.row + 1 };
            let cells = vec![String::new(); app.session.sheet.headers().len()];
            if app
                .session
                .sheet
                .insert_row_cells(at, cells.clone())
                .is_err()
            {
                return;
            }
            record(app, SheetEdit::InsertRow { at, cells });
            app.readings.row = at;
            app.readings.column = app
                .session
                .sheet
                .column_index(SheetColumn::Test)
                .unwrap_or(0);
            app.scroll_readings();
            app.info(format!(
                "row {} added: type the test id, Tab to the next column",
                at + 1
            ));
            effects.push(app.sheet_save());
        }
        Action::DeleteRow => {
            if rows == 0 {
                return;
            }
            let row = app.readings.row;
            let test = app
                .session
                .sheet
                .cell(row, SheetColumn::Test)
                .unwrap_or("")
                .to_string();
            app.confirm = Some(Confirm::DeleteRow(row));
            app.info(format!("delete row {} ({test})? (y/n)", row + 1));
        }
        Action::Undo => undo_redo(app, true, effects),
        Action::Redo => undo_redo(app, false, effects),
        _ => {}
    }
}

fn groups_action(app: &mut App, action: Action, effects: &mut Vec<Effect>) {
    if matches!(
        action,
        Action::BeginEdit
            | Action::BeginEditWith(_)
            | Action::ToggleLock
            | Action::Undo
            | Action::Redo
    ) && app.refuse_read_only(SaveTarget::Network)
    {
        return;
    }
    if let Some(edit) = &mut app.groups.edit
        && edit_text(edit, &action)
    {
        return;
    }
    let count = app.groups.rows.len();
    if count == 0 {
        return;
    }
    match action {
        Action::MoveCursor(m) => {
            let g = &mut app.groups;
            match m {
                Move::Left => g.column = g.column.saturating_sub(1).max(GROUP_START),
                Move::Right => g.column = (g.column + 1).min(GROUP_LOCK),
                Move::Home => g.column = GROUP_START,
                Move::End => g.column = GROUP_LOCK,
                vertical => g.row = moved(g.row, count, vertical, 10),
            }
            g.column = g.column.clamp(GROUP_START, GROUP_LOCK);
        }
        Action::BeginEdit | Action::BeginEditWith(_) => {
            let g = &mut app.groups;
            g.column = g.column.clamp(GROUP_START, GROUP_LOCK);
            if g.column == GROUP_LOCK {
                if matches!(action, Action::BeginEdit | Action::BeginEditWith(' ')) {
                    groups_action(app, Action::ToggleLock, effects);
                }
                return;
            }
            let row = &g.rows[g.row];
            let text = match action {
                Action::BeginEditWith(c) => c.to_string(),
                _ => format_c(match g.column {
                    GROUP_START => row.start_c.unwrap_or(0.0),
                    GROUP_MIN => row.min_c,
                    _ => row.max_c,
                }),
            };
            g.edit = Some(CellEdit::new(g.row, g.column, &text));
        }
        Action::CompleteOrCommit => groups_action(app, Action::CommitEdit(After::Right), effects),
        Action::CommitEdit(after) => {
            let Some(edit) = app.groups.edit.take() else {
                return;
            };
            let Ok(value) = edit.buffer.trim().parse::<f64>() else {
                app.error(format!(
                    "`{}` is not a number; nothing changed",
                    edit.buffer
                ));
                return;
            };
            let name = app.groups.rows[edit.row].name.clone();
            let text = &app.session.network_text;
            let edited = match edit.column {
                GROUP_START => apply_group_c(text, &BTreeMap::from([(name.clone(), value)])),
                column => {
                    let update = if column == GROUP_MIN {
                        GroupUpdate {
                            min: Some(value),
                            ..GroupUpdate::default()
                        }
                    } else {
                        GroupUpdate {
                            max: Some(value),
                            ..GroupUpdate::default()
                        }
                    };
                    update_groups(text, &BTreeMap::from([(name.clone(), update)]))
                }
            };
            match edited {
                Ok(new_text) => edit_network_text(app, new_text, effects),
                Err(e) => app.error(format!("{name}: {e}; nothing changed")),
            }
            let g = &mut app.groups;
            match after {
                After::Up => g.row = g.row.saturating_sub(1),
                After::Down => g.row = (g.row + 1).min(count - 1),
                After::Right => g.column = (g.column + 1).min(GROUP_LOCK),
                After::Left => g.column = g.column.saturating_sub(1).max(GROUP_START),
                After::Stay => {}
            }
        }
        Action::CancelEdit => app.groups.edit = None,
        Action::ToggleLock => {
            let row = &app.groups.rows[app.groups.row];
            let name = row.name.clone();
            let update = GroupUpdate {
                locked: Some(!row.locked),
                ..GroupUpdate::default()
            };
            match update_groups(
                &app.session.network_text,
                &BTreeMap::from([(name.clone(), update)]),
            ) {
                Ok(new_text) => edit_network_text(app, new_text, effects),
                Err(e) => app.error(format!("{name}: {e}")),
            }
        }
        Action::Undo => undo_redo_groups(app, true, effects),
        Action::Redo => undo_redo_groups(app, false, effects),
        _ => {}
    }
}

/// A C-factor as typed in the groups table.
pub fn format_c(c: f64) -> String {
    let rounded = (c * 10.0).round() / 10.0;
    if rounded.fract() == 0.0 {
        format!("{rounded:.0}")
    } else {
        format!("{rounded:.1}")
    }
}

/// A group edit by the user: applied and saved like any network text, and undoable.
fn edit_network_text(app: &mut App, text: String, effects: &mut Vec<Effect>) {
    let before = app.session.network_text.clone();
    if set_network_text(app, text, effects) {
        if app.groups.undo.len() == GROUP_UNDO_DEPTH {
            app.groups.undo.remove(0);
        }
        app.groups.undo.push(before);
        app.groups.redo.clear();
    }
}

/// Ctrl+Z / Ctrl+Y in the Groups view: puts back the network text before (or after) a group edit.
fn undo_redo_groups(app: &mut App, undo: bool, effects: &mut Vec<Effect>) {
    let popped = if undo {
        app.groups.undo.pop()
    } else {
        app.groups.redo.pop()
    };
    let Some(text) = popped else {
        app.info(if undo {
            "no group edit to undo"
        } else {
            "no group edit to redo"
        });
        return;
    };
    let current = app.session.network_text.clone();
    if set_network_text(app, text, effects) {
        if undo {
            app.groups.redo.push(current);
        } else {
            app.groups.undo.push(current);
        }
        let name = app.session.network_path.display().to_string();
        app.info(format!(
            "{} the group edit; saved to {name}",
            if undo { "undid" } else { "redid" }
        ));
    }
}

/// Takes an edited network text: reads it back (so the model always matches the file) and saves it.
/// Returns whether it was taken.
fn set_network_text(app: &mut App, text: String, effects: &mut Vec<Effect>) -> bool {
    let name = app.session.network_path.display().to_string();
    match parse_network(&text, &name) {
        Ok(loaded) => {
            app.session.network = loaded.network;
            app.session.network_text = text.clone();
            app.network_changed();
            app.read_all_rows();
            app.network_unsaved = true;
            app.fit.stale = app.fit.outcome.is_some();
            app.fit.export_out_of_date = false;
            let side = match &app.network_conflict {
                Some(Conflict {
                    side_file: Ok((side, _)),
                }) => Some(side.clone()),
                _ => None,
            };
            match side {
                Some(side) => {
                    app.info(format!("kept aside in {}", side.display()));
                    effects.push(Effect::SaveSideFile {
                        target: SaveTarget::Network,
                        path: side,
                        text,
                    });
                }
                None => {
                    app.info(format!("saved to {name}"));
                    effects.push(Effect::SaveNetwork {
                        path: app.session.network_path.clone(),
                        text,
                        expected: app.session.network_file.stamp,
                    });
                }
            }
            true
        }
        Err(e) => {
            app.error(format!("the edited network does not read back: {e}"));
            false
        }
    }
}

fn run_calibration(app: &mut App, effects: &mut Vec<Effect>) {
    commit_pending(app, effects);
    if app.fit.running.is_some() {
        app.info("a fit is already running (Esc cancels it)");
        return;
    }
    let job = Job::new(
        app.session.network.clone(),
        app.session.network_text.clone(),
        &app.session.sheet,
        CalibrationOptions::for_units(app.session.network.units),
        &app.static_heads,
    );
    if job.tests.is_empty() {
        app.error("no usable test on the sheet: fix the flagged rows first");
        return;
    }
    app.fit.failure = None;
    app.view = View::Fit;
    app.info(format!(
        "fitting {} tests... (Esc cancels)",
        job.tests.len()
    ));
    app.fit.running = Some(RunningFit {
        iterations: Vec::new(),
        job: job.clone(),
        cancelling: false,
    });
    effects.push(Effect::StartCalibration(Box::new(job)));
}

fn finish_calibration(app: &mut App, result: Result<CalibrationResult, CalibrationError>) {
    let Some(running) = app.fit.running.take() else {
        return;
    };
    match result {
        Ok(result) => {
            let mut by_error: Vec<usize> = (0..result.tests.len()).collect();
            let error = |i: usize| {
                let t = &result.tests[i];
                (t.measured_static - t.modelled_static_after)
                    .abs()
                    .max((t.measured_residual - t.modelled_residual_after).abs())
            };
            by_error.sort_by(|&a, &b| error(b).total_cmp(&error(a)));
            let converged = result.converged;
            let termination = result.termination.clone();
            app.fit.outcome = Some(FitOutcome {
                pipe_c_before: app.session.network.c_factors(),
                job: running.job,
                result,
                by_error,
            });
            app.fit.stale = false;
            app.fit.export_out_of_date = false;
            app.fit.first_row = 0;
            app.map.selected = 0;
            app.rebuild_map();
            if converged {
                app.info(format!("fit done: {termination}. Ctrl+E exports"));
            } else {
                app.error(format!("FIT DID NOT CONVERGE: {termination}"));
            }
        }
        Err(CalibrationError::Cancelled) => app.info("fit cancelled; the previous result is kept"),
        Err(e) => {
            app.fit.failure = Some(e.to_string());
            app.error(format!("fit failed: {e}"));
        }
    }
}

/// Ctrl+E: refuses a fit that did not converge, asks first about one the edits since have made out
/// of date, then asks where to export.
fn open_export_prompt(app: &mut App) {
    let Some(outcome) = &app.fit.outcome else {
        app.error("nothing to export yet: run the fit first (Ctrl+R)");
        return;
    };
    if !outcome.result.converged {
        app.error(
            "the last fit did NOT converge: it is not a fit and is not exported; adjust the bounds or \
             the sheet and run the fit again (Ctrl+R)",
        );
        return;
    }
    if app.fit.stale && !app.fit.export_out_of_date {
        app.confirm = Some(Confirm::ExportOutOfDate);
        app.info(
            "fit out of date: the sheet or groups changed since it ran. Ctrl+R fits again; export \
             the old fit anyway (the report says so)? (y/n)",
        );
        return;
    }
    ask_export_folder(app);
}

/// Opens the export folder prompt, offering this session's export folder if there is one.
fn ask_export_folder(app: &mut App) {
    let offered = app
        .export_folder
        .as_ref()
        .map(|f| f.display().to_string())
        .unwrap_or_default();
    app.export_prompt = Some(CellEdit::new(0, 0, &offered));
}

/// Typing in the export prompt; Enter exports, Esc gives up.
fn export_prompt_action(app: &mut App, action: Action, effects: &mut Vec<Effect>) {
    if let Some(prompt) = &mut app.export_prompt
        && edit_text(prompt, &action)
    {
        return;
    }
    let Some(prompt) = app.export_prompt.take() else {
        return;
    };
    match action {
        Action::CommitEdit(_) | Action::CompleteOrCommit => {
            let typed = prompt.buffer.trim();
            let folder = (!typed.is_empty()).then(|| PathBuf::from(typed));
            export(app, false, folder, effects);
        }
        _ => app.info("export cancelled"),
    }
}

/// Writes the outputs into `folder`, or into a new numbered folder beside the sheet when `None`.
fn export(app: &mut App, force: bool, folder: Option<PathBuf>, effects: &mut Vec<Effect>) {
    let Some(outcome) = &app.fit.outcome else {
        app.error("nothing to export yet: run the fit first (Ctrl+R)");
        return;
    };
    let job = &outcome.job;
    let network_file = app.session.network_path.display().to_string();
    let sheet_file = app.session.sheet_path.display().to_string();
    let run = RunContext::of_job(
        job,
        &outcome.result,
        &network_file,
        &sheet_file,
        (app.fit.stale && app.fit.export_out_of_date).then_some(OUT_OF_DATE_ANSWER),
    );
    if !outcome.result.converged || (app.fit.stale && !app.fit.export_out_of_date) {
        // The prompt was opened before the state changed (a refit finished, an edit came in).
        app.error("the fit changed while the export was asked for: press Ctrl+E again");
        return;
    }
    // The same provenance `calibrate --out` writes: the sheet as saved (every edit is saved at once).
    let sheet_text = app.session.sheet.to_csv_string();
    let provenance = crate::report::Provenance::of(
        crate::storage::today_utc(),
        job.network_text.as_bytes(),
        sheet_text.as_bytes(),
        &crate::fieldtest::read_tests(&app.session.sheet),
    );
    let outputs = match CalibrationOutputs::build_delivered(&run, &job.network_text, &provenance) {
        Ok(outputs) => outputs,
        Err(e) => {
            app.error(format!("export failed: {e}"));
            return;
        }
    };
    let numbered = folder.is_none();
    let folder = folder.unwrap_or_else(|| {
        let base = app
            .session
            .sheet_path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .map_or_else(|| PathBuf::from("."), PathBuf::from);
        base.join("roughcal-export")
    });
    effects.push(Effect::WriteExport(Box::new(ExportJob {
        folder,
        numbered,
        force,
        outputs,
    })));
    app.info("exporting...");
}
