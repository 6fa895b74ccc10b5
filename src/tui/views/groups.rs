//! Roughness groups: what the fit starts from, its limits and locks (editable), and what it found.

use ratatui::Frame;
use ratatui::layout::Rect;
use ratatui::style::Style;
use ratatui::text::{Line, Span};
use ratatui::widgets::Paragraph;

use super::{fit_text, right};
use crate::calibrate::GroupStatus;
use crate::tui::app::App;
use crate::tui::state::groups::{
    GROUP_COLUMNS, GROUP_LOCK, GROUP_MAX, GROUP_MIN, GROUP_START, format_c,
};

const WIDTHS: [usize; 10] = [15, 5, 6, 7, 4, 4, 4, 6, 7, 12];

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let state = &app.groups;
    let units = app.session.network.units;
    let mut lines = Vec::new();
    let mut header = Vec::new();
    for (i, name) in GROUP_COLUMNS.iter().enumerate() {
        let name = if i == 2 {
            format!("{} {}", "len", units.length_label())
        } else {
            name.to_string()
        };
        let text = if i == 0 {
            fit_text(&name, WIDTHS[i])
        } else {
            right(&name, WIDTHS[i])
        };
        header.push(Span::styled(format!("{text} "), theme.header()));
    }
    lines.push(Line::from(header));
    if state.rows.is_empty() {
        lines.push(Line::from(Span::styled(
            "  The network declares no [[group]]: nothing to calibrate.",
            theme.dim(),
        )));
    }
    let outcome = app.fit.outcome.as_ref();
    for (r, row) in state.rows.iter().enumerate() {
        let fit = outcome.and_then(|o| o.result.groups.iter().find(|g| g.name == row.name));
        let cells: [String; 10] = [
            row.name.clone(),
            row.pipes.to_string(),
            format!("{:.0}", row.length),
            row.start_c.map_or("-".into(), format_c),
            format_c(row.min_c),
            format_c(row.max_c),
            if row.locked {
                "yes".into()
            } else {
                "no".into()
            },
            fit.map_or(String::new(), |g| format_c(g.fitted_c)),
            fit.and_then(|g| g.ci95)
                .map_or(String::new(), |(l, h)| format!("{l:.0}-{h:.0}")),
            fit.map_or(String::new(), |g| g.status.label().to_string()),
        ];
        let mut spans = Vec::new();
        for (c, text) in cells.iter().enumerate() {
            let editing = state.edit.as_ref().filter(|e| e.row == r && e.column == c);
            let shown = match editing {
                Some(edit) => right(&format!("{}_", edit.input.buffer), WIDTHS[c]),
                None if c == 0 => fit_text(text, WIDTHS[c]),
                None => right(text, WIDTHS[c]),
            };
            let mut style = Style::default();
            if c == 9 {
                style = match fit.map(|g| g.status) {
                    Some(GroupStatus::Fitted) => theme.good(),
                    Some(GroupStatus::AtBound | GroupStatus::NotInformed) => theme.warning(),
                    _ => theme.dim(),
                };
            }
            if editing.is_some() {
                style = theme.editing();
            } else if r == state.row && c == state.column {
                style = theme.cursor();
            } else if (GROUP_START..=GROUP_LOCK).contains(&c) && r == state.row {
                style = style.patch(theme.header());
            }
            spans.push(Span::styled(shown, style));
            spans.push(Span::raw(" "));
        }
        lines.push(Line::from(spans));
    }
    lines.push(Line::default());
    if let Some(row) = state.rows.get(state.row) {
        let column = match state.column {
            GROUP_START => "start C: the C every pipe of the group gets before the fit",
            GROUP_MIN | GROUP_MAX => "bounds: the fit keeps the group's C between min and max",
            _ => "lock: a locked group keeps its C (Space toggles)",
        };
        lines.push(Line::from(Span::styled(
            format!("  {}: {column}", row.name),
            theme.dim(),
        )));
        if let Some(g) = outcome.and_then(|o| o.result.groups.iter().find(|g| g.name == row.name)) {
            let se = g.std_error.map_or("-".into(), |s| format!("{s:.1}"));
            lines.push(Line::from(format!(
                "  fitted {} (start {}), standard error {se}, informed by {} tests",
                format_c(g.fitted_c),
                format_c(g.start_c),
                g.tests_informing
            )));
            if !g.suggested_test_nodes.is_empty() {
                lines.push(Line::from(Span::styled(
                    format!(
                        "  no test informs it; a test at {} would",
                        g.suggested_test_nodes.join(", ")
                    ),
                    theme.warning(),
                )));
            }
        }
    }
    if let Some(o) = outcome {
        for (a, b, r) in &o.result.strongly_correlated {
            lines.push(Line::from(Span::styled(
                format!("  {a} and {b} move together (correlation {r:+.2}): the tests cannot tell them apart"),
                theme.warning(),
            )));
        }
        if app.fit.stale {
            lines.push(Line::from(Span::styled(
                "  groups or sheet changed since this fit: Ctrl+R runs it again",
                theme.warning(),
            )));
        }
    }
    frame.render_widget(Paragraph::new(lines), area);
}
