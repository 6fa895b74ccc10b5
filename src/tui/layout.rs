//! Screen geometry shared by `update` (to keep the cursor in sight) and the views (to draw): both must
//! agree on how many rows and columns a view shows.

use ratatui::layout::Rect;

use crate::fieldtest::SheetColumn;

/// Lines taken by the title bar (top) and the two status lines (bottom).
pub const TITLE_LINES: u16 = 1;
pub const STATUS_LINES: u16 = 2;

/// Width of the flag column at the left of the readings table.
pub const FLAG_WIDTH: u16 = 2;

/// Width of the details panel beside the map.
pub const MAP_PANEL_WIDTH: u16 = 28;

/// The three bands of the screen: title, body, status.
pub fn bands(area: Rect) -> (Rect, Rect, Rect) {
    let title = Rect {
        height: TITLE_LINES.min(area.height),
        ..area
    };
    let status_height = STATUS_LINES.min(area.height.saturating_sub(title.height));
    let body_height = area.height.saturating_sub(title.height + status_height);
    let body = Rect {
        y: area.y + title.height,
        height: body_height,
        ..area
    };
    let status = Rect {
        y: body.y + body_height,
        height: status_height,
        ..area
    };
    (title, body, status)
}

/// Data rows the readings table shows in a body of `body_height` lines (one line is the header).
pub fn readings_visible_rows(body_height: u16) -> usize {
    usize::from(body_height.saturating_sub(1)).max(1)
}

/// Display width of a sheet column.
pub fn column_width(column: Option<SheetColumn>) -> u16 {
    match column {
        Some(SheetColumn::Test) => 7,
        Some(SheetColumn::Date) => 10,
        Some(SheetColumn::Time) => 5,
        Some(SheetColumn::ResidualNode | SheetColumn::FlowNode) => 9,
        Some(SheetColumn::Static) => 8,
        Some(SheetColumn::Residual) => 7,
        Some(SheetColumn::Flow) => 8,
        Some(SheetColumn::Pitot) => 7,
        Some(SheetColumn::Outlet) => 6,
        Some(SheetColumn::Coefficient) => 5,
        Some(SheetColumn::Condition) => 9,
        Some(SheetColumn::Note) => 18,
        Some(SheetColumn::Use) => 4,
        None => 10,
    }
}

/// The columns (header indices) shown from `first`, fitting `width` cells with one space between.
pub fn visible_columns(widths: &[u16], first: usize, width: u16) -> std::ops::Range<usize> {
    let mut used = FLAG_WIDTH;
    let mut end = first;
    while end < widths.len() {
        let next = used + widths[end] + 1;
        if next > width && end > first {
            break;
        }
        used = next;
        end += 1;
    }
    first..end
}

/// The columns (header indices) the readings table shows: the `frozen` one (the test id) always at the
/// left once scrolled past, then as many as fit from `first`.
pub fn shown_columns(
    widths: &[u16],
    first: usize,
    width: u16,
    frozen: Option<usize>,
) -> Vec<usize> {
    match frozen {
        Some(f) if f < first && f < widths.len() => {
            let rest = width.saturating_sub(widths[f] + 1);
            std::iter::once(f)
                .chain(visible_columns(widths, first, rest))
                .collect()
        }
        _ => visible_columns(widths, first, width).collect(),
    }
}

/// The canvas of the map view, in cells, for a body of `body` size.
pub fn map_canvas(body: Rect) -> Rect {
    let panel = if body.width >= MAP_PANEL_WIDTH + 20 {
        MAP_PANEL_WIDTH
    } else {
        0
    };
    Rect {
        width: body.width.saturating_sub(panel),
        ..body
    }
}

/// Body rectangle for a terminal of `width` x `height`.
pub fn body_of(width: u16, height: u16) -> Rect {
    bands(Rect::new(0, 0, width, height)).1
}
