//! The whole job on simulated demo data (the invented Larch–Rowan link): simulate →
//! inspect → scan (finds the delays) → sweep (picks the window) → count → CHSH, plus a
//! visibility series; every table and plot goes into one folder.

use crate::analysis::bell3::Convention;
use crate::analysis::chsh::ChshReport;
use crate::analysis::visibility::{fit_visibility, VisibilityFit};
use crate::engine::{accidentals, count::DEFAULT_SLICE_PS, scan, sweep, CountConfig, Criterion, Delays, ScanConfig};
use crate::manifest::{InputFormat, Manifest, Settings, Setup};
use crate::output::{self, layout, layout_analysis, plot, provenance::Provenance, AttrValue, Format};
use crate::pipeline::{self, PassMode};
use crate::sys::progress::Progress;
use crate::read::ReadOptions;
use crate::simulate::{self, plan, RunConfig, SourceModel};
use crate::{Channel, Error, Result};
use std::path::{Path, PathBuf};

/// Demo settings (the scenario's defaults).
#[derive(Debug, Clone)]
pub struct DemoConfig {
    pub out_dir: PathBuf,
    pub seed: u64,
    /// Length of each CHSH block, s.
    pub duration_s: f64,
    pub quiet: bool,
}

/// A delay found by the scan beside the simulated truth.
#[derive(Debug, Clone, serde::Serialize)]
pub struct FoundDelay {
    pub channel: Channel,
    pub found_ps: i64,
    pub true_ps: i64,
}

/// What the demo found and where it put it.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DemoSummary {
    pub events: u64,
    pub delays: Vec<FoundDelay>,
    /// FWHM of each Alice–Bob pair's peak (fine scan), ps.
    pub fwhm_ps: Vec<((Channel, Channel), f64)>,
    /// The window used for every count: the widest of the pairs' recommendations.
    pub window_ps: u64,
    /// Each Alice–Bob pair's recommended window from the sweep (largest net/σ), ps.
    pub recommended_ps: Vec<((Channel, Channel), u64)>,
    /// CAR of each Alice–Bob pair in block ab at the chosen window.
    pub car: Vec<((Channel, Channel), f64)>,
    pub s_raw: (f64, f64),
    pub s_corrected: Option<(f64, f64)>,
    pub violation_sigma: f64,
    /// The raw primary S against the local bound, in words (or that there is no violation).
    pub verdict: String,
    pub visibility: Option<(f64, f64)>,
    pub tables: Vec<PathBuf>,
    pub plots: Vec<PathBuf>,
}

fn say(quiet: bool, msg: impl AsRef<str>) {
    if !quiet {
        eprintln!("demo: {}", msg.as_ref());
    }
}

/// The scenario's CHSH run, four blocks, delays left out of the manifest.
fn chsh_run(cfg: &DemoConfig) -> RunConfig {
    let (alice, bob) = plan::chsh_labels(0.0, 45.0, 22.5, 67.5);
    run_config(cfg, alice, bob, cfg.duration_s, "Larch–Rowan demo: CHSH settings")
}

/// A visibility series: Larch at 0°, Rowan from 0° to 180° in 15° steps.
fn series_run(cfg: &DemoConfig) -> RunConfig {
    let alice = vec![plan::SettingLabel::new("a", 0.0)];
    let bob: Vec<_> = (0..13).map(|i| plan::SettingLabel::new(&format!("b{i}"), 15.0 * i as f64)).collect();
    run_config(cfg, alice, bob, 0.5, "Larch–Rowan demo: visibility series")
}

fn run_config(cfg: &DemoConfig, alice: Vec<plan::SettingLabel>, bob: Vec<plan::SettingLabel>, duration_s: f64, what: &str) -> RunConfig {
    let settings = Settings {
        alice: alice.iter().map(|s| (s.label.clone(), s.angle_deg)).collect(),
        bob: bob.iter().map(|s| (s.label.clone(), s.angle_deg)).collect(),
    };
    RunConfig {
        source: SourceModel::scenario(),
        detectors: simulate::scenario_detectors(),
        setup: Setup::FourDetectors,
        settings,
        blocks: plan::plan_blocks(Setup::FourDetectors, &alice, &bob),
        duration_s,
        seed: cfg.seed,
        format: InputFormat::Container,
        window_ps: None,
        omit_delays: true,
        description: format!("{what} (simulated by tagsieve {}, seed {})", env!("CARGO_PKG_VERSION"), cfg.seed),
    }
}

/// Run the demo.
pub fn run_demo(cfg: &DemoConfig) -> Result<DemoSummary> {
    let dir = &cfg.out_dir;
    let plots_dir = dir.join("plots");
    for d in [dir, &plots_dir] {
        std::fs::create_dir_all(d).map_err(|e| Error::io(d, e))?;
    }
    let q = cfg.quiet;
    let mut plots = Vec::new();

    say(q, "simulating the Larch–Rowan link (4 blocks, CHSH settings)");
    let run = chsh_run(cfg);
    let total_ms = (run.duration_s * 1e3) as u64 * run.blocks.len() as u64;
    let progress = Progress::items("simulate ms", total_ms, q);
    let summary = simulate::write_run(&run, &dir.join("chsh-run"), true, &progress)?;
    progress.finish();
    let m = Manifest::load(&summary.manifest)?;
    let opts = ReadOptions::default();

    say(q, "inspecting the tag files");
    let mut events = 0;
    for b in &m.blocks {
        let sources = pipeline::open_block(&m.block_inputs(b), None, opts)?;
        let report = crate::read::check::inspect(&sources, &Progress::hidden())?;
        if let Some(p) = report.problems().first() {
            return Err(Error::Usage(format!("demo: block {}: {p}", b.name)));
        }
        events += report.totals.events;
    }

    say(q, "scanning block ab for the delays (reference channel 1)");
    let ab = m.blocks.first().ok_or_else(|| Error::Usage("demo: no blocks".into()))?;
    let ab_sources = pipeline::open_block(&m.block_inputs(ab), None, opts)?;
    let coarse = ScanConfig { pairs: vec![], delays: Delays::default(), half_range_ps: 100_000, bin_ps: 20 };
    let coarse_block = pipeline::scan_sources("ab", &ab_sources, &coarse, PassMode::Auto, true)?;
    let channels: Vec<_> = coarse_block.singles.iter().map(|s| s.channel).collect();
    let delays = scan::propose_delays(&coarse_block.scans, 1, &channels);
    if let Some((c, why)) = delays.not_found.iter().next() {
        return Err(Error::Usage(format!("demo: the scan found no delay for channel {c}: {why}")));
    }
    output::atomic::write_bytes(&dir.join("delays.toml"), delays.to_toml().as_bytes(), true)?;

    let pairs = pipeline::role_pairs(&m)?;
    let fine = ScanConfig { pairs: pairs.clone(), delays: delays.clone(), half_range_ps: 2_000, bin_ps: 10 };
    let fine_block = pipeline::scan_sources("ab", &ab_sources, &fine, PassMode::Auto, true)?;

    say(q, "sweeping the window on block ab");
    let base = CountConfig {
        pairs: pairs.clone(),
        delays: delays.clone(),
        window_ps: 1,
        offsets_ps: vec![],
        slice_ps: DEFAULT_SLICE_PS,
    };
    let windows = sweep::window_range(50, 3000, 50)?;
    let sweep_block = pipeline::sweep_sources("ab", &ab_sources, &base, &windows, &sweep::OffPeak::PerWindow, Criterion::MaxNetSignificance, PassMode::Auto, true)?;
    // One window for all four pairs: the widest of their recommendations keeps every peak.
    let window_ps = sweep_block.sweeps.iter().map(|s| s.recommended_window_ps).max().unwrap_or(1000);

    for s in &fine_block.scans {
        let p = plots_dir.join(format!("scan-{}-{}.png", s.a, s.b));
        plot::plot_scan(s, Some(window_ps), false, &p, true)?;
        plots.push(p);
    }
    let log_scan = plots_dir.join("scan-1-3-wide-log.svg");
    if let Some(s) = coarse_block.scans.iter().find(|s| (s.a, s.b) == (1, 3)) {
        plot::plot_scan(s, None, true, &log_scan, true)?;
        plots.push(log_scan);
    }
    if let Some(s) = sweep_block.sweeps.first() {
        let p = plots_dir.join(format!("sweep-{}-{}.png", s.a, s.b));
        plot::plot_sweep(s, &p, true)?;
        plots.push(p);
    }

    say(q, &format!("counting every block at w = {window_ps} ps and evaluating CHSH"));
    let count_cfg = CountConfig { window_ps, offsets_ps: accidentals::default_offsets_ps(window_ps), ..base };
    let (blocks, files) = pipeline::count_run(&m, &count_cfg, opts, PassMode::Auto, true)?;
    let car = blocks[0].coincidences.iter().map(|r| ((r.a, r.b), r.car)).collect();
    let settings = pipeline::setting_counts(&m, &blocks)?;
    let report: ChshReport = pipeline::chsh_report(&settings).ok_or_else(|| Error::Usage("demo: CHSH settings missing".into()))??;
    let p = plots_dir.join("chsh-correlations.png");
    plot::plot_correlations(&report, Some(plot::ModelLine { visibility: run.source.visibility, source: "simulated" }), &p, true)?;
    plots.push(p);

    // Scans and the sweep go to /scans and /sweeps; /blocks holds the counted blocks.
    let mut scan_blocks = vec![coarse_block.clone(), fine_block.clone()];
    for (b, label) in scan_blocks.iter_mut().zip(["ab_wide", "ab_fine"]) {
        b.label = label.into();
    }
    let run_h5 = dir.join("run.h5");
    let prov = demo_provenance(&summary.manifest, &files, window_ps, &delays)?;
    let mut doc = layout::run_document_parts(&blocks, &scan_blocks, std::slice::from_ref(&sweep_block), &prov);
    doc.root.groups.push(layout_analysis::chsh_group(&report));
    output::write_document(&doc, Some(&run_h5), Format::Hdf5, true)?;

    say(q, "simulating and fitting a visibility series (Rowan 0°–180°)");
    let series = series_run(cfg);
    let ssum = simulate::write_run(&series, &dir.join("series-run"), true, &Progress::hidden())?;
    let sm = Manifest::load(&ssum.manifest)?;
    let (sblocks, sfiles) = pipeline::count_run(&sm, &count_cfg, opts, PassMode::Auto, true)?;
    let series_pts = pipeline::visibility_series(&sm, &sblocks)?;
    let fits: Vec<(VisibilityFit, _)> =
        series_pts.into_iter().map(|(basis, pts)| fit_visibility(&basis, &pts).map(|f| (f, pts))).collect::<Result<_>>()?;
    for (f, pts) in &fits {
        let p = plots_dir.join(format!("visibility-{}.png", layout_analysis::sanitize(&f.label)));
        plot::plot_visibility(f, pts, &p, true)?;
        plots.push(p);
    }
    let series_h5 = dir.join("series.h5");
    let sprov = demo_provenance(&ssum.manifest, &sfiles, window_ps, &delays)?;
    let mut sdoc = layout::run_document(&sblocks, &sprov);
    sdoc.root.groups.push(layout_analysis::visibility_group(&fits));
    let sset = pipeline::setting_counts(&sm, &sblocks)?;
    if let Some((angles, r)) = pipeline::bell3_search(&sset, Convention::Correlated) {
        sdoc.root.groups.push(layout_analysis::bell3_group(&r, angles));
    }
    output::write_document(&sdoc, Some(&series_h5), Format::Hdf5, true)?;

    let truth = |c: Channel| {
        let d = |ch: Channel| run.detectors.iter().find(|x| x.channel == ch).map_or(0, |x| x.delay_ps as i64);
        d(c) - d(1)
    };
    let primary = report.raw.primary();
    Ok(DemoSummary {
        events,
        delays: delays.by_channel.iter().map(|(&c, &d)| FoundDelay { channel: c, found_ps: d, true_ps: truth(c) }).collect(),
        fwhm_ps: fine_block.scans.iter().filter_map(|s| s.peak.map(|p| ((s.a, s.b), p.fwhm_ps))).collect(),
        window_ps,
        recommended_ps: sweep_block.sweeps.iter().map(|s| ((s.a, s.b), s.recommended_window_ps)).collect(),
        car,
        s_raw: (primary.s, primary.sigma),
        s_corrected: report.corrected.as_ref().map(|c| (c.primary().s, c.primary().sigma)),
        violation_sigma: primary.violation_sigma,
        verdict: primary.verdict(),
        visibility: fits.first().map(|(f, _)| (f.visibility.value, f.visibility.sigma)),
        tables: vec![run_h5, series_h5, dir.join("delays.toml")],
        plots,
    })
}

fn demo_provenance(manifest: &Path, files: &[PathBuf], window_ps: u64, delays: &Delays) -> Result<Provenance> {
    let mut p = Provenance::new(std::env::args().collect())
        .param("command", AttrValue::Str("demo".into()))
        .param("window_ps", AttrValue::U64(window_ps))
        .param_json("delays_ps", &delays.by_channel)
        .input(manifest)?;
    for f in files {
        p = p.input(f)?;
    }
    Ok(p)
}
