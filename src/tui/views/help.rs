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
    frame.render_widget(Clear, area);
    let block = Block::default()
        .borders(Borders::ALL)
        .title(" keys (Esc closes) ");
    let inner = block.inner(area);
    frame.render_widget(block, area);
    let [left, right] =
        Layout::horizontal([Constraint::Percentage(50), Constraint::Percentage(50)]).areas(inner);
    let section = |range: std::ops::Range<usize>| {
        let mut lines = Vec::new();
        for (title, keys) in &KEY_HELP[range] {
            lines.push(Line::from(Span::styled(*title, theme.header())));
            for (key, what) in *keys {
                lines.push(Line::from(vec![
                    Span::styled(format!("{key:<14} "), theme.key()),
                    Span::raw(*what),
                ]));
            }
        }
        lines
    };
    frame.render_widget(
        Paragraph::new(section(0..3)).wrap(Wrap { trim: true }),
        left,
    );
    let mut lines = section(3..KEY_HELP.len());
    lines.push(Line::default());
    lines.push(Line::from(Span::styled("Caution", theme.header())));
    lines.push(Line::from(CAUTION));
    frame.render_widget(Paragraph::new(lines).wrap(Wrap { trim: true }), right);
}
