//! Draws the term-structure chart of one analysis as SVG (plotters; the through-time
//! charts are `time_chart`). Numbers in, SVG text out; no HTTP or store types (the
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

/// Default chart width, pixels; text keeps its size at any width.
pub const DEFAULT_WIDTH: u32 = 880;
/// Text size, pixels (tick labels, axis titles, legends).
const FONT: u32 = 13;
/// Series colours (chosen for contrast on white, readable by most colour-blind readers).
const VARIANCE_COLOUR: RGBColor = RGBColor(0x1f, 0x5f, 0xa8);
const GAMMA_COLOUR: RGBColor = RGBColor(0xd1, 0x7a, 0x00);
const FORWARD_COLOUR: RGBColor = RGBColor(0x5a, 0x5a, 0x5a);
const MARKET_COLOUR: RGBColor = RGBColor(0x8e, 0x2c, 0x8e);
const MODEL_COLOUR: RGBColor = RGBColor(0x2a, 0x8c, 0x4a);
const GAP_COLOUR: RGBColor = RGBColor(0xb8, 0x32, 0x2a);

/// The date `tau` years (ACT/365F, as the input's expiries are read) after `as_of`.
pub fn expiry_date(as_of: chrono::DateTime<chrono::Utc>, tau: f64) -> String {
    let seconds = (tau * 365.0 * 86_400.0).round();
    if !seconds.is_finite() || seconds.abs() > 1e11 {
        return String::new();
    }
    (as_of + chrono::Duration::seconds(seconds as i64)).format("%Y-%m-%d").to_string()
}

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

/// A variance level as a vol in vol points (`100 sqrt(v)`); NaN when negative.
fn vol_points(level: f64) -> f64 {
    if level >= 0.0 {
        100.0 * level.sqrt()
    } else {
        f64::NAN
    }
}

/// How a legend entry is drawn.
#[derive(Clone, Copy)]
enum Swatch {
    Line(RGBColor),
    Dot(RGBColor),
    Shade(RGBColor),
}

/// Legend entries laid out in rows over `width` pixels: `(row, x, label, swatch)`.
fn legend_layout<'a>(items: &[(&'a str, Swatch)], width: u32) -> (Vec<(u32, i32, &'a str, Swatch)>, u32) {
    let (mut row, mut x, mut out) = (0u32, 8i32, Vec::new());
    for (label, swatch) in items {
        let item = 30 + (0.56 * FONT as f64 * label.chars().count() as f64) as i32;
        if x + item > width as i32 && x > 8 {
            row += 1;
            x = 8;
        }
        out.push((row, x, *label, *swatch));
        x += item + 16;
    }
    (out, row + 1)
}

/// Height of a legend strip of `rows` rows, pixels.
fn legend_height(rows: u32) -> u32 {
    rows * (FONT + 8) + 6
}

/// Draws a legend strip above a panel, outside its data.
fn draw_legend(area: &DrawingArea<SVGBackend, Shift>, items: &[(&str, Swatch)], width: u32) -> Result<(), ChartError> {
    let (layout, _) = legend_layout(items, width);
    for (row, x, label, swatch) in layout {
        let y = 4 + (row * (FONT + 8)) as i32 + FONT as i32 / 2;
        match swatch {
            Swatch::Line(c) => area.draw(&PathElement::new(vec![(x, y), (x + 22, y)], c.stroke_width(2))),
            Swatch::Dot(c) => area.draw(&Circle::new((x + 11, y), 3, c.filled())),
            Swatch::Shade(c) => area.draw(&Rectangle::new([(x, y - 6), (x + 22, y + 6)], c.mix(0.18).filled())),
        }
        .map_err(drawing)?;
        area.draw(&Text::new(label.to_string(), (x + 28, y - FONT as i32 / 2), ("sans-serif", FONT)))
            .map_err(drawing)?;
    }
    Ok(())
}

/// The term structures of one analysis, `width` pixels wide: variance and gamma swap
/// vols with forward vol drawn as steps (forward variance is flat between expiries;
/// a negative or missing one is a shaded gap, never bridged), and the leverage swap as
/// gamma-swap vol minus variance-swap vol with the model fit; vols in vol points, the
/// expiry axis labelled by `date_of_tau` (years to expiry to a date), legends above
/// the data.
///
/// # Errors
/// [`ChartError::Empty`] without points.
pub fn term_structure_svg(
    title: &str,
    points: &[TermPoint],
    width: u32,
    date_of_tau: &dyn Fn(f64) -> String,
) -> Result<String, ChartError> {
    if points.is_empty() {
        return Err(ChartError::Empty);
    }
    let mut points = points.to_vec();
    points.sort_by(|a, b| a.tau.total_cmp(&b.tau));
    let steps = forward_steps(&points);
    let gap_reasons: Vec<&str> = {
        let mut r: Vec<&str> = steps.iter().filter_map(|s| s.gap).collect();
        r.dedup();
        r
    };
    let mut top_items = vec![
        ("variance swap vol", Swatch::Line(VARIANCE_COLOUR)),
        ("gamma swap vol", Swatch::Line(GAMMA_COLOUR)),
        ("forward vol (flat between expiries)", Swatch::Line(FORWARD_COLOUR)),
    ];
    let gap_label = gap_reasons.iter().map(|r| format!("gap: {r}")).collect::<Vec<_>>().join("; ");
    if !gap_reasons.is_empty() {
        top_items.push((gap_label.as_str(), Swatch::Shade(GAP_COLOUR)));
    }
    let bottom_items =
        [("leverage swap (market)", Swatch::Dot(MARKET_COLOUR)), ("model fit", Swatch::Line(MODEL_COLOUR))];
    let (_, top_rows) = legend_layout(&top_items, width);
    let (_, bottom_rows) = legend_layout(&bottom_items, width);
    let panel = (0.32 * width as f64).clamp(200.0, 330.0) as u32;
    let top_height = legend_height(top_rows) + panel + 48;
    let bottom_height = legend_height(bottom_rows) + panel * 3 / 4 + 48;
    let height = 30 + top_height + bottom_height;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing)?;
        let root = root.titled(title, ("sans-serif", FONT + 3)).map_err(drawing)?;
        let (top, bottom) = root.split_vertically(top_height);
        let t_max = points.iter().map(|p| p.tau).fold(0.0, f64::max) * 1.03;
        let (legend, plot) = top.split_vertically(legend_height(top_rows));
        draw_legend(&legend, &top_items, width)?;
        draw_vols(&plot, &points, &steps, t_max, date_of_tau)?;
        let (legend, plot) = bottom.split_vertically(legend_height(bottom_rows));
        draw_legend(&legend, &bottom_items, width)?;
        draw_leverage(&plot, &points, t_max, date_of_tau)?;
        root.present().map_err(drawing)?;
    }
    Ok(svg)
}

/// Forward variance of one period between expiries.
struct ForwardStep {
    from: f64,
    to: f64,
    /// Forward vol, vol points; NaN in a gap.
    vol: f64,
    /// Why there is no vol.
    gap: Option<&'static str>,
}

/// The forward-variance steps: each expiry's forward variance over the period since
/// the previous expiry (from 0 for the first).
fn forward_steps(points: &[TermPoint]) -> Vec<ForwardStep> {
    let mut from = 0.0;
    points
        .iter()
        .map(|p| {
            let (vol, gap) = match p.forward_variance {
                Some(v) if v >= 0.0 => (vol_points(v), None),
                Some(v) if v < 0.0 => (f64::NAN, Some("negative forward variance (calendar arbitrage)")),
                _ => (f64::NAN, Some("forward variance missing")),
            };
            let step = ForwardStep { from, to: p.tau, vol, gap };
            from = p.tau;
            step
        })
        .collect()
}

/// A panel over time to expiry, labelled by expiry date, with its mesh drawn.
fn term_panel<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    t_max: f64,
    y: std::ops::Range<f64>,
    y_desc: &str,
    date_of_tau: &dyn Fn(f64) -> String,
) -> Result<ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>, ChartError> {
    let x_labels = (area.dim_in_pixel().0 / 120).max(2) as usize;
    let mut chart = ChartBuilder::on(area)
        .margin(10)
        .x_label_area_size(40)
        .y_label_area_size(48)
        .build_cartesian_2d(0.0..t_max, y)
        .map_err(drawing)?;
    chart
        .configure_mesh()
        .x_labels(x_labels)
        .y_labels(6)
        .x_desc("expiry")
        .y_desc(y_desc)
        .label_style(("sans-serif", FONT))
        .axis_desc_style(("sans-serif", FONT))
        .x_label_formatter(&|t| date_of_tau(*t))
        .y_label_formatter(&|v| format!("{v:.1}"))
        .draw()
        .map_err(drawing)?;
    Ok(chart)
}

fn draw_vols(
    area: &DrawingArea<SVGBackend, Shift>,
    points: &[TermPoint],
    steps: &[ForwardStep],
    t_max: f64,
    date_of_tau: &dyn Fn(f64) -> String,
) -> Result<(), ChartError> {
    let vs: Vec<(f64, f64)> = points.iter().map(|p| (p.tau, vol_points(p.variance_swap))).collect();
    let gs: Vec<(f64, f64)> = points.iter().map(|p| (p.tau, vol_points(p.gamma_swap))).collect();
    let y = padded(vs.iter().chain(&gs).map(|p| p.1).chain(steps.iter().map(|s| s.vol)));
    let mut chart = term_panel(area, t_max, y.clone(), "vol points", date_of_tau)?;
    for step in steps.iter().filter(|s| s.gap.is_some()) {
        chart
            .draw_series(std::iter::once(Rectangle::new(
                [(step.from, y.start), (step.to, y.end)],
                GAP_COLOUR.mix(0.18).filled(),
            )))
            .map_err(drawing)?;
    }
    // Steps joined where one period follows another; broken at every gap.
    let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
    for step in steps {
        if step.vol.is_finite() {
            if let Some(run) = runs.last_mut() {
                run.extend([(step.from, step.vol), (step.to, step.vol)]);
            }
        } else if runs.last().is_some_and(|r| !r.is_empty()) {
            runs.push(Vec::new());
        }
    }
    let forward_style = ShapeStyle::from(&FORWARD_COLOUR).stroke_width(2);
    for run in runs.into_iter().filter(|r| !r.is_empty()) {
        chart.draw_series(LineSeries::new(run, forward_style)).map_err(drawing)?;
    }
    for (data, colour) in [(&vs, VARIANCE_COLOUR), (&gs, GAMMA_COLOUR)] {
        let style = ShapeStyle::from(&colour).stroke_width(2);
        let finite = data.iter().filter(|p| p.1.is_finite()).cloned();
        chart.draw_series(LineSeries::new(finite, style)).map_err(drawing)?;
    }
    chart.draw_series(vs.iter().map(|p| Circle::new(*p, 2, VARIANCE_COLOUR.filled()))).map_err(drawing)?;
    Ok(())
}

fn draw_leverage(
    area: &DrawingArea<SVGBackend, Shift>,
    points: &[TermPoint],
    t_max: f64,
    date_of_tau: &dyn Fn(f64) -> String,
) -> Result<(), ChartError> {
    // Gamma-swap vol minus variance-swap vol, vol points: the leverage swap as desks read it.
    let spread = |variance: f64, leverage: f64| vol_points(variance + leverage) - vol_points(variance);
    let market: Vec<(f64, f64)> =
        points.iter().map(|p| (p.tau, spread(p.variance_swap, p.leverage_swap))).filter(|p| p.1.is_finite()).collect();
    let model: Vec<(f64, f64)> = points
        .iter()
        .filter_map(|p| p.model_leverage_swap.map(|m| (p.tau, spread(p.variance_swap, m))))
        .filter(|p| p.1.is_finite())
        .collect();
    let y = padded(market.iter().chain(&model).map(|p| p.1).chain(std::iter::once(0.0)));
    let mut chart = term_panel(area, t_max, y, "gamma − variance (vol points)", date_of_tau)?;
    chart.draw_series(market.iter().map(|p| Circle::new(*p, 3, MARKET_COLOUR.filled()))).map_err(drawing)?;
    if !model.is_empty() {
        let style = ShapeStyle::from(&MODEL_COLOUR).stroke_width(2);
        chart.draw_series(LineSeries::new(model.iter().cloned(), style)).map_err(drawing)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn points(negative_at: Option<usize>) -> Vec<TermPoint> {
        (1..=5)
            .map(|i| {
                let t = 0.25 * i as f64;
                TermPoint {
                    tau: t,
                    variance_swap: 0.04 + 0.002 * t,
                    gamma_swap: 0.039 + 0.0015 * t,
                    leverage_swap: -0.001 - 0.0005 * t,
                    forward_variance: Some(if negative_at == Some(i) { -0.01 } else { 0.041 + 0.004 * t }),
                    model_leverage_swap: Some(-0.0011 - 0.0005 * t),
                }
            })
            .collect()
    }

    /// Polylines drawn in the forward-vol colour, less the legend's swatch.
    fn forward_lines(svg: &str) -> usize {
        let tags = svg.split("<polyline").skip(1).map(|p| p.split('>').next().unwrap_or(""));
        tags.filter(|tag| tag.contains("stroke=\"#5A5A5A\"")).count() - 1
    }

    #[test]
    fn charts_have_axes_labels_and_paths() {
        let svg = term_structure_svg("ORIOLE 2026-11-30T15:30:00Z", &points(None), 420, &|t| format!("{t:.2}y"))
            .expect("drawn");
        for expected in ["<svg", "<polyline", "vol points", "gamma − variance (vol points)", "model fit", "ORIOLE"] {
            assert!(svg.contains(expected), "missing {expected}");
        }
        assert!(svg.contains("width=\"420\""));
        assert_eq!(forward_lines(&svg), 1, "one run of steps without gaps");
        assert!(!svg.contains("gap:"));
        assert!(matches!(term_structure_svg("x", &[], 880, &|t| t.to_string()), Err(ChartError::Empty)));
    }

    /// Forward variance is flat between expiries: each period is one horizontal step
    /// (two points at one level), and a negative one is a named gap the line does not
    /// bridge.
    #[test]
    fn forward_variance_is_drawn_as_steps_broken_at_a_negative_period() {
        let steps = forward_steps(&points(Some(3)));
        assert_eq!(steps.len(), 5);
        assert!(steps[0].from.abs() < 1e-15 && (steps[1].from - steps[0].to).abs() < 1e-15);
        assert!(steps[2].vol.is_nan() && steps[2].gap.is_some_and(|g| g.contains("negative")));
        let svg = term_structure_svg("ORIOLE", &points(Some(3)), 880, &|t| format!("{t:.2}y")).expect("drawn");
        assert_eq!(forward_lines(&svg), 2, "the steps break at the gap");
        assert!(svg.contains("gap: negative forward variance (calendar arbitrage)"));
    }
}
