//! The field sheet as a table: only the rows and columns on screen are drawn.

use ratatui::Frame;
use ratatui::layout::Rect;
use ratatui::style::Style;
use ratatui::text::{Line, Span};
use ratatui::widgets::Paragraph;

use super::{fit_text, right};
use crate::fieldtest::Severity;
use crate::fieldtest::SheetColumn;
use crate::tui::app::App;
use crate::tui::layout;

/// Short header label of a column, with its unit.
fn label(app: &App, index: usize) -> String {
    let sheet = &app.session.sheet;
    let units = sheet.units();
    match sheet.column_at(index) {
        Some(SheetColumn::Test) => "test".into(),
        Some(SheetColumn::Date) => "date".into(),
        Some(SheetColumn::Time) => "time".into(),
        Some(SheetColumn::ResidualNode) => "resid at".into(),
        Some(SheetColumn::FlowNode) => "flow at".into(),
        Some(SheetColumn::Static) => format!("stat {}", units.pressure_label()),
        Some(SheetColumn::Residual) => format!("res {}", units.pressure_label()),
        Some(SheetColumn::Flow) => format!("flow {}", units.flow_label()),
        Some(SheetColumn::Pitot) => format!("pit {}", units.pressure_label()),
        Some(SheetColumn::Outlet) => format!("out {}", units.diameter_label()),
        Some(SheetColumn::Coefficient) => "coef".into(),
        Some(SheetColumn::Condition) => "condition".into(),
        Some(SheetColumn::Note) => "note".into(),
        Some(SheetColumn::Use) => "use".into(),
        None => sheet.headers().get(index).cloned().unwrap_or_default(),
    }
}

fn numeric(column: Option<SheetColumn>) -> bool {
    matches!(
        column,
        Some(
            SheetColumn::Static
                | SheetColumn::Residual
                | SheetColumn::Flow
                | SheetColumn::Pitot
                | SheetColumn::Outlet
                | SheetColumn::Coefficient
        )
    )
}

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let state = &app.readings;
    let sheet = &app.session.sheet;
    let columns = layout::shown_columns(
        &state.widths,
        state.first_column,
        area.width,
        sheet.column_index(SheetColumn::Test),
    );
    let mut lines = Vec::with_capacity(usize::from(area.height));
    let mut header = vec![Span::styled(
        fit_text("", usize::from(layout::FLAG_WIDTH)),
        theme.header(),
    )];
    for &c in &columns {
        let width = usize::from(state.widths[c]);
        header.push(Span::styled(
            format!("{} ", fit_text(&label(app, c), width)),
            theme.header(),
        ));
    }
    lines.push(Line::from(header));
    if sheet.row_count() == 0 {
        lines.push(Line::from(Span::styled(
            "  The sheet is empty: start typing (or Ctrl+N) to add the first test.",
            theme.dim(),
        )));
    }
    let visible = layout::readings_visible_rows(area.height);
    let end = (state.first_row + visible).min(sheet.row_count());
    for row in state.first_row..end {
        let reading = app.row_reading(row);
        let blank = reading.is_some_and(|r| r.blank);
        let (flag, flag_style) = match reading.and_then(|r| r.worst()) {
            _ if blank => ("· ", theme.dim()),
            Some(Severity::Error) => ("x ", theme.error()),
            Some(Severity::Warning) => ("! ", theme.warning()),
            None => ("  ", theme.good()),
        };
        let mut spans = vec![Span::styled(flag, flag_style)];
        for &c in &columns {
            let width = usize::from(state.widths[c]);
            let column = sheet.column_at(c);
            let editing = state
                .edit
                .as_ref()
                .filter(|e| e.row == row && e.column == c);
            if let Some(edit) = editing {
                spans.extend(edit_spans(
                    app,
                    &edit.input.buffer,
                    edit.input.cursor,
                    width,
                ));
                spans.push(Span::raw(" "));
                continue;
            }
            let raw = sheet.cell_at(row, c).unwrap_or("");
            let mut style = Style::default();
            let mut text = raw.to_string();
            if column == Some(SheetColumn::Flow)
                && raw.trim().is_empty()
                && let Some(flow) = reading
                    .filter(|r| r.flow_from_pitot)
                    .and_then(|r| r.total_flow)
            {
                text = format!("~{flow:.0}");
                style = theme.computed();
            }
            let header_name = sheet.headers().get(c).map_or("", String::as_str);
            let finding = reading.and_then(|r| r.column_severity(header_name));
            match finding {
                Some(Severity::Error) => style = theme.error(),
                Some(Severity::Warning) => style = theme.warning(),
                None => {}
            }
            if row == state.row && c == state.column {
                style = theme.cursor();
            }
            let shown = if numeric(column) {
                right(&text, width)
            } else {
                fit_text(&text, width)
            };
            spans.push(Span::styled(shown, style));
            spans.push(Span::raw(" "));
        }
        lines.push(Line::from(spans));
    }
    frame.render_widget(Paragraph::new(lines), area);
}

/// The text being typed, with the cursor shown (scrolled so the cursor stays in the cell).
fn edit_spans(app: &App, buffer: &str, cursor: usize, width: usize) -> Vec<Span<'static>> {
    let theme = app.theme;
    let chars: Vec<char> = buffer.chars().collect();
    let start = (cursor + 1).saturating_sub(width);
    let mut spans = Vec::new();
    let mut used = 0;
    for (i, ch) in chars.iter().enumerate().skip(start) {
        if used == width {
            break;
        }
        let style = if i == cursor {
            theme.cursor()
        } else {
            theme.editing()
        };
        spans.push(Span::styled(ch.to_string(), style));
        used += 1;
    }
    if cursor >= chars.len() && used < width {
        spans.push(Span::styled(" ", theme.cursor()));
        used += 1;
    }
    if used < width {
        spans.push(Span::styled(" ".repeat(width - used), theme.editing()));
    }
    spans
}
