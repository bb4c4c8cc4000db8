//! Publication plots (PNG and SVG) for the measurement chain.
//!
//! Every public function takes plain slices so that this module depends on nothing else in the
//! crate, validates its input (empty or all-NaN data is an input error), and writes
//! `<stem>.png` and `<stem>.svg` atomically: both files are rendered to temporary names in the
//! target folder and renamed into place only when both are complete.
//!
//! Text uses an embedded DejaVu Sans (see `assets/fonts/README.md`), registered once with
//! plotters' ab_glyph backend, so output does not depend on the fonts of the host machine.

use std::error::Error as StdError;
use std::ffi::OsString;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::OnceLock;

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::{register_font, FontStyle};

use crate::{Error, Result};

/// Family name under which the embedded font is registered; every text style uses it.
const FAMILY: &str = "DejaVu Sans";
static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// Default canvas: large enough for talks, fonts are sized for it.
const WIDTH: u32 = 1000;
const HEIGHT: u32 = 700;
/// Sky maps are subsampled to this many points so that SVGs stay small.
pub const SKY_MAX_POINTS: usize = 20_000;

const TITLE_PX: u32 = 30;
const AXIS_DESC_PX: u32 = 26;
const TICK_PX: u32 = 22;
const LEGEND_PX: u32 = 22;

// Okabe–Ito colours: distinguishable with the common colour-vision deficiencies.
const C_BLUE: RGBColor = RGBColor(0, 114, 178);
const C_ORANGE: RGBColor = RGBColor(230, 159, 0);
const C_VERMILLION: RGBColor = RGBColor(213, 94, 0);
const C_GREEN: RGBColor = RGBColor(0, 158, 115);
const C_PURPLE: RGBColor = RGBColor(204, 121, 167);
const C_SKY: RGBColor = RGBColor(86, 180, 233);
const C_GREY: RGBColor = RGBColor(110, 110, 110);
const PALETTE: [RGBColor; 7] = [
    C_BLUE,
    C_VERMILLION,
    C_GREEN,
    C_ORANGE,
    C_PURPLE,
    C_SKY,
    RGBColor(0, 0, 0),
];

type DrawResult = std::result::Result<(), Box<dyn StdError>>;
type Chart2d<'a, DB> = ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Register the embedded font once per process. Also registered as "sans-serif", the family
/// plotters falls back to for any text whose style we do not set ourselves.
fn ensure_font() -> Result<()> {
    static OK: OnceLock<bool> = OnceLock::new();
    let ok = *OK.get_or_init(|| {
        register_font(FAMILY, FontStyle::Normal, FONT_BYTES).is_ok()
            && register_font("sans-serif", FontStyle::Normal, FONT_BYTES).is_ok()
    });
    if ok {
        Ok(())
    } else {
        Err(Error::other("plots: the embedded font could not be parsed"))
    }
}

fn font(px: u32) -> TextStyle<'static> {
    (FAMILY, f64::from(px)).into_font().color(&BLACK)
}

// ---------------------------------------------------------------------------------------------
// Atomic writing of both formats
// ---------------------------------------------------------------------------------------------

/// A figure that can be drawn on any plotters backend (bitmap and SVG share one drawing code).
trait Figure {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static;
}

fn with_suffix(stem: &Path, suffix: &str) -> PathBuf {
    let mut s: OsString = stem.as_os_str().to_owned();
    s.push(suffix);
    PathBuf::from(s)
}

/// Removes the listed temporary files when dropped unless disarmed, so that no error path
/// leaves partial output behind.
struct TempGuard(Vec<PathBuf>);
impl Drop for TempGuard {
    fn drop(&mut self) {
        for p in &self.0 {
            let _ = std::fs::remove_file(p);
        }
    }
}

fn write_figure(stem: &Path, fig: &impl Figure) -> Result<()> {
    ensure_font()?;
    let name = stem
        .file_name()
        .and_then(|n| n.to_str())
        .filter(|n| !n.is_empty())
        .ok_or_else(|| {
            Error::input(format!(
                "plot path {}: needs a file name (UTF-8) to which .png/.svg is appended",
                stem.display()
            ))
        })?;
    let dir = match stem.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let final_png = with_suffix(stem, ".png");
    let final_svg = with_suffix(stem, ".svg");
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let tag = format!(
        "{}.{}",
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::Relaxed)
    );
    // The bitmap encoder picks the format from the extension, so the temp name ends in .png.
    let tmp_png = dir.join(format!(".{name}.{tag}.tmp.png"));
    let tmp_svg = dir.join(format!(".{name}.{tag}.tmp.svg"));
    let mut guard = TempGuard(vec![tmp_png.clone(), tmp_svg.clone()]);
    let size = fig.size();

    {
        let root = BitMapBackend::new(&tmp_png, size).into_drawing_area();
        root.fill(&WHITE)
            .map_err(|e| Error::other(format!("plot {}: {e}", final_png.display())))?;
        fig.draw(&root).map_err(|e| {
            Error::other(format!("plot {}: drawing failed: {e}", final_png.display()))
        })?;
        root.present().map_err(|e| {
            Error::resource(format!("{}: cannot write plot: {e}", final_png.display()))
        })?;
    }
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE)
            .map_err(|e| Error::other(format!("plot {}: {e}", final_svg.display())))?;
        fig.draw(&root).map_err(|e| {
            Error::other(format!("plot {}: drawing failed: {e}", final_svg.display()))
        })?;
        root.present()
            .map_err(|e| Error::other(format!("plot {}: {e}", final_svg.display())))?;
    }
    std::fs::write(&tmp_svg, svg.as_bytes())
        .map_err(|e| Error::resource(format!("{}: cannot write plot: {e}", final_svg.display())))?;
    std::fs::rename(&tmp_png, &final_png)
        .map_err(|e| Error::resource(format!("{}: cannot write plot: {e}", final_png.display())))?;
    std::fs::rename(&tmp_svg, &final_svg)
        .map_err(|e| Error::resource(format!("{}: cannot write plot: {e}", final_svg.display())))?;
    guard.0.clear();
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Validation and small numerical helpers
// ---------------------------------------------------------------------------------------------

fn same_len(what: &str, a: (&str, usize), b: (&str, usize)) -> Result<()> {
    if a.1 != b.1 {
        return Err(Error::input(format!(
            "{what}: {} has {} values but {} has {}",
            a.0, a.1, b.0, b.1
        )));
    }
    Ok(())
}

/// Points where both coordinates are finite; an error if there are none.
fn finite_points(what: &str, x: &[f64], y: &[f64]) -> Result<Vec<(f64, f64)>> {
    if x.is_empty() {
        return Err(Error::input(format!("{what}: no data points")));
    }
    let pts: Vec<(f64, f64)> = x
        .iter()
        .zip(y)
        .filter(|(a, b)| a.is_finite() && b.is_finite())
        .map(|(a, b)| (*a, *b))
        .collect();
    if pts.is_empty() {
        return Err(Error::input(format!(
            "{what}: all {} data points are NaN or infinite",
            x.len()
        )));
    }
    Ok(pts)
}

/// Axis range covering the finite values with a fractional padding on both sides; a
/// degenerate range is widened so that the axis still has a scale.
fn padded_range(vals: impl IntoIterator<Item = f64>, pad: f64) -> Option<Range<f64>> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in vals.into_iter().filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if lo > hi {
        return None;
    }
    if hi - lo <= f64::EPSILON * lo.abs().max(hi.abs()) {
        let half = if lo == 0.0 { 1.0 } else { 0.1 * lo.abs() };
        return Some(lo - half..hi + half);
    }
    let p = pad * (hi - lo);
    Some(lo - p..hi + p)
}

/// Split a curve at non-finite points so that gaps stay gaps instead of being bridged.
fn segments(x: &[f64], y: &[f64]) -> Vec<Vec<(f64, f64)>> {
    let mut out = vec![];
    let mut cur = vec![];
    for (a, b) in x.iter().zip(y) {
        if a.is_finite() && b.is_finite() {
            cur.push((*a, *b));
        } else if !cur.is_empty() {
            out.push(std::mem::take(&mut cur));
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

/// Linear-interpolated quantile of sorted data (common practice, no source).
fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    let n = sorted.len();
    if n == 1 {
        return sorted[0];
    }
    let pos = q.clamp(0.0, 1.0) * (n - 1) as f64;
    let i = pos.floor() as usize;
    let f = pos - i as f64;
    if i + 1 >= n {
        sorted[n - 1]
    } else {
        sorted[i] * (1.0 - f) + sorted[i + 1] * f
    }
}

/// Bin edges from bin centres: midpoints inside, half a neighbouring width outside.
fn edges_from_centres(c: &[f64]) -> Vec<f64> {
    let n = c.len();
    if n == 1 {
        let half = if c[0] == 0.0 { 0.5 } else { 0.05 * c[0].abs() };
        return vec![c[0] - half, c[0] + half];
    }
    let mut e = Vec::with_capacity(n + 1);
    e.push(c[0] - 0.5 * (c[1] - c[0]));
    for i in 1..n {
        e.push(0.5 * (c[i - 1] + c[i]));
    }
    e.push(c[n - 1] + 0.5 * (c[n - 1] - c[n - 2]));
    e
}

/// Weighted histogram on `n_bins` equal bins over `[lo, hi]`, the last bin closed.
fn histogram(vals: &[(f64, f64)], lo: f64, hi: f64, n_bins: usize) -> Vec<f64> {
    let mut h = vec![0.0; n_bins];
    let width = (hi - lo) / n_bins as f64;
    for &(v, w) in vals {
        if v < lo || v > hi {
            continue;
        }
        let i = (((v - lo) / width) as usize).min(n_bins - 1);
        h[i] += w;
    }
    h
}

/// Diverging colour map for correlations: blue (-1), near-white (0), red (+1).
fn diverging(v: f64) -> RGBColor {
    if !v.is_finite() {
        return RGBColor(170, 170, 170);
    }
    let v = v.clamp(-1.0, 1.0);
    let (neg, mid, pos) = (
        [33.0, 102.0, 172.0],
        [247.0, 247.0, 247.0],
        [178.0, 24.0, 43.0],
    );
    let (a, b, t) = if v < 0.0 {
        (mid, neg, -v)
    } else {
        (mid, pos, v)
    };
    let c = |k: usize| (a[k] + (b[k] - a[k]) * t).round() as u8;
    RGBColor(c(0), c(1), c(2))
}

/// Shift RA values so that a footprint crossing RA = 0 is contiguous: cut the circle at the
/// largest empty gap. Returns the shifted values (some may be negative).
fn unwrap_ra(ra: &[f64]) -> Vec<f64> {
    let mut s: Vec<f64> = ra.iter().map(|r| r.rem_euclid(360.0)).collect();
    let norm = s.clone();
    s.sort_by(|a, b| a.total_cmp(b));
    if s.len() < 2 {
        return norm;
    }
    let wrap_gap = s[0] + 360.0 - s[s.len() - 1];
    let (mut best, mut cut) = (wrap_gap, None);
    for w in s.windows(2) {
        if w[1] - w[0] > best {
            best = w[1] - w[0];
            cut = Some(w[1]);
        }
    }
    match cut {
        None => norm,
        Some(c) => norm
            .into_iter()
            .map(|r| if r >= c { r - 360.0 } else { r })
            .collect(),
    }
}

/// Deterministic subsample of `n` items down to at most `max`: evenly strided indices.
fn subsample_indices(n: usize, max: usize) -> Vec<usize> {
    if n <= max {
        return (0..n).collect();
    }
    (0..max).map(|k| k * n / max).collect()
}

/// Count thresholds of a 2-D histogram enclosing the given probability masses
/// (highest-density regions; common practice, no source).
fn hpd_thresholds(counts: &[f64], masses: &[f64]) -> Vec<f64> {
    let mut sorted: Vec<f64> = counts.to_vec();
    sorted.sort_by(|a, b| b.total_cmp(a));
    let total: f64 = sorted.iter().sum();
    masses
        .iter()
        .map(|&m| {
            let mut acc = 0.0;
            for &c in &sorted {
                acc += c;
                if acc >= m * total {
                    return c;
                }
            }
            sorted.last().copied().unwrap_or(0.0)
        })
        .collect()
}

/// Tick label with a fixed number of decimals chosen for the axis span: ticks are at most about
/// ten per axis and at 1, 2 or 5 times a power of ten, so span/10 sets the finest digit needed.
fn tick_fmt(span: f64) -> impl Fn(&f64) -> String {
    let step = span.abs() / 10.0;
    let decimals = if step.is_finite() && step > 0.0 {
        (-step.log10()).ceil().clamp(0.0, 8.0) as usize
    } else {
        2
    };
    move |v: &f64| {
        let s = format!("{v:.decimals$}");
        // Avoid "-0" and "-0.00" labels.
        if s.trim_start_matches('-')
            .chars()
            .all(|c| c == '0' || c == '.')
        {
            s.trim_start_matches('-').to_string()
        } else {
            s
        }
    }
}

/// Short label for a single number: at most four decimals, trailing zeros dropped.
fn short(v: f64) -> String {
    let s = format!("{v:.4}");
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

// ---------------------------------------------------------------------------------------------
// Shared chart pieces
// ---------------------------------------------------------------------------------------------

struct Axes<'t> {
    title: &'t str,
    xlabel: &'t str,
    ylabel: &'t str,
    x: Range<f64>,
    y: Range<f64>,
}

fn cartesian<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    ax: &Axes<'_>,
) -> std::result::Result<Chart2d<'a, DB>, Box<dyn StdError>>
where
    DB::ErrorType: 'static,
{
    let mut b = ChartBuilder::on(area);
    if !ax.title.is_empty() {
        b.caption(ax.title, font(TITLE_PX));
    }
    let chart = b
        .margin(20)
        .margin_right(35)
        .x_label_area_size(75)
        .y_label_area_size(105)
        .build_cartesian_2d(ax.x.clone(), ax.y.clone())?;
    Ok(chart)
}

fn draw_mesh<DB: DrawingBackend>(chart: &mut Chart2d<'_, DB>, ax: &Axes<'_>) -> DrawResult
where
    DB::ErrorType: 'static,
{
    let fx = tick_fmt(ax.x.end - ax.x.start);
    let fy = tick_fmt(ax.y.end - ax.y.start);
    chart
        .configure_mesh()
        .x_desc(ax.xlabel)
        .y_desc(ax.ylabel)
        .axis_desc_style(font(AXIS_DESC_PX))
        .label_style(font(TICK_PX))
        .x_labels(8)
        .y_labels(8)
        .x_label_formatter(&fx)
        .y_label_formatter(&fy)
        .bold_line_style(RGBColor(215, 215, 215))
        .light_line_style(RGBColor(240, 240, 240))
        .axis_style(BLACK.stroke_width(2))
        .draw()?;
    Ok(())
}

fn draw_legend<'a, DB: DrawingBackend + 'a>(
    chart: &mut Chart2d<'a, DB>,
    pos: SeriesLabelPosition,
) -> DrawResult
where
    DB::ErrorType: 'static,
{
    chart
        .configure_series_labels()
        .position(pos)
        .margin(15)
        .legend_area_size(45)
        .label_font(font(LEGEND_PX))
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .draw()?;
    Ok(())
}

/// A line (solid or dashed) through the finite segments of a curve, with an optional legend
/// entry attached once.
fn draw_curve<DB: DrawingBackend>(
    chart: &mut Chart2d<'_, DB>,
    x: &[f64],
    y: &[f64],
    style: ShapeStyle,
    dashed: bool,
    label: Option<&str>,
) -> DrawResult
where
    DB::ErrorType: 'static,
{
    let mut labelled = false;
    for seg in segments(x, y) {
        let anno = if dashed {
            chart.draw_series(DashedLineSeries::new(seg, 14, 8, style))?
        } else {
            chart.draw_series(LineSeries::new(seg, style))?
        };
        if let (Some(l), false) = (label, labelled) {
            labelled = true;
            anno.label(l).legend(move |(x, y)| {
                DashedPathElement::new(
                    vec![(x, y), (x + 36, y)],
                    if dashed { 8 } else { 40 },
                    if dashed { 5 } else { 0 },
                    style,
                )
            });
        }
    }
    Ok(())
}

/// Data points with asymmetric vertical error bars (bars with NaN ends are skipped).
fn draw_points_with_errors<DB: DrawingBackend>(
    chart: &mut Chart2d<'_, DB>,
    pts: &[(f64, f64, f64, f64)], // x, y, err_lo, err_hi
    colour: RGBColor,
    label: &str,
) -> DrawResult
where
    DB::ErrorType: 'static,
{
    let bar = colour.stroke_width(2);
    for &(x, y, lo, hi) in pts {
        if lo.is_finite() && hi.is_finite() {
            chart.draw_series(std::iter::once(PathElement::new(
                vec![(x, y - lo), (x, y + hi)],
                bar,
            )))?;
            for end in [y - lo, y + hi] {
                chart.draw_series(std::iter::once(
                    EmptyElement::at((x, end)) + PathElement::new(vec![(-6, 0), (6, 0)], bar),
                ))?;
            }
        }
    }
    chart
        .draw_series(
            pts.iter()
                .map(|&(x, y, _, _)| Circle::new((x, y), 6, colour.filled())),
        )?
        .label(label)
        .legend(move |(x, y)| Circle::new((x + 18, y), 6, colour.filled()));
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// xi(s)
// ---------------------------------------------------------------------------------------------

struct XiFig<'a> {
    pts: Vec<(f64, f64, f64, f64)>,
    model: Option<(&'a [f64], Vec<f64>)>,
    nowiggle: Option<(&'a [f64], Vec<f64>)>,
    title: &'a str,
}

impl Figure for XiFig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let xs = self
            .pts
            .iter()
            .map(|p| p.0)
            .chain(self.model.iter().flat_map(|m| m.0.iter().copied()))
            .chain(self.nowiggle.iter().flat_map(|m| m.0.iter().copied()));
        let ys = self
            .pts
            .iter()
            .flat_map(|p| {
                let (lo, hi) = if p.2.is_finite() {
                    (p.2, p.3)
                } else {
                    (0.0, 0.0)
                };
                [p.1 - lo, p.1 + hi]
            })
            .chain(self.model.iter().flat_map(|m| m.1.iter().copied()))
            .chain(self.nowiggle.iter().flat_map(|m| m.1.iter().copied()));
        let ax = Axes {
            title: self.title,
            xlabel: "s [Mpc/h]",
            ylabel: "s² ξ(s) [(Mpc/h)²]",
            x: padded_range(xs, 0.04).unwrap_or(0.0..1.0),
            y: padded_range(ys, 0.08).unwrap_or(0.0..1.0),
        };
        let mut chart = cartesian(root, &ax)?;
        draw_mesh(&mut chart, &ax)?;
        if let Some((s, y)) = &self.nowiggle {
            let st = C_ORANGE.stroke_width(3);
            draw_curve(&mut chart, s, y, st, true, Some("no-wiggle model"))?;
        }
        if let Some((s, y)) = &self.model {
            let st = C_BLUE.stroke_width(3);
            draw_curve(&mut chart, s, y, st, false, Some("best-fit model"))?;
        }
        draw_points_with_errors(&mut chart, &self.pts, RGBColor(20, 20, 20), "data")?;
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// s² ξ(s) in (Mpc/h)² against s in Mpc/h: measured points with 1σ error bars, the best-fit
/// model as a solid line and the no-wiggle model dashed. Writes `<stem>.png` and `<stem>.svg`.
pub fn xi_plot(
    stem: &Path,
    s: &[f64],
    xi: &[f64],
    err: &[f64],
    model: Option<(&[f64], &[f64])>,
    nowiggle: Option<(&[f64], &[f64])>,
    title: &str,
) -> Result<()> {
    const W: &str = "xi plot";
    same_len(W, ("s", s.len()), ("xi", xi.len()))?;
    same_len(W, ("s", s.len()), ("err", err.len()))?;
    finite_points(W, s, xi)?;
    if let Some(i) = err.iter().position(|e| *e < 0.0) {
        return Err(Error::input(format!(
            "{W}: err[{i}] = {} is negative",
            err[i]
        )));
    }
    let pts: Vec<_> = s
        .iter()
        .zip(xi)
        .zip(err)
        .filter(|((a, b), _)| a.is_finite() && b.is_finite())
        .map(|((a, b), e)| {
            let e2 = if e.is_finite() { a * a * e } else { f64::NAN };
            (*a, a * a * b, e2, e2)
        })
        .collect();
    let scale = |name: &str, m: Option<(&'_ [f64], &'_ [f64])>| -> Result<Option<Vec<f64>>> {
        match m {
            None => Ok(None),
            Some((ms, mx)) => {
                same_len(W, (&format!("{name} s"), ms.len()), (name, mx.len()))?;
                Ok(Some(ms.iter().zip(mx).map(|(a, b)| a * a * b).collect()))
            }
        }
    };
    let fig = XiFig {
        pts,
        model: scale("model", model)?.map(|y| (model.unwrap().0, y)),
        nowiggle: scale("no-wiggle model", nowiggle)?.map(|y| (nowiggle.unwrap().0, y)),
        title,
    };
    write_figure(stem, &fig)
}

// ---------------------------------------------------------------------------------------------
// chi2(alpha)
// ---------------------------------------------------------------------------------------------

struct Chi2Fig<'a> {
    alpha: &'a [f64],
    chi2: &'a [f64],
    nowiggle: Option<&'a [f64]>,
    best: f64,
    interval: (f64, f64),
    title: &'a str,
}

impl Figure for Chi2Fig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let min_chi2 = self
            .chi2
            .iter()
            .copied()
            .filter(|v| v.is_finite())
            .fold(f64::INFINITY, f64::min);
        let ys = self
            .chi2
            .iter()
            .chain(self.nowiggle.into_iter().flatten())
            .copied()
            .chain([min_chi2 + 1.0]);
        let ax = Axes {
            title: self.title,
            xlabel: "α (dilation)",
            ylabel: "χ²",
            x: padded_range(self.alpha.iter().copied(), 0.02).unwrap_or(0.0..1.0),
            y: padded_range(ys, 0.06).unwrap_or(0.0..1.0),
        };
        let mut chart = cartesian(root, &ax)?;
        draw_mesh(&mut chart, &ax)?;
        let (lo, hi) = self.interval;
        if lo.is_finite() && hi.is_finite() && lo <= hi {
            let band = C_SKY.mix(0.25);
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(lo, ax.y.start), (hi, ax.y.end)],
                    band.filled(),
                )))?
                .label(format!("Δχ² = 1 interval [{lo:.3}, {hi:.3}]"))
                .legend(move |(x, y)| Rectangle::new([(x, y - 8), (x + 36, y + 8)], band.filled()));
        }
        let grey = C_GREY.stroke_width(2);
        let x = &ax.x;
        draw_curve(
            &mut chart,
            &[x.start, x.end],
            &[min_chi2 + 1.0, min_chi2 + 1.0],
            grey,
            true,
            Some("min χ² + 1"),
        )?;
        if let Some(nw) = self.nowiggle {
            let st = C_ORANGE.stroke_width(3);
            draw_curve(
                &mut chart,
                self.alpha,
                nw,
                st,
                true,
                Some("no-wiggle model"),
            )?;
        }
        draw_curve(
            &mut chart,
            self.alpha,
            self.chi2,
            C_BLUE.stroke_width(3),
            false,
            Some("BAO model"),
        )?;
        if self.best.is_finite() {
            let b = self.best;
            draw_curve(
                &mut chart,
                &[b, b],
                &[ax.y.start, ax.y.end],
                C_VERMILLION.stroke_width(2),
                false,
                Some(&format!("best fit α = {}", short(b))),
            )?;
        }
        draw_legend(&mut chart, SeriesLabelPosition::UpperMiddle)?;
        Ok(())
    }
}

/// χ²(α) of the BAO fit (and optionally of the no-wiggle model), with the best fit marked and
/// the Δχ² = 1 interval shaded. Writes `<stem>.png` and `<stem>.svg`.
pub fn chi2_plot(
    stem: &Path,
    alpha: &[f64],
    chi2: &[f64],
    chi2_nowiggle: Option<&[f64]>,
    best: f64,
    interval: (f64, f64),
    title: &str,
) -> Result<()> {
    const W: &str = "chi2 plot";
    same_len(W, ("alpha", alpha.len()), ("chi2", chi2.len()))?;
    if let Some(nw) = chi2_nowiggle {
        same_len(W, ("alpha", alpha.len()), ("chi2_nowiggle", nw.len()))?;
    }
    finite_points(W, alpha, chi2)?;
    write_figure(
        stem,
        &Chi2Fig {
            alpha,
            chi2,
            nowiggle: chi2_nowiggle,
            best,
            interval,
            title,
        },
    )
}

// ---------------------------------------------------------------------------------------------
// Correlation matrix
// ---------------------------------------------------------------------------------------------

struct CorrFig<'a> {
    corr: &'a [f64],
    n: usize,
    edges: Vec<f64>,
    title: &'a str,
}

impl Figure for CorrFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 820)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let root = if self.title.is_empty() {
            root.clone()
        } else {
            root.margin(12, 0, 0, 0)
                .titled(self.title, font(TITLE_PX))?
        };
        let (main, bar) = root.split_horizontally(820);
        let lo = self.edges[0];
        let hi = self.edges[self.n];
        let ax = Axes {
            title: "",
            xlabel: "s [Mpc/h]",
            ylabel: "s′ [Mpc/h]",
            x: lo..hi,
            y: lo..hi,
        };
        let mut chart = ChartBuilder::on(&main)
            .margin(20)
            .x_label_area_size(75)
            .y_label_area_size(105)
            .build_cartesian_2d(ax.x.clone(), ax.y.clone())?;
        let fx = tick_fmt(hi - lo);
        chart.draw_series((0..self.n * self.n).map(|k| {
            let (i, j) = (k / self.n, k % self.n);
            Rectangle::new(
                [
                    (self.edges[j], self.edges[i]),
                    (self.edges[j + 1], self.edges[i + 1]),
                ],
                diverging(self.corr[k]).filled(),
            )
        }))?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc(ax.xlabel)
            .y_desc(ax.ylabel)
            .axis_desc_style(font(AXIS_DESC_PX))
            .label_style(font(TICK_PX))
            .x_labels(8)
            .y_labels(8)
            .x_label_formatter(&fx)
            .y_label_formatter(&fx)
            .axis_style(BLACK.stroke_width(2))
            .draw()?;

        let mut cb = ChartBuilder::on(&bar)
            .margin_top(20)
            .margin_bottom(95)
            .margin_right(10)
            .right_y_label_area_size(75)
            .build_cartesian_2d(0.0..1.0, -1.0..1.0)?;
        const STEPS: usize = 200;
        cb.draw_series((0..STEPS).map(|k| {
            let a = -1.0 + 2.0 * k as f64 / STEPS as f64;
            let b = -1.0 + 2.0 * (k + 1) as f64 / STEPS as f64;
            Rectangle::new([(0.0, a), (1.0, b)], diverging(0.5 * (a + b)).filled())
        }))?;
        cb.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_labels(9)
            .y_label_formatter(&|v| format!("{v:.2}"))
            .y_desc("correlation")
            .axis_desc_style(font(AXIS_DESC_PX))
            .label_style(font(TICK_PX))
            .draw()?;
        cb.draw_series(std::iter::once(Rectangle::new(
            [(0.0, -1.0), (1.0, 1.0)],
            BLACK.stroke_width(1),
        )))?;
        Ok(())
    }
}

/// Heat map of a correlation matrix (row-major `n × n`, values in [-1, 1] on a diverging
/// scale, NaN grey) with a colour bar; both axes are in s [Mpc/h] using the bin centres.
pub fn correlation_matrix_plot(
    stem: &Path,
    corr: &[f64],
    n: usize,
    s_centres: &[f64],
    title: &str,
) -> Result<()> {
    const W: &str = "correlation matrix plot";
    if n == 0 || corr.is_empty() {
        return Err(Error::input(format!("{W}: empty matrix")));
    }
    if corr.len() != n * n {
        return Err(Error::input(format!(
            "{W}: corr has {} values, expected n*n = {}",
            corr.len(),
            n * n
        )));
    }
    same_len(W, ("s_centres", s_centres.len()), ("n", n))?;
    if corr.iter().all(|v| !v.is_finite()) {
        return Err(Error::input(format!("{W}: all matrix entries are NaN")));
    }
    if let Some(i) = s_centres.iter().position(|v| !v.is_finite()) {
        return Err(Error::input(format!("{W}: s_centres[{i}] is not finite")));
    }
    if let Some(i) = s_centres.windows(2).position(|w| w[1] <= w[0]) {
        return Err(Error::input(format!(
            "{W}: s_centres must increase strictly (s_centres[{}] = {} >= s_centres[{}] = {})",
            i,
            s_centres[i],
            i + 1,
            s_centres[i + 1]
        )));
    }
    write_figure(
        stem,
        &CorrFig {
            corr,
            n,
            edges: edges_from_centres(s_centres),
            title,
        },
    )
}

// ---------------------------------------------------------------------------------------------
// Sky footprint
// ---------------------------------------------------------------------------------------------

struct SkyFig<'a> {
    /// Points as (-RA unwrapped, Dec) so that RA grows to the left.
    pts: Vec<(f64, f64)>,
    total: usize,
    title: &'a str,
}

impl Figure for SkyFig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let ax = Axes {
            title: self.title,
            xlabel: "RA [deg]",
            ylabel: "Dec [deg]",
            x: padded_range(self.pts.iter().map(|p| p.0), 0.04).unwrap_or(0.0..1.0),
            y: {
                // Extra room on top keeps the legend off the footprint.
                let r = padded_range(self.pts.iter().map(|p| p.1), 0.05).unwrap_or(0.0..1.0);
                r.start..r.end + 0.15 * (r.end - r.start)
            },
        };
        let mut chart = cartesian(root, &ax)?;
        let fx = tick_fmt(ax.x.end - ax.x.start);
        let fy = tick_fmt(ax.y.end - ax.y.start);
        let ra_label = move |v: &f64| fx(&(-v).rem_euclid(360.0));
        chart
            .configure_mesh()
            .x_desc(ax.xlabel)
            .y_desc(ax.ylabel)
            .axis_desc_style(font(AXIS_DESC_PX))
            .label_style(font(TICK_PX))
            .x_labels(8)
            .y_labels(8)
            .x_label_formatter(&ra_label)
            .y_label_formatter(&fy)
            .bold_line_style(RGBColor(215, 215, 215))
            .light_line_style(RGBColor(240, 240, 240))
            .axis_style(BLACK.stroke_width(2))
            .draw()?;
        let dot = C_BLUE.mix(0.45).filled();
        let label = if self.pts.len() < self.total {
            format!("{} objects ({} shown)", self.total, self.pts.len())
        } else {
            format!("{} objects", self.total)
        };
        chart
            .draw_series(self.pts.iter().map(|&p| Circle::new(p, 2, dot)))?
            .label(label)
            .legend(move |(x, y)| Circle::new((x + 18, y), 5, C_BLUE.filled()));
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// Sky footprint: Dec against RA in degrees, RA increasing to the left as on the sky, a
/// footprint crossing RA = 0 drawn contiguously. More than [`SKY_MAX_POINTS`] objects are
/// subsampled with an even stride (deterministic).
pub fn sky_plot(stem: &Path, ra_deg: &[f64], dec_deg: &[f64], title: &str) -> Result<()> {
    const W: &str = "sky plot";
    same_len(W, ("ra", ra_deg.len()), ("dec", dec_deg.len()))?;
    let pts = finite_points(W, ra_deg, dec_deg)?;
    if let Some(p) = pts.iter().find(|p| p.1.abs() > 90.0) {
        return Err(Error::input(format!(
            "{W}: declination {} outside [-90, 90] degrees",
            p.1
        )));
    }
    let idx = subsample_indices(pts.len(), SKY_MAX_POINTS);
    let ra: Vec<f64> = idx.iter().map(|&i| pts[i].0).collect();
    let ra = unwrap_ra(&ra);
    let shown = idx.iter().zip(ra).map(|(&i, r)| (-r, pts[i].1)).collect();
    write_figure(
        stem,
        &SkyFig {
            pts: shown,
            total: pts.len(),
            title,
        },
    )
}

// ---------------------------------------------------------------------------------------------
// n(z)
// ---------------------------------------------------------------------------------------------

struct NzFig<'a> {
    edges: Vec<f64>,
    counts: Vec<f64>,
    weighted: bool,
    n_obj: usize,
    title: &'a str,
}

impl Figure for NzFig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let nb = self.counts.len();
        let dz = self.edges[1] - self.edges[0];
        let ylabel = if self.weighted {
            format!("weighted count per Δz = {dz:.3}")
        } else {
            format!("count per Δz = {dz:.3}")
        };
        let ymin = self.counts.iter().copied().fold(0.0, f64::min);
        let ymax = self.counts.iter().copied().fold(0.0, f64::max);
        let pad = 0.08 * (ymax - ymin).max(1e-300);
        let ax = Axes {
            title: self.title,
            xlabel: "redshift z",
            ylabel: &ylabel,
            x: padded_range([self.edges[0], self.edges[nb]], 0.03).unwrap_or(0.0..1.0),
            y: (ymin - if ymin < 0.0 { pad } else { 0.0 })..(ymax + pad),
        };
        let mut chart = cartesian(root, &ax)?;
        draw_mesh(&mut chart, &ax)?;
        let fill = C_SKY.mix(0.55).filled();
        chart
            .draw_series((0..nb).map(|i| {
                Rectangle::new(
                    [(self.edges[i], 0.0), (self.edges[i + 1], self.counts[i])],
                    fill,
                )
            }))?
            .label(format!("{} objects, {nb} bins", self.n_obj))
            .legend(move |(x, y)| Rectangle::new([(x, y - 8), (x + 36, y + 8)], fill));
        // Step outline so adjacent bins of equal height still read as a histogram.
        let mut step = vec![(self.edges[0], 0.0)];
        for i in 0..nb {
            step.push((self.edges[i], self.counts[i]));
            step.push((self.edges[i + 1], self.counts[i]));
        }
        step.push((self.edges[nb], 0.0));
        chart.draw_series(LineSeries::new(step, C_BLUE.stroke_width(2)))?;
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// Histogram of redshifts (optionally weighted) in `n_bins` equal bins spanning the finite
/// redshifts. Objects with a NaN redshift or weight are skipped.
pub fn nz_plot(
    stem: &Path,
    z: &[f64],
    weights: Option<&[f64]>,
    n_bins: usize,
    title: &str,
) -> Result<()> {
    const W: &str = "n(z) plot";
    if n_bins == 0 || n_bins > 100_000 {
        return Err(Error::input(format!(
            "{W}: n_bins = {n_bins} must be between 1 and 100000"
        )));
    }
    let ones;
    let w = match weights {
        Some(w) => {
            same_len(W, ("z", z.len()), ("weights", w.len()))?;
            w
        }
        None => {
            ones = vec![1.0; z.len()];
            &ones
        }
    };
    let pts = finite_points(W, z, w)?;
    let range = padded_range(pts.iter().map(|p| p.0), 0.0).unwrap_or(0.0..1.0);
    let counts = histogram(&pts, range.start, range.end, n_bins);
    let edges = (0..=n_bins)
        .map(|i| range.start + (range.end - range.start) * i as f64 / n_bins as f64)
        .collect();
    write_figure(
        stem,
        &NzFig {
            edges,
            counts,
            weighted: weights.is_some(),
            n_obj: pts.len(),
            title,
        },
    )
}

// ---------------------------------------------------------------------------------------------
// Several xi curves
// ---------------------------------------------------------------------------------------------

struct MultiXiFig<'a> {
    curves: Vec<(&'a str, &'a [f64], Vec<f64>)>,
    title: &'a str,
}

impl Figure for MultiXiFig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let ax = Axes {
            title: self.title,
            xlabel: "s [Mpc/h]",
            ylabel: "s² ξ(s) [(Mpc/h)²]",
            x: padded_range(self.curves.iter().flat_map(|c| c.1.iter().copied()), 0.04)
                .unwrap_or(0.0..1.0),
            y: padded_range(self.curves.iter().flat_map(|c| c.2.iter().copied()), 0.08)
                .unwrap_or(0.0..1.0),
        };
        let mut chart = cartesian(root, &ax)?;
        draw_mesh(&mut chart, &ax)?;
        for (k, (label, s, y)) in self.curves.iter().enumerate() {
            let colour = PALETTE[k % PALETTE.len()];
            // Alternate solid and dashed once the palette repeats.
            let dashed = (k / PALETTE.len()) % 2 == 1;
            draw_curve(
                &mut chart,
                s,
                y,
                colour.stroke_width(3),
                dashed,
                Some(label),
            )?;
            chart.draw_series(
                s.iter()
                    .zip(y)
                    .filter(|(a, b)| a.is_finite() && b.is_finite())
                    .map(|(a, b)| Circle::new((*a, *b), 4, colour.filled())),
            )?;
        }
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// s² ξ(s) of several measurements on one panel, one colour per curve with its label in the
/// legend (for example the same data under different fiducial cosmologies).
pub fn multi_xi_plot(
    stem: &Path,
    curves: &[(String, Vec<f64>, Vec<f64>)],
    title: &str,
) -> Result<()> {
    const W: &str = "multi xi plot";
    if curves.is_empty() {
        return Err(Error::input(format!("{W}: no curves")));
    }
    let mut out = Vec::with_capacity(curves.len());
    let mut any_finite = false;
    for (label, s, xi) in curves {
        same_len(
            W,
            (&format!("curve '{label}' s"), s.len()),
            ("xi", xi.len()),
        )?;
        any_finite |= s
            .iter()
            .zip(xi)
            .any(|(a, b)| a.is_finite() && b.is_finite());
        let y = s.iter().zip(xi).map(|(a, b)| a * a * b).collect();
        out.push((label.as_str(), s.as_slice(), y));
    }
    if !any_finite {
        return Err(Error::input(format!(
            "{W}: no curve has a finite data point"
        )));
    }
    write_figure(stem, &MultiXiFig { curves: out, title })
}

// ---------------------------------------------------------------------------------------------
// Generic points with asymmetric error bars
// ---------------------------------------------------------------------------------------------

struct XyFig<'a> {
    pts: Vec<(f64, f64, f64, f64)>,
    xlabel: &'a str,
    ylabel: &'a str,
    title: &'a str,
    reference: Option<f64>,
}

impl Figure for XyFig<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let ys = self
            .pts
            .iter()
            .flat_map(|p| {
                let lo = if p.2.is_finite() { p.2 } else { 0.0 };
                let hi = if p.3.is_finite() { p.3 } else { 0.0 };
                [p.1 - lo, p.1 + hi]
            })
            .chain(self.reference.filter(|r| r.is_finite()));
        let ax = Axes {
            title: self.title,
            xlabel: self.xlabel,
            ylabel: self.ylabel,
            x: padded_range(self.pts.iter().map(|p| p.0), 0.08).unwrap_or(0.0..1.0),
            y: padded_range(ys, 0.12).unwrap_or(0.0..1.0),
        };
        let mut chart = cartesian(root, &ax)?;
        draw_mesh(&mut chart, &ax)?;
        if let Some(r) = self.reference.filter(|r| r.is_finite()) {
            draw_curve(
                &mut chart,
                &[ax.x.start, ax.x.end],
                &[r, r],
                C_GREY.stroke_width(2),
                true,
                Some(&format!("reference = {}", short(r))),
            )?;
        }
        draw_points_with_errors(&mut chart, &self.pts, C_BLUE, "measurement")?;
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// Points with asymmetric 1σ error bars (`y - yerr_lo` to `y + yerr_hi`) and an optional
/// horizontal reference line, e.g. α or D_V/r_d against the Ω_k of the fiducial cosmology.
#[allow(clippy::too_many_arguments)]
pub fn xy_errorbar_plot(
    stem: &Path,
    x: &[f64],
    y: &[f64],
    yerr_lo: &[f64],
    yerr_hi: &[f64],
    xlabel: &str,
    ylabel: &str,
    title: &str,
    reference_line: Option<f64>,
) -> Result<()> {
    const W: &str = "error-bar plot";
    same_len(W, ("x", x.len()), ("y", y.len()))?;
    same_len(W, ("x", x.len()), ("yerr_lo", yerr_lo.len()))?;
    same_len(W, ("x", x.len()), ("yerr_hi", yerr_hi.len()))?;
    finite_points(W, x, y)?;
    for (name, e) in [("yerr_lo", yerr_lo), ("yerr_hi", yerr_hi)] {
        if let Some(i) = e.iter().position(|v| *v < 0.0) {
            return Err(Error::input(format!(
                "{W}: {name}[{i}] = {} is negative",
                e[i]
            )));
        }
    }
    let pts = (0..x.len())
        .filter(|&i| x[i].is_finite() && y[i].is_finite())
        .map(|i| (x[i], y[i], yerr_lo[i], yerr_hi[i]))
        .collect();
    write_figure(
        stem,
        &XyFig {
            pts,
            xlabel,
            ylabel,
            title,
            reference: reference_line,
        },
    )
}

// ---------------------------------------------------------------------------------------------
// 2-D posterior with the x marginal
// ---------------------------------------------------------------------------------------------

struct PosteriorFig<'a> {
    pts: Vec<(f64, f64)>,
    xlabel: &'a str,
    ylabel: &'a str,
    title: &'a str,
}

impl Figure for PosteriorFig<'_> {
    fn size(&self) -> (u32, u32) {
        (1000, 900)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult
    where
        DB::ErrorType: 'static,
    {
        let n = self.pts.len();
        let xr = padded_range(self.pts.iter().map(|p| p.0), 0.05).unwrap_or(0.0..1.0);
        let yr = padded_range(self.pts.iter().map(|p| p.1), 0.05).unwrap_or(0.0..1.0);
        let nb = ((n as f64).sqrt() / 3.0).clamp(10.0, 50.0) as usize;
        let mut xs: Vec<f64> = self.pts.iter().map(|p| p.0).collect();
        xs.sort_by(|a, b| a.total_cmp(b));
        let (q16, q50, q84) = (
            quantile_sorted(&xs, 0.158_655),
            quantile_sorted(&xs, 0.5),
            quantile_sorted(&xs, 0.841_345),
        );

        let root = if self.title.is_empty() {
            root.clone()
        } else {
            root.margin(12, 0, 0, 0)
                .titled(self.title, font(TITLE_PX))?
        };
        let (top, bottom) = root.split_vertically(260);

        // Marginal of x: density-normalised histogram with the central 68% interval shaded.
        let width = (xr.end - xr.start) / nb as f64;
        let hx = histogram(
            &self.pts.iter().map(|p| (p.0, 1.0)).collect::<Vec<_>>(),
            xr.start,
            xr.end,
            nb,
        );
        let dens: Vec<f64> = hx.iter().map(|c| c / (n as f64 * width)).collect();
        let dmax = dens.iter().copied().fold(0.0, f64::max).max(1e-300);
        let mut top_chart = ChartBuilder::on(&top)
            .margin(20)
            .margin_right(35)
            .margin_bottom(5)
            .x_label_area_size(10)
            .y_label_area_size(105)
            .build_cartesian_2d(xr.clone(), 0.0..1.5 * dmax)?;
        let fy_top = tick_fmt(1.5 * dmax);
        top_chart
            .configure_mesh()
            .x_labels(8)
            .y_labels(4)
            .x_label_formatter(&|_| String::new())
            .y_label_formatter(&fy_top)
            .y_desc("density")
            .axis_desc_style(font(AXIS_DESC_PX))
            .label_style(font(TICK_PX))
            .bold_line_style(RGBColor(215, 215, 215))
            .light_line_style(RGBColor(240, 240, 240))
            .axis_style(BLACK.stroke_width(2))
            .draw()?;
        let band = C_SKY.mix(0.3);
        top_chart
            .draw_series(std::iter::once(Rectangle::new(
                [(q16, 0.0), (q84, 1.5 * dmax)],
                band.filled(),
            )))?
            .label(format!(
                "median {} (68%: {} – {})",
                tick_fmt(q84 - q16)(&q50),
                tick_fmt(q84 - q16)(&q16),
                tick_fmt(q84 - q16)(&q84)
            ))
            .legend(move |(x, y)| Rectangle::new([(x, y - 8), (x + 36, y + 8)], band.filled()));
        let mut step = vec![(xr.start, 0.0)];
        for (i, d) in dens.iter().enumerate() {
            step.push((xr.start + i as f64 * width, *d));
            step.push((xr.start + (i + 1) as f64 * width, *d));
        }
        step.push((xr.end, 0.0));
        top_chart.draw_series(LineSeries::new(step, C_BLUE.stroke_width(3)))?;
        top_chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .margin(8)
            .legend_area_size(45)
            .label_font(font(20))
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .draw()?;

        // Joint distribution: 2-D histogram, cells shaded by highest-density credible region.
        let ax = Axes {
            title: "",
            xlabel: self.xlabel,
            ylabel: self.ylabel,
            x: xr.clone(),
            y: yr.clone(),
        };
        let mut chart = ChartBuilder::on(&bottom)
            .margin(20)
            .margin_right(35)
            .margin_top(5)
            .x_label_area_size(75)
            .y_label_area_size(105)
            .build_cartesian_2d(xr.clone(), yr.clone())?;
        draw_mesh(&mut chart, &ax)?;
        let (wx, wy) = (
            (xr.end - xr.start) / nb as f64,
            (yr.end - yr.start) / nb as f64,
        );
        let mut counts = vec![0.0; nb * nb];
        for &(x, y) in &self.pts {
            let i = (((x - xr.start) / wx) as usize).min(nb - 1);
            let j = (((y - yr.start) / wy) as usize).min(nb - 1);
            counts[j * nb + i] += 1.0;
        }
        let th = hpd_thresholds(&counts, &[0.6827, 0.9545]);
        let (c68, c95, c_out) = (
            RGBColor(8, 69, 148),
            RGBColor(107, 174, 214),
            RGBColor(222, 235, 247),
        );
        chart.draw_series((0..nb * nb).filter(|&k| counts[k] > 0.0).map(|k| {
            let (i, j) = (k % nb, k / nb);
            let c = if counts[k] >= th[0] {
                c68
            } else if counts[k] >= th[1] {
                c95
            } else {
                c_out
            };
            let x0 = xr.start + i as f64 * wx;
            let y0 = yr.start + j as f64 * wy;
            Rectangle::new([(x0, y0), (x0 + wx, y0 + wy)], c.filled())
        }))?;
        for (c, l) in [(c68, "68% region"), (c95, "95% region"), (c_out, "samples")] {
            chart
                .draw_series(std::iter::empty::<Rectangle<(f64, f64)>>())?
                .label(l)
                .legend(move |(x, y)| Rectangle::new([(x, y - 8), (x + 36, y + 8)], c.filled()));
        }
        let ymed = {
            let mut ys: Vec<f64> = self.pts.iter().map(|p| p.1).collect();
            ys.sort_by(|a, b| a.total_cmp(b));
            quantile_sorted(&ys, 0.5)
        };
        chart
            .draw_series(std::iter::once(
                EmptyElement::at((q50, ymed))
                    + PathElement::new(vec![(-9, 0), (9, 0)], C_VERMILLION.stroke_width(3))
                    + PathElement::new(vec![(0, -9), (0, 9)], C_VERMILLION.stroke_width(3)),
            ))?
            .label("medians")
            .legend(move |(x, y)| {
                EmptyElement::at((x + 18, y))
                    + PathElement::new(vec![(-9, 0), (9, 0)], C_VERMILLION.stroke_width(3))
                    + PathElement::new(vec![(0, -9), (0, 9)], C_VERMILLION.stroke_width(3))
            });
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// Joint posterior of two parameters from MCMC samples: a 2-D histogram shaded by the 68% and
/// 95% highest-density regions, with the marginal density of x (median and central 68%
/// interval) in a panel above sharing the x axis.
pub fn posterior_plot(
    stem: &Path,
    samples_x: &[f64],
    samples_y: &[f64],
    xlabel: &str,
    ylabel: &str,
    title: &str,
) -> Result<()> {
    const W: &str = "posterior plot";
    same_len(
        W,
        ("samples_x", samples_x.len()),
        ("samples_y", samples_y.len()),
    )?;
    let pts = finite_points(W, samples_x, samples_y)?;
    write_figure(
        stem,
        &PosteriorFig {
            pts,
            xlabel,
            ylabel,
            title,
        },
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    /// PNG signature and IHDR layout (PNG specification, sections 5.2 and 11.2.2).
    fn check_png(path: &Path, w: u32, h: u32) {
        let b = std::fs::read(path).unwrap();
        assert_eq!(&b[..8], &[137, 80, 78, 71, 13, 10, 26, 10], "PNG signature");
        assert_eq!(&b[12..16], b"IHDR");
        let be = |o: usize| u32::from_be_bytes([b[o], b[o + 1], b[o + 2], b[o + 3]]);
        assert_eq!((be(16), be(20)), (w, h), "PNG dimensions");
        assert!(b.len() > 5000, "PNG suspiciously small: {} bytes", b.len());
    }

    fn check_svg(path: &Path, texts: &[&str]) {
        let s = std::fs::read_to_string(path).unwrap();
        assert!(s.contains("<svg"), "no <svg> element");
        assert!(s.trim_end().ends_with("</svg>"), "SVG not closed");
        for t in texts {
            assert!(s.contains(t), "SVG lacks text {t:?}");
        }
    }

    /// Exactly the two final files, nothing temporary.
    fn check_dir_only(dir: &Path, names: &[&str]) {
        let mut found: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        found.sort();
        let mut want: Vec<String> = names.iter().map(|s| s.to_string()).collect();
        want.sort();
        assert_eq!(found, want);
    }

    fn check_outputs(dir: &Path, stem: &str, size: (u32, u32), texts: &[&str]) {
        check_png(&dir.join(format!("{stem}.png")), size.0, size.1);
        check_svg(&dir.join(format!("{stem}.svg")), texts);
        check_dir_only(dir, &[&format!("{stem}.png"), &format!("{stem}.svg")]);
    }

    fn assert_input_err(r: Result<()>, dir: &Path) {
        match r {
            Err(Error::Input(_)) => {}
            other => panic!("expected an input error, got {other:?}"),
        }
        check_dir_only(dir, &[]);
    }

    /// Synthetic s² ξ with a damped acoustic bump near 102 Mpc/h (shape invented for display;
    /// values typical of galaxy surveys, from memory).
    fn fake_s2xi(s: f64, bump: f64) -> f64 {
        60.0 * (-s / 80.0).exp() + bump * (-(s - 102.0).powi(2) / (2.0 * 9.0 * 9.0)).exp() - 5.0
    }

    struct XiData {
        s: Vec<f64>,
        xi: Vec<f64>,
        err: Vec<f64>,
        ms: Vec<f64>,
        model: Vec<f64>,
        nw: Vec<f64>,
    }

    fn xi_data() -> XiData {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let noise = Normal::new(0.0, 1.0).unwrap();
        let s: Vec<f64> = (0..25).map(|i| 42.5 + 5.0 * i as f64).collect();
        let err: Vec<f64> = s.iter().map(|s| 3.5 / (s * s)).collect();
        let xi = s
            .iter()
            .zip(&err)
            .map(|(s, e)| fake_s2xi(*s, 18.0) / (s * s) + e * noise.sample(&mut rng))
            .collect();
        let ms: Vec<f64> = (0..=130).map(|i| 40.0 + i as f64).collect();
        let model = ms.iter().map(|s| fake_s2xi(*s, 18.0) / (s * s)).collect();
        let nw = ms.iter().map(|s| fake_s2xi(*s, 0.0) / (s * s)).collect();
        XiData {
            s,
            xi,
            err,
            ms,
            model,
            nw,
        }
    }

    fn draw_xi(dir: &Path) -> Result<()> {
        let d = xi_data();
        xi_plot(
            &dir.join("xi"),
            &d.s,
            &d.xi,
            &d.err,
            Some((&d.ms, &d.model)),
            Some((&d.ms, &d.nw)),
            "Lantern Bay LRG, 0.4 < z < 0.7",
        )
    }

    fn draw_chi2(dir: &Path) -> Result<()> {
        let alpha: Vec<f64> = (0..=120).map(|i| 0.85 + 0.0025 * i as f64).collect();
        let chi2: Vec<f64> = alpha
            .iter()
            .map(|a| 18.0 + ((a - 1.012) / 0.018).powi(2))
            .collect();
        let nw: Vec<f64> = alpha.iter().map(|a| 27.0 + 3.0 * (a - 1.0)).collect();
        chi2_plot(
            &dir.join("chi2"),
            &alpha,
            &chi2,
            Some(&nw),
            1.012,
            (0.994, 1.030),
            "BAO fit, flat fiducial",
        )
    }

    fn draw_corr(dir: &Path) -> Result<()> {
        let n = 25;
        let s: Vec<f64> = (0..n).map(|i| 42.5 + 5.0 * i as f64).collect();
        let mut c = vec![0.0; n * n];
        for i in 0..n {
            for j in 0..n {
                let d = (i as f64 - j as f64).abs();
                c[i * n + j] = (-d / 4.0).exp() - if d > 10.0 { 0.15 } else { 0.0 };
            }
        }
        correlation_matrix_plot(&dir.join("corr"), &c, n, &s, "Jackknife correlation")
    }

    fn sky_data(n: usize) -> (Vec<f64>, Vec<f64>) {
        // A cap straddling RA = 0: RA in [340, 360) U [0, 25), Dec in [-5, 30].
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        (0..n)
            .map(|_| {
                let ra: f64 = (rng.gen::<f64>() * 45.0 - 20.0).rem_euclid(360.0);
                let sd = rng.gen::<f64>() * (30f64.to_radians().sin() + 5f64.to_radians().sin())
                    - 5f64.to_radians().sin();
                (ra, sd.asin().to_degrees())
            })
            .unzip()
    }

    fn draw_sky(dir: &Path) -> Result<()> {
        let (ra, dec) = sky_data(30_000);
        sky_plot(&dir.join("sky"), &ra, &dec, "Lantern Bay footprint")
    }

    fn nz_data() -> (Vec<f64>, Vec<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let g = Normal::new(0.55, 0.07).unwrap();
        (0..20_000)
            .map(|_| (g.sample(&mut rng), 0.5 + rng.gen::<f64>()))
            .filter(|(z, _)| (0.4..0.7).contains(z))
            .unzip()
    }

    fn draw_nz(dir: &Path) -> Result<()> {
        let (z, w) = nz_data();
        nz_plot(&dir.join("nz"), &z, Some(&w), 30, "Redshift distribution")
    }

    fn draw_multi(dir: &Path) -> Result<()> {
        let s: Vec<f64> = (0..25).map(|i| 42.5 + 5.0 * i as f64).collect();
        let curves: Vec<(String, Vec<f64>, Vec<f64>)> = [-0.1, 0.0, 0.1]
            .iter()
            .map(|ok: &f64| {
                let shift = 1.0 + 0.3 * ok;
                let xi = s
                    .iter()
                    .map(|s| fake_s2xi(s / shift, 18.0) / (s * s))
                    .collect();
                (format!("fiducial Ω_k = {ok:+.1}"), s.clone(), xi)
            })
            .collect();
        multi_xi_plot(&dir.join("multi"), &curves, "Peak position vs fiducial")
    }

    fn draw_xy(dir: &Path) -> Result<()> {
        let ok = [-0.1, -0.05, 0.0, 0.05, 0.1];
        let y: Vec<f64> = ok.iter().map(|o| 1.0 - 0.3 * o).collect();
        let lo = [0.017, 0.018, 0.018, 0.019, 0.021];
        let hi = [0.019, 0.019, 0.020, 0.021, 0.022];
        xy_errorbar_plot(
            &dir.join("xy"),
            &ok,
            &y,
            &lo,
            &hi,
            "Ω_k of fiducial",
            "α",
            "Dilation vs fiducial curvature",
            Some(1.0),
        )
    }

    fn draw_posterior(dir: &Path) -> Result<()> {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let g = Normal::new(0.0, 1.0).unwrap();
        let (x, y): (Vec<f64>, Vec<f64>) = (0..20_000)
            .map(|_| {
                let (a, b): (f64, f64) = (g.sample(&mut rng), g.sample(&mut rng));
                (0.01 + 0.04 * a, 0.69 + 0.012 * (0.8 * a + 0.6 * b))
            })
            .unzip();
        posterior_plot(
            &dir.join("post"),
            &x,
            &y,
            "Ω_k",
            "Ω_Λ",
            "Curvature posterior",
        )
    }

    #[test]
    fn xi_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_xi(t.path()).unwrap();
        check_outputs(
            t.path(),
            "xi",
            (WIDTH, HEIGHT),
            &[
                "s [Mpc/h]",
                "s² ξ(s) [(Mpc/h)²]",
                "best-fit model",
                "no-wiggle model",
            ],
        );
    }

    #[test]
    fn chi2_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_chi2(t.path()).unwrap();
        check_outputs(
            t.path(),
            "chi2",
            (WIDTH, HEIGHT),
            &["α (dilation)", "χ²", "Δχ² = 1"],
        );
    }

    #[test]
    fn correlation_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_corr(t.path()).unwrap();
        check_outputs(t.path(), "corr", (1000, 820), &["s [Mpc/h]", "correlation"]);
    }

    #[test]
    fn sky_plot_writes_both_formats_and_subsamples() {
        let t = tempfile::tempdir().unwrap();
        draw_sky(t.path()).unwrap();
        check_outputs(
            t.path(),
            "sky",
            (WIDTH, HEIGHT),
            &["RA [deg]", "Dec [deg]", "30000 objects (20000 shown)"],
        );
        // One <circle> per shown point plus the legend marker.
        let svg = std::fs::read_to_string(t.path().join("sky.svg")).unwrap();
        assert_eq!(svg.matches("<circle").count(), SKY_MAX_POINTS + 1);
    }

    #[test]
    fn nz_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_nz(t.path()).unwrap();
        check_outputs(
            t.path(),
            "nz",
            (WIDTH, HEIGHT),
            &["redshift z", "weighted count"],
        );
    }

    #[test]
    fn multi_xi_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_multi(t.path()).unwrap();
        check_outputs(
            t.path(),
            "multi",
            (WIDTH, HEIGHT),
            &["s [Mpc/h]", "fiducial Ω_k = -0.1", "fiducial Ω_k = +0.1"],
        );
    }

    #[test]
    fn xy_errorbar_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_xy(t.path()).unwrap();
        check_outputs(
            t.path(),
            "xy",
            (WIDTH, HEIGHT),
            &["Ω_k of fiducial", "reference = 1"],
        );
    }

    #[test]
    fn posterior_plot_writes_both_formats() {
        let t = tempfile::tempdir().unwrap();
        draw_posterior(t.path()).unwrap();
        check_outputs(
            t.path(),
            "post",
            (1000, 900),
            &["Ω_k", "Ω_Λ", "68% region", "density"],
        );
    }

    #[test]
    fn empty_and_nan_inputs_are_input_errors() {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        let st = d.join("bad");
        let nan = [f64::NAN; 4];
        let e: [f64; 0] = [];
        assert_input_err(xi_plot(&st, &e, &e, &e, None, None, ""), d);
        assert_input_err(xi_plot(&st, &nan, &nan, &nan, None, None, ""), d);
        assert_input_err(chi2_plot(&st, &e, &e, None, 1.0, (0.9, 1.1), ""), d);
        assert_input_err(chi2_plot(&st, &nan, &nan, None, 1.0, (0.9, 1.1), ""), d);
        assert_input_err(correlation_matrix_plot(&st, &e, 0, &e, ""), d);
        assert_input_err(correlation_matrix_plot(&st, &nan, 2, &[1.0, 2.0], ""), d);
        assert_input_err(sky_plot(&st, &e, &e, ""), d);
        assert_input_err(sky_plot(&st, &nan, &nan, ""), d);
        assert_input_err(nz_plot(&st, &e, None, 10, ""), d);
        assert_input_err(nz_plot(&st, &nan, None, 10, ""), d);
        assert_input_err(multi_xi_plot(&st, &[], ""), d);
        let c = vec![("a".to_string(), nan.to_vec(), nan.to_vec())];
        assert_input_err(multi_xi_plot(&st, &c, ""), d);
        assert_input_err(xy_errorbar_plot(&st, &e, &e, &e, &e, "x", "y", "", None), d);
        assert_input_err(
            xy_errorbar_plot(&st, &nan, &nan, &nan, &nan, "x", "y", "", None),
            d,
        );
        assert_input_err(posterior_plot(&st, &e, &e, "x", "y", ""), d);
        assert_input_err(posterior_plot(&st, &nan, &nan, "x", "y", ""), d);
    }

    #[test]
    fn inconsistent_inputs_are_input_errors() {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        let st = d.join("bad");
        let a = [1.0, 2.0, 3.0];
        let b = [1.0, 2.0];
        assert_input_err(xi_plot(&st, &a, &b, &a, None, None, ""), d);
        assert_input_err(xi_plot(&st, &a, &a, &[0.1, -0.1, 0.1], None, None, ""), d);
        assert_input_err(xi_plot(&st, &a, &a, &a, Some((&a, &b)), None, ""), d);
        assert_input_err(
            correlation_matrix_plot(&st, &[1.0; 4], 2, &[2.0, 1.0], ""),
            d,
        );
        assert_input_err(
            correlation_matrix_plot(&st, &[1.0; 3], 2, &[1.0, 2.0], ""),
            d,
        );
        assert_input_err(sky_plot(&st, &a, &[0.0, 95.0, 0.0], ""), d);
        assert_input_err(nz_plot(&st, &a, None, 0, ""), d);
        assert_input_err(nz_plot(&st, &a, Some(&b), 5, ""), d);
        assert_input_err(posterior_plot(&st, &a, &b, "x", "y", ""), d);
    }

    #[test]
    fn partial_nan_is_skipped() {
        let t = tempfile::tempdir().unwrap();
        let s = [50.0, f64::NAN, 100.0, 150.0];
        let xi = [0.01, 0.02, f64::NAN, 0.0001];
        let err = [0.001, 0.001, 0.001, f64::NAN];
        xi_plot(&t.path().join("p"), &s, &xi, &err, None, None, "").unwrap();
        check_outputs(t.path(), "p", (WIDTH, HEIGHT), &["s [Mpc/h]"]);
    }

    #[test]
    fn unwritable_target_is_resource_error_and_leaves_nothing() {
        let t = tempfile::tempdir().unwrap();
        // The stem's folder does not exist: writing must fail without panicking.
        let r = sky_plot(&t.path().join("missing/sky"), &[10.0], &[5.0], "");
        assert!(matches!(r, Err(Error::Resource(_))), "{r:?}");
        check_dir_only(t.path(), &[]);
        // A directory sitting where the final PNG should go: the rename fails.
        std::fs::create_dir(t.path().join("sky.png")).unwrap();
        let r = sky_plot(&t.path().join("sky"), &[10.0], &[5.0], "");
        assert!(matches!(r, Err(Error::Resource(_))), "{r:?}");
        check_dir_only(t.path(), &["sky.png"]);
    }

    #[test]
    fn stem_keeps_dots_and_overwrites() {
        let t = tempfile::tempdir().unwrap();
        let st = t.path().join("xi.fid-ok+0.05");
        for _ in 0..2 {
            xi_plot(&st, &[100.0], &[0.003], &[0.0005], None, None, "").unwrap();
        }
        check_dir_only(t.path(), &["xi.fid-ok+0.05.png", "xi.fid-ok+0.05.svg"]);
    }

    #[test]
    fn output_is_deterministic() {
        let (a, b) = (tempfile::tempdir().unwrap(), tempfile::tempdir().unwrap());
        draw_sky(a.path()).unwrap();
        draw_sky(b.path()).unwrap();
        for f in ["sky.png", "sky.svg"] {
            let x = std::fs::read(a.path().join(f)).unwrap();
            let y = std::fs::read(b.path().join(f)).unwrap();
            assert!(x == y, "{f} differs between identical runs");
        }
    }

    #[test]
    fn helpers_match_brute_force() {
        // Edges from centres: uniform bins of width 5 centred on 42.5 + 5 i.
        let c: Vec<f64> = (0..4).map(|i| 42.5 + 5.0 * i as f64).collect();
        assert_eq!(edges_from_centres(&c), vec![40.0, 45.0, 50.0, 55.0, 60.0]);
        // Weighted histogram against a direct count (last bin closed).
        let vals = [
            (0.0, 1.0),
            (0.24, 2.0),
            (0.25, 3.0),
            (0.99, 4.0),
            (1.0, 5.0),
            (1.5, 9.0),
        ];
        assert_eq!(histogram(&vals, 0.0, 1.0, 4), vec![3.0, 3.0, 0.0, 9.0]);
        // Quantiles by linear interpolation.
        let q = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!(quantile_sorted(&q, 0.5), 3.0);
        assert!((quantile_sorted(&q, 0.125) - 1.5).abs() < 1e-12);
        // HPD thresholds: counts 5,3,1,1 -> 68% of 10 needs 5+3, 95% needs all.
        assert_eq!(
            hpd_thresholds(&[1.0, 5.0, 1.0, 3.0], &[0.68, 0.95]),
            vec![3.0, 1.0]
        );
        // Colour map ends and centre.
        assert_eq!(diverging(-1.0), RGBColor(33, 102, 172));
        assert_eq!(diverging(0.0), RGBColor(247, 247, 247));
        assert_eq!(diverging(1.0), RGBColor(178, 24, 43));
        assert_eq!(diverging(7.0), diverging(1.0));
        // RA unwrapping: a cap across RA = 0 becomes one interval of width 20.
        let u = unwrap_ra(&[350.0, 355.0, 0.0, 5.0, 10.0]);
        assert_eq!(u, vec![-10.0, -5.0, 0.0, 5.0, 10.0]);
        let u = unwrap_ra(&[100.0, 120.0, 140.0]);
        assert_eq!(u, vec![100.0, 120.0, 140.0]);
        // Subsampling: at most max, strictly increasing, deterministic.
        let idx = subsample_indices(50_001, 20_000);
        assert_eq!(idx.len(), 20_000);
        assert!(idx.windows(2).all(|w| w[0] < w[1]) && *idx.last().unwrap() < 50_001);
        assert_eq!(subsample_indices(10, 20).len(), 10);
        // Padded ranges ignore NaN and widen degenerate spans.
        assert_eq!(padded_range([f64::NAN, 1.0, 3.0], 0.5), Some(0.0..4.0));
        assert_eq!(padded_range([2.0, 2.0], 0.1), Some(1.8..2.2));
        assert_eq!(padded_range([f64::NAN], 0.1), None);
        // Tick labels: decimals follow the span; no "-0".
        assert_eq!(tick_fmt(0.3)(&0.85), "0.85");
        assert_eq!(tick_fmt(40.0)(&30.0), "30");
        assert_eq!(tick_fmt(0.3)(&-0.0001), "0.00");
        assert_eq!(
            (short(1.0), short(0.69), short(-1e-9)),
            ("1".into(), "0.69".into(), "0".into())
        );
        // Segments split at NaN.
        let s = segments(&[1.0, 2.0, f64::NAN, 4.0], &[1.0, 2.0, 3.0, 4.0]);
        assert_eq!(s, vec![vec![(1.0, 1.0), (2.0, 2.0)], vec![(4.0, 4.0)]]);
    }

    /// Writes every plot type with realistic fake data into $RINGSCALE_PLOT_GALLERY for
    /// visual inspection (run with --ignored).
    #[test]
    #[ignore]
    fn gallery() {
        let dir = PathBuf::from(std::env::var("RINGSCALE_PLOT_GALLERY").unwrap());
        std::fs::create_dir_all(&dir).unwrap();
        draw_xi(&dir).unwrap();
        draw_chi2(&dir).unwrap();
        draw_corr(&dir).unwrap();
        draw_sky(&dir).unwrap();
        draw_nz(&dir).unwrap();
        draw_multi(&dir).unwrap();
        draw_xy(&dir).unwrap();
        draw_posterior(&dir).unwrap();
    }
}
