//! `fit.svg`: measured against modelled pressure for every static and residual reading, before the fit
//! (hollow circles) and after it (filled triangles), with the 1:1 line where model equals field.

use plotters::prelude::*;

use crate::calibrate::CalibrationResult;
use crate::network::UnitSystem;

use super::ReportError;

/// Legend label of the readings before the fit.
pub const BEFORE_LABEL: &str = "before calibration";
/// Legend label of the readings after the fit.
pub const AFTER_LABEL: &str = "after calibration";
/// Legend label of the readings at the last iteration of a fit that did not converge.
pub const LAST_ITERATION_LABEL: &str = "at the last iteration (NOT CONVERGED)";
/// Title of the plot.
pub const TITLE: &str = "Measured and modelled pressure";
/// Title of the plot of a fit that did not converge.
pub const NOT_CONVERGED_TITLE: &str = "NOT CONVERGED: measured and modelled pressure";
/// Legend label of the line of perfect agreement.
pub const ONE_TO_ONE_LABEL: &str = "1:1 (model equals field)";

const BEFORE_COLOUR: RGBColor = RGBColor(196, 110, 20);
const AFTER_COLOUR: RGBColor = RGBColor(22, 96, 136);

/// The plot as SVG text.
pub fn fit_svg(result: &CalibrationResult, units: UnitSystem) -> Result<String, ReportError> {
    let before: Vec<(f64, f64)> = result
        .tests
        .iter()
        .flat_map(|t| {
            [
                (t.measured_static, t.modelled_static_before),
                (t.measured_residual, t.modelled_residual_before),
            ]
        })
        .collect();
    let after: Vec<(f64, f64)> = result
        .tests
        .iter()
        .flat_map(|t| {
            [
                (t.measured_static, t.modelled_static_after),
                (t.measured_residual, t.modelled_residual_after),
            ]
        })
        .collect();
    let (lo, hi) = axis_range(before.iter().chain(&after));
    let unit = units.pressure_label();
    let mut svg = String::new();
    let (title, after_label) = if result.converged {
        (TITLE, AFTER_LABEL)
    } else {
        (NOT_CONVERGED_TITLE, LAST_ITERATION_LABEL)
    };
    draw(
        &mut svg,
        (lo, hi),
        unit,
        (title, after_label),
        &before,
        &after,
    )
    .map_err(|e| ReportError::Plot(e.to_string()))?;
    Ok(svg)
}

/// One range for both axes, so the 1:1 line is the diagonal: the data's extent with a 5 % margin.
fn axis_range<'a>(points: impl Iterator<Item = &'a (f64, f64)>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for &(x, y) in points {
        for v in [x, y] {
            if v.is_finite() {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        }
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let margin = ((hi - lo) * 0.05).max(1.0);
    ((lo - margin).max(0.0).min(lo), hi + margin)
}

fn draw(
    svg: &mut String,
    (lo, hi): (f64, f64),
    unit: &str,
    (title, after_label): (&str, &str),
    before: &[(f64, f64)],
    after: &[(f64, f64)],
) -> Result<(), Box<dyn std::error::Error>> {
    let root = SVGBackend::with_string(svg, (720, 720)).into_drawing_area();
    root.fill(&WHITE)?;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", 24))
        .margin(20)
        .x_label_area_size(50)
        .y_label_area_size(64)
        .build_cartesian_2d(lo..hi, lo..hi)?;
    chart
        .configure_mesh()
        .x_desc(format!("measured pressure ({unit})"))
        .y_desc(format!("modelled pressure ({unit})"))
        .light_line_style(RGBColor(235, 235, 235))
        .draw()?;
    chart
        .draw_series(LineSeries::new([(lo, lo), (hi, hi)], BLACK.stroke_width(1)))?
        .label(ONE_TO_ONE_LABEL)
        .legend(|(x, y)| PathElement::new([(x, y), (x + 20, y)], BLACK));
    chart
        .draw_series(
            before
                .iter()
                .map(|&p| Circle::new(p, 5, BEFORE_COLOUR.stroke_width(2))),
        )?
        .label(BEFORE_LABEL)
        .legend(|(x, y)| Circle::new((x + 10, y), 5, BEFORE_COLOUR.stroke_width(2)));
    chart
        .draw_series(
            after
                .iter()
                .map(|&p| TriangleMarker::new(p, 6, AFTER_COLOUR.filled())),
        )?
        .label(after_label)
        .legend(|(x, y)| TriangleMarker::new((x + 10, y), 6, AFTER_COLOUR.filled()));
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .background_style(WHITE.mix(0.9))
        .border_style(BLACK)
        .draw()?;
    root.present()?;
    Ok(())
}
