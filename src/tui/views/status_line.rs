//! The two bottom lines: what is going on (a message, the selected row's finding, completions) and
//! the keys that matter now.

use ratatui::Frame;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};
use ratatui::widgets::Paragraph;

use super::fit_text;
use crate::tui::app::{App, View};
use crate::tui::keymap::key_hints;

/// The first status line's text and whether it is an error.
pub fn status_text(app: &App) -> (String, bool) {
    if let Some(prompt) = &app.fit.export_prompt {
        return (prompt_line(app, &prompt.buffer, prompt.cursor), false);
    }
    if let Some(edit) = &app.readings.edit
        && app.view == View::Readings
        && app.is_node_column(edit.column)
    {
        let found = app.node_completions(&edit.input.buffer, 6);
        return match found.as_slice() {
            [] => ("no junction starts like that".into(), true),
            ids => (format!("nodes: {}  (Tab completes)", ids.join(" ")), false),
        };
    }
    if let Some(message) = &app.message {
        return (message.text.clone(), message.error);
    }
    if app.view == View::Readings {
        let row = app.readings.row;
        let total = app.session.sheet.row_count();
        let cursor_column = app
            .session
            .sheet
            .headers()
            .get(app.readings.column)
            .map_or("", String::as_str);
        let reading = app.row_reading(row);
        let at_cursor = reading.and_then(|r| r.findings.iter().find(|f| f.column == cursor_column));
        if let Some(finding) = at_cursor.or_else(|| reading.and_then(|r| r.main_finding())) {
            let more = app.row_reading(row).map_or(0, |r| r.findings.len()) - 1;
            let more = if more > 0 {
                format!(" (+{more} more)")
            } else {
                String::new()
            };
            let error = finding.severity == crate::fieldtest::Severity::Error;
            return (
                format!(
                    "row {}, {}: {}{more}",
                    row + 1,
                    finding.column,
                    finding.reason
                ),
                error,
            );
        }
        let usable = app.usable_count();
        return (
            format!(
                "row {}/{total} | usable tests: {usable} | {}",
                (row + 1).min(total),
                app.session.sheet_path.display()
            ),
            false,
        );
    }
    (app.session.network_path.display().to_string(), false)
}

/// The export prompt with a `|` at the cursor, scrolled so the cursor stays on the screen.
fn prompt_line(app: &App, buffer: &str, cursor: usize) -> String {
    let label = if buffer.is_empty() {
        "export to folder (empty: a new roughcal-export-N by the sheet): "
    } else {
        "export to folder: "
    };
    let mut chars: Vec<char> = buffer.chars().collect();
    let cursor = cursor.min(chars.len());
    chars.insert(cursor, '|');
    let room = usize::from(app.width)
        .saturating_sub(label.chars().count() + 1)
        .max(8);
    // Keep the cursor in view: scroll left by as much as it would run past the right edge.
    let start = (cursor + 1).saturating_sub(room);
    let mut shown: String = chars.iter().skip(start).take(room).collect();
    if start > 0 {
        shown.replace_range(..shown.char_indices().nth(1).map_or(0, |(i, _)| i), "~");
    }
    format!("{label}{shown}")
}

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let width = usize::from(area.width);
    let (text, error) = status_text(app);
    let style = if error { theme.error() } else { theme.normal() };
    let mut keys = Vec::new();
    for (key, what) in key_hints(app) {
        keys.push(Span::styled(*key, theme.key()));
        keys.push(Span::styled(format!(" {what}  "), theme.dim()));
    }
    let lines = vec![
        Line::from(Span::styled(fit_text(&text, width), style)),
        Line::from(keys),
    ];
    frame.render_widget(Paragraph::new(lines), area);
}
