//! The network in plan: pipes shaded by group or fitted change, tests marked by their error.

use ratatui::Frame;
use ratatui::layout::Rect;
use ratatui::style::Color;
use ratatui::text::{Line, Span};
use ratatui::widgets::canvas::{Canvas, Line as CanvasLine, Points};
use ratatui::widgets::{Block, Borders, Paragraph};

use super::fit_text;
use crate::tui::app::App;
use crate::tui::layout;
use crate::tui::map_model::{
    MapShading, SHADE_HIGHER, SHADE_LOWER, SHADE_MUCH_HIGHER, SHADE_MUCH_LOWER, SHADE_UNGROUPED,
};
use crate::tui::theme::GROUP_COLOURS;

fn shade_colour(shading: MapShading, shade: u8) -> Color {
    match shading {
        MapShading::Group if shade == SHADE_UNGROUPED => Color::Gray,
        MapShading::Group => GROUP_COLOURS[usize::from(shade) % GROUP_COLOURS.len()],
        MapShading::FittedChange => match shade {
            SHADE_MUCH_LOWER => Color::LightRed,
            SHADE_LOWER => Color::Red,
            SHADE_HIGHER => Color::Blue,
            SHADE_MUCH_HIGHER => Color::LightBlue,
            _ => Color::Gray,
        },
    }
}

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let canvas_area = layout::map_canvas(area);
    let markers = app.test_markers();
    let selected = app.map.selected.min(markers.len().saturating_sub(1));
    let outcome = app.fit.outcome.as_ref();
    let geometry = &app.map.geometry;
    let Some(bounds) = geometry.bounds else {
        frame.render_widget(
            Paragraph::new("No pipe has plan coordinates (x, y) to draw."),
            canvas_area,
        );
        return;
    };
    let shading = app.map.shading;
    let error_of = |comparison: Option<usize>| -> Option<f64> {
        let t = outcome?.result.tests.get(comparison?)?;
        Some(
            (t.measured_static - t.modelled_static_after)
                .abs()
                .max((t.measured_residual - t.modelled_residual_after).abs()),
        )
    };
    let (tight, loose) = outcome.map_or((0.0, 0.0), |o| {
        (o.result.after.within_tight, o.result.after.within_loose)
    });
    let canvas = Canvas::default()
        .x_bounds(bounds.x)
        .y_bounds(bounds.y)
        .paint(|ctx| {
            for segment in &geometry.segments {
                ctx.draw(&CanvasLine {
                    x1: segment.from.0,
                    y1: segment.from.1,
                    x2: segment.to.0,
                    y2: segment.to.1,
                    color: theme.ink(shade_colour(shading, segment.shade)),
                });
            }
            for dot in &geometry.dots {
                ctx.draw(&Points {
                    coords: &[dot.from],
                    color: theme.ink(shade_colour(shading, dot.shade)),
                });
            }
            ctx.layer();
            for (i, marker) in markers.iter().enumerate() {
                let style = match error_of(marker.comparison) {
                    None => theme.normal(),
                    Some(e) if e <= tight => theme.good(),
                    Some(e) if e <= loose => theme.warning(),
                    Some(_) => theme.error(),
                };
                let style = if i == selected { theme.cursor() } else { style };
                let text = if i == selected {
                    format!("[{}]", marker.id)
                } else {
                    "@".to_string()
                };
                ctx.print(
                    marker.position.0,
                    marker.position.1,
                    Span::styled(text, style),
                );
            }
        });
    frame.render_widget(canvas, canvas_area);

    let panel = Rect {
        x: canvas_area.x + canvas_area.width,
        width: area.width.saturating_sub(canvas_area.width),
        ..area
    };
    if panel.width == 0 {
        return;
    }
    let width = usize::from(panel.width.saturating_sub(2));
    let p = app.session.network.units.pressure_label();
    let mut lines = vec![
        Line::from(Span::styled(
            format!("shading: {}", shading.label()),
            theme.header(),
        )),
        Line::from(Span::styled(
            format!(
                "{} of {} pipes placed",
                geometry.segments.len() + geometry.dots.len(),
                geometry.placed_pipes
            ),
            theme.dim(),
        )),
        Line::default(),
    ];
    match markers.get(selected) {
        None => lines.push(Line::from(Span::styled(
            "no usable test to show",
            theme.dim(),
        ))),
        Some(marker) => {
            lines.push(Line::from(Span::styled(
                fit_text(
                    &format!("test {} ({}/{})", marker.id, selected + 1, markers.len()),
                    width,
                ),
                theme.header(),
            )));
            match marker.comparison.and_then(|c| outcome?.result.tests.get(c)) {
                None => lines.push(Line::from(Span::styled("no fit yet: Ctrl+R", theme.dim()))),
                Some(t) => {
                    lines.push(Line::from(format!("{:<9}{:>8}{:>8}", p, "static", "resid")));
                    lines.push(Line::from(format!(
                        "{:<9}{:>8.1}{:>8.1}",
                        "measured", t.measured_static, t.measured_residual
                    )));
                    lines.push(Line::from(format!(
                        "{:<9}{:>8.1}{:>8.1}",
                        "before", t.modelled_static_before, t.modelled_residual_before
                    )));
                    lines.push(Line::from(format!(
                        "{:<9}{:>8.1}{:>8.1}",
                        "after", t.modelled_static_after, t.modelled_residual_after
                    )));
                    lines.push(Line::from(format!(
                        "{:<9}{:>+8.1}{:>+8.1}",
                        "error",
                        t.measured_static - t.modelled_static_after,
                        t.measured_residual - t.modelled_residual_after
                    )));
                }
            }
        }
    }
    lines.push(Line::default());
    lines.push(Line::from(Span::styled(
        "markers: error after fit",
        theme.dim(),
    )));
    if outcome.is_some() {
        lines.push(Line::from(Span::styled(
            format!(" within {tight:.0} {p}"),
            theme.good(),
        )));
        lines.push(Line::from(Span::styled(
            format!(" within {loose:.0} {p}"),
            theme.warning(),
        )));
        lines.push(Line::from(Span::styled(
            format!(" over {loose:.0} {p}"),
            theme.error(),
        )));
    }
    let paragraph = Paragraph::new(lines).block(Block::default().borders(Borders::LEFT));
    frame.render_widget(paragraph, panel);
}
