//! Every key, and the caution, over the current view.

use ratatui::Frame;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Borders, Clear, Paragraph, Wrap};

use crate::calibrate::CAUTION;
use crate::tui::app::App;
use crate::tui::keymap::KEY_HELP;

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let caution_lines = 4;
    frame.render_widget(Clear, area);
    let block = Block::default()
        .borders(Borders::ALL)
        .title(" keys (Esc closes) ");
    let inner = block.inner(area);
    frame.render_widget(block, area);
    let [keys, caution] =
        Layout::vertical([Constraint::Min(0), Constraint::Length(caution_lines)]).areas(inner);
    let [left, right] =
        Layout::horizontal([Constraint::Percentage(50), Constraint::Percentage(50)]).areas(keys);
    let section = |range: std::ops::Range<usize>| {
        let mut lines = Vec::new();
        for (title, keys) in &KEY_HELP[range] {
            lines.push(Line::from(Span::styled(*title, theme.header())));
            for (key, what) in *keys {
                lines.push(Line::from(vec![
                    Span::styled(format!("{key:<13} "), theme.key()),
                    Span::raw(*what),
                ]));
            }
        }
        lines
    };
    frame.render_widget(Paragraph::new(section(0..2)), left);
    frame.render_widget(Paragraph::new(section(2..KEY_HELP.len())), right);
    let lines = vec![
        Line::from(Span::styled("Caution", theme.header())),
        Line::from(CAUTION),
    ];
    frame.render_widget(Paragraph::new(lines).wrap(Wrap { trim: true }), caution);
}
