//! Drawing: each view reads the [`App`] and draws; none changes it.

mod fit;
mod groups;
mod help;
mod map;
mod readings;
mod status_line;

use ratatui::Frame;
use ratatui::layout::Rect;
use ratatui::text::{Line, Span};
use ratatui::widgets::Paragraph;

use super::app::{App, View};
use super::layout;

/// Draws the whole screen.
pub fn render(app: &App, frame: &mut Frame) {
    let (title, body, status) = layout::bands(frame.area());
    title_bar(app, frame, title);
    match app.view {
        View::Readings => readings::render(app, frame, body),
        View::Groups => groups::render(app, frame, body),
        View::Fit => fit::render(app, frame, body),
        View::Map => map::render(app, frame, body),
    }
    status_line::render(app, frame, status);
    if app.help {
        help::render(app, frame, frame.area());
    }
}

fn title_bar(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let mut spans = vec![Span::styled(" roughcal ", theme.title_current())];
    for view in View::ALL {
        let text = format!(" F{} {} ", view.number() + 1, view.title());
        let style = if view == app.view {
            theme.title_current()
        } else {
            theme.title()
        };
        spans.push(Span::styled(text, style));
    }
    let run = match (&app.fit.running, &app.fit.outcome) {
        (Some(running), _) => format!(
            "fitting: iteration {}",
            running.iterations.last().map_or(0, |i| i.iteration)
        ),
        (None, Some(o)) if !o.result.converged => "fit NOT converged".to_string(),
        (None, Some(_)) if app.fit.stale => "fit out of date".to_string(),
        (None, Some(_)) => "fit done".to_string(),
        (None, None) => "no fit yet".to_string(),
    };
    let saved = if app.sheet_conflict.is_some() || app.network_conflict.is_some() {
        "CHANGED ON DISK, NOT SAVED"
    } else if app.has_unsaved_edits() {
        "NOT SAVED"
    } else {
        "saved"
    };
    let read_only = match (
        app.session.sheet_file.read_only,
        app.session.network_file.read_only,
    ) {
        (true, true) => "read-only | ",
        (true, false) => "sheet read-only | ",
        (false, true) => "network read-only | ",
        (false, false) => "",
    };
    let style = if read_only.is_empty() {
        theme.title()
    } else {
        theme.title_current()
    };
    if !read_only.is_empty() {
        // Right after the name, so that a narrow terminal never cuts it off.
        spans.insert(
            1,
            Span::styled(format!(" {} ", read_only.trim_end_matches(" | ")), style),
        );
    }
    spans.push(Span::styled(format!(" {saved} | {run} "), theme.title()));
    let used: usize = spans.iter().map(|s| s.content.chars().count()).sum();
    let rest = usize::from(area.width).saturating_sub(used);
    spans.push(Span::styled(" ".repeat(rest), theme.title()));
    frame.render_widget(Paragraph::new(Line::from(spans)), area);
}

/// `text` cut or padded to exactly `width` characters.
pub(crate) fn fit_text(text: &str, width: usize) -> String {
    let count = text.chars().count();
    if count > width {
        let mut cut: String = text.chars().take(width.saturating_sub(1)).collect();
        cut.push('~');
        cut.chars().take(width).collect()
    } else {
        format!("{text}{}", " ".repeat(width - count))
    }
}

/// `text` right-aligned in `width` characters (cut if longer).
pub(crate) fn right(text: &str, width: usize) -> String {
    let count = text.chars().count();
    if count >= width {
        fit_text(text, width)
    } else {
        format!("{}{text}", " ".repeat(width - count))
    }
}
