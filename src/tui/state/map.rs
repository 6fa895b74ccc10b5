//! The Map view: pipes shaded by group or by the fitted change, and the test locations.

use std::collections::HashMap;

use crate::fieldtest::SheetColumn;

use super::super::app::{Action, Effect, Move};
use super::super::layout;
use super::super::map_model::{MapGeometry, MapShading, Point, pipe_shades};
use super::super::session::Session;
use super::super::sheet_reading::RowReading;
use super::Ctx;
use super::fit::FitOutcome;

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

/// Test locations for the map: the residual hydrant of each fitted test, or of each usable test
/// before any fit.
pub fn test_markers(
    session: &Session,
    outcome: Option<&FitOutcome>,
    rows: &[RowReading],
    junction_index: &HashMap<String, usize>,
) -> Vec<TestMarker> {
    let net = &session.network;
    let position = |j: usize| net.junctions.get(j).and_then(|j| j.position);
    match outcome {
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
        None => rows
            .iter()
            .enumerate()
            .filter(|(_, r)| r.usable)
            .filter_map(|(row, r)| {
                let junction = *junction_index.get(r.residual_node.as_deref()?)?;
                Some(TestMarker {
                    id: session
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

impl MapState {
    /// Draws the pipes again for the canvas of a `width` x `height` screen.
    pub fn rebuild(
        &mut self,
        session: &Session,
        outcome: Option<&FitOutcome>,
        width: u16,
        height: u16,
    ) {
        let after = outcome.map(|o| o.result.pipe_c_after.as_slice());
        let shades = pipe_shades(&session.network, self.shading, after);
        let canvas = layout::map_canvas(layout::body_of(width, height));
        self.geometry = MapGeometry::build(&self.ends, &shades, canvas.width, canvas.height);
    }

    pub fn update(&mut self, ctx: &mut Ctx, action: Action) -> Vec<Effect> {
        match action {
            Action::ToggleMapShading => {
                self.shading = match self.shading {
                    MapShading::Group => MapShading::FittedChange,
                    MapShading::FittedChange => MapShading::Group,
                };
                if self.shading == MapShading::FittedChange && !ctx.fitted {
                    ctx.info("no fit yet: every pipe shows as unchanged (Ctrl+R runs the fit)");
                }
                ctx.changed.map = true;
            }
            Action::SelectTest(step) => self.select(ctx.marker_count, step),
            Action::MoveCursor(m) => {
                let step = match m {
                    Move::Up | Move::Left | Move::PageUp => -1,
                    _ => 1,
                };
                self.select(ctx.marker_count, step);
            }
            _ => {}
        }
        Vec::new()
    }

    fn select(&mut self, count: usize, step: i32) {
        if count > 0 {
            let current = self.selected.min(count - 1) as i64;
            self.selected = (current + i64::from(step)).rem_euclid(count as i64) as usize;
        }
    }
}
