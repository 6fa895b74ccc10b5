//! The state of each view and its `update`: [`readings`], [`groups`], [`fit`], [`map`]. A view's
//! update sees its own state and a [`Ctx`] of what the views share; what it changes beyond that (the
//! sheet, the network, the fit) it reports in [`Changed`], and the router brings the rest in line.

pub mod fit;
pub mod groups;
pub mod map;
pub mod readings;

use std::collections::HashMap;

use crate::fieldtest::StaticHeads;

use std::path::PathBuf;

use super::edit::Move;
use super::session::{Conflict, SaveTarget, Session};

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

/// What the status line says.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StatusMessage {
    pub text: String,
    pub error: bool,
}

/// What the views share while one of them handles an action.
pub struct Ctx<'a> {
    pub session: &'a mut Session,
    pub confirm: &'a mut Option<Confirm>,
    pub message: &'a mut Option<StatusMessage>,
    /// Junction ids for completion: (lower-case id, id), sorted.
    pub node_index: &'a [(String, String)],
    pub junction_index: &'a HashMap<String, usize>,
    pub static_heads: &'a StaticHeads,
    pub unsaved: &'a mut bool,
    pub network_unsaved: &'a mut bool,
    pub sheet_conflict: &'a Option<Conflict>,
    pub network_conflict: &'a Option<Conflict>,
    pub width: u16,
    pub height: u16,
    /// Whether a fit outcome exists (the map says what shading means without one).
    pub fitted: bool,
    /// How many test markers the map shows.
    pub marker_count: usize,
    pub changed: Changed,
}

/// What an update changed that other views depend on.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Changed {
    /// The sheet was edited: read it again, the fit is out of date.
    pub sheet: bool,
    /// The network text was replaced: rebuild everything drawn from it.
    pub network: bool,
    /// A fit finished: the map shows it.
    pub fit: bool,
    /// The map's shading changed.
    pub map: bool,
}

impl Ctx<'_> {
    pub fn info(&mut self, text: impl Into<String>) {
        *self.message = Some(StatusMessage {
            text: text.into(),
            error: false,
        });
    }

    pub fn error(&mut self, text: impl Into<String>) {
        *self.message = Some(StatusMessage {
            text: text.into(),
            error: true,
        });
    }

    /// Refuses an edit of a read-only file with a message; returns whether it was refused.
    pub fn refuse_read_only(&mut self, target: SaveTarget) -> bool {
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

/// A row index after a vertical move in a list of `count`.
pub fn moved(row: usize, count: usize, m: Move, page: usize) -> usize {
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
