//! The Groups view: each roughness group's start C, limits and lock, edited in the network file, with
//! undo.

use std::collections::BTreeMap;

use crate::network::Network;
use crate::network::edit::{GroupUpdate, apply_group_c, update_groups};
use crate::network::file::parse_network;

use super::super::app::{Action, After, Effect, Move};
use super::super::edit::CellEdit;
use super::super::session::{Conflict, SaveTarget};
use super::super::undo::UndoStack;
use super::{Ctx, moved};

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
#[derive(Debug, Clone)]
pub struct GroupsState {
    pub row: usize,
    pub column: usize,
    pub edit: Option<CellEdit>,
    pub rows: Vec<GroupRow>,
    /// Network file texts before each group edit (whole texts: an edit goes through the
    /// format-preserving TOML writer).
    pub undo: UndoStack<String>,
}

impl Default for GroupsState {
    fn default() -> Self {
        Self {
            row: 0,
            column: GROUP_START,
            edit: None,
            rows: Vec::new(),
            undo: UndoStack::default(),
        }
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

/// A C-factor as typed in the groups table.
pub fn format_c(c: f64) -> String {
    let rounded = (c * 10.0).round() / 10.0;
    if rounded.fract() == 0.0 {
        format!("{rounded:.0}")
    } else {
        format!("{rounded:.1}")
    }
}

/// Takes an edited network text: reads it back (so the model always matches the file) and saves it.
/// Returns the save, or `None` when it does not read (the text is not taken).
fn set_network_text(ctx: &mut Ctx, text: String) -> Option<Effect> {
    let name = ctx.session.network_path.display().to_string();
    let loaded = match parse_network(&text, &name) {
        Ok(loaded) => loaded,
        Err(e) => {
            ctx.error(format!("the edited network does not read back: {e}"));
            return None;
        }
    };
    ctx.session.network = loaded.network;
    ctx.session.network_text = text.clone();
    ctx.changed.network = true;
    *ctx.network_unsaved = true;
    if let Some(Conflict {
        side_file: Ok((side, _)),
    }) = ctx.network_conflict
    {
        let side = side.clone();
        ctx.info(format!("kept aside in {}", side.display()));
        return Some(Effect::SaveSideFile {
            target: SaveTarget::Network,
            path: side,
            text,
        });
    }
    ctx.info(format!("saved to {name}"));
    Some(Effect::SaveNetwork {
        path: ctx.session.network_path.clone(),
        text,
        expected: ctx.session.network_file.stamp,
    })
}

impl GroupsState {
    /// A group edit by the user: applied and saved like any network text, and undoable.
    fn edit_network_text(&mut self, ctx: &mut Ctx, text: String) -> Vec<Effect> {
        let before = ctx.session.network_text.clone();
        let saved = set_network_text(ctx, text);
        if saved.is_some() {
            self.undo.record(before);
        }
        saved.into_iter().collect()
    }

    /// Ctrl+Z / Ctrl+Y: puts back the network text before (or after) a group edit.
    fn undo_redo(&mut self, ctx: &mut Ctx, undo: bool) -> Vec<Effect> {
        let popped = if undo {
            self.undo.pop_undo()
        } else {
            self.undo.pop_redo()
        };
        let Some(text) = popped else {
            ctx.info(if undo {
                "no group edit to undo"
            } else {
                "no group edit to redo"
            });
            return Vec::new();
        };
        let current = ctx.session.network_text.clone();
        let Some(saved) = set_network_text(ctx, text) else {
            return Vec::new();
        };
        if undo {
            self.undo.push_redo(current);
        } else {
            self.undo.push_undo(current);
        }
        let name = ctx.session.network_path.display().to_string();
        ctx.info(format!(
            "{} the group edit; saved to {name}",
            if undo { "undid" } else { "redid" }
        ));
        vec![saved]
    }

    fn toggle_lock(&mut self, ctx: &mut Ctx) -> Vec<Effect> {
        let Some(row) = self.rows.get(self.row) else {
            return Vec::new();
        };
        let name = row.name.clone();
        let update = GroupUpdate {
            locked: Some(!row.locked),
            ..GroupUpdate::default()
        };
        match update_groups(
            &ctx.session.network_text,
            &BTreeMap::from([(name.clone(), update)]),
        ) {
            Ok(new_text) => self.edit_network_text(ctx, new_text),
            Err(e) => {
                ctx.error(format!("{name}: {e}"));
                Vec::new()
            }
        }
    }

    fn commit(&mut self, ctx: &mut Ctx, after: After) -> Vec<Effect> {
        let Some(edit) = self.edit.take() else {
            return Vec::new();
        };
        let buffer = &edit.input.buffer;
        let Ok(value) = buffer.trim().parse::<f64>() else {
            ctx.error(format!("`{buffer}` is not a number; nothing changed"));
            return Vec::new();
        };
        let Some(name) = self.rows.get(edit.row).map(|r| r.name.clone()) else {
            return Vec::new();
        };
        let text = &ctx.session.network_text;
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
        let effects = match edited {
            Ok(new_text) => self.edit_network_text(ctx, new_text),
            Err(e) => {
                ctx.error(format!("{name}: {e}; nothing changed"));
                Vec::new()
            }
        };
        let count = self.rows.len();
        match after {
            After::Up => self.row = self.row.saturating_sub(1),
            After::Down => self.row = (self.row + 1).min(count.saturating_sub(1)),
            After::Right => self.column = (self.column + 1).min(GROUP_LOCK),
            After::Left => self.column = self.column.saturating_sub(1).max(GROUP_START),
            After::Stay => {}
        }
        effects
    }

    pub fn update(&mut self, ctx: &mut Ctx, action: Action) -> Vec<Effect> {
        if matches!(
            action,
            Action::BeginEdit
                | Action::BeginEditWith(_)
                | Action::ToggleLock
                | Action::Undo
                | Action::Redo
        ) && ctx.refuse_read_only(SaveTarget::Network)
        {
            return Vec::new();
        }
        if let Some(edit) = &mut self.edit
            && edit.input.apply(&action)
        {
            return Vec::new();
        }
        let count = self.rows.len();
        if count == 0 {
            return Vec::new();
        }
        match action {
            Action::MoveCursor(m) => {
                match m {
                    Move::Left => self.column = self.column.saturating_sub(1).max(GROUP_START),
                    Move::Right => self.column = (self.column + 1).min(GROUP_LOCK),
                    Move::Home => self.column = GROUP_START,
                    Move::End => self.column = GROUP_LOCK,
                    vertical => self.row = moved(self.row, count, vertical, 10),
                }
                self.column = self.column.clamp(GROUP_START, GROUP_LOCK);
            }
            Action::BeginEdit | Action::BeginEditWith(_) => {
                self.column = self.column.clamp(GROUP_START, GROUP_LOCK);
                if self.column == GROUP_LOCK {
                    if matches!(action, Action::BeginEdit | Action::BeginEditWith(' ')) {
                        return self.toggle_lock(ctx);
                    }
                    return Vec::new();
                }
                let Some(row) = self.rows.get(self.row) else {
                    return Vec::new();
                };
                let text = match action {
                    Action::BeginEditWith(c) => c.to_string(),
                    _ => format_c(match self.column {
                        GROUP_START => row.start_c.unwrap_or(0.0),
                        GROUP_MIN => row.min_c,
                        _ => row.max_c,
                    }),
                };
                self.edit = Some(CellEdit::new(self.row, self.column, &text));
            }
            Action::CompleteOrCommit => return self.commit(ctx, After::Right),
            Action::CommitEdit(after) => return self.commit(ctx, after),
            Action::CancelEdit => self.edit = None,
            Action::ToggleLock => return self.toggle_lock(ctx),
            Action::Undo => return self.undo_redo(ctx, true),
            Action::Redo => return self.undo_redo(ctx, false),
            _ => {}
        }
        Vec::new()
    }
}
