//! What the map draws: pipes reduced to what a canvas of a given size can show.
//!
//! Many short pipes fall inside one character cell; drawing each would cost time and show nothing more.
//! Pipes are bucketed by the cells of their ends: one segment per pair of end cells and shade, and one
//! dot per cell for pipes shorter than a cell.

use std::collections::HashSet;

use crate::network::Network;

/// A plan position (file length units).
pub type Point = (f64, f64);

/// The plan extent shown, widened so one unit is as long across as up the screen (a cell is about
/// twice as tall as it is wide).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlanBounds {
    pub x: [f64; 2],
    pub y: [f64; 2],
}

/// One thing to draw, with its shade class (see [`MapShading`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MapSegment {
    pub from: Point,
    pub to: Point,
    pub shade: u8,
}

/// What the map shades the pipes by.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum MapShading {
    /// One colour per roughness group.
    #[default]
    Group,
    /// How much the fit changed the pipe's C.
    FittedChange,
}

impl MapShading {
    pub fn label(self) -> &'static str {
        match self {
            Self::Group => "group",
            Self::FittedChange => "fitted change",
        }
    }
}

/// Shade of a pipe with no group (group shading).
pub const SHADE_UNGROUPED: u8 = u8::MAX;
/// Shades of the fitted change, from much lower to much higher C.
pub const SHADE_MUCH_LOWER: u8 = 0;
pub const SHADE_LOWER: u8 = 1;
pub const SHADE_SAME: u8 = 2;
pub const SHADE_HIGHER: u8 = 3;
pub const SHADE_MUCH_HIGHER: u8 = 4;

/// Change of C taken as "about the same" and as "much" (common practice, no source: a few units of C
/// are within what the tests can tell apart).
const SAME_C: f64 = 2.0;
const MUCH_C: f64 = 10.0;

/// The shade class of each pipe.
pub fn pipe_shades(net: &Network, shading: MapShading, c_after: Option<&[f64]>) -> Vec<u8> {
    net.pipes
        .iter()
        .enumerate()
        .map(|(k, pipe)| match shading {
            MapShading::Group => pipe.group.map_or(SHADE_UNGROUPED, |g| (g % 250) as u8),
            MapShading::FittedChange => {
                let change = c_after
                    .and_then(|c| c.get(k))
                    .map_or(0.0, |after| after - pipe.c_factor);
                if change <= -MUCH_C {
                    SHADE_MUCH_LOWER
                } else if change <= -SAME_C {
                    SHADE_LOWER
                } else if change < SAME_C {
                    SHADE_SAME
                } else if change < MUCH_C {
                    SHADE_HIGHER
                } else {
                    SHADE_MUCH_HIGHER
                }
            }
        })
        .collect()
}

/// The drawable map for a canvas of `columns` x `rows` cells.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct MapGeometry {
    pub bounds: Option<PlanBounds>,
    pub segments: Vec<MapSegment>,
    /// Pipes shorter than a cell: one per cell and shade.
    pub dots: Vec<MapSegment>,
    /// Pipes with both ends placed, and pipes drawn (as segments or dots).
    pub placed_pipes: usize,
}

/// Plan end points of every pipe whose two ends have positions.
pub fn pipe_ends(net: &Network) -> Vec<Option<(Point, Point)>> {
    net.pipes
        .iter()
        .map(|p| Some((net.node_position(p.from)?, net.node_position(p.to)?)))
        .collect()
}

impl MapGeometry {
    /// Thins `ends` (from [`pipe_ends`]) with `shades` to what `columns` x `rows` cells show.
    pub fn build(ends: &[Option<(Point, Point)>], shades: &[u8], columns: u16, rows: u16) -> Self {
        let placed: Vec<(usize, Point, Point)> = ends
            .iter()
            .enumerate()
            .filter_map(|(k, e)| e.map(|(a, b)| (k, a, b)))
            .collect();
        if placed.is_empty() || columns == 0 || rows == 0 {
            return Self::default();
        }
        let mut x = [f64::INFINITY, f64::NEG_INFINITY];
        let mut y = [f64::INFINITY, f64::NEG_INFINITY];
        for &(_, a, b) in &placed {
            for p in [a, b] {
                x = [x[0].min(p.0), x[1].max(p.0)];
                y = [y[0].min(p.1), y[1].max(p.1)];
            }
        }
        let (cols, rows_f) = (f64::from(columns), f64::from(rows));
        let unit = ((x[1] - x[0]) / cols)
            .max((y[1] - y[0]) / (2.0 * rows_f))
            .max(f64::MIN_POSITIVE)
            * 1.04;
        let (cx, cy) = ((x[0] + x[1]) / 2.0, (y[0] + y[1]) / 2.0);
        let bounds = PlanBounds {
            x: [cx - unit * cols / 2.0, cx + unit * cols / 2.0],
            y: [cy - unit * rows_f, cy + unit * rows_f],
        };
        let cell = |p: Point| -> (i64, i64) {
            (
                ((p.0 - bounds.x[0]) / unit).floor() as i64,
                ((p.1 - bounds.y[0]) / (2.0 * unit)).floor() as i64,
            )
        };
        let mut seen_segments = HashSet::new();
        let mut seen_dots = HashSet::new();
        let mut geometry = Self {
            bounds: Some(bounds),
            placed_pipes: placed.len(),
            ..Self::default()
        };
        for (k, a, b) in placed {
            let shade = shades.get(k).copied().unwrap_or(SHADE_SAME);
            let (ca, cb) = (cell(a), cell(b));
            if ca == cb {
                if seen_dots.insert((ca, shade)) {
                    geometry.dots.push(MapSegment {
                        from: a,
                        to: a,
                        shade,
                    });
                }
            } else if seen_segments.insert((ca.min(cb), ca.max(cb), shade)) {
                geometry.segments.push(MapSegment {
                    from: a,
                    to: b,
                    shade,
                });
            }
        }
        geometry
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn many_short_pipes_in_one_cell_become_one_dot() {
        let ends: Vec<Option<(Point, Point)>> = (0..1000)
            .map(|i| Some(((i as f64 * 0.001, 0.0), (i as f64 * 0.001 + 0.0005, 0.0))))
            .chain([Some(((0.0, 0.0), (100.0, 50.0))), None])
            .collect();
        let shades = vec![0; ends.len()];
        let geometry = MapGeometry::build(&ends, &shades, 40, 10);
        assert_eq!(geometry.placed_pipes, 1001);
        assert_eq!(geometry.segments.len(), 1);
        assert!(geometry.dots.len() <= 2, "{}", geometry.dots.len());
    }
}
