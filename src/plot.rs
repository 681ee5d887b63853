//! Figures of result files, as PNG and SVG, drawn with `plotters` (pure Rust: bitmap and SVG
//! backends; text through `ab_glyph` with the embedded DejaVu Sans of `assets/fonts`, licence in
//! `assets/fonts/DejaVuSans-LICENSE.txt`).
//!
//! - [`plot_file`]: every figure of one result file — recall success against flipped sites
//!   (`/recall`, contract C2), time traces of the observables (with ±1
//!   standard-error bands for trajectory results, from the `*_stderr` datasets), scan results
//!   (lines for one scan axis, heat maps for two), and the coupling matrix (`/memory/couplings`,
//!   or `/model/zz` if a file has it).
//! - [`lines`] and [`heat_map`]: the two figure kinds, also used by `cavern compare`.
//!
//! Style: 1600 × 1000 pixel PNGs (the SVGs have the same size in user units), text 32–40 px high
//! (plotters font sizes 40–50) so it stays readable on a slide, line colours from the colour-blind-safe palette of Okabe & Ito,
//! *Color Universal Design* (2008), heat maps in a five-point piecewise-linear approximation of
//! the perceptually uniform "viridis" map (van der Walt & Smith, matplotlib, 2015) and signed
//! matrices in a blue–white–vermillion diverging map built from two Okabe–Ito colours. Values
//! spanning many decades get a power-of-ten factor in the axis label instead of long tick labels.

use crate::h5out::{AttrValue, Data, Dataset, Group};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::{Path, PathBuf};

/// Okabe–Ito palette (Okabe & Ito 2008), ordered for lines on white: blue, vermillion, bluish
/// green, orange, reddish purple, sky blue, black, yellow.
pub const OKABE_ITO: [RGBColor; 8] = [
    RGBColor(0x00, 0x72, 0xB2),
    RGBColor(0xD5, 0x5E, 0x00),
    RGBColor(0x00, 0x9E, 0x73),
    RGBColor(0xE6, 0x9F, 0x00),
    RGBColor(0xCC, 0x79, 0xA7),
    RGBColor(0x56, 0xB4, 0xE9),
    RGBColor(0x00, 0x00, 0x00),
    RGBColor(0xF0, 0xE4, 0x42),
];

/// Viridis at 0, ¼, ½, ¾, 1 (van der Walt & Smith 2015; the published end and quarter points).
const VIRIDIS: [(u8, u8, u8); 5] = [
    (0x44, 0x01, 0x54),
    (0x3b, 0x52, 0x8b),
    (0x21, 0x91, 0x8c),
    (0x5e, 0xc9, 0x62),
    (0xfd, 0xe7, 0x25),
];

const WIDTH: u32 = 1600;
const HEIGHT: u32 = 1000;
const FONT: &str = "sans-serif";
const TITLE_PX: u32 = 50;
const AXIS_PX: u32 = 46;
const TICK_PX: u32 = 40;

fn register_font() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        // The bytes are a valid TrueType font shipped with the source; a failure here is a
        // packaging bug, and text then simply falls back to nothing rather than panicking.
        let _ = plotters::style::register_font(
            FONT,
            FontStyle::Normal,
            include_bytes!("../assets/fonts/DejaVuSans.ttf"),
        );
    });
}

/// One line of a line figure.
#[derive(Clone, Debug)]
pub struct Line {
    /// Legend text.
    pub label: String,
    /// Abscissae.
    pub x: Vec<f64>,
    /// Ordinates (NaN points are skipped).
    pub y: Vec<f64>,
    /// Half-width of the error band (±1 standard error), if any.
    pub err: Option<Vec<f64>>,
}

/// A line figure: title, axis labels (quantity and unit) and lines.
#[derive(Clone, Debug)]
pub struct LineFigure {
    /// Caption above the plot.
    pub title: String,
    /// Abscissa label, e.g. `time t (µs)`.
    pub x_label: String,
    /// Quantity of the ordinate, e.g. `output flux κ⟨a†a⟩`.
    pub y_quantity: String,
    /// Unit of the ordinate as stored (e.g. `photons/s`); shown in parentheses, with a
    /// power-of-ten factor when the values are very large or small.
    pub y_unit: String,
    /// The lines.
    pub lines: Vec<Line>,
}

/// A heat map over a grid of (x, y) values.
#[derive(Clone, Debug)]
pub struct HeatMap {
    /// Caption above the plot.
    pub title: String,
    /// Abscissa label.
    pub x_label: String,
    /// Ordinate label.
    pub y_label: String,
    /// Quantity shown by the colour (colour-bar label).
    pub z_quantity: String,
    /// Its unit as stored (a power-of-ten factor is added when needed).
    pub z_unit: String,
    /// Column coordinates (length nx); tick labels show these values.
    pub x: Vec<f64>,
    /// Row coordinates (length ny).
    pub y: Vec<f64>,
    /// Values `z[iy * nx + ix]`; NaN cells are drawn grey.
    pub z: Vec<f64>,
    /// Diverging colour map centred on zero (for signed matrices) instead of viridis.
    pub diverging: bool,
    /// Draw the matrix with row 0 at the top (matrices) instead of at the bottom (scans).
    pub matrix: bool,
}

/// Files written for one figure (the PNG and the SVG).
pub type Written = Vec<PathBuf>;

fn err_text<E: std::fmt::Debug>(e: E) -> String {
    format!("{e:?}")
}

/// Human-readable unit: `us` → `µs`, the dimensionless labels shortened.
pub fn pretty_unit(u: &str) -> String {
    if u.starts_with("1 (") || u == "1" || u.is_empty() {
        "dimensionless".into()
    } else {
        u.replace("us", "µs")
    }
}

/// Power-of-ten exponent k to divide values by so that ticks stay short (0 when not needed).
fn scale_exponent(max_abs: f64) -> i32 {
    if !(max_abs.is_finite()) || max_abs == 0.0 || (1e-2..1e4).contains(&max_abs) {
        0
    } else {
        (max_abs.log10().floor() as i32).div_euclid(3) * 3
    }
}

fn superscript(k: i32) -> String {
    const D: [char; 10] = ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'];
    let mut s = String::new();
    if k < 0 {
        s.push('⁻');
    }
    for c in k.unsigned_abs().to_string().chars() {
        s.push(D[c.to_digit(10).unwrap_or(0) as usize]);
    }
    s
}

/// Axis label `quantity (10ᵏ unit)` / `quantity (unit)`.
fn axis_label(quantity: &str, unit: &str, k: i32) -> String {
    let u = pretty_unit(unit);
    if k == 0 {
        format!("{quantity} ({u})")
    } else if u == "dimensionless" {
        format!("{quantity} (×10{})", superscript(k))
    } else {
        format!("{quantity} (10{} {u})", superscript(k))
    }
}

/// Tick label for an axis spanning `span`: as many decimals as the tick spacing needs (about a
/// tenth of the span), so that rounding noise such as −2.2e−16 prints as 0.
fn tick(v: f64, span: f64) -> String {
    let span = if span.is_finite() && span > 0.0 {
        span
    } else {
        v.abs().max(1.0)
    };
    if v.abs() < 1e-9 * span {
        return "0".into();
    }
    let a = v.abs().max(span);
    if !(1e-3..1e5).contains(&a) {
        return format!("{v:.1e}");
    }
    let decimals = (1.0 - (span / 10.0).log10().floor()).clamp(0.0, 8.0) as usize;
    let s = format!("{v:.decimals$}");
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    };
    if s == "-0" {
        "0".into()
    } else {
        s
    }
}

fn padded_range(lo: f64, hi: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    if hi - lo <= 1e-12 * (lo.abs() + hi.abs()).max(1e-300) {
        let d = if lo == 0.0 { 1.0 } else { 0.1 * lo.abs() };
        return (lo - d, hi + d);
    }
    let pad = 0.05 * (hi - lo);
    (lo - pad, hi + pad)
}

/// Draw `fig` as `<stem>.png` and `<stem>.svg` in `dir`.
///
/// # Errors
/// A message when there is nothing to draw or a backend fails.
pub fn lines(fig: &LineFigure, dir: &Path, stem: &str) -> Result<Written, String> {
    register_font();
    let png = dir.join(format!("{stem}.png"));
    let svg = dir.join(format!("{stem}.svg"));
    draw_lines(
        BitMapBackend::new(&png, (WIDTH, HEIGHT)).into_drawing_area(),
        fig,
    )
    .map_err(|e| format!("{}: {e}", png.display()))?;
    draw_lines(
        SVGBackend::new(&svg, (WIDTH, HEIGHT)).into_drawing_area(),
        fig,
    )
    .map_err(|e| format!("{}: {e}", svg.display()))?;
    Ok(vec![png, svg])
}

fn draw_lines<DB: DrawingBackend>(
    root: DrawingArea<DB, Shift>,
    fig: &LineFigure,
) -> Result<(), String> {
    let finite = |v: &f64| v.is_finite();
    let xs = fig
        .lines
        .iter()
        .flat_map(|l| l.x.iter().copied())
        .filter(finite);
    let (x0, x1) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
        (a.min(v), b.max(v))
    });
    let mut y_lo = f64::INFINITY;
    let mut y_hi = f64::NEG_INFINITY;
    for l in &fig.lines {
        for (k, &y) in l.y.iter().enumerate() {
            if !y.is_finite() {
                continue;
            }
            let e = l
                .err
                .as_ref()
                .and_then(|e| e.get(k))
                .copied()
                .filter(|e| e.is_finite())
                .unwrap_or(0.0);
            y_lo = y_lo.min(y - e);
            y_hi = y_hi.max(y + e);
        }
    }
    if !(x0.is_finite() && y_lo.is_finite()) {
        return Err("no finite data to draw".into());
    }
    let k = scale_exponent(y_lo.abs().max(y_hi.abs()));
    let f = 10f64.powi(-k);
    let (y0, y1) = padded_range(y_lo * f, y_hi * f);
    let (x0, x1) = if x1 > x0 {
        (x0, x1)
    } else {
        padded_range(x0, x1)
    };
    // integer abscissae (numbers of flipped sites): one tick per integer
    let integer_x = fig
        .lines
        .iter()
        .flat_map(|l| l.x.iter())
        .all(|x| x.fract() == 0.0)
        && x1 - x0 <= 20.0;
    let x_ticks = if integer_x { (x1 - x0) as usize + 1 } else { 8 };
    let legend_at = legend_corner(fig, (x0, x1), (y0, y1), f);
    root.fill(&WHITE).map_err(err_text)?;
    let mut chart = ChartBuilder::on(&root)
        .caption(&fig.title, (FONT, TITLE_PX))
        .margin(28)
        .margin_right(60)
        .x_label_area_size(110)
        .y_label_area_size(170)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(err_text)?;
    chart
        .configure_mesh()
        .x_desc(&fig.x_label)
        .y_desc(axis_label(&fig.y_quantity, &fig.y_unit, k))
        .axis_desc_style((FONT, AXIS_PX))
        .label_style((FONT, TICK_PX))
        .x_labels(x_ticks)
        .y_labels(8)
        .x_label_formatter(&|v| tick(*v, x1 - x0))
        .y_label_formatter(&|v| tick(*v, y1 - y0))
        .light_line_style(WHITE)
        .bold_line_style(RGBColor(0xDD, 0xDD, 0xDD))
        .axis_style(BLACK.stroke_width(2))
        .draw()
        .map_err(err_text)?;
    for (i, l) in fig.lines.iter().enumerate() {
        let c = OKABE_ITO[i % OKABE_ITO.len()];
        if let Some(err) = &l.err {
            let pts: Vec<(f64, f64, f64)> =
                l.x.iter()
                    .zip(&l.y)
                    .zip(err)
                    .filter(|((x, y), e)| x.is_finite() && y.is_finite() && e.is_finite())
                    .map(|((&x, &y), &e)| (x, y * f, e * f))
                    .collect();
            if pts.len() >= 2 {
                let mut poly: Vec<(f64, f64)> = pts.iter().map(|&(x, y, e)| (x, y + e)).collect();
                poly.extend(pts.iter().rev().map(|&(x, y, e)| (x, y - e)));
                chart
                    .draw_series(std::iter::once(Polygon::new(poly, c.mix(0.25).filled())))
                    .map_err(err_text)?;
            }
        }
        let pts: Vec<(f64, f64)> =
            l.x.iter()
                .zip(&l.y)
                .filter(|(x, y)| x.is_finite() && y.is_finite())
                .map(|(&x, &y)| (x, y * f))
                .collect();
        let style = c.stroke_width(4);
        if (2..=40).contains(&pts.len()) {
            // few points (scans): mark the computed values
            chart
                .draw_series(pts.iter().map(|&p| Circle::new(p, 7, c.filled())))
                .map_err(err_text)?;
        }
        let series = if pts.len() == 1 {
            chart.draw_series(pts.into_iter().map(|p| Circle::new(p, 8, c.filled())))
        } else {
            chart.draw_series(LineSeries::new(pts, style))
        }
        .map_err(err_text)?;
        series
            .label(&l.label)
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 44, y)], c.stroke_width(6)));
    }
    if fig.lines.len() > 1 || !fig.lines.iter().all(|l| l.label.is_empty()) {
        chart
            .configure_series_labels()
            .label_font((FONT, TICK_PX))
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(0x99, 0x99, 0x99))
            .position(legend_at)
            .legend_area_size(64)
            .margin(16)
            .draw()
            .map_err(err_text)?;
    }
    root.present().map_err(err_text)?;
    Ok(())
}

/// The corner of the plot area with the fewest data points (legend placement): each corner box
/// covers 40 % of the width and 30 % of the height; ties prefer upper right.
fn legend_corner(fig: &LineFigure, x: (f64, f64), y: (f64, f64), f: f64) -> SeriesLabelPosition {
    let corners = [
        (SeriesLabelPosition::UpperRight, true, true),
        (SeriesLabelPosition::UpperLeft, false, true),
        (SeriesLabelPosition::LowerRight, true, false),
        (SeriesLabelPosition::LowerLeft, false, false),
    ];
    let (w, h) = (x.1 - x.0, y.1 - y.0);
    let inside = |px: f64, py: f64, right: bool, upper: bool| {
        let in_x = if right {
            px >= x.1 - 0.4 * w
        } else {
            px <= x.0 + 0.4 * w
        };
        let in_y = if upper {
            py >= y.1 - 0.3 * h
        } else {
            py <= y.0 + 0.3 * h
        };
        in_x && in_y
    };
    let count = |right: bool, upper: bool| {
        fig.lines
            .iter()
            .flat_map(|l| {
                l.x.iter()
                    .zip(&l.y)
                    .enumerate()
                    .map(move |(k, (&px, &py))| {
                        let e = l
                            .err
                            .as_ref()
                            .and_then(|e| e.get(k))
                            .copied()
                            .unwrap_or(0.0);
                        (px, py * f, e * f)
                    })
            })
            .filter(|&(px, py, e)| {
                inside(px, py, right, upper)
                    || (e.is_finite()
                        && (inside(px, py + e, right, upper) || inside(px, py - e, right, upper)))
            })
            .count()
    };
    let mut best = (usize::MAX, SeriesLabelPosition::UpperRight);
    for (pos, right, upper) in corners {
        let n = count(right, upper);
        if n < best.0 {
            best = (n, pos);
        }
    }
    best.1
}

fn viridis(t: f64) -> RGBColor {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let s = t * 4.0;
    let i = (s.floor() as usize).min(3);
    let u = s - i as f64;
    let (a, b) = (VIRIDIS[i], VIRIDIS[i + 1]);
    let mix = |p: u8, q: u8| (f64::from(p) + u * (f64::from(q) - f64::from(p))).round() as u8;
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

/// Blue (Okabe–Ito #0072B2) at −1, white at 0, vermillion (#D55E00) at +1.
fn diverging(t: f64) -> RGBColor {
    let t = if t.is_finite() {
        t.clamp(-1.0, 1.0)
    } else {
        0.0
    };
    let end = if t < 0.0 {
        (0x00, 0x72, 0xB2)
    } else {
        (0xD5, 0x5E, 0x00)
    };
    let u = t.abs();
    let mix = |w: u8| (255.0 + u * (f64::from(w) - 255.0)).round() as u8;
    RGBColor(mix(end.0), mix(end.1), mix(end.2))
}

/// Cell edges around the centres `v` (midpoints; the outer edges mirrored).
fn edges(v: &[f64]) -> Vec<f64> {
    let n = v.len();
    if n == 1 {
        return vec![v[0] - 0.5, v[0] + 0.5];
    }
    let mut e = Vec::with_capacity(n + 1);
    e.push(v[0] - 0.5 * (v[1] - v[0]));
    for k in 0..n - 1 {
        e.push(0.5 * (v[k] + v[k + 1]));
    }
    e.push(v[n - 1] + 0.5 * (v[n - 1] - v[n - 2]));
    e
}

/// Draw `map` as `<stem>.png` and `<stem>.svg` in `dir`.
///
/// # Errors
/// A message when the grid is inconsistent or a backend fails.
pub fn heat_map(map: &HeatMap, dir: &Path, stem: &str) -> Result<Written, String> {
    if map.x.is_empty() || map.y.is_empty() || map.z.len() != map.x.len() * map.y.len() {
        return Err(format!(
            "heat map {stem}: {} values for a {}×{} grid",
            map.z.len(),
            map.y.len(),
            map.x.len()
        ));
    }
    register_font();
    let png = dir.join(format!("{stem}.png"));
    let svg = dir.join(format!("{stem}.svg"));
    draw_heat_map(
        BitMapBackend::new(&png, (WIDTH, HEIGHT)).into_drawing_area(),
        map,
    )
    .map_err(|e| format!("{}: {e}", png.display()))?;
    draw_heat_map(
        SVGBackend::new(&svg, (WIDTH, HEIGHT)).into_drawing_area(),
        map,
    )
    .map_err(|e| format!("{}: {e}", svg.display()))?;
    Ok(vec![png, svg])
}

fn draw_heat_map<DB: DrawingBackend>(
    root: DrawingArea<DB, Shift>,
    map: &HeatMap,
) -> Result<(), String> {
    let (nx, ny) = (map.x.len(), map.y.len());
    let finite: Vec<f64> = map.z.iter().copied().filter(|v| v.is_finite()).collect();
    let (mut lo, mut hi) = finite
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        (lo, hi) = (0.0, 1.0);
    }
    if map.diverging {
        let m = lo.abs().max(hi.abs()).max(1e-300);
        (lo, hi) = (-m, m);
    } else if hi <= lo {
        (lo, hi) = padded_range(lo, hi);
    }
    let k = scale_exponent(lo.abs().max(hi.abs()));
    let f = 10f64.powi(-k);
    let colour = |v: f64| -> RGBColor {
        if !v.is_finite() {
            RGBColor(0xBB, 0xBB, 0xBB)
        } else if map.diverging {
            diverging(v / hi)
        } else {
            viridis((v - lo) / (hi - lo))
        }
    };
    root.fill(&WHITE).map_err(err_text)?;
    let root = root.margin(20, 0, 0, 0);
    let title = if map.z.iter().any(|v| !v.is_finite()) {
        format!("{} (grey: no value)", map.title)
    } else {
        map.title.clone()
    };
    let root = root.titled(&title, (FONT, TITLE_PX)).map_err(err_text)?;
    let (main, bar) = root.split_horizontally(WIDTH - 330);
    // Uniform index coordinates when the values are not equally spaced would distort the grid;
    // use the cell edges in value space (matrices use integer indices anyway).
    let xe = edges(&map.x);
    let ye = edges(&map.y);
    let (ya, yb) = if map.matrix {
        (ye[ny], ye[0])
    } else {
        (ye[0], ye[ny])
    };
    let mut chart = ChartBuilder::on(&main)
        .margin(24)
        .x_label_area_size(110)
        .y_label_area_size(150)
        .build_cartesian_2d(xe[0]..xe[nx], ya..yb)
        .map_err(err_text)?;
    let int_ticks = map.matrix;
    let (xspan, yspan) = (xe[nx] - xe[0], (ye[ny] - ye[0]).abs());
    let fmt_x = move |v: &f64| {
        if int_ticks {
            format!("{}", v.round() as i64)
        } else {
            tick(*v, xspan)
        }
    };
    let fmt_y = move |v: &f64| {
        if int_ticks {
            format!("{}", v.round() as i64)
        } else {
            tick(*v, yspan)
        }
    };
    chart
        .configure_mesh()
        .disable_mesh()
        .x_desc(&map.x_label)
        .y_desc(&map.y_label)
        .axis_desc_style((FONT, AXIS_PX))
        .label_style((FONT, TICK_PX))
        .x_labels(if map.matrix { nx.min(12) } else { 8 })
        .y_labels(if map.matrix { ny.min(12) } else { 8 })
        .x_label_formatter(&fmt_x)
        .y_label_formatter(&fmt_y)
        .axis_style(BLACK.stroke_width(2))
        .draw()
        .map_err(err_text)?;
    chart
        .draw_series((0..ny).flat_map(|iy| {
            let (xe, ye) = (&xe, &ye);
            (0..nx).map(move |ix| {
                Rectangle::new(
                    [(xe[ix], ye[iy]), (xe[ix + 1], ye[iy + 1])],
                    colour(map.z[iy * nx + ix]).filled(),
                )
            })
        }))
        .map_err(err_text)?;
    // colour bar
    let mut cb = ChartBuilder::on(&bar)
        .margin_top(24)
        .margin_bottom(134)
        .margin_right(10)
        .y_label_area_size(150)
        .build_cartesian_2d(0.0..1.0, lo * f..hi * f)
        .map_err(err_text)?;
    cb.configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .y_desc(axis_label(&map.z_quantity, &map.z_unit, k))
        .axis_desc_style((FONT, AXIS_PX - 4))
        .label_style((FONT, TICK_PX))
        .y_labels(6)
        .y_label_formatter(&|v| tick(*v, (hi - lo) * f))
        .axis_style(BLACK.stroke_width(2))
        .draw()
        .map_err(err_text)?;
    let steps = 200;
    cb.draw_series((0..steps).map(|s| {
        let a = lo + (hi - lo) * s as f64 / steps as f64;
        let b = lo + (hi - lo) * (s + 1) as f64 / steps as f64;
        Rectangle::new([(0.0, a * f), (1.0, b * f)], colour(0.5 * (a + b)).filled())
    }))
    .map_err(err_text)?;
    root.present().map_err(err_text)?;
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Reading what to draw from a result tree

/// Display name of an observable for axis labels.
pub fn quantity_name(name: &str) -> String {
    match name {
        "pattern_overlap" => "pattern overlap m".into(),
        "photon_number" => "photon number ⟨a†a⟩".into(),
        "output_flux" => "output flux κ⟨a†a⟩".into(),
        "spin_z" => "inversion ⟨σᶻ⟩ = 2Pₑ − 1".into(),
        "spin_x" => "⟨σˣ⟩".into(),
        "spin_y" => "⟨σʸ⟩".into(),
        "purity" => "purity Tr ρ²".into(),
        "field_re" => "Re ⟨a⟩".into(),
        "field_im" => "Im ⟨a⟩".into(),
        other => other.replace('_', " "),
    }
}

/// Observables drawn as time traces, in this order (others are skipped to keep the figure set
/// focused: fields and the truncation diagnostic are in the file).
pub const TRACE_OBSERVABLES: [&str; 7] = [
    "pattern_overlap",
    "photon_number",
    "output_flux",
    "spin_z",
    "spin_x",
    "spin_y",
    "purity",
];

/// A string attribute.
pub fn attr_str<'a>(attrs: &'a [(String, AttrValue)], name: &str) -> Option<&'a str> {
    attrs
        .iter()
        .find(|(n, _)| n == name)
        .and_then(|(_, v)| match v {
            AttrValue::Str(s) => Some(s.as_str()),
            _ => None,
        })
}

/// A list-of-strings attribute (a single string counts as a list of one).
pub fn attr_strs(attrs: &[(String, AttrValue)], name: &str) -> Vec<String> {
    match attrs.iter().find(|(n, _)| n == name).map(|(_, v)| v) {
        Some(AttrValue::Strs(v)) => v.clone(),
        Some(AttrValue::Str(s)) => vec![s.clone()],
        _ => Vec::new(),
    }
}

/// Numeric values of a dataset as f64 (integers converted).
pub fn values(ds: &Dataset) -> Vec<f64> {
    match &ds.data {
        Data::F64(v) => v.clone(),
        Data::I64(v) => v.iter().map(|&x| x as f64).collect(),
        _ => Vec::new(),
    }
}

/// Row labels of a dataset with `n` rows (its `rows` attribute, or `row0`, `row1`, …).
pub fn row_labels(ds: &Dataset, n: usize) -> Vec<String> {
    let r = attr_strs(&ds.attrs, "rows");
    if r.len() == n {
        r
    } else {
        (0..n).map(|i| format!("row{i}")).collect()
    }
}

/// A time-trace observable of a single run: row labels, `[rows][time]` values and standard
/// errors (trajectory results).
pub struct Trace {
    /// Observable name.
    pub name: String,
    /// Unit attribute.
    pub unit: String,
    /// Row labels (one entry `""` for single-row quantities).
    pub rows: Vec<String>,
    /// Values per row.
    pub data: Vec<Vec<f64>>,
    /// Standard errors per row, when stored.
    pub stderr: Option<Vec<Vec<f64>>>,
}

/// Split a `[rows, time]` or `[time]` dataset into rows.
fn split_rows(ds: &Dataset, n_t: usize) -> Option<Vec<Vec<f64>>> {
    let v = values(ds);
    if n_t == 0 || !v.len().is_multiple_of(n_t) || v.is_empty() {
        return None;
    }
    Some(v.chunks(n_t).map(<[f64]>::to_vec).collect())
}

/// The time trace `name` of a single-run tree, if present.
pub fn trace(root: &Group, name: &str) -> Option<Trace> {
    let n_t = root.get_dataset("time")?.data.len();
    let obs = root.get_group("observables")?;
    let ds = obs.get_dataset(name)?;
    let data = split_rows(ds, n_t)?;
    let rows = if ds.shape.len() <= 1 {
        vec![String::new()]
    } else {
        row_labels(ds, data.len())
    };
    let stderr = obs
        .get_dataset(&format!("{name}_stderr"))
        .and_then(|e| split_rows(e, n_t))
        .filter(|e| e.len() == data.len());
    Some(Trace {
        name: name.into(),
        unit: attr_str(&ds.attrs, "units").unwrap_or("").to_string(),
        rows,
        data,
        stderr,
    })
}

/// `time t (µs)` from the `/time` dataset's units.
pub fn time_label(root: &Group) -> String {
    let u = root
        .get_dataset("time")
        .and_then(|t| attr_str(&t.attrs, "units"))
        .unwrap_or("");
    format!("time t ({})", pretty_unit(u))
}

/// The title of a result (its `title` attribute, else the file name).
pub fn title_of(root: &Group, fallback: &str) -> String {
    attr_str(root.attrs(), "title")
        .unwrap_or(fallback)
        .to_string()
}

/// A file-name-safe version of `s`.
pub fn slug(s: &str) -> String {
    let mut out: String = s
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '-'
            }
        })
        .collect();
    while out.contains("--") {
        out = out.replace("--", "-");
    }
    out.trim_matches('-').to_string()
}

/// Every figure of one result tree into `dir` (PNG + SVG each); returns the files written.
///
/// # Errors
/// A message naming the figure when drawing fails, or when the file has nothing to draw.
pub fn plot_file(root: &Group, name: &str, dir: &Path) -> Result<Written, String> {
    let mut out = Vec::new();
    let title = title_of(root, name);
    let is_scan = root.get_group("scan").is_some();
    if !is_scan {
        let t = root.get_dataset("time").map(values).unwrap_or_default();
        for obs in TRACE_OBSERVABLES {
            let Some(tr) = trace(root, obs) else { continue };
            let ls = tr
                .rows
                .iter()
                .enumerate()
                .map(|(r, label)| Line {
                    label: label.clone(),
                    x: t.clone(),
                    y: tr.data[r].clone(),
                    err: tr.stderr.as_ref().map(|e| e[r].clone()),
                })
                .collect();
            let band = if tr.stderr.is_some() {
                ", bands ±1 s.e."
            } else {
                ""
            };
            let fig = LineFigure {
                title: format!("{}{band}", short(&title)),
                x_label: time_label(root),
                y_quantity: quantity_name(obs),
                y_unit: tr.unit.clone(),
                lines: ls,
            };
            out.extend(lines(&fig, dir, obs)?);
        }
    } else {
        out.extend(plot_scan(root, &title, dir)?);
    }
    if let Some(fig) = recall_figure(root, &title) {
        out.extend(lines(&fig, dir, "recall")?);
    }
    out.extend(plot_couplings(root, &title, dir)?);
    if out.is_empty() {
        return Err(format!(
            "{name}: nothing to plot (no /observables, /scan or coupling matrix found)"
        ));
    }
    Ok(out)
}

/// Shorten a long title for the caption (about 45 characters fit beside the figure's other
/// caption text at slide size).
fn short(t: &str) -> String {
    clip(t, 48)
}

/// `t` cut to at most `n` characters, with an ellipsis when cut.
fn clip(t: &str, n: usize) -> String {
    if t.chars().count() > n {
        let s: String = t.chars().take(n - 1).collect();
        format!("{s}…")
    } else {
        t.to_string()
    }
}

/// A scan axis: name, values, unit.
pub struct Axis {
    /// Axis name.
    pub name: String,
    /// Values along the axis.
    pub values: Vec<f64>,
    /// Unit attribute.
    pub unit: String,
}

/// The scan axes of a scan tree (contract C3), in order.
pub fn scan_axes(root: &Group) -> Vec<Axis> {
    let Some(scan) = root.get_group("scan") else {
        return Vec::new();
    };
    let axes_group = scan.get_group("axes");
    attr_strs(scan.attrs(), "axes")
        .into_iter()
        .filter_map(|name| {
            let ds = axes_group?.get_dataset(&name)?;
            Some(Axis {
                unit: attr_str(&ds.attrs, "units").unwrap_or("").to_string(),
                values: values(ds),
                name,
            })
        })
        .collect()
}

/// Values of one observable over a scan grid, from [`scan_values`].
pub struct ScanValues {
    /// `steady state` or `final time`.
    pub what: String,
    /// Unit attribute.
    pub unit: String,
    /// Row labels (one empty label for single-row quantities).
    pub rows: Vec<String>,
    /// `values[point][row]`, points in row-major axis order.
    pub values: Vec<Vec<f64>>,
}

/// Per-point values of a scan observable (contract C3): the steady state if stored
/// (`/steady_state/observables/<name>`, shape `[axes…]` or `[axes…, rows]`), else the final time of
/// `/observables/<name>` (`[axes…, time]` or `[axes…, rows, time]`). Failed points (`/scan/status`
/// ≠ 0) are NaN. Returns a [`ScanValues`] (values per point and row), points in row-major axis
/// order (first axis slowest).
pub fn scan_values(root: &Group, name: &str, n_axes: usize) -> Option<ScanValues> {
    let status = root
        .get_group("scan")
        .and_then(|s| s.get_dataset("status"))
        .map(values);
    let steady = root
        .get_group("steady_state")
        .and_then(|g| g.get_group("observables"))
        .and_then(|g| g.get_dataset(name));
    let (what, ds, timed) = match steady {
        Some(ds) => ("steady state", ds, false),
        None => (
            "final time",
            root.get_group("observables")?.get_dataset(name)?,
            true,
        ),
    };
    if ds.shape.len() < n_axes + usize::from(timed) {
        return None;
    }
    let n_points: usize = ds.shape[..n_axes].iter().product();
    let rest = &ds.shape[n_axes..];
    let (n_t, row_dims) = if timed {
        (rest[rest.len() - 1], &rest[..rest.len() - 1])
    } else {
        (1, rest)
    };
    let n_rows: usize = row_dims.iter().product();
    let v = values(ds);
    if n_t == 0 || n_points == 0 || v.len() != n_points * n_rows * n_t {
        return None;
    }
    let per_point = n_rows * n_t;
    let vals = (0..n_points)
        .map(|p| {
            let failed = status
                .as_ref()
                .and_then(|s| s.get(p))
                .is_some_and(|&x| x != 0.0);
            (0..n_rows)
                .map(|r| {
                    if failed {
                        f64::NAN
                    } else {
                        v[p * per_point + r * n_t + n_t - 1]
                    }
                })
                .collect()
        })
        .collect();
    let rows = if row_dims.is_empty() {
        vec![String::new()]
    } else {
        row_labels(ds, n_rows)
    };
    Some(ScanValues {
        what: what.into(),
        unit: attr_str(&ds.attrs, "units").unwrap_or("").to_string(),
        rows,
        values: vals,
    })
}

fn plot_scan(root: &Group, title: &str, dir: &Path) -> Result<Written, String> {
    let axes = scan_axes(root);
    let mut out = Vec::new();
    let n_points: usize = axes.iter().map(|a| a.values.len()).product();
    if axes.is_empty() || n_points == 0 {
        return Ok(out);
    }
    for obs in TRACE_OBSERVABLES {
        let Some(ScanValues {
            what,
            unit,
            rows,
            values: vals,
        }) = scan_values(root, obs, axes.len())
        else {
            continue;
        };
        if vals.len() != n_points {
            continue;
        }
        if axes.len() == 1 {
            let a = &axes[0];
            let ls = rows
                .iter()
                .enumerate()
                .map(|(r, label)| Line {
                    label: label.clone(),
                    x: a.values.clone(),
                    y: vals.iter().map(|v| v[r]).collect(),
                    err: None,
                })
                .collect();
            let fig = LineFigure {
                title: format!("{} — {what}", short(title)),
                x_label: axis_label(&a.name, &a.unit, 0),
                y_quantity: quantity_name(obs),
                y_unit: unit.clone(),
                lines: ls,
            };
            out.extend(lines(&fig, dir, &format!("scan-{obs}"))?);
        } else if axes.len() == 2 {
            let (ax, ay) = (&axes[1], &axes[0]);
            for (r, label) in rows.iter().enumerate().take(8) {
                // point index p = iy * n_x + ix (axis 0 slowest) matches z[iy * nx + ix]
                let map = HeatMap {
                    title: format!(
                        "{}{} — {what}",
                        quantity_name(obs),
                        if label.is_empty() {
                            String::new()
                        } else {
                            format!(", {label}")
                        }
                    ),
                    x_label: axis_label(&ax.name, &ax.unit, 0),
                    y_label: axis_label(&ay.name, &ay.unit, 0),
                    z_quantity: quantity_name(obs),
                    z_unit: unit.clone(),
                    x: ax.values.clone(),
                    y: ay.values.clone(),
                    z: vals.iter().map(|v| v[r]).collect(),
                    diverging: false,
                    matrix: false,
                };
                let stem = if label.is_empty() {
                    format!("scan-{obs}")
                } else {
                    format!("scan-{obs}-{}", slug(label))
                };
                out.extend(heat_map(&map, dir, &stem)?);
            }
        }
    }
    Ok(out)
}

/// Recall success against the number of flipped sites (`/recall`, contract C2): the quantum
/// network with its ±1 standard-error band, and the classical baselines on the same couplings.
pub fn recall_figure(root: &Group, title: &str) -> Option<LineFigure> {
    let rec = root.get_group("recall")?;
    let flips = values(rec.get_dataset("flips")?);
    let mut ls = vec![Line {
        label: "quantum network".into(),
        x: flips.clone(),
        y: values(rec.get_dataset("success")?),
        err: rec.get_dataset("success_stderr").map(values),
    }];
    for (name, label) in [
        ("baseline_descent_success", "classical descent (T = 0)"),
        ("baseline_glauber_success", "classical Glauber"),
    ] {
        if let Some(d) = rec.get_dataset(name) {
            ls.push(Line {
                label: label.into(),
                x: flips.clone(),
                y: values(d),
                err: None,
            });
        }
    }
    if ls.iter().any(|l| l.y.len() != flips.len()) || flips.is_empty() {
        return None;
    }
    Some(LineFigure {
        title: format!("recall — {}", short(title)),
        x_label: "flipped sites in the probe".into(),
        y_quantity: "recall success".into(),
        y_unit: "probability".into(),
        lines: ls,
    })
}

fn plot_couplings(root: &Group, title: &str, dir: &Path) -> Result<Written, String> {
    let found = root
        .get_group("memory")
        .and_then(|m| m.get_dataset("couplings"))
        .map(|d| (d, "coupling J_ij (learning rule)", "J_ij"))
        .or_else(|| {
            root.get_group("model")
                .and_then(|m| m.get_dataset("zz"))
                .map(|d| (d, "zz coupling J^z_ij/2π", "J^z_ij/2π"))
        });
    let Some((ds, what, z)) = found else {
        return Ok(Vec::new());
    };
    if ds.shape.len() != 2 || ds.shape[0] != ds.shape[1] || ds.shape[0] == 0 {
        return Ok(Vec::new());
    }
    let n = ds.shape[0];
    let idx: Vec<f64> = (0..n).map(|i| i as f64).collect();
    let map = HeatMap {
        // a heat map leaves less width for the caption than a line figure (colour bar)
        title: clip(&format!("{what} — {title}"), 52),
        x_label: "site j".into(),
        y_label: "site i".into(),
        z_quantity: z.into(),
        z_unit: attr_str(&ds.attrs, "units").unwrap_or("").into(),
        x: idx.clone(),
        y: idx,
        z: values(ds),
        diverging: true,
        matrix: true,
    };
    heat_map(&map, dir, "couplings")
}

/// Where [`PathBuf`]s of written figures are listed in reports: file names only.
pub fn names(files: &[PathBuf]) -> Vec<String> {
    files
        .iter()
        .filter_map(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_labels_and_scaling() {
        assert_eq!(tick(-2.2e-16, 1.4), "0");
        assert_eq!(tick(0.30000000000000004, 1.0), "0.3");
        assert_eq!(tick(1.5, 3.0), "1.5");
        assert_eq!(tick(250.0, 1000.0), "250");
        assert_eq!(scale_exponent(2.3e6), 6);
        assert_eq!(scale_exponent(0.5), 0);
        assert_eq!(scale_exponent(3e-5), -6);
        assert_eq!(axis_label("flux", "photons/s", 6), "flux (10⁶ photons/s)");
        assert_eq!(axis_label("m", "1", 0), "m (dimensionless)");
        assert_eq!(pretty_unit("us"), "µs");
    }

    #[test]
    fn colour_maps_hit_their_anchors() {
        assert_eq!(viridis(0.0), RGBColor(0x44, 0x01, 0x54));
        assert_eq!(viridis(0.5), RGBColor(0x21, 0x91, 0x8c));
        assert_eq!(viridis(1.0), RGBColor(0xfd, 0xe7, 0x25));
        assert_eq!(diverging(0.0), RGBColor(255, 255, 255));
        assert_eq!(diverging(-1.0), OKABE_ITO[0]);
        assert_eq!(diverging(1.0), OKABE_ITO[1]);
        assert_eq!(edges(&[1.0, 2.0, 4.0]), vec![0.5, 1.5, 3.0, 5.0]);
    }
}
