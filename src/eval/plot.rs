//! SVG line charts of sweep results, drawn with plotters' SVG backend.
//!
//! Text is written as SVG `<text>` elements (plotters' SVG backend without its `ttf` feature
//! measures text with built-in estimates), so drawing needs no font installed; the viewer
//! renders the text with its own sans-serif font.

use std::path::Path;

use plotters::prelude::*;

use crate::error::{Error, Result};

/// One line of a chart: a legend label and its points, drawn in the order given.
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Legend label.
    pub label: String,
    /// `(x, y)` points.
    pub points: Vec<(f64, f64)>,
}

/// What a chart shows.
#[derive(Clone, Debug, PartialEq)]
pub struct Chart<'a> {
    /// Title above the chart.
    pub title: &'a str,
    /// Label of the x axis, with its unit.
    pub x_label: &'a str,
    /// Label of the y axis, with its unit.
    pub y_label: &'a str,
    /// Draw the x axis on a log2 scale (dimensions 2, 4, 8, … evenly spaced).
    pub x_log: bool,
    /// Fixed y range, else from the data with a margin.
    pub y_range: Option<(f64, f64)>,
    /// Join each series' points with a line; `false` draws a scatter of markers only (for
    /// measurements such as q/s whose order along x means nothing).
    pub lines: bool,
}

/// Draws `series` as a line chart with markers (or a scatter, see [`Chart::lines`]) and a legend into an SVG file at `path`.
pub fn line_chart(path: &Path, chart: &Chart<'_>, series: &[Series]) -> Result<()> {
    let fail = |e: String| Error::Io {
        path: path.to_path_buf(),
        source: std::io::Error::other(e),
    };
    let pts = series.iter().flat_map(|s| s.points.iter());
    let (mut x0, mut x1, mut y0, mut y1) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
    for &(x, y) in pts {
        x0 = x0.min(x);
        x1 = x1.max(x);
        y0 = y0.min(y);
        y1 = y1.max(y);
    }
    if x0 > x1 {
        (x0, x1, y0, y1) = (1.0, 2.0, 0.0, 1.0);
    }
    let tx = |x: f64| if chart.x_log { x.max(1e-9).log2() } else { x };
    let (mut a, mut b) = (tx(x0), tx(x1));
    let pad = ((b - a) * 0.05).max(0.25);
    a -= pad;
    b += pad;
    let (ya, yb) = chart.y_range.unwrap_or_else(|| {
        let p = ((y1 - y0) * 0.08).max(0.01);
        (y0 - p, y1 + p)
    });
    let root = SVGBackend::new(path, (900, 600)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| fail(e.to_string()))?;
    let mut ctx = ChartBuilder::on(&root)
        .caption(chart.title, ("sans-serif", 24))
        .margin(20)
        .x_label_area_size(55)
        .y_label_area_size(75)
        .build_cartesian_2d(a..b, ya..yb)
        .map_err(|e| fail(e.to_string()))?;
    let log = chart.x_log;
    let fmt_x = move |v: &f64| {
        let x = if log { v.exp2() } else { *v };
        if x >= 100.0 || (x - x.round()).abs() < 1e-6 {
            format!("{:.0}", x)
        } else {
            format!("{:.1}", x)
        }
    };
    ctx.configure_mesh()
        .x_desc(chart.x_label)
        .y_desc(chart.y_label)
        .axis_desc_style(("sans-serif", 18))
        .label_style(("sans-serif", 15))
        .x_label_formatter(&fmt_x)
        .y_label_formatter(&|v| format!("{v:.2}"))
        .x_labels(if log {
            ((b - a).ceil() as usize + 1).max(2)
        } else {
            8
        })
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(|e| fail(e.to_string()))?;
    for (i, s) in series.iter().enumerate() {
        let color = Palette99::pick(i).to_rgba();
        let shape = ShapeStyle::from(&color).stroke_width(2);
        let line: Vec<(f64, f64)> = s.points.iter().map(|&(x, y)| (tx(x), y)).collect();
        if chart.lines {
            ctx.draw_series(LineSeries::new(line.clone(), shape))
                .map_err(|e| fail(e.to_string()))?
                .label(s.label.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], shape));
            ctx.draw_series(line.iter().map(|&p| Circle::new(p, 3, color.filled())))
                .map_err(|e| fail(e.to_string()))?;
        } else {
            ctx.draw_series(line.iter().map(|&p| Circle::new(p, 5, color.filled())))
                .map_err(|e| fail(e.to_string()))?
                .label(s.label.clone())
                .legend(move |(x, y)| Circle::new((x + 10, y), 4, color.filled()));
        }
    }
    ctx.configure_series_labels()
        .position(SeriesLabelPosition::LowerRight)
        .label_font(("sans-serif", 14))
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .draw()
        .map_err(|e| fail(e.to_string()))?;
    root.present().map_err(|e| fail(e.to_string()))?;
    Ok(())
}
