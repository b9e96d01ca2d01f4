//! Plots: SVG charts of the survey's curves, the trend's quantities and the run report's
//! tracks, drawn with plotters in one style (white ground, thin grey mesh, units on every
//! axis) and the Okabe–Ito colour-blind-safe palette (Okabe & Ito, "Color Universal Design",
//! 2008).
//!
//! Does not: compute what it draws (the jobs do).

use plotters::coord::Shift;
use plotters::prelude::*;

/// The Okabe–Ito palette, in the order series take it.
pub const PALETTE: [RGBColor; 7] = [
    RGBColor(0, 114, 178),   // blue
    RGBColor(213, 94, 0),    // vermillion
    RGBColor(0, 158, 115),   // bluish green
    RGBColor(230, 159, 0),   // orange
    RGBColor(204, 121, 167), // reddish purple
    RGBColor(86, 180, 233),  // sky blue
    RGBColor(0, 0, 0),       // black
];

/// One line of a panel.
#[derive(Debug, Clone)]
pub struct Series {
    /// Legend name.
    pub name: String,
    /// Points (x, y), in order of x.
    pub points: Vec<(f64, f64)>,
}

/// A vertical marker across a panel.
#[derive(Debug, Clone)]
pub struct Marker {
    /// Where (x).
    pub x: f64,
    /// What it marks.
    pub label: String,
}

/// One chart.
#[derive(Debug, Clone)]
pub struct Panel {
    /// Title.
    pub title: String,
    /// x axis label, with its unit.
    pub x_label: String,
    /// y axis label, with its unit.
    pub y_label: String,
    /// Logarithmic x axis.
    pub log_x: bool,
    /// Logarithmic y axis.
    pub log_y: bool,
    /// Lines.
    pub series: Vec<Series>,
    /// Vertical markers.
    pub markers: Vec<Marker>,
    /// Draw the series as bars (a histogram; the points are bin centres) rather than lines.
    pub bars: bool,
    /// Draw the series as points only (categories, scattered values) rather than lines.
    pub points_only: bool,
}

/// Width of a panel (px).
pub const PANEL_WIDTH: u32 = 900;
/// Height of a panel (px).
pub const PANEL_HEIGHT: u32 = 260;

/// The panels stacked in one SVG document.
pub fn panels_svg(panels: &[Panel]) -> String {
    let mut out = String::new();
    let h = PANEL_HEIGHT * panels.len().max(1) as u32;
    {
        let root = SVGBackend::with_string(&mut out, (PANEL_WIDTH, h)).into_drawing_area();
        // Drawing into a string fails only on non-finite ranges, which `draw` avoids.
        let _ = root.fill(&WHITE);
        let areas = root.split_evenly((panels.len().max(1), 1));
        for (area, p) in areas.iter().zip(panels) {
            let _ = draw(area, p);
        }
        let _ = root.present();
    }
    out
}

fn range(values: impl Iterator<Item = f64>, log: bool) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| v.is_finite() && (!log || *v > 0.0)) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return if log { (0.1, 10.0) } else { (0.0, 1.0) };
    }
    if log {
        (lo / 1.3, hi * 1.3)
    } else if hi - lo <= f64::EPSILON * hi.abs().max(1.0) {
        let pad = hi.abs().max(1.0) * 0.05;
        (lo - pad, hi + pad)
    } else {
        let pad = (hi - lo) * 0.06;
        (lo - pad, hi + pad)
    }
}

/// Tick labels for an axis over `lo … hi`: on a linear axis enough decimals to tell ticks a
/// tenth of the range apart, on a log axis four significant digits; no trailing zeros,
/// scientific outside 10⁻³ … 10⁶.
fn ticks(lo: f64, hi: f64, log: bool) -> impl Fn(&f64) -> String {
    let span = (hi - lo).abs();
    let decimals = if log || !(span > 0.0) {
        None
    } else {
        Some((1.0 - (span / 10.0).log10().floor()).clamp(0.0, 9.0) as usize)
    };
    move |&v: &f64| {
        let a = v.abs();
        if v == 0.0 {
            return "0".into();
        }
        if !(1e-3..1e6).contains(&a) {
            return format!("{v:.2e}");
        }
        let d = decimals.unwrap_or((3 - a.log10().floor() as i32).clamp(0, 9) as usize);
        let s = format!("{v:.d$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    }
}

type DrawResult = Result<(), Box<dyn std::error::Error>>;

fn draw(area: &DrawingArea<SVGBackend, Shift>, p: &Panel) -> DrawResult {
    let xs = p
        .series
        .iter()
        .flat_map(|s| s.points.iter().map(|q| q.0))
        .chain(p.markers.iter().map(|m| m.x));
    let ys = p.series.iter().flat_map(|s| s.points.iter().map(|q| q.1));
    let (x0, x1) = range(xs, p.log_x);
    let (y0, y1) = range(ys, p.log_y);
    let (x_tick, y_tick) = (ticks(x0, x1, p.log_x), ticks(y0, y1, p.log_y));
    let mut b = ChartBuilder::on(area);
    b.caption(&p.title, ("sans-serif", 17))
        .margin(10)
        .x_label_area_size(38)
        .y_label_area_size(70);
    macro_rules! body {
        ($chart:expr) => {{
            let mut chart = $chart;
            chart
                .configure_mesh()
                .light_line_style(TRANSPARENT)
                .bold_line_style(RGBColor(225, 225, 225))
                .x_labels(8)
                .y_labels(6)
                .x_label_formatter(&x_tick)
                .y_label_formatter(&y_tick)
                .x_desc(&p.x_label)
                .y_desc(&p.y_label)
                .label_style(("sans-serif", 12))
                .draw()?;
            for (i, s) in p.series.iter().enumerate() {
                let c = PALETTE[i % PALETTE.len()];
                let pts: Vec<(f64, f64)> = s
                    .points
                    .iter()
                    .copied()
                    .filter(|q| q.0.is_finite() && q.1.is_finite())
                    .filter(|q| (!p.log_x || q.0 > 0.0) && (!p.log_y || q.1 > 0.0))
                    .collect();
                if p.bars {
                    // Bins of equal width, centred on the points.
                    let half = pts
                        .windows(2)
                        .map(|w| (w[1].0 - w[0].0) / 2.0)
                        .fold(f64::INFINITY, f64::min);
                    let half = if half.is_finite() { half * 0.9 } else { 0.5 };
                    let base = if p.log_y { y0 } else { 0.0f64.max(y0) };
                    chart
                        .draw_series(pts.iter().map(|&(x, y)| {
                            Rectangle::new([(x - half, base), (x + half, y)], c.filled())
                        }))?
                        .label(s.name.clone())
                        .legend(move |(x, y)| {
                            Rectangle::new([(x, y - 5), (x + 12, y + 5)], c.filled())
                        });
                    continue;
                }
                if p.points_only {
                    chart
                        .draw_series(pts.iter().map(|&q| Circle::new(q, 3, c.filled())))?
                        .label(s.name.clone())
                        .legend(move |(x, y)| Circle::new((x + 6, y), 3, c.filled()));
                    continue;
                }
                chart
                    .draw_series(LineSeries::new(pts.clone(), c.stroke_width(2)))?
                    .label(s.name.clone())
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], c));
                if pts.len() <= 60 {
                    chart.draw_series(pts.iter().map(|&q| Circle::new(q, 3, c.filled())))?;
                }
            }
            for (i, m) in p.markers.iter().enumerate() {
                let c = PALETTE[(p.series.len() + i) % PALETTE.len()];
                let (lo, hi) = (y0, y1);
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(m.x, lo), (m.x, hi)],
                        c.stroke_width(2),
                    )))?
                    .label(m.label.clone())
                    .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], c));
            }
            if p.series.len() + p.markers.len() > 1 {
                chart
                    .configure_series_labels()
                    .background_style(WHITE.mix(0.85))
                    .border_style(RGBColor(160, 160, 160))
                    .label_font(("sans-serif", 12))
                    .position(SeriesLabelPosition::UpperLeft)
                    .draw()?;
            }
        }};
    }
    match (p.log_x, p.log_y) {
        (false, false) => body!(b.build_cartesian_2d(x0..x1, y0..y1)?),
        (true, false) => body!(b.build_cartesian_2d((x0..x1).log_scale(), y0..y1)?),
        (false, true) => body!(b.build_cartesian_2d(x0..x1, (y0..y1).log_scale())?),
        (true, true) => body!(b.build_cartesian_2d((x0..x1).log_scale(), (y0..y1).log_scale())?),
    }
    Ok(())
}
