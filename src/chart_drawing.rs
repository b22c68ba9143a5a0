//! Draws the charts as SVG (plotters): the term structures of one analysis, and a fit
//! parameter through time. Numbers in, SVG text out; no HTTP or store types (the
//! service's chart endpoints are in `api::chart_endpoints`).

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;

/// One expiry of a term-structure chart (annualised variance levels).
#[derive(Debug, Clone, PartialEq)]
pub struct TermPoint {
    /// Expiry, years.
    pub tau: f64,
    /// Variance swap level.
    pub variance_swap: f64,
    /// Gamma swap level.
    pub gamma_swap: f64,
    /// Leverage swap level.
    pub leverage_swap: f64,
    /// Forward variance of the period ending here.
    pub forward_variance: Option<f64>,
    /// The fitted model's leverage swap.
    pub model_leverage_swap: Option<f64>,
}

/// Why a chart could not be drawn.
#[derive(Debug, thiserror::Error)]
pub enum ChartError {
    /// Nothing to draw.
    #[error("no points to draw")]
    Empty,
    /// The drawing backend failed.
    #[error("drawing failed: {0}")]
    Drawing(String),
}

fn drawing<E: std::fmt::Debug>(e: E) -> ChartError {
    ChartError::Drawing(format!("{e:?}"))
}

/// Chart size, pixels.
const WIDTH: u32 = 880;
const HEIGHT: u32 = 560;
/// Series colours (chosen for contrast on white, readable by most colour-blind readers).
const VARIANCE_COLOUR: RGBColor = RGBColor(0x1f, 0x5f, 0xa8);
const GAMMA_COLOUR: RGBColor = RGBColor(0xd1, 0x7a, 0x00);
const FORWARD_COLOUR: RGBColor = RGBColor(0x5a, 0x5a, 0x5a);
const MARKET_COLOUR: RGBColor = RGBColor(0x8e, 0x2c, 0x8e);
const MODEL_COLOUR: RGBColor = RGBColor(0x2a, 0x8c, 0x4a);

/// `min..max` padded by 8% (and widened when flat).
fn padded(values: impl Iterator<Item = f64>) -> std::ops::Range<f64> {
    let (lo, hi) =
        values.filter(|v| v.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    if !lo.is_finite() {
        return 0.0..1.0;
    }
    let span = (hi - lo).max(1e-3 * hi.abs().max(1e-6));
    (lo - 0.08 * span)..(hi + 0.08 * span)
}

fn vol_percent(level: f64) -> f64 {
    if level >= 0.0 {
        100.0 * level.sqrt()
    } else {
        f64::NAN
    }
}

/// The term structures of one analysis: variance and gamma swap vols and forward vol
/// (top, annualised %), leverage swap with the model fit (bottom, annualised variance
/// in basis points, 1 bp = 1e-4).
///
/// # Errors
/// [`ChartError::Empty`] without points.
pub fn term_structure_svg(title: &str, points: &[TermPoint]) -> Result<String, ChartError> {
    if points.is_empty() {
        return Err(ChartError::Empty);
    }
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing)?;
        let root = root.titled(title, ("sans-serif", 18)).map_err(drawing)?;
        let (top, bottom) = root.split_vertically(HEIGHT * 55 / 100);
        let t_max = points.iter().map(|p| p.tau).fold(0.0, f64::max) * 1.03;
        draw_vols(&top, points, t_max)?;
        draw_leverage(&bottom, points, t_max)?;
        root.present().map_err(drawing)?;
    }
    Ok(svg)
}

/// A panel over time to expiry with its mesh drawn.
fn term_panel<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    t_max: f64,
    y: std::ops::Range<f64>,
    y_desc: &str,
    decimals: usize,
) -> Result<ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>, ChartError> {
    let mut chart = ChartBuilder::on(area)
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_max, y)
        .map_err(drawing)?;
    chart
        .configure_mesh()
        .x_desc("time to expiry (years)")
        .y_desc(y_desc)
        .y_label_formatter(&|v| format!("{v:.decimals$}"))
        .draw()
        .map_err(drawing)?;
    Ok(chart)
}

fn draw_vols(area: &DrawingArea<SVGBackend, Shift>, points: &[TermPoint], t_max: f64) -> Result<(), ChartError> {
    let vs: Vec<(f64, f64)> = points.iter().map(|p| (p.tau, vol_percent(p.variance_swap))).collect();
    let gs: Vec<(f64, f64)> = points.iter().map(|p| (p.tau, vol_percent(p.gamma_swap))).collect();
    let fwd: Vec<(f64, f64)> = points
        .iter()
        .filter_map(|p| p.forward_variance.map(|f| (p.tau, vol_percent(f))))
        .filter(|p| p.1.is_finite())
        .collect();
    let y = padded(vs.iter().chain(&gs).chain(&fwd).map(|p| p.1));
    let mut chart = term_panel(area, t_max, y, "annualised vol (%)", 1)?;
    let series = [
        ("variance swap vol", &vs, VARIANCE_COLOUR),
        ("gamma swap vol", &gs, GAMMA_COLOUR),
        ("forward vol (sqrt of forward variance)", &fwd, FORWARD_COLOUR),
    ];
    for (label, data, colour) in series {
        let style = ShapeStyle::from(&colour).stroke_width(2);
        chart
            .draw_series(LineSeries::new(data.iter().cloned(), style))
            .map_err(drawing)?
            .label(label)
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
    }
    chart.draw_series(vs.iter().map(|p| Circle::new(*p, 2, VARIANCE_COLOUR.filled()))).map_err(drawing)?;
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .position(SeriesLabelPosition::LowerRight)
        .draw()
        .map_err(drawing)
}

fn draw_leverage(area: &DrawingArea<SVGBackend, Shift>, points: &[TermPoint], t_max: f64) -> Result<(), ChartError> {
    let bp = |x: f64| x * 1e4;
    let market: Vec<(f64, f64)> = points.iter().map(|p| (p.tau, bp(p.leverage_swap))).collect();
    let model: Vec<(f64, f64)> = points.iter().filter_map(|p| p.model_leverage_swap.map(|m| (p.tau, bp(m)))).collect();
    let y = padded(market.iter().chain(&model).map(|p| p.1).chain(std::iter::once(0.0)));
    let mut chart = term_panel(area, t_max, y, "leverage swap (bp of variance)", 0)?;
    chart
        .draw_series(market.iter().map(|p| Circle::new(*p, 3, MARKET_COLOUR.filled())))
        .map_err(drawing)?
        .label("leverage swap (model-free)")
        .legend(|(x, y)| Circle::new((x + 9, y), 3, MARKET_COLOUR.filled()));
    if !model.is_empty() {
        let style = ShapeStyle::from(&MODEL_COLOUR).stroke_width(2);
        chart
            .draw_series(LineSeries::new(model.iter().cloned(), style))
            .map_err(drawing)?
            .label("model fit")
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .position(SeriesLabelPosition::LowerLeft)
        .draw()
        .map_err(drawing)
}

/// A fit parameter through time: `(hours since the first point, value)` pairs, with
/// the clock time of each tick label given by `label_of_hours`.
///
/// # Errors
/// [`ChartError::Empty`] without points.
pub fn parameter_history_svg(
    title: &str,
    parameter: &str,
    points: &[(f64, f64)],
    label_of_hours: &dyn Fn(f64) -> String,
) -> Result<String, ChartError> {
    if points.is_empty() {
        return Err(ChartError::Empty);
    }
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT * 2 / 3)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing)?;
        let root = root.titled(title, ("sans-serif", 18)).map_err(drawing)?;
        let x = padded(points.iter().map(|p| p.0));
        let y = padded(points.iter().map(|p| p.1));
        // Enough decimals that neighbouring ticks (about a tenth of the range apart) differ.
        let decimals = (2.0 - ((y.end - y.start) / 10.0).log10().floor()).clamp(2.0, 8.0) as usize;
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(72)
            .build_cartesian_2d(x, y)
            .map_err(drawing)?;
        chart
            .configure_mesh()
            .x_desc("valuation time (UTC)")
            .y_desc(parameter)
            .x_label_formatter(&|h| label_of_hours(*h))
            .y_label_formatter(&|v| format!("{v:.decimals$}"))
            .draw()
            .map_err(drawing)?;
        let style = ShapeStyle::from(&VARIANCE_COLOUR).stroke_width(2);
        chart.draw_series(LineSeries::new(points.iter().cloned(), style)).map_err(drawing)?;
        chart.draw_series(points.iter().map(|p| Circle::new(*p, 3, VARIANCE_COLOUR.filled()))).map_err(drawing)?;
        root.present().map_err(drawing)?;
    }
    Ok(svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn charts_have_axes_labels_and_paths() {
        let points: Vec<TermPoint> = (1..=5)
            .map(|i| {
                let t = 0.25 * i as f64;
                TermPoint {
                    tau: t,
                    variance_swap: 0.04 + 0.002 * t,
                    gamma_swap: 0.039 + 0.0015 * t,
                    leverage_swap: -0.001 - 0.0005 * t,
                    forward_variance: Some(0.041 + 0.004 * t),
                    model_leverage_swap: Some(-0.0011 - 0.0005 * t),
                }
            })
            .collect();
        let svg = term_structure_svg("ORIOLE 2026-11-30T15:30:00Z", &points).expect("drawn");
        for expected in
            ["<svg", "<polyline", "annualised vol (%)", "leverage swap (bp of variance)", "model fit", "ORIOLE"]
        {
            assert!(svg.contains(expected), "missing {expected}");
        }
        let history =
            parameter_history_svg("ORIOLE hurst", "hurst", &[(0.0, 0.1), (1.0, 0.12)], &|h| format!("{h:.0}h"))
                .expect("drawn");
        assert!(history.contains("<polyline") && history.contains("valuation time (UTC)"));
        assert!(matches!(term_structure_svg("x", &[]), Err(ChartError::Empty)));
    }
}
