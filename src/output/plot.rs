//! Plots (plotters): delay histograms, window sweeps, correlations, visibility fits; PNG or
//! SVG by the final path's extension. Each figure is rendered into memory (an RGB buffer
//! encoded as PNG, or an SVG string) and written atomically, so no partial file ever appears.

use crate::analysis::chsh::{ChshReport, ChshSet};
use crate::analysis::visibility::{AnglePoint, VisibilityFit};
use crate::engine::tables::{ScanResult, SweepTable};
use crate::sys::atomic;
use crate::{Error, Result};
use plotters::chart::MeshStyle;
use plotters::coord::ranged1d::{AsRangedCoord, Ranged, ValueFormatter};
use plotters::coord::{CoordTranslate, Shift};
use plotters::prelude::*;
use plotters::style::FontStyle;
use std::path::Path;
use std::sync::OnceLock;

/// Image size in pixels (PNG) or user units (SVG).
pub const SIZE: (u32, u32) = (1000, 640);

// A calm palette of our own: slate blue, sage, ochre, clay, pine, graphite, pale grid.
const SLATE: RGBColor = RGBColor(52, 93, 128);
const SAGE: RGBColor = RGBColor(96, 148, 120);
const OCHRE: RGBColor = RGBColor(196, 146, 58);
const CLAY: RGBColor = RGBColor(176, 92, 86);
const PINE: RGBColor = RGBColor(34, 96, 70);
const GRAPHITE: RGBColor = RGBColor(64, 68, 76);
const GRID: RGBColor = RGBColor(226, 229, 234);
const FONT: &str = "sans-serif";

type Drawn = std::result::Result<(), Box<dyn std::error::Error>>;

/// A figure that can draw itself on any plotters backend.
trait Figure {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Drawn
    where
        DB::ErrorType: 'static;
}

/// Register the bundled DejaVu Sans once (plotters is built with ab_glyph, without ttf).
fn ensure_font() -> Result<()> {
    static DONE: OnceLock<bool> = OnceLock::new();
    let ok = *DONE.get_or_init(|| {
        plotters::style::register_font(FONT, FontStyle::Normal, include_bytes!("../../assets/DejaVuSans.ttf")).is_ok()
    });
    if ok {
        Ok(())
    } else {
        Err(Error::Output { path: "assets/DejaVuSans.ttf".into(), message: "bundled font did not load".into() })
    }
}

/// Render `fig` into memory in the format named by `path`'s extension, then write atomically.
fn save(fig: &impl Figure, path: &Path, force: bool) -> Result<()> {
    ensure_font()?;
    let ext = path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase());
    let fail = |e: Box<dyn std::error::Error>| Error::Output { path: path.to_path_buf(), message: e.to_string() };
    let bytes = match ext.as_deref() {
        Some("svg") => {
            let mut s = String::new();
            fig.draw(&SVGBackend::with_string(&mut s, SIZE).into_drawing_area()).map_err(fail)?;
            s.into_bytes()
        }
        Some("png") => {
            let mut rgb = vec![0u8; (SIZE.0 * SIZE.1 * 3) as usize];
            fig.draw(&BitMapBackend::with_buffer(&mut rgb, SIZE).into_drawing_area()).map_err(fail)?;
            encode_png(&rgb, SIZE).map_err(|e| fail(e.into()))?
        }
        _ => {
            return Err(Error::Usage(format!(
                "{}: plot format is chosen by extension; expected .png or .svg",
                path.display()
            )))
        }
    };
    atomic::write_bytes(path, &bytes, force)
}

fn encode_png(rgb: &[u8], (w, h): (u32, u32)) -> std::result::Result<Vec<u8>, png::EncodingError> {
    let mut out = Vec::new();
    let mut enc = png::Encoder::new(&mut out, w, h);
    enc.set_color(png::ColorType::Rgb);
    enc.set_depth(png::BitDepth::Eight);
    enc.write_header()?.write_image_data(rgb)?;
    Ok(out)
}

/// Time axis unit for a span: ns above 20 ns, else ps. Returns (ps per unit, name).
fn time_unit(span_ps: f64) -> (f64, &'static str) {
    if span_ps >= 20_000.0 {
        (1000.0, "ns")
    } else {
        (1.0, "ps")
    }
}

/// A short text box (one line per entry) at pixel offset `at` inside `area`.
fn text_box<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, at: (i32, i32), lines: &[String]) -> Drawn
where
    DB::ErrorType: 'static,
{
    let h = 20 * lines.len() as i32 + 10;
    let w = 12 + 8 * lines.iter().map(|l| l.chars().count()).max().unwrap_or(0) as i32;
    area.draw(&Rectangle::new([at, (at.0 + w, at.1 + h)], WHITE.mix(0.9).filled()))?;
    area.draw(&Rectangle::new([at, (at.0 + w, at.1 + h)], GRAPHITE.stroke_width(1)))?;
    for (i, l) in lines.iter().enumerate() {
        area.draw(&Text::new(
            l.clone(),
            (at.0 + 8, at.1 + 8 + 20 * i as i32),
            (FONT, 15).into_font().color(&GRAPHITE),
        ))?;
    }
    Ok(())
}

/// Legend entry glyph: a short line in `c`.
fn line_key(c: RGBColor) -> impl Fn((i32, i32)) -> PathElement<(i32, i32)> {
    move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], c.stroke_width(3))
}

/// Our mesh look: pale grid, no bold lines, readable fonts.
fn calm<'m, 'a, 'b, X: Ranged<ValueType = f64>, Y: Ranged<ValueType = f64>, DB: DrawingBackend>(
    m: &'m mut MeshStyle<'a, 'b, X, Y, DB>,
) -> &'m mut MeshStyle<'a, 'b, X, Y, DB> {
    m.light_line_style(GRID)
        .bold_line_style(GRID.mix(0.0))
        .axis_desc_style((FONT, 17))
        .label_style((FONT, 14))
        .x_label_formatter(&tick)
        .y_label_formatter(&tick)
}

/// Axis tick text: integers without a decimal point, others with up to 3 decimals.
fn tick(v: &f64) -> String {
    if v.fract().abs() < 1e-9 && v.abs() < 1e15 {
        format!("{}", v.round() as i64)
    } else {
        let s = format!("{v:.3}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// The legend box at `pos`.
fn draw_legend<'a, DB: DrawingBackend + 'a, CT: CoordTranslate>(
    chart: &mut ChartContext<'a, DB, CT>,
    pos: SeriesLabelPosition,
) -> Drawn
where
    DB::ErrorType: 'static,
{
    chart
        .configure_series_labels()
        .position(pos)
        .background_style(WHITE.mix(0.9))
        .border_style(GRAPHITE)
        .label_font((FONT, 15))
        .draw()?;
    Ok(())
}

// ---------------------------------------------------------------- delay scan

struct ScanFigure<'a> {
    scan: &'a ScanResult,
    window_ps: Option<u64>,
    log_y: bool,
}

/// Delay histogram of one pair: bars, peak centre, FWHM at half height, and the window.
pub fn plot_scan(scan: &ScanResult, window_ps: Option<u64>, log_y: bool, path: &Path, force: bool) -> Result<()> {
    if scan.counts.is_empty() {
        return Err(Error::Usage(format!("{}: delay scan of {}-{} has no bins", path.display(), scan.a, scan.b)));
    }
    save(&ScanFigure { scan, window_ps, log_y }, path, force)
}

impl Figure for ScanFigure<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Drawn
    where
        DB::ErrorType: 'static,
    {
        root.fill(&WHITE)?;
        let max = *self.scan.counts.iter().max().unwrap_or(&1) as f64;
        if self.log_y {
            self.chart(root, (0.5..(max.max(1.0) * 3.0)).log_scale())?;
        } else {
            self.chart(root, 0.0..(max.max(1.0) * 1.12))?;
        }
        root.present()?;
        Ok(())
    }
}

impl ScanFigure<'_> {
    fn title(&self) -> String {
        let s = self.scan;
        format!("Delay scan, channels {} and {} (relative delay {} ps)", s.a, s.b, s.rel_delay_ps)
    }

    fn chart<DB, Y>(&self, root: &DrawingArea<DB, Shift>, y_range: Y) -> Drawn
    where
        DB: DrawingBackend,
        DB::ErrorType: 'static,
        Y: AsRangedCoord<Value = f64>,
        Y::CoordDescType: Ranged<ValueType = f64> + ValueFormatter<f64>,
    {
        let s = self.scan;
        let (unit, uname) = time_unit(s.half_range_ps as f64);
        let edges: Vec<f64> = s.bin_edges_ps().iter().map(|e| *e as f64 / unit).collect();
        let (x0, x1) = (edges[0], *edges.last().expect("non-empty"));
        let mut chart = ChartBuilder::on(root)
            .caption(self.title(), (FONT, 24).into_font().color(&GRAPHITE))
            .margin(18)
            .x_label_area_size(50)
            .y_label_area_size(80)
            .build_cartesian_2d(x0..x1, y_range)?;
        calm(&mut chart.configure_mesh())
            .x_desc(format!("Δ = (t_B − d_B) − (t_A − d_A) [{uname}]"))
            .y_desc(format!("coincidences per {} ps bin", s.bin_ps))
            .draw()?;
        let floor: f64 = if self.log_y { 0.5 } else { 0.0 };
        if let Some(w) = self.window_ps {
            let centre_ps = s.peak.map_or(0.0, |p| p.delay_ps);
            let half = (w / 2) as f64;
            let (l, r) = ((centre_ps - half) / unit, (centre_ps + half) / unit);
            let top = chart.y_range().end;
            let what = if s.peak.is_some() { "|Δ − peak|" } else { "|Δ|" };
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(l, floor.max(0.5)), (r, top)],
                    OCHRE.mix(0.25).filled(),
                )))?
                .label(format!("window {w} ps ({what} ≤ {} ps)", w / 2))
                .legend(|(x, y)| Rectangle::new([(x, y - 6), (x + 20, y + 6)], OCHRE.mix(0.4).filled()));
        }
        chart
            .draw_series(s.counts.iter().enumerate().map(|(i, c)| {
                let top = (*c as f64).max(floor);
                Rectangle::new([(edges[i], floor), (edges[i + 1], top)], SLATE.mix(0.8).filled())
            }))?
            .label("counts")
            .legend(|(x, y)| Rectangle::new([(x, y - 6), (x + 20, y + 6)], SLATE.mix(0.8).filled()));
        if let Some(p) = s.peak {
            let x = p.delay_ps / unit;
            let top = chart.y_range().end;
            chart
                .draw_series(DashedLineSeries::new(vec![(x, floor.max(0.5)), (x, top)], 8, 5, CLAY.stroke_width(2)))?
                .label(format!("peak {:.1} ± {:.1} ps", p.delay_ps, p.delay_sigma_ps))
                .legend(line_key(CLAY));
            let half_y = (p.background + p.height / 2.0).max(floor);
            let (l, r) = ((p.delay_ps - p.fwhm_ps / 2.0) / unit, (p.delay_ps + p.fwhm_ps / 2.0) / unit);
            let ticks = |x: f64| PathElement::new(vec![(x, half_y * 0.97), (x, half_y * 1.03)], PINE.stroke_width(3));
            chart.draw_series([ticks(l), ticks(r)])?;
            chart
                .draw_series(LineSeries::new(vec![(l, half_y), (r, half_y)], PINE.stroke_width(4)))?
                .label(format!("FWHM {:.1} ps", p.fwhm_ps))
                .legend(line_key(PINE));
        }
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

// ---------------------------------------------------------------- window sweep

struct SweepFigure<'a> {
    sweep: &'a SweepTable,
}

/// Window sweep of one pair: coincidences and accidentals (top) and CAR (bottom) against
/// the window, with the recommended window marked in both panels.
pub fn plot_sweep(sweep: &SweepTable, path: &Path, force: bool) -> Result<()> {
    if sweep.rows.is_empty() {
        return Err(Error::Usage(format!("{}: window sweep of {}-{} has no rows", path.display(), sweep.a, sweep.b)));
    }
    save(&SweepFigure { sweep }, path, force)
}

impl Figure for SweepFigure<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Drawn
    where
        DB::ErrorType: 'static,
    {
        root.fill(&WHITE)?;
        let s = self.sweep;
        let title = format!("Window sweep, channels {} and {} (relative delay {} ps)", s.a, s.b, s.rel_delay_ps);
        let body = root.titled(&title, (FONT, 24).into_font().color(&GRAPHITE))?;
        let (top, bottom) = body.split_vertically(SIZE.1 as i32 * 55 / 100);
        let max_w = s.rows.iter().map(|r| r.window_ps).max().unwrap_or(1) as f64;
        let (unit, uname) = time_unit(max_w);
        let xs: Vec<f64> = s.rows.iter().map(|r| r.window_ps as f64 / unit).collect();
        let x_range = 0.0..(max_w / unit * 1.03);
        let rec = s.recommended_window_ps as f64 / unit;
        let rec_label = format!("recommended {} ps ({})", s.recommended_window_ps, s.criterion);

        // Log scale: accidentals are usually orders of magnitude below the coincidences.
        let ymax = s.rows.iter().map(|r| r.coincidences as f64).fold(1.0, f64::max) * 2.0;
        let ymin = s
            .rows
            .iter()
            .flat_map(|r| [r.coincidences as f64, r.acc_analytic.value])
            .filter(|v| *v > 0.0)
            .fold(ymax, f64::min)
            .max(1e-3)
            / 2.0;
        let mut c = ChartBuilder::on(&top)
            .margin(14)
            .x_label_area_size(30)
            .y_label_area_size(80)
            .build_cartesian_2d(x_range.clone(), (ymin..ymax).log_scale())?;
        calm(&mut c.configure_mesh()).y_desc("counts in window (log)").draw()?;
        let coinc: Vec<(f64, f64)> = xs.iter().zip(&s.rows).map(|(x, r)| (*x, r.coincidences as f64)).collect();
        let acc: Vec<(f64, f64)> = xs
            .iter()
            .zip(&s.rows)
            .filter(|(_, r)| r.acc_analytic.value > 0.0)
            .map(|(x, r)| (*x, r.acc_analytic.value))
            .collect();
        c.draw_series(LineSeries::new(coinc.clone(), SLATE.stroke_width(2)))?
            .label("coincidences")
            .legend(line_key(SLATE));
        c.draw_series(coinc.iter().map(|p| Circle::new(*p, 3, SLATE.filled())))?;
        c.draw_series(LineSeries::new(acc.clone(), OCHRE.stroke_width(2)))?
            .label("accidentals (analytic)")
            .legend(line_key(OCHRE));
        c.draw_series(acc.iter().map(|p| Circle::new(*p, 3, OCHRE.filled())))?;
        c.draw_series(DashedLineSeries::new(vec![(rec, ymin), (rec, ymax)], 8, 5, CLAY.stroke_width(2)))?
            .label(rec_label)
            .legend(line_key(CLAY));
        draw_legend(&mut c, SeriesLabelPosition::LowerRight)?;

        let car: Vec<(f64, f64)> =
            xs.iter().zip(&s.rows).filter(|(_, r)| r.car.is_finite()).map(|(x, r)| (*x, r.car)).collect();
        let cmax = car.iter().map(|p| p.1).fold(1.0, f64::max) * 1.1;
        let mut c = ChartBuilder::on(&bottom)
            .margin(14)
            .x_label_area_size(50)
            .y_label_area_size(80)
            .build_cartesian_2d(x_range, 0.0..cmax)?;
        calm(&mut c.configure_mesh())
            .x_desc(format!("coincidence window w [{uname}]"))
            .y_desc("CAR (coinc./acc.)")
            .draw()?;
        c.draw_series(LineSeries::new(car.clone(), SAGE.stroke_width(2)))?.label("CAR").legend(line_key(SAGE));
        c.draw_series(car.iter().map(|p| Circle::new(*p, 3, SAGE.filled())))?;
        c.draw_series(DashedLineSeries::new(vec![(rec, 0.0), (rec, cmax)], 8, 5, CLAY.stroke_width(2)))?;
        draw_legend(&mut c, SeriesLabelPosition::UpperRight)?;
        root.present()?;
        Ok(())
    }
}

// ---------------------------------------------------------------- correlations

/// The model line of the CHSH plot: E = V·cos 2(α−β) per setting pair, with where V comes
/// from (the simulated source's visibility in the demo, a fit to the data in `chsh`).
#[derive(Debug, Clone, Copy)]
pub struct ModelLine<'a> {
    pub visibility: f64,
    /// e.g. "simulated" or "fitted to E".
    pub source: &'a str,
}

struct CorrelationFigure<'a> {
    report: &'a ChshReport,
    model: Option<ModelLine<'a>>,
}

/// E per setting pair with error bars (raw, and accidental-corrected when present), the
/// primary S in the title and a text box; optionally the model V·cos 2(α−β) per pair.
pub fn plot_correlations(report: &ChshReport, model: Option<ModelLine<'_>>, path: &Path, force: bool) -> Result<()> {
    save(&CorrelationFigure { report, model }, path, force)
}

fn s_line(kind: &str, set: &ChshSet) -> String {
    let p = set.primary();
    format!("S ({kind}) = {:.4} ± {:.4}: {}", p.s, p.sigma, p.verdict())
}

impl Figure for CorrelationFigure<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Drawn
    where
        DB::ErrorType: 'static,
    {
        root.fill(&WHITE)?;
        let r = self.report;
        let p = r.raw.primary();
        let title = format!("CHSH correlations: S = {:.3} ± {:.3} (raw)", p.s, p.sigma);
        let labels: Vec<String> = r.pairs.iter().map(|p| format!("({},{})", p.label_a, p.label_b)).collect();
        let mut chart = ChartBuilder::on(root)
            .caption(title, (FONT, 24).into_font().color(&GRAPHITE))
            .margin(18)
            .x_label_area_size(50)
            .y_label_area_size(70)
            .build_cartesian_2d(-0.5..3.5, -1.1..1.55)?; // headroom above E = 1 for the S box
        calm(&mut chart.configure_mesh())
            .x_labels(4)
            .x_label_formatter(&|x: &f64| {
                let i = x.round();
                if (x - i).abs() < 1e-6 && (0.0..4.0).contains(&i) {
                    labels[i as usize].clone()
                } else {
                    String::new()
                }
            })
            .x_desc("setting pair (Alice, Bob)")
            .y_desc("correlation E")
            .draw()?;
        chart.draw_series(LineSeries::new(vec![(-0.5, 0.0), (3.5, 0.0)], GRAPHITE.mix(0.5)))?;
        if let Some(ModelLine { visibility: v, source }) = self.model {
            let model = r.pairs.iter().enumerate().map(|(i, p)| {
                let e = v * (2.0 * (p.angle_a_deg - p.angle_b_deg).to_radians()).cos();
                PathElement::new(vec![(i as f64 - 0.25, e), (i as f64 + 0.25, e)], CLAY.stroke_width(2))
            });
            chart.draw_series(model)?.label(format!("V·cos 2(α−β), V = {v:.3} ({source})")).legend(line_key(CLAY));
        }
        let raw: Vec<(f64, f64, f64)> =
            r.pairs.iter().enumerate().map(|(i, p)| (i as f64 - 0.08, p.raw.e, p.raw.sigma)).collect();
        draw_points_with_bars(&mut chart, &raw, SLATE, "raw")?;
        if r.corrected.is_some() {
            let cor: Vec<(f64, f64, f64)> = r
                .pairs
                .iter()
                .enumerate()
                .filter_map(|(i, p)| p.corrected.map(|c| (i as f64 + 0.08, c.e, c.sigma)))
                .collect();
            draw_points_with_bars(&mut chart, &cor, SAGE, "accidental-corrected")?;
        }
        draw_legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        let mut lines = vec!["S = E(a,b) − E(a,b') + E(a',b) + E(a',b')".to_string(), s_line("raw", &r.raw)];
        if let Some(c) = &r.corrected {
            lines.push(s_line("acc.-corrected", c));
        }
        text_box(root, (110, 80), &lines)?;
        root.present()?;
        Ok(())
    }
}

/// Points (x, y, σ) with vertical error bars in colour `c`, one legend entry.
fn draw_points_with_bars<DB: DrawingBackend>(
    chart: &mut ChartContext<
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
    >,
    pts: &[(f64, f64, f64)],
    c: RGBColor,
    label: &str,
) -> Drawn
where
    DB::ErrorType: 'static,
{
    // Error bars drawn as paths: plotters' errorbar feature is not enabled.
    let cap = 0.012 * (chart.x_range().end - chart.x_range().start);
    chart.draw_series(pts.iter().map(|&(x, y, s)| {
        let bar = vec![(x - cap, y - s), (x + cap, y - s), (x, y - s), (x, y + s), (x - cap, y + s), (x + cap, y + s)];
        PathElement::new(bar, c.stroke_width(2))
    }))?;
    chart
        .draw_series(pts.iter().map(|&(x, y, _)| Circle::new((x, y), 5, c.filled())))?
        .label(label)
        .legend(move |(x, y)| Circle::new((x + 10, y), 5, c.filled()));
    Ok(())
}

// ---------------------------------------------------------------- visibility

struct VisibilityFigure<'a> {
    fit: &'a VisibilityFit,
    data: &'a [AnglePoint],
}

/// Counts against analyzer angle with √N error bars and the fitted curve.
pub fn plot_visibility(fit: &VisibilityFit, data: &[AnglePoint], path: &Path, force: bool) -> Result<()> {
    if data.is_empty() {
        return Err(Error::Usage(format!("{}: visibility plot {} has no points", path.display(), fit.label)));
    }
    save(&VisibilityFigure { fit, data }, path, force)
}

impl Figure for VisibilityFigure<'_> {
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Drawn
    where
        DB::ErrorType: 'static,
    {
        root.fill(&WHITE)?;
        let f = self.fit;
        let lo = self.data.iter().map(|p| p.angle_deg).fold(f64::INFINITY, f64::min).min(0.0);
        let hi = self.data.iter().map(|p| p.angle_deg).fold(f64::NEG_INFINITY, f64::max).max(lo + 180.0);
        let curve: Vec<(f64, f64)> =
            (0..=400).map(|i| lo + (hi - lo) * i as f64 / 400.0).map(|a| (a, f.model(a))).collect();
        let ymax = self
            .data
            .iter()
            .map(|p| p.counts as f64 + (p.counts as f64).sqrt())
            .chain(curve.iter().map(|p| p.1))
            .fold(1.0, f64::max)
            * 1.45; // headroom for the result box and legend above the data
        let mut chart = ChartBuilder::on(root)
            .caption(format!("Visibility fit: {}", f.label), (FONT, 24).into_font().color(&GRAPHITE))
            .margin(18)
            .x_label_area_size(50)
            .y_label_area_size(80)
            .build_cartesian_2d(lo..hi, 0.0..ymax)?;
        calm(&mut chart.configure_mesh()).x_desc("analyzer angle θ [deg]").y_desc("coincidences").draw()?;
        chart
            .draw_series(LineSeries::new(curve, CLAY.stroke_width(2)))?
            .label("A·(1 + V·cos 2(θ − θ0))")
            .legend(line_key(CLAY));
        let pts: Vec<(f64, f64, f64)> =
            self.data.iter().map(|p| (p.angle_deg, p.counts as f64, (p.counts as f64).sqrt())).collect();
        draw_points_with_bars(&mut chart, &pts, SLATE, "counts ± √N")?;
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        let lines = [
            format!("V = {:.4} ± {:.4}", f.visibility.value, f.visibility.sigma),
            format!("θ0 = {:.2} ± {:.2} deg", f.phase_deg.value, f.phase_deg.sigma),
            format!("A = {:.1} ± {:.1}", f.amplitude.value, f.amplitude.sigma),
            format!("χ²/dof = {:.2} / {}", f.chi2, f.dof),
        ];
        text_box(root, (110, 80), &lines)?;
        root.present()?;
        Ok(())
    }
}
