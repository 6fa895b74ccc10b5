//! The fit: statistics before and after, the tests worst first, and measured against modelled.

use ratatui::Frame;
use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::style::Color;
use ratatui::symbols::Marker;
use ratatui::text::{Line, Span};
use ratatui::widgets::{Axis, Block, Borders, Chart, Dataset, GraphType, Paragraph};

use super::{fit_text, right};
use crate::calibrate::FitStatistics;
use crate::tui::app::App;

pub fn render(app: &App, frame: &mut Frame, area: Rect) {
    let [top, bottom] = Layout::vertical([Constraint::Length(8), Constraint::Min(0)]).areas(area);
    let [stats, run] = Layout::horizontal([Constraint::Length(36), Constraint::Min(0)]).areas(top);
    statistics(app, frame, stats);
    run_state(app, frame, run);
    let [tests, chart] =
        Layout::horizontal([Constraint::Percentage(50), Constraint::Percentage(50)]).areas(bottom);
    test_table(app, frame, tests);
    scatter(app, frame, chart);
}

fn statistics(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let p = app.session.network.units.pressure_label();
    let mut lines = vec![Line::from(Span::styled(
        format!(
            "{}{}{}",
            fit_text("", 16),
            right("before", 10),
            right("after", 10)
        ),
        theme.header(),
    ))];
    let Some(outcome) = &app.fit.outcome else {
        let text = if app.fit.running.is_some() {
            "the first fit is running..."
        } else {
            "no fit yet: Ctrl+R runs it"
        };
        lines.push(Line::from(Span::styled(text, theme.dim())));
        frame.render_widget(Paragraph::new(lines), area);
        return;
    };
    let (b, a) = (&outcome.result.before, &outcome.result.after);
    let row = |name: String, f: &dyn Fn(&FitStatistics) -> String| {
        Line::from(format!(
            "{}{}{}",
            fit_text(&name, 16),
            right(&f(b), 10),
            right(&f(a), 10)
        ))
    };
    lines.push(row("readings".into(), &|s| s.n.to_string()));
    lines.push(row(format!("mean error {p}"), &|s| {
        format!("{:+.2}", s.mean_error)
    }));
    lines.push(row(format!("RMSE {p}"), &|s| format!("{:.2}", s.rmse)));
    lines.push(row(format!("max |error| {p}"), &|s| {
        format!("{:.2}", s.max_abs_error)
    }));
    lines.push(row(format!("within {:.0} {p}", a.within_tight), &|s| {
        format!("{:.0}%", 100.0 * s.share_within_tight)
    }));
    lines.push(row(format!("within {:.0} {p}", a.within_loose), &|s| {
        format!("{:.0}%", 100.0 * s.share_within_loose)
    }));
    frame.render_widget(Paragraph::new(lines), area);
}

fn run_state(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let width = usize::from(area.width);
    let mut lines = Vec::new();
    if let Some(running) = &app.fit.running {
        let word = if running.cancelling {
            "cancelling"
        } else {
            "running"
        };
        lines.push(Line::from(Span::styled(
            format!(
                "fit {word}: {} tests (Esc cancels)",
                running.job.tests.len()
            ),
            theme.warning(),
        )));
        for report in running
            .iterations
            .iter()
            .rev()
            .take(usize::from(area.height).saturating_sub(1))
        {
            lines.push(Line::from(fit_text(
                &format!(
                    "it {:>3}  objective {:>10.4}  step C {:>6.2}",
                    report.iteration, report.objective, report.step_c
                ),
                width,
            )));
        }
        if running.iterations.is_empty() {
            lines.push(Line::from(Span::styled(
                "solving the model for every test...",
                theme.dim(),
            )));
        }
    } else if let Some(failure) = &app.fit.failure {
        lines.push(Line::from(Span::styled("FIT FAILED", theme.error())));
        lines.push(Line::from(failure.clone()));
    }
    if app.fit.running.is_none()
        && let Some(outcome) = &app.fit.outcome
    {
        let r = &outcome.result;
        if r.converged {
            lines.push(Line::from(Span::styled(
                format!("converged in {} iterations", r.iterations.len()),
                theme.good(),
            )));
        } else {
            lines.push(Line::from(Span::styled(
                "NOT CONVERGED: do not use as is",
                theme.error(),
            )));
        }
        lines.push(Line::from(fit_text(&r.termination, width)));
        lines.push(Line::from(format!("fit on {}", r.fit.label())));
        if let Some(chi) = r.reduced_chi_square {
            lines.push(Line::from(format!(
                "misfit / gauge accuracy {chi:.2} (1 is ideal)"
            )));
        }
        if app.fit.stale {
            lines.push(Line::from(Span::styled(
                "sheet or groups changed since: Ctrl+R",
                theme.warning(),
            )));
        }
    }
    let paragraph = Paragraph::new(lines).block(Block::default().borders(Borders::LEFT));
    frame.render_widget(paragraph, area);
}

fn test_table(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let p = app.session.network.units.pressure_label();
    let mut lines = vec![Line::from(Span::styled(
        format!(
            "{}{}{}{}",
            fit_text("test", 9),
            right(&format!("res {p}"), 9),
            right("model", 10),
            right("error", 10)
        ),
        theme.header(),
    ))];
    if let Some(outcome) = &app.fit.outcome {
        let visible = usize::from(area.height).saturating_sub(1);
        let first = app
            .fit
            .first_row
            .min(outcome.by_error.len().saturating_sub(visible));
        for &i in outcome.by_error.iter().skip(first).take(visible) {
            let t = &outcome.result.tests[i];
            let static_error = t.measured_static - t.modelled_static_after;
            let residual_error = t.measured_residual - t.modelled_residual_after;
            let worst = if static_error.abs() > residual_error.abs() {
                static_error
            } else {
                residual_error
            };
            let style = if worst.abs() <= outcome.result.after.within_tight {
                theme.good()
            } else if worst.abs() <= outcome.result.after.within_loose {
                theme.warning()
            } else {
                theme.error()
            };
            lines.push(Line::from(vec![
                Span::raw(format!(
                    "{}{}{}",
                    fit_text(&t.id, 9),
                    right(&format!("{:.1}", t.measured_residual), 9),
                    right(&format!("{:.1}", t.modelled_residual_after), 10)
                )),
                Span::styled(right(&format!("{worst:+.1}"), 10), style),
            ]));
        }
    }
    frame.render_widget(Paragraph::new(lines), area);
}

fn scatter(app: &App, frame: &mut Frame, area: Rect) {
    let theme = app.theme;
    let Some(outcome) = &app.fit.outcome else {
        return;
    };
    let tests = &outcome.result.tests;
    let before: Vec<(f64, f64)> = tests
        .iter()
        .flat_map(|t| {
            [
                (t.measured_static, t.modelled_static_before),
                (t.measured_residual, t.modelled_residual_before),
            ]
        })
        .collect();
    let after: Vec<(f64, f64)> = tests
        .iter()
        .flat_map(|t| {
            [
                (t.measured_static, t.modelled_static_after),
                (t.measured_residual, t.modelled_residual_after),
            ]
        })
        .collect();
    let (mut low, mut high) = (f64::INFINITY, f64::NEG_INFINITY);
    for &(x, y) in before.iter().chain(&after) {
        low = low.min(x.min(y));
        high = high.max(x.max(y));
    }
    if !low.is_finite() {
        return;
    }
    let pad = ((high - low) * 0.05).max(1.0);
    let (low, high) = ((low - pad).floor(), (high + pad).ceil());
    let line = [(low, low), (high, high)];
    let datasets = vec![
        Dataset::default()
            .name("1:1")
            .marker(Marker::Braille)
            .graph_type(GraphType::Line)
            .style(theme.fg(Color::DarkGray))
            .data(&line),
        Dataset::default()
            .name("before")
            .marker(Marker::Dot)
            .graph_type(GraphType::Scatter)
            .style(theme.fg(Color::Yellow))
            .data(&before),
        Dataset::default()
            .name("after")
            .marker(Marker::Block)
            .graph_type(GraphType::Scatter)
            .style(theme.fg(Color::LightGreen))
            .data(&after),
    ];
    let p = app.session.network.units.pressure_label();
    let labels = |lo: f64, hi: f64| vec![format!("{lo:.0}"), format!("{hi:.0}")];
    let chart = Chart::new(datasets)
        .block(
            Block::default()
                .borders(Borders::LEFT)
                .title(format!("modelled vs measured {p}")),
        )
        .x_axis(
            Axis::default()
                .bounds([low, high])
                .labels(labels(low, high)),
        )
        .y_axis(
            Axis::default()
                .bounds([low, high])
                .labels(labels(low, high)),
        );
    frame.render_widget(chart, area);
}
