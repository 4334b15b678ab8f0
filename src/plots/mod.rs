//! Residual plots, written beside a run's output as PNG and SVG: residuals
//! against time per station/site with error bars, and a histogram of the
//! normalised residuals (residual/σ) with the unit normal curve.
//!
//! Text uses DejaVu Sans shipped in `data/fonts` (no system fonts needed).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Once;

use plotters::coord::Shift;
use plotters::prelude::*;

static FONT: &[u8] = include_bytes!("../../data/fonts/DejaVuSans.ttf");
static REGISTER: Once = Once::new();

fn register_font() {
    REGISTER.call_once(|| {
        let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, FONT);
    });
}

/// An image format of the plots.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PlotFormat {
    Png,
    Svg,
}

impl std::str::FromStr for PlotFormat {
    type Err = PlotError;
    fn from_str(s: &str) -> Result<Self, PlotError> {
        match s.trim().to_ascii_lowercase().as_str() {
            "png" => Ok(PlotFormat::Png),
            "svg" => Ok(PlotFormat::Svg),
            other => Err(PlotError::Draw(format!("unknown plot format '{other}' (png, svg)"))),
        }
    }
}

/// Errors of drawing or writing a plot.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    #[error("plot: {0}")]
    Draw(String),
}

impl PlotError {
    fn draw(e: impl std::fmt::Display) -> Self {
        PlotError::Draw(e.to_string())
    }
}

/// One series: label, times, values and their σ (same unit as the values).
#[derive(Clone, Debug, Default)]
pub struct Group {
    pub label: String,
    pub t: Vec<f64>,
    pub y: Vec<f64>,
    pub sigma: Vec<f64>,
}

/// Groups rows by label (sorted by label).
pub fn group(labels: &[String], t: &[f64], y: &[f64], sigma: &[f64]) -> Vec<Group> {
    let mut m: BTreeMap<&str, Group> = BTreeMap::new();
    for i in 0..labels.len() {
        let g = m.entry(labels[i].as_str()).or_insert_with(|| Group { label: labels[i].clone(), ..Default::default() });
        g.t.push(t[i]);
        g.y.push(y[i]);
        g.sigma.push(sigma[i]);
    }
    m.into_values().collect()
}

const COLORS: [RGBColor; 6] = [RGBColor(31, 119, 180), RGBColor(214, 39, 40), RGBColor(44, 160, 44), RGBColor(148, 103, 189), RGBColor(255, 127, 14), RGBColor(23, 190, 207)];

fn finite_range(v: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = v.filter(|x| x.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| (a.min(x), b.max(x)));
    if !lo.is_finite() {
        return (-1.0, 1.0);
    }
    let pad = ((hi - lo) * 0.05).max(1e-12 * hi.abs().max(1.0));
    (lo - pad, hi + pad)
}

fn draw_residuals<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, title: &str, x_label: &str, y_label: &str, groups: &[Group]) -> Result<(), PlotError>
where
    DB::ErrorType: 'static,
{
    area.fill(&WHITE).map_err(PlotError::draw)?;
    let (x0, x1) = finite_range(groups.iter().flat_map(|g| g.t.iter().copied()));
    let (y0, y1) = finite_range(groups.iter().flat_map(|g| g.y.iter().zip(&g.sigma).flat_map(|(y, s)| [y - s, y + s])));
    let mut chart = ChartBuilder::on(area).caption(title, ("sans-serif", 22)).margin(12).x_label_area_size(45).y_label_area_size(80).build_cartesian_2d(x0..x1, y0..y1).map_err(PlotError::draw)?;
    chart
        .configure_mesh()
        .x_desc(x_label)
        .y_desc(y_label)
        .label_style(("sans-serif", 14))
        .axis_desc_style(("sans-serif", 16))
        .x_label_formatter(&|x| format!("{x:.1}"))
        .y_label_formatter(&|y| format!("{y:.3}"))
        .draw()
        .map_err(PlotError::draw)?;
    for (k, g) in groups.iter().enumerate() {
        let c = COLORS[k % COLORS.len()];
        chart.draw_series(g.t.iter().zip(&g.y).zip(&g.sigma).map(|((t, y), s)| ErrorBar::new_vertical(*t, y - s, *y, y + s, c.mix(0.5).stroke_width(1), 4))).map_err(PlotError::draw)?;
        chart
            .draw_series(g.t.iter().zip(&g.y).map(|(t, y)| Circle::new((*t, *y), 2, c.filled())))
            .map_err(PlotError::draw)?
            .label(format!("{} ({} rows)", g.label, g.t.len()))
            .legend(move |(x, y)| Circle::new((x + 8, y), 4, c.filled()));
    }
    chart.configure_series_labels().background_style(WHITE.mix(0.85)).border_style(BLACK).label_font(("sans-serif", 14)).position(SeriesLabelPosition::UpperRight).draw().map_err(PlotError::draw)?;
    area.present().map_err(PlotError::draw)
}

fn draw_histogram<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, title: &str, groups: &[Group]) -> Result<(), PlotError>
where
    DB::ErrorType: 'static,
{
    area.fill(&WHITE).map_err(PlotError::draw)?;
    let z: Vec<f64> = groups.iter().flat_map(|g| g.y.iter().zip(&g.sigma).map(|(y, s)| y / s)).filter(|x| x.is_finite()).collect();
    let width = 0.25;
    let nbins = 40usize; // −5 … +5
    let mut counts = vec![0usize; nbins];
    for v in &z {
        let b = ((v + 5.0) / width).floor();
        if (0.0..nbins as f64).contains(&b) {
            counts[b as usize] += 1;
        }
    }
    let outside = z.iter().filter(|v| v.abs() >= 5.0).count();
    let n = z.len().max(1) as f64;
    let peak = counts.iter().copied().max().unwrap_or(1).max((n * width / (2.0 * std::f64::consts::PI).sqrt()).ceil() as usize) as f64 * 1.15;
    let mut chart =
        ChartBuilder::on(area).caption(title, ("sans-serif", 22)).margin(12).x_label_area_size(45).y_label_area_size(60).build_cartesian_2d(-5.0f64..5.0, 0.0..peak).map_err(PlotError::draw)?;
    chart
        .configure_mesh()
        .x_desc("normalised residual (residual / σ)")
        .y_desc("rows per bin of 0.25")
        .label_style(("sans-serif", 14))
        .axis_desc_style(("sans-serif", 16))
        .draw()
        .map_err(PlotError::draw)?;
    chart
        .draw_series(counts.iter().enumerate().map(|(i, c)| {
            let x = -5.0 + i as f64 * width;
            Rectangle::new([(x, 0.0), (x + width, *c as f64)], RGBColor(31, 119, 180).mix(0.6).filled())
        }))
        .map_err(PlotError::draw)?
        .label(if outside > 0 { format!("{} rows ({outside} beyond ±5, not shown)", z.len()) } else { format!("{} rows", z.len()) })
        .legend(|(x, y)| Rectangle::new([(x, y - 4), (x + 12, y + 4)], RGBColor(31, 119, 180).filled()));
    let gauss = (0..=200).map(|i| {
        let x = -5.0 + i as f64 * 0.05;
        (x, n * width * (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt())
    });
    chart.draw_series(LineSeries::new(gauss, RED.stroke_width(2))).map_err(PlotError::draw)?.label("unit normal").legend(|(x, y)| PathElement::new(vec![(x, y), (x + 12, y)], RED.stroke_width(2)));
    chart.configure_series_labels().background_style(WHITE.mix(0.85)).border_style(BLACK).label_font(("sans-serif", 14)).draw().map_err(PlotError::draw)?;
    area.present().map_err(PlotError::draw)
}

/// Draws `<output stem>.<name>.{png,svg}` (residuals against time) and
/// `<output stem>.<name>_normalised.{png,svg}` (histogram of residual/σ),
/// each written where `stage` says for its final path (a temporary name
/// with the same extension, renamed by the caller). Returns (written,
/// final) path pairs.
#[allow(clippy::too_many_arguments)]
pub fn residual_plots(
    output: &Path,
    name: &str,
    title: &str,
    x_label: &str,
    y_label: &str,
    groups: &[Group],
    formats: &[PlotFormat],
    stage: &mut dyn FnMut(&Path) -> PathBuf,
) -> Result<Vec<(PathBuf, PathBuf)>, PlotError> {
    register_font();
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    let dir = output.parent().unwrap_or(Path::new("."));
    let mut written = Vec::new();
    let p = |suffix: &str, ext: &str| dir.join(format!("{stem}.{suffix}.{ext}"));
    let (res_png, res_svg) = (p(name, "png"), p(name, "svg"));
    let hist = format!("{name}_normalised");
    let (hist_png, hist_svg) = (p(&hist, "png"), p(&hist, "svg"));
    let htitle = format!("{title}: normalised residuals");
    for f in formats {
        let (res, hist) = match f {
            PlotFormat::Png => (&res_png, &hist_png),
            PlotFormat::Svg => (&res_svg, &hist_svg),
        };
        let (rs, hs) = (stage(res), stage(hist));
        match f {
            PlotFormat::Png => {
                draw_residuals(&BitMapBackend::new(&rs, (1200, 700)).into_drawing_area(), title, x_label, y_label, groups)?;
                draw_histogram(&BitMapBackend::new(&hs, (900, 600)).into_drawing_area(), &htitle, groups)?;
            }
            PlotFormat::Svg => {
                draw_residuals(&SVGBackend::new(&rs, (1200, 700)).into_drawing_area(), title, x_label, y_label, groups)?;
                draw_histogram(&SVGBackend::new(&hs, (900, 600)).into_drawing_area(), &htitle, groups)?;
            }
        }
        written.push((rs, res.clone()));
        written.push((hs, hist.clone()));
    }
    Ok(written)
}
