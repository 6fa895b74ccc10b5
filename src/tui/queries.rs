//! What the views and the router read from the [`App`] beyond its fields, and the state derived from
//! the network and the screen size.

use crate::fieldtest::StaticHeads;

use super::app::{App, StatusMessage};
use super::map_model::pipe_ends;
use super::sheet_reading::RowReading;
use super::state::groups::group_rows;
use super::state::map::{TestMarker, test_markers};
use super::state::readings::{is_node_column, node_completions};

impl App {
    /// Rebuilds everything drawn from the network (after it was replaced).
    pub(super) fn network_changed(&mut self) {
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

    pub(super) fn rebuild_map(&mut self) {
        let outcome = self.fit.outcome.as_ref();
        self.map
            .rebuild(&self.session, outcome, self.width, self.height);
    }

    pub(super) fn scroll_readings(&mut self) {
        let (sheet, width, height) = (&self.session.sheet, self.width, self.height);
        self.readings.scroll(sheet, width, height);
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
        is_node_column(&self.session.sheet, column)
    }

    /// Junction ids starting with the last `;`-separated part of `text` (ignoring case), at most `limit`.
    pub fn node_completions(&self, text: &str, limit: usize) -> Vec<&str> {
        node_completions(&self.node_index, text, limit)
    }

    /// Test locations for the map.
    pub fn test_markers(&self) -> Vec<TestMarker> {
        let outcome = self.fit.outcome.as_ref();
        test_markers(
            &self.session,
            outcome,
            &self.readings.rows,
            &self.junction_index,
        )
    }

    pub(super) fn info(&mut self, text: impl Into<String>) {
        self.message = Some(StatusMessage {
            text: text.into(),
            error: false,
        });
    }

    pub(super) fn error(&mut self, text: impl Into<String>) {
        self.message = Some(StatusMessage {
            text: text.into(),
            error: true,
        });
    }

    /// Whether edits exist that are not in the file they belong to.
    pub fn has_unsaved_edits(&self) -> bool {
        self.unsaved
            || self.network_unsaved
            || self.save_failed
            || self.sheet_conflict.is_some()
            || self.network_conflict.is_some()
    }
}
