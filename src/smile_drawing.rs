//! Draws one expiry's smile against its quotes as SVG: the quotes with their bid/ask
//! bars, the fitted smile (dashed beyond the outermost kept quotes, where it is
//! extrapolated), left-out and suspect quotes marked and listed, and a residual panel
//! (quote minus fit, vol points) against each quote's half spread. Numbers in, SVG
//! text out; no HTTP or store types (the endpoint is `api::smile_endpoints`).
//!
//! Written by hand rather than with plotters so that each quote is one element with a
//! class (`quote kept`, `quote left-out`, `quote suspect`) and a tooltip, and so that
//! the text keeps its size in pixels at any chart width.

use std::fmt::Write as _;

/// How the smile fit treated a quote.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum QuoteMark {
    /// Used by the fit.
    Kept,
    /// Left out of the fit as off-market.
    LeftOut,
    /// Used, but further from the fit than its half spreads allow.
    Suspect,
}

impl QuoteMark {
    fn class(self) -> &'static str {
        match self {
            Self::Kept => "kept",
            Self::LeftOut => "left-out",
            Self::Suspect => "suspect",
        }
    }

    fn words(self) -> &'static str {
        match self {
            Self::Kept => "kept",
            Self::LeftOut => "left out of the fit",
            Self::Suspect => "kept, suspect",
        }
    }
}

/// One quote with the fitted smile's vol at its strike (decimal vols).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MarkedQuote {
    /// Strike, price units.
    pub strike: f64,
    /// Quoted (mid) vol.
    pub vol: f64,
    /// Half the bid/ask spread in vol, when quoted.
    pub half_spread: Option<f64>,
    /// The fitted smile's vol at the strike.
    pub fitted_vol: f64,
    /// How the fit treated it.
    pub mark: QuoteMark,
}

/// One expiry's smile view.
#[derive(Debug, Clone, PartialEq)]
pub struct SmileView {
    /// First title line.
    pub title: String,
    /// Lines under the title (valuation time, snapshot, expiry, forward).
    pub subtitle: Vec<String>,
    /// Forward, price units (marked on the strike axis).
    pub forward: f64,
    /// Quotes in strike order.
    pub quotes: Vec<MarkedQuote>,
    /// The fitted smile sampled in strike order: `(strike, vol)`.
    pub curve: Vec<(f64, f64)>,
    /// Strikes of the outermost kept quotes: the smile beyond them is extrapolated.
    pub kept_range: (f64, f64),
    /// Notes printed under the chart (a refit that differs from the stored one).
    pub notes: Vec<String>,
}

/// Why a smile could not be drawn.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SmileDrawingError {
    /// No quotes, or no finite numbers to scale the axes by.
    #[error("no quotes to draw")]
    Empty,
}

/// Narrowest and widest chart, pixels.
pub const WIDTH_RANGE: (u32, u32) = (320, 2400);
/// Text size, pixels: the same at every width, so that a narrow chart stays legible.
const FONT: f64 = 13.0;
const KEPT_COLOUR: &str = "#1f5fa8";
const LEFT_OUT_COLOUR: &str = "#b8322a";
const SUSPECT_COLOUR: &str = "#c77700";
const FIT_COLOUR: &str = "#222a35";
const BAND_COLOUR: &str = "#d8e0ea";
const GRID_COLOUR: &str = "#e6e9ee";
/// Most flagged quotes listed under the chart; more are counted.
const LISTED_FLAGS: usize = 10;

/// A linear map from data to pixels.
#[derive(Clone, Copy)]
struct Axis {
    from: (f64, f64),
    to: (f64, f64),
}

impl Axis {
    fn at(&self, x: f64) -> f64 {
        self.to.0 + (x - self.from.0) / (self.from.1 - self.from.0) * (self.to.1 - self.to.0)
    }
}

/// Round tick positions about `target` apart over `lo..hi` (steps of 1, 2 or 5 times a
/// power of ten), with the decimals that tell them apart.
fn ticks(lo: f64, hi: f64, count: f64) -> (Vec<f64>, usize) {
    let raw = (hi - lo) / count.max(1.0);
    let power = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * power).find(|s| *s >= raw).unwrap_or(10.0 * power);
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    ((first..=last).map(|i| i as f64 * step).collect(), decimals)
}

/// `min..max` of the finite values, padded by `pad` of the span (widened when flat).
fn extent(values: impl Iterator<Item = f64>, pad: f64) -> Option<(f64, f64)> {
    let (lo, hi) =
        values.filter(|v| v.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    if !lo.is_finite() {
        return None;
    }
    let span = (hi - lo).max(1e-3 * hi.abs().max(1e-3));
    Some((lo - pad * span, hi + pad * span))
}

fn escape(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// Vol points (decimal vol times 100) to two decimals.
fn points(vol: f64) -> String {
    format!("{:.2}", 100.0 * vol)
}

/// A strike as quoted: no decimals when whole.
fn strike_text(strike: f64) -> String {
    if (strike - strike.round()).abs() < 1e-9 {
        format!("{strike:.0}")
    } else {
        format!("{strike}")
    }
}

/// `text` broken at spaces into lines that fit `width` pixels (an average glyph is
/// taken as 0.56 of the font size).
fn wrapped(text: &str, width: f64) -> Vec<String> {
    let most = ((width / (0.56 * FONT)) as usize).max(16);
    let mut lines: Vec<String> = Vec::new();
    for word in text.split(' ') {
        match lines.last_mut() {
            Some(line) if line.chars().count() + 1 + word.chars().count() <= most => {
                line.push(' ');
                line.push_str(word);
            }
            _ => lines.push(word.to_string()),
        }
    }
    lines
}

/// The marker of a quote centred at `(x, y)`.
fn marker(svg: &mut String, mark: QuoteMark, x: f64, y: f64) {
    let _ = match mark {
        QuoteMark::Kept => write!(svg, r#"<circle cx="{x:.1}" cy="{y:.1}" r="3.2" fill="{KEPT_COLOUR}"/>"#),
        QuoteMark::LeftOut => write!(
            svg,
            r#"<path d="M{:.1} {:.1}l9 9m0 -9l-9 9" stroke="{LEFT_OUT_COLOUR}" stroke-width="2.2" fill="none"/>"#,
            x - 4.5,
            y - 4.5
        ),
        QuoteMark::Suspect => write!(
            svg,
            r##"<path d="M{x:.1} {:.1}l5 5l-5 5l-5 -5z" stroke="{SUSPECT_COLOUR}" stroke-width="2" fill="#fff"/>"##,
            y - 5.0
        ),
    };
}

/// The legend: one row of swatches and words above the data, wrapped to the width.
fn legend(svg: &mut String, top: f64, left: f64, width: f64) -> f64 {
    let items: [(&str, &str); 5] = [
        ("kept", "quote (bar: bid to ask)"),
        ("fit", "fitted smile"),
        ("wing", "extrapolated beyond kept quotes"),
        ("left-out", "left out of the fit"),
        ("suspect", "suspect (over 2 half spreads off)"),
    ];
    let (mut x, mut y) = (left, top + FONT);
    for (kind, words) in items {
        let item_width = 30.0 + 0.56 * FONT * words.len() as f64;
        if x + item_width > left + width && x > left {
            x = left;
            y += FONT * 1.6;
        }
        let _ = match kind {
            "fit" => {
                write!(svg, r#"<path d="M{x:.1} {:.1}h22" stroke="{FIT_COLOUR}" stroke-width="2"/>"#, y - FONT * 0.35)
            }
            "wing" => write!(
                svg,
                r#"<path d="M{x:.1} {:.1}h22" stroke="{FIT_COLOUR}" stroke-width="2" stroke-dasharray="5 4"/>"#,
                y - FONT * 0.35
            ),
            "kept" => {
                let _ = write!(
                    svg,
                    r#"<path d="M{:.1} {:.1}v12" stroke="{KEPT_COLOUR}" stroke-opacity="0.45" stroke-width="2"/>"#,
                    x + 11.0,
                    y - FONT * 0.35 - 6.0
                );
                marker(svg, QuoteMark::Kept, x + 11.0, y - FONT * 0.35);
                Ok(())
            }
            "left-out" => {
                marker(svg, QuoteMark::LeftOut, x + 11.0, y - FONT * 0.35);
                Ok(())
            }
            _ => {
                marker(svg, QuoteMark::Suspect, x + 11.0, y - FONT * 0.35);
                Ok(())
            }
        };
        let _ = write!(svg, r#"<text x="{:.1}" y="{y:.1}">{}</text>"#, x + 28.0, escape(words));
        x += item_width + 14.0;
    }
    y + FONT * 0.8
}

/// Grid lines and labels of one panel; `x_labels` only under the lowest panel.
fn frame(svg: &mut String, x: Axis, y: Axis, x_count: f64, y_count: f64, x_labels: bool, y_title: &str) {
    let (left, right) = x.to;
    let (bottom, top) = y.to;
    let (y_ticks, y_decimals) = ticks(y.from.0, y.from.1, y_count);
    for v in y_ticks {
        let py = y.at(v);
        let _ = write!(
            svg,
            r#"<path d="M{left:.1} {py:.1}H{right:.1}" stroke="{GRID_COLOUR}"/><text x="{:.1}" y="{:.1}" text-anchor="end">{v:.y_decimals$}</text>"#,
            left - 5.0,
            py + FONT * 0.35
        );
    }
    let (x_ticks, x_decimals) = ticks(x.from.0, x.from.1, x_count);
    for v in x_ticks {
        let px = x.at(v);
        let _ = write!(svg, r#"<path d="M{px:.1} {top:.1}V{bottom:.1}" stroke="{GRID_COLOUR}"/>"#);
        if x_labels {
            let _ = write!(
                svg,
                r#"<text x="{px:.1}" y="{:.1}" text-anchor="middle">{v:.x_decimals$}</text>"#,
                bottom + FONT * 1.3
            );
        }
    }
    let _ = write!(
        svg,
        r##"<rect x="{left:.1}" y="{top:.1}" width="{:.1}" height="{:.1}" fill="none" stroke="#9aa4b1"/><text x="{:.1}" y="{:.1}" class="axis-title">{}</text>"##,
        right - left,
        bottom - top,
        left,
        top - 5.0,
        escape(y_title)
    );
}

/// The smile view as an SVG document `width` pixels wide (clamped to [`WIDTH_RANGE`]).
///
/// # Errors
/// [`SmileDrawingError::Empty`] without quotes or finite vols.
pub fn smile_svg(view: &SmileView, width: u32) -> Result<String, SmileDrawingError> {
    if view.quotes.is_empty() {
        return Err(SmileDrawingError::Empty);
    }
    let width = f64::from(width.clamp(WIDTH_RANGE.0, WIDTH_RANGE.1));
    let (left, right) = (58.0, width - 14.0);
    let plot_width = right - left;
    let strikes = view.quotes.iter().map(|q| q.strike);
    let (x_lo, x_hi) = extent(strikes.chain(view.curve.iter().map(|c| c.0)), 0.02).ok_or(SmileDrawingError::Empty)?;
    // The vol axis covers the quotes with their bars and the fit between them; the
    // extrapolated wings are clipped to it.
    let bars = view.quotes.iter().flat_map(|q| {
        let h = q.half_spread.unwrap_or(0.0);
        [q.vol - h, q.vol + h, q.fitted_vol]
    });
    let (v_lo, v_hi) = extent(bars.map(|v| 100.0 * v), 0.06).ok_or(SmileDrawingError::Empty)?;
    let kept_residuals = view.quotes.iter().filter(|q| q.mark != QuoteMark::LeftOut).flat_map(|q| {
        let h = q.half_spread.unwrap_or(0.0);
        [100.0 * (q.vol - q.fitted_vol), 100.0 * h, -100.0 * h]
    });
    let r_max = kept_residuals.map(f64::abs).filter(|v| v.is_finite()).fold(0.05, f64::max) * 1.15;

    let mut svg = String::new();
    let main_height = (0.52 * width).clamp(240.0, 520.0);
    let residual_height = (0.2 * width).clamp(110.0, 200.0);
    let mut body = String::new();
    let _ = write!(body, r#"<text x="{left:.1}" y="{:.1}" class="title">{}</text>"#, FONT * 1.4, escape(&view.title));
    let mut line_y = FONT * 1.4;
    for line in view.subtitle.iter().flat_map(|l| wrapped(l, plot_width)) {
        line_y += FONT * 1.4;
        let _ = write!(body, r#"<text x="{left:.1}" y="{line_y:.1}">{}</text>"#, escape(&line));
    }
    let legend_bottom = legend(&mut body, line_y + FONT * 0.6, left, plot_width);
    let main_top = legend_bottom + FONT * 1.6;
    let main_bottom = main_top + main_height;
    let x = Axis { from: (x_lo, x_hi), to: (left, right) };
    let y = Axis { from: (v_lo, v_hi), to: (main_bottom, main_top) };
    let x_count = plot_width / 95.0;
    frame(&mut body, x, y, x_count, main_height / 45.0, false, "implied vol (vol points)");
    let _ = write!(
        body,
        r#"<clipPath id="smile-area"><rect x="{left:.1}" y="{main_top:.1}" width="{plot_width:.1}" height="{main_height:.1}"/></clipPath>"#
    );
    let fx = x.at(view.forward);
    if (left..=right).contains(&fx) {
        let _ = write!(
            body,
            r##"<path d="M{fx:.1} {main_top:.1}V{main_bottom:.1}" stroke="#8a94a3" stroke-dasharray="2 3"/><text x="{:.1}" y="{:.1}" class="forward">forward</text>"##,
            fx + 3.0,
            main_top + FONT * 1.1
        );
    }
    draw_curve(&mut body, view, x, y);
    for q in &view.quotes {
        let (px, py) = (x.at(q.strike), y.at(100.0 * q.vol));
        let colour = match q.mark {
            QuoteMark::Kept => KEPT_COLOUR,
            QuoteMark::LeftOut => LEFT_OUT_COLOUR,
            QuoteMark::Suspect => SUSPECT_COLOUR,
        };
        let spread = q.half_spread.map(|h| format!(", bid {} ask {}", points(q.vol - h), points(q.vol + h)));
        let _ = write!(
            body,
            r#"<g class="quote {}" data-strike="{}" clip-path="url(#smile-area)"><title>strike {}: quote {}{}, fit {}, {}</title>"#,
            q.mark.class(),
            q.strike,
            strike_text(q.strike),
            points(q.vol),
            spread.unwrap_or_default(),
            points(q.fitted_vol),
            q.mark.words()
        );
        if let Some(h) = q.half_spread {
            let _ = write!(
                body,
                r#"<path d="M{px:.1} {:.1}V{:.1}" stroke="{colour}" stroke-opacity="0.45" stroke-width="2"/>"#,
                y.at(100.0 * (q.vol - h)),
                y.at(100.0 * (q.vol + h))
            );
        }
        marker(&mut body, q.mark, px, py);
        body.push_str("</g>");
    }

    // Residual panel: quote minus fit against the half spread.
    let r_top = main_bottom + FONT * 2.2;
    let r_bottom = r_top + residual_height;
    let r = Axis { from: (-r_max, r_max), to: (r_bottom, r_top) };
    frame(&mut body, x, r, x_count, residual_height / 30.0, true, "quote minus fit (vol points); band: ± half spread");
    let _ = write!(body, r##"<path d="M{left:.1} {:.1}H{right:.1}" stroke="#6b7685"/>"##, r.at(0.0));
    for q in &view.quotes {
        let px = x.at(q.strike);
        if let Some(h) = q.half_spread {
            let (top, bottom) = (r.at((100.0 * h).min(r_max)), r.at((-100.0 * h).max(-r_max)));
            let _ = write!(
                body,
                r#"<rect class="band" x="{:.1}" y="{top:.1}" width="5" height="{:.1}" fill="{BAND_COLOUR}"/>"#,
                px - 2.5,
                bottom - top
            );
        }
        let residual = 100.0 * (q.vol - q.fitted_vol);
        let shown = residual.clamp(-r_max, r_max);
        let _ = write!(body, r#"<g class="residual {}" data-strike="{}">"#, q.mark.class(), q.strike);
        marker(&mut body, q.mark, px, r.at(shown));
        if residual.abs() > r_max {
            // Off the panel: drawn at its edge with the value written beside it.
            let _ = write!(
                body,
                r#"<text x="{:.1}" y="{:.1}" class="off-scale">{residual:+.1}</text>"#,
                px + 7.0,
                r.at(shown) + if residual > 0.0 { FONT } else { -4.0 }
            );
        }
        body.push_str("</g>");
    }
    let _ = write!(
        body,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" class="axis-title">strike</text>"#,
        left + plot_width / 2.0,
        r_bottom + FONT * 2.7
    );
    line_y = r_bottom + FONT * 4.4;
    let flagged: Vec<&MarkedQuote> = view.quotes.iter().filter(|q| q.mark != QuoteMark::Kept).collect();
    let mut lines: Vec<String> = flagged
        .iter()
        .take(LISTED_FLAGS)
        .map(|q| {
            format!(
                "strike {}: quote {}, fit {} ({:+.2} vol points): {}",
                strike_text(q.strike),
                points(q.vol),
                points(q.fitted_vol),
                100.0 * (q.vol - q.fitted_vol),
                q.mark.words()
            )
        })
        .collect();
    if flagged.len() > LISTED_FLAGS {
        lines.push(format!("and {} more", flagged.len() - LISTED_FLAGS));
    }
    if flagged.is_empty() {
        lines.push("no quote left out or suspect".to_string());
    }
    lines.extend(view.notes.iter().cloned());
    for line in lines.iter().flat_map(|l| wrapped(l, plot_width)) {
        let _ = write!(body, r#"<text x="{left:.1}" y="{line_y:.1}" class="flag-line">{}</text>"#, escape(&line));
        line_y += FONT * 1.45;
    }
    let height = line_y + FONT * 0.5;
    let _ = write!(
        svg,
        r##"<svg xmlns="http://www.w3.org/2000/svg" class="smile-chart" width="{width:.0}" height="{height:.0}" viewBox="0 0 {width:.0} {height:.0}" font-family="sans-serif" font-size="{FONT}" fill="#1d2430"><style>.title{{font-size:{}px;font-weight:600}} .axis-title{{fill:#4a5361}} .flag-line{{fill:#7a2a1f}} .off-scale{{fill:{LEFT_OUT_COLOUR}}}</style><rect width="100%" height="100%" fill="#fff"/>{body}</svg>"##,
        FONT * 1.2
    );
    Ok(svg)
}

/// The fitted smile: solid between the outermost kept quotes, dashed beyond them.
fn draw_curve(svg: &mut String, view: &SmileView, x: Axis, y: Axis) {
    let (lo, hi) = view.kept_range;
    let segment = |keep: &dyn Fn(f64) -> bool| -> String {
        let mut d = String::new();
        let mut pen_down = false;
        for (s, v) in &view.curve {
            if !(keep(*s) && v.is_finite()) {
                pen_down = false;
                continue;
            }
            let _ = write!(d, "{}{:.1} {:.1}", if pen_down { "L" } else { "M" }, x.at(*s), y.at(100.0 * v));
            pen_down = true;
        }
        d
    };
    let inner = segment(&|s| s >= lo && s <= hi);
    let left_wing = segment(&|s| s <= lo);
    let right_wing = segment(&|s| s >= hi);
    let _ = write!(
        svg,
        r#"<g clip-path="url(#smile-area)" fill="none" stroke="{FIT_COLOUR}" stroke-width="2"><path class="fit" d="{inner}"/><path class="wing" stroke-dasharray="5 4" d="{left_wing}"/><path class="wing" stroke-dasharray="5 4" d="{right_wing}"/></g>"#
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    fn view() -> SmileView {
        let quotes: Vec<MarkedQuote> = (0..9)
            .map(|i| {
                let strike = 80.0 + 5.0 * i as f64;
                let fitted_vol = 0.2 + 0.0004 * (strike - 100.0).powi(2) / 25.0;
                let mark = match i {
                    0 => QuoteMark::LeftOut,
                    4 => QuoteMark::Suspect,
                    _ => QuoteMark::Kept,
                };
                let vol = fitted_vol + if i == 0 { 0.08 } else { 0.001 };
                MarkedQuote { strike, vol, half_spread: Some(0.004), fitted_vol, mark }
            })
            .collect();
        let curve = (0..=60).map(|i| 70.0 + i as f64).map(|s| (s, 0.2 + 0.0004 * (s - 100.0).powi(2) / 25.0)).collect();
        SmileView {
            title: "ORIOLE 2027-03-19".into(),
            subtitle: vec!["as of 2026-11-30T12:00:00Z".into()],
            forward: 100.0,
            quotes,
            curve,
            kept_range: (85.0, 120.0),
            notes: vec![],
        }
    }

    #[test]
    fn every_quote_is_one_marked_element_and_the_wings_are_dashed() {
        let svg = smile_svg(&view(), 420).expect("drawn");
        assert!(svg.starts_with("<svg") && svg.ends_with("</svg>"));
        assert_eq!(svg.matches("<g class=\"quote ").count(), 9);
        assert_eq!(svg.matches("<g class=\"residual ").count(), 9);
        assert_eq!(svg.matches("<g class=\"quote left-out\"").count(), 1);
        assert_eq!(svg.matches("<g class=\"quote suspect\"").count(), 1);
        assert!(svg.contains("class=\"wing\" stroke-dasharray"));
        assert!(svg.contains("strike 80: quote"), "the left-out quote is listed");
        // The left-out quote is 8 vol points off: drawn at the residual panel's edge.
        assert!(svg.contains("class=\"off-scale\">+8.0<"));
        assert!(svg.contains("width=\"420\""));
        assert_eq!(wrapped("aaaa bbbb cccc dddd eeee ffff gggg", 150.0), ["aaaa bbbb cccc dddd", "eeee ffff gggg"]);
        assert_eq!(smile_svg(&SmileView { quotes: vec![], ..view() }, 800), Err(SmileDrawingError::Empty));
    }

    #[test]
    fn ticks_are_round_and_inside() {
        let (t, d) = ticks(17.3, 24.9, 5.0);
        assert_eq!(d, 0);
        assert!(t.first().is_some_and(|v| *v >= 17.3) && t.last().is_some_and(|v| *v <= 24.9));
        let (_, d) = ticks(-0.3, 0.3, 4.0);
        assert_eq!(d, 1);
    }
}
