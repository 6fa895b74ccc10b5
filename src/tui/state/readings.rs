//! The Readings view: the sheet as a table, typed cell by cell, with undo.

use crate::fieldtest::{FieldSheet, SheetColumn, StaticHeads};

use super::super::app::{Action, After, Confirm, Effect, Move};
use super::super::edit::CellEdit;
use super::super::layout;
use super::super::session::{Conflict, SaveTarget, Session};
use super::super::sheet_reading::{self, RowReading};
use super::super::undo::UndoStack;
use super::{Ctx, moved};

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
    pub undo: UndoStack<SheetEdit>,
    /// One reading per sheet row.
    pub rows: Vec<RowReading>,
    /// The sheet's header with no rows (for reading one row while it is typed).
    pub header: Option<FieldSheet>,
    /// Display widths of the sheet's columns.
    pub widths: Vec<u16>,
}

/// Junction ids starting with the last `;`-separated part of `text` (ignoring case), at most `limit`.
pub fn node_completions<'a>(
    node_index: &'a [(String, String)],
    text: &str,
    limit: usize,
) -> Vec<&'a str> {
    let part = text.rsplit(';').next().unwrap_or("").trim().to_lowercase();
    let start = node_index.partition_point(|(key, _)| key.as_str() < part.as_str());
    node_index[start..]
        .iter()
        .take_while(|(key, _)| key.starts_with(&part))
        .take(limit)
        .map(|(_, id)| id.as_str())
        .collect()
}

/// Whether a header index of `sheet` is a node column (completion applies).
pub fn is_node_column(sheet: &FieldSheet, column: usize) -> bool {
    matches!(
        sheet.column_at(column),
        Some(SheetColumn::ResidualNode | SheetColumn::FlowNode)
    )
}

/// After a change of the sheet: marks it unsaved and saves it (into the side file while another
/// program's change waits for an answer). The router reads the sheet again.
pub fn save_sheet(ctx: &mut Ctx) -> Effect {
    ctx.changed.sheet = true;
    *ctx.unsaved = true;
    let text = ctx.session.sheet.to_csv_string();
    if let Some(Conflict {
        side_file: Ok((side, _)),
    }) = ctx.sheet_conflict
    {
        return Effect::SaveSideFile {
            target: SaveTarget::Sheet,
            path: side.clone(),
            text,
        };
    }
    let keep_original = std::mem::replace(&mut ctx.session.keep_original, false);
    Effect::SaveSheet {
        path: ctx.session.sheet_path.clone(),
        text,
        keep_original,
        expected: ctx.session.sheet_file.stamp,
    }
}

impl ReadingsState {
    /// Reads and screens the whole sheet again (after any change of the sheet or the network: rules
    /// such as a repeated test id span rows).
    pub fn read_all(&mut self, session: &Session, static_heads: &StaticHeads) {
        self.rows = sheet_reading::read_sheet(&session.sheet, &session.network, static_heads);
    }

    /// Keeps the cursor inside the sheet and in sight.
    pub fn scroll(&mut self, sheet: &FieldSheet, width: u16, height: u16) {
        let rows = sheet.row_count();
        let columns = sheet.headers().len();
        self.row = self.row.min(rows.saturating_sub(1));
        self.column = self.column.min(columns.saturating_sub(1));
        let visible = layout::readings_visible_rows(layout::body_of(width, height).height);
        if self.row < self.first_row {
            self.first_row = self.row;
        } else if self.row >= self.first_row + visible {
            self.first_row = self.row + 1 - visible;
        }
        self.first_row = self.first_row.min(rows.saturating_sub(visible));
        if self.column < self.first_column {
            self.first_column = self.column;
        }
        let frozen = sheet.column_index(SheetColumn::Test);
        while self.first_column < self.column
            && !layout::shown_columns(&self.widths, self.first_column, width, frozen)
                .contains(&self.column)
        {
            self.first_column += 1;
        }
    }

    /// Forgets the typing and the history (the sheet was replaced from disk).
    pub fn reset_history(&mut self) {
        self.undo.clear();
        self.edit = None;
        self.preview = None;
    }

    fn update_preview(&mut self, ctx: &Ctx) {
        self.preview = match (&self.edit, &self.header) {
            (Some(edit), Some(header)) => Some(sheet_reading::preview_row(
                header,
                &ctx.session.sheet,
                &ctx.session.network,
                ctx.static_heads,
                edit.row,
                edit.column,
                &edit.input.buffer,
            )),
            _ => None,
        };
    }

    /// Deletes a row (the user said yes).
    pub fn delete_row(&mut self, ctx: &mut Ctx, row: usize) -> Vec<Effect> {
        let Ok(cells) = ctx.session.sheet.delete_row(row) else {
            ctx.error("that row is gone already");
            return Vec::new();
        };
        let test = cells.first().cloned().unwrap_or_default();
        self.undo.record(SheetEdit::DeleteRow { at: row, cells });
        self.scroll(&ctx.session.sheet, ctx.width, ctx.height);
        ctx.info(format!(
            "row {} ({test}) deleted; Ctrl+Z brings it back",
            row + 1
        ));
        vec![save_sheet(ctx)]
    }

    /// Applies a sheet edit (or its inverse) and returns the cell to put the cursor on.
    fn apply(
        &self,
        sheet: &mut FieldSheet,
        edit: &SheetEdit,
        inverse: bool,
    ) -> Option<(usize, usize)> {
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
                Some((*at, self.column))
            }
            (SheetEdit::InsertRow { at, .. }, true) | (SheetEdit::DeleteRow { at, .. }, false) => {
                sheet.delete_row(*at).ok()?;
                Some((at.saturating_sub(1), self.column))
            }
        }
    }

    fn undo_redo(&mut self, ctx: &mut Ctx, undo: bool) -> Vec<Effect> {
        let popped = if undo {
            self.undo.pop_undo()
        } else {
            self.undo.pop_redo()
        };
        let Some(edit) = popped else {
            ctx.info(if undo {
                "nothing to undo"
            } else {
                "nothing to redo"
            });
            return Vec::new();
        };
        let mut effects = Vec::new();
        match self.apply(&mut ctx.session.sheet, &edit, undo) {
            Some((row, column)) => {
                self.row = row;
                self.column = column;
                self.scroll(&ctx.session.sheet, ctx.width, ctx.height);
                let what = match &edit {
                    SheetEdit::SetCell { .. } => "cell edit",
                    SheetEdit::InsertRow { .. } => "row added",
                    SheetEdit::DeleteRow { .. } => "row deleted",
                };
                ctx.info(format!("{} {what}", if undo { "undid" } else { "redid" }));
                effects.push(save_sheet(ctx));
            }
            None => ctx.error("the sheet no longer matches that edit"),
        }
        if undo {
            self.undo.push_redo(edit);
        } else {
            self.undo.push_undo(edit);
        }
        effects
    }

    /// Sets a cell to `text` as one undoable edit (and saves), or says why not.
    fn set_cell(&mut self, ctx: &mut Ctx, row: usize, column: usize, text: String) -> Vec<Effect> {
        match ctx.session.sheet.set_cell_at(row, column, &text) {
            Ok(before) if before != text => {
                self.undo.record(SheetEdit::SetCell {
                    row,
                    column,
                    before,
                    after: text,
                });
                vec![save_sheet(ctx)]
            }
            Ok(_) => Vec::new(),
            Err(e) => {
                ctx.error(format!("cannot edit that cell: {e}"));
                Vec::new()
            }
        }
    }

    /// Tab while typing a node column: completes the id (see [`node_completions`]); returns whether it
    /// did.
    fn complete(&mut self, ctx: &Ctx) -> bool {
        let Some(edit) = &mut self.edit else {
            return false;
        };
        if !is_node_column(&ctx.session.sheet, edit.column) {
            return false;
        }
        let buffer = &edit.input.buffer;
        let part = buffer.rsplit(';').next().unwrap_or("").trim().to_string();
        let exact = ctx.node_index.iter().any(|(_, id)| *id == part);
        let first = node_completions(ctx.node_index, buffer, 1)
            .first()
            .map(|s| s.to_string());
        let (false, false, Some(id)) = (part.is_empty(), exact, first) else {
            return false;
        };
        let keep = buffer.len() - buffer.rsplit(';').next().unwrap_or("").len();
        let mut text = buffer[..keep].to_string();
        text.push_str(&id);
        edit.input.set(text);
        true
    }

    pub fn update(&mut self, ctx: &mut Ctx, action: Action) -> Vec<Effect> {
        if matches!(
            action,
            Action::BeginEdit
                | Action::BeginEditWith(_)
                | Action::AddRow
                | Action::DeleteRow
                | Action::ClearCell
                | Action::Undo
                | Action::Redo
        ) && ctx.refuse_read_only(SaveTarget::Sheet)
        {
            return Vec::new();
        }
        if let Some(edit) = &mut self.edit
            && edit.input.apply(&action)
        {
            self.update_preview(ctx);
            return Vec::new();
        }
        let rows = ctx.session.sheet.row_count();
        match action {
            Action::MoveCursor(m) => {
                let columns = ctx.session.sheet.headers().len();
                let page =
                    layout::readings_visible_rows(layout::body_of(ctx.width, ctx.height).height);
                match m {
                    Move::Left => self.column = self.column.saturating_sub(1),
                    Move::Right => self.column = (self.column + 1).min(columns.saturating_sub(1)),
                    Move::Home => self.column = 0,
                    Move::End => self.column = columns.saturating_sub(1),
                    vertical => self.row = moved(self.row, rows, vertical, page),
                }
                self.scroll(&ctx.session.sheet, ctx.width, ctx.height);
                *ctx.message = None;
            }
            Action::BeginEdit | Action::BeginEditWith(_) => {
                let mut effects = Vec::new();
                if rows == 0 {
                    // Typing into an empty sheet starts its first row.
                    effects = self.update(ctx, Action::AddRow);
                    if matches!(action, Action::BeginEdit) {
                        return effects;
                    }
                }
                let (row, column) = (self.row, self.column);
                let text = match action {
                    Action::BeginEditWith(c) => c.to_string(),
                    _ => ctx
                        .session
                        .sheet
                        .cell_at(row, column)
                        .unwrap_or("")
                        .to_string(),
                };
                self.edit = Some(CellEdit::new(row, column, &text));
                self.update_preview(ctx);
                return effects;
            }
            Action::CompleteOrCommit => {
                if self.edit.is_none() {
                    return Vec::new();
                }
                if self.complete(ctx) {
                    self.update_preview(ctx);
                    return Vec::new();
                }
                return self.update(ctx, Action::CommitEdit(After::Right));
            }
            Action::CommitEdit(after) => {
                let Some(edit) = self.edit.take() else {
                    return Vec::new();
                };
                self.preview = None;
                let mut effects = self.set_cell(ctx, edit.row, edit.column, edit.input.buffer);
                let m = match after {
                    After::Up => Some(Move::Up),
                    After::Down => Some(Move::Down),
                    After::Right => Some(Move::Right),
                    After::Left => Some(Move::Left),
                    After::Stay => None,
                };
                if let Some(m) = m {
                    effects.extend(self.update(ctx, Action::MoveCursor(m)));
                }
                return effects;
            }
            Action::CancelEdit => {
                self.edit = None;
                self.preview = None;
            }
            Action::AddRow => {
                let at = if rows == 0 { 0 } else { self.row + 1 };
                let cells = vec![String::new(); ctx.session.sheet.headers().len()];
                if ctx
                    .session
                    .sheet
                    .insert_row_cells(at, cells.clone())
                    .is_err()
                {
                    return Vec::new();
                }
                self.undo.record(SheetEdit::InsertRow { at, cells });
                self.row = at;
                self.column = ctx
                    .session
                    .sheet
                    .column_index(SheetColumn::Test)
                    .unwrap_or(0);
                self.scroll(&ctx.session.sheet, ctx.width, ctx.height);
                ctx.info(format!(
                    "row {} added: type the test id, Tab to the next column",
                    at + 1
                ));
                return vec![save_sheet(ctx)];
            }
            Action::DeleteRow => {
                if rows == 0 {
                    return Vec::new();
                }
                let row = self.row;
                let test = ctx
                    .session
                    .sheet
                    .cell(row, SheetColumn::Test)
                    .unwrap_or("")
                    .to_string();
                *ctx.confirm = Some(Confirm::DeleteRow(row));
                ctx.info(format!("delete row {} ({test})? (y/n)", row + 1));
            }
            Action::ClearCell => {
                if rows == 0 {
                    return Vec::new();
                }
                let effects = self.set_cell(ctx, self.row, self.column, String::new());
                if !effects.is_empty() {
                    ctx.info("cell cleared; Ctrl+Z brings it back");
                }
                return effects;
            }
            Action::Undo => return self.undo_redo(ctx, true),
            Action::Redo => return self.undo_redo(ctx, false),
            _ => {}
        }
        Vec::new()
    }
}
