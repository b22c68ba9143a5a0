//! Draws figures through time as SVG (the tenor chart and the fit-parameter chart):
//! one line per series against valuation time (UTC), broken where a value is missing,
//! never bridged, the legend beside the plot (outside the data), and every point a
//! link (`<a href>`) to its snapshot with a tooltip (`<title>`) saying what it is.
//! Written by hand rather than with plotters, whose SVG backend has no links. Numbers
//! in, SVG text out; no HTTP or store types.

use crate::chart_drawing::ChartError;
use chrono::{DateTime, Duration, Utc};
use std::fmt::Write;

/// One point of a series.
#[derive(Debug, Clone, PartialEq)]
pub struct TimePoint {
    /// Valuation time.
    pub at: DateTime<Utc>,
    /// The value in the chart's unit; `None` breaks the line (drawn as a gap).
    pub value: Option<f64>,
    /// Where the point links to (the snapshot's page).
    pub href: String,
    /// Id of the snapshot, for the tooltip.
    pub snapshot_id: i64,
}

/// A named series in time order.
#[derive(Debug, Clone, PartialEq)]
pub struct TimeSeries {
    /// Legend text.
    pub label: String,
    /// Points by time.
    pub points: Vec<TimePoint>,
}

/// Chart height and margins, pixels (the legend sits in the right margin); the width
/// is the caller's (text keeps its pixel size at any width).
const HEIGHT: f64 = 400.0;
const LEFT: f64 = 84.0;
const RIGHT: f64 = 150.0;
const TOP: f64 = 40.0;
const BOTTOM: f64 = 48.0;
/// Series colours (distinct on white and for most colour-blind readers).
const COLOURS: [&str; 5] = ["#1f5fa8", "#d17a00", "#2a8c4a", "#8e2c8e", "#5a5a5a"];

/// Escapes text for SVG content and attribute values.
fn escape(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// A tick step of 1, 2 or 5 times a power of ten giving about `count` ticks over `span`.
fn nice_step(span: f64, count: f64) -> f64 {
    let raw = (span / count).max(f64::MIN_POSITIVE);
    let power = 10f64.powf(raw.log10().floor());
    let factor = raw / power;
    power
        * if factor < 1.5 {
            1.0
        } else if factor < 3.5 {
            2.0
        } else if factor < 7.5 {
            5.0
        } else {
            10.0
        }
}

/// Figures through time: `series` against valuation time, `y_label` naming the unit,
/// values written with `decimals` decimals in ticks and tooltips, `width` pixels wide.
///
/// # Errors
/// [`ChartError::Empty`] when no series has a value.
pub fn time_chart_svg(
    title: &str,
    y_label: &str,
    series: &[TimeSeries],
    decimals: usize,
    width: u32,
) -> Result<String, ChartError> {
    let chart_width = f64::from(width);
    let values = || series.iter().flat_map(|s| s.points.iter().filter_map(|p| p.value)).filter(|v| v.is_finite());
    let times = || series.iter().flat_map(|s| s.points.iter().map(|p| p.at));
    let (Some(t0), Some(t1)) = (times().min(), times().max()) else { return Err(ChartError::Empty) };
    let (lo, hi) = values().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    if !lo.is_finite() {
        return Err(ChartError::Empty);
    }
    let pad = ((hi - lo) * 0.08).max(10f64.powi(-(decimals as i32)));
    let (y0, y1) = (lo - pad, hi + pad);
    let span_s = ((t1 - t0).num_milliseconds() as f64 / 1000.0).max(60.0);
    let x_of = |t: DateTime<Utc>| {
        let s = (t - t0).num_milliseconds() as f64 / 1000.0;
        LEFT + (chart_width - LEFT - RIGHT) * if t1 > t0 { s / span_s } else { 0.5 }
    };
    let y_of = |v: f64| TOP + (HEIGHT - TOP - BOTTOM) * (y1 - v) / (y1 - y0);
    let mut svg = String::new();
    let w = |svg: &mut String, text: String| svg.push_str(&text);
    w(
        &mut svg,
        format!(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {chart_width} {HEIGHT}\" width=\"{chart_width}\" \
             height=\"{HEIGHT}\" font-family=\"sans-serif\" font-size=\"13\">\n<rect width=\"100%\" height=\"100%\" \
             fill=\"#ffffff\"/>\n<text x=\"{LEFT}\" y=\"22\" font-size=\"15\">{}</text>\n",
            escape(title)
        ),
    );
    // Axes, grid and tick labels.
    let step = nice_step(y1 - y0, 6.0);
    let mut tick = (y0 / step).ceil() * step;
    while tick <= y1 {
        let y = y_of(tick);
        let _ = writeln!(
            svg,
            "<line x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#e3e7ec\"/>\
             <text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{tick:.decimals$}</text>",
            chart_width - RIGHT,
            LEFT - 6.0,
            y + 4.0
        );
        tick += step;
    }
    let multi_day = t1 - t0 > Duration::hours(24);
    // Ticks on round clock times (UTC): the smallest step of the list giving at most 7.
    const STEPS_S: [i64; 15] =
        [60, 300, 600, 900, 1800, 3600, 7200, 10_800, 21_600, 43_200, 86_400, 172_800, 604_800, 1_209_600, 2_592_000];
    let step_s = STEPS_S.iter().copied().find(|s| span_s / *s as f64 <= 7.0).unwrap_or(STEPS_S[14]);
    let mut tick_s = t0.timestamp().div_euclid(step_s) * step_s;
    if t1 == t0 {
        tick_s = t0.timestamp();
    } else if tick_s < t0.timestamp() {
        tick_s += step_s;
    }
    while let Some(t) = DateTime::from_timestamp(tick_s, 0).filter(|t| *t <= t1 || t1 == t0) {
        let x = x_of(t);
        let label = if multi_day { t.format("%m-%d %H:%M") } else { t.format("%H:%M") };
        let _ = writeln!(
            svg,
            "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{TOP}\" y2=\"{:.1}\" stroke=\"#f0f2f5\"/>\
             <text x=\"{x:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{label}</text>",
            HEIGHT - BOTTOM,
            HEIGHT - BOTTOM + 18.0
        );
        if t1 == t0 {
            break;
        }
        tick_s += step_s;
    }
    let day_note = if multi_day { ", month-day time".to_string() } else { format!(", {}", t0.format("%Y-%m-%d")) };
    let _ = write!(
        svg,
        "<rect x=\"{LEFT}\" y=\"{TOP}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"none\" stroke=\"#9aa4b1\"/>\n\
         <text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">valuation time (UTC{})</text>\n\
         <text transform=\"translate(16 {:.1}) rotate(-90)\" text-anchor=\"middle\">{}</text>\n",
        chart_width - LEFT - RIGHT,
        HEIGHT - TOP - BOTTOM,
        (LEFT + chart_width - RIGHT) / 2.0,
        HEIGHT - 8.0,
        day_note,
        (TOP + HEIGHT - BOTTOM) / 2.0,
        escape(y_label)
    );
    for (n, s) in series.iter().enumerate() {
        let colour = COLOURS[n % COLOURS.len()];
        // Lines over runs of present values: a missing value is a gap.
        for run in s.points.split(|p| p.value.is_none_or(|v| !v.is_finite())) {
            if run.len() > 1 {
                let coords: Vec<String> =
                    run.iter().filter_map(|p| p.value.map(|v| format!("{:.1},{:.1}", x_of(p.at), y_of(v)))).collect();
                let _ = writeln!(
                    svg,
                    "<polyline fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\" points=\"{}\"/>",
                    coords.join(" ")
                );
            }
        }
        for p in &s.points {
            let Some(v) = p.value.filter(|v| v.is_finite()) else { continue };
            let _ = writeln!(
                svg,
                "<a href=\"{}\"><circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"4\" fill=\"{colour}\"><title>{} at {}: \
                 {v:.decimals$} (snapshot {}; open it)</title></circle></a>",
                escape(&p.href),
                x_of(p.at),
                y_of(v),
                escape(&s.label),
                p.at.format("%Y-%m-%dT%H:%M:%SZ"),
                p.snapshot_id
            );
        }
        let y = TOP + 10.0 + 22.0 * n as f64;
        let x = chart_width - RIGHT + 14.0;
        let _ = writeln!(
            svg,
            "<line x1=\"{x:.1}\" x2=\"{:.1}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"{colour}\" stroke-width=\"3\"/>\
             <text x=\"{:.1}\" y=\"{:.1}\">{}</text>",
            x + 20.0,
            x + 26.0,
            y + 4.0,
            escape(&s.label)
        );
    }
    svg.push_str("</svg>\n");
    Ok(svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(minute: i64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_796_032_800 + 60 * minute, 0).expect("time")
    }

    #[test]
    fn points_link_to_their_snapshots_and_gaps_break_the_line() {
        let point = |minute: i64, value: Option<f64>| TimePoint {
            at: at(minute),
            value,
            href: format!("/?snapshot={minute}"),
            snapshot_id: minute,
        };
        let series = vec![
            TimeSeries {
                label: "1M".into(),
                points: vec![point(0, Some(17.5)), point(10, Some(17.7)), point(20, None), point(30, Some(17.6))],
            },
            TimeSeries { label: "1Y <&>".into(), points: vec![point(0, Some(19.1)), point(10, Some(19.0))] },
        ];
        let svg = time_chart_svg("KESTREL50 variance swap vol", "vol points", &series, 2, 880).expect("drawn");
        assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
        assert_eq!(svg.matches("<a href=").count(), 5, "one link per present value");
        assert!(svg.contains("<a href=\"/?snapshot=30\">"));
        // The 1M line breaks at the missing 20-minute value: one polyline of two points,
        // the lone point after the gap has none; the 1Y line is one polyline.
        assert_eq!(svg.matches("<polyline").count(), 2);
        assert!(svg.contains("1Y &lt;&amp;&gt;") && !svg.contains("1Y <&>"), "text escaped");
        assert!(svg.contains("valuation time (UTC"));
        let empty = TimeSeries { label: "x".into(), points: vec![point(0, None)] };
        assert!(matches!(time_chart_svg("t", "y", &[empty], 2, 880), Err(ChartError::Empty)));
    }

    #[test]
    fn ticks_are_one_two_or_five_times_a_power_of_ten() {
        for (span, expected) in [(1.0, 0.2), (7.0, 1.0), (0.003, 0.0005), (30.0, 5.0)] {
            let got = nice_step(span, 6.0);
            assert!((got - expected).abs() < 1e-12 * expected, "{span}: {got}");
        }
    }
}
