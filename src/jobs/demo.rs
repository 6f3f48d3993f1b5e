//! The demo job on simulated data (the invented Larch–Rowan link): the same jobs a user
//! runs, in order: simulate → inspect → scan (finds the delays) → sweep (picks the window)
//! → chsh (counts every block), plus a visibility series; every table and plot in one folder.

use super::chsh::{self, ChshJob};
use super::count::{OffPeakChoice, Sourced};
use super::inputs::{BlockInputs, DelaySources};
use super::inspect::{self, InspectJob};
use super::pass::PassMode;
use super::scan::{self, ScanJob};
use super::simulate::{self as simulate_job, SimulateJob};
use super::sweep::{self, SweepJob};
use super::Context;
use crate::analysis::bell3::Convention;
use crate::engine::{count::DEFAULT_SLICE_PS, sweep::window_range, Criterion};
use crate::manifest::{InputFormat, Manifest, Settings, Setup};
use crate::output::{self, layout, layout_analysis, plot, Format};
use crate::read::ReadOptions;
use crate::simulate::{self, plan, RunConfig, SourceModel};
use crate::{Channel, Error, Result};
use std::path::PathBuf;

/// Demo settings (the scenario's defaults).
#[derive(Debug, Clone)]
pub struct DemoConfig {
    pub out_dir: PathBuf,
    pub seed: u64,
    /// Length of each CHSH block, s.
    pub duration_s: f64,
    pub quiet: bool,
    /// The command line recorded in provenance.
    pub command_line: Vec<String>,
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
    // The inner jobs show no progress of their own; the demo says what it does.
    let inner = Context { quiet: true, command_line: cfg.command_line.clone() };
    let mut plots = Vec::new();

    say(q, "simulating the Larch–Rowan link (4 blocks, CHSH settings)");
    let run = chsh_run(cfg);
    let simulated = SimulateJob { ctx: Context { quiet: q, ..inner.clone() }, run: run.clone(), second_site: None, output: dir.join("chsh-run"), force: true };
    let summary = simulate_job::run(&simulated)?;
    let m = Manifest::load(&summary.manifest)?;
    let block_inputs = |b: &crate::manifest::BlockSpec| BlockInputs { inputs: m.block_inputs(b), layout: None, read: ReadOptions::mapped(), clock: None };

    say(q, "inspecting the tag files");
    let mut events = 0;
    for b in &m.blocks {
        let report = inspect::run(&InspectJob { ctx: inner.clone(), inputs: block_inputs(b) })?;
        if let Some(p) = report.problems().first() {
            return Err(Error::Usage(format!("demo: block {}: {p}", b.name)));
        }
        events += report.totals.events;
    }

    say(q, "scanning block ab for the delays (reference channel 1)");
    let ab = m.blocks.first().ok_or_else(|| Error::Usage("demo: no blocks".into()))?;
    let scan_job = |pairs: Vec<(Channel, Channel)>, delays: DelaySources, half_range_ps: u64, bin_ps: u64, reference: Option<Channel>| ScanJob {
        ctx: inner.clone(),
        label: "ab".into(),
        inputs: block_inputs(ab),
        pass: PassMode::Auto,
        pairs,
        delays,
        half_range_ps,
        bin_ps,
        reference,
        delays_file: dir.join("delays.toml"),
        document: false,
    };
    let coarse = scan::run(&scan_job(vec![], DelaySources::default(), 100_000, 20, Some(1)))?;
    let delays = coarse.proposal.ok_or_else(|| Error::Usage("demo: the scan proposed no delays".into()))?;
    if let Some((c, why)) = delays.not_found.iter().next() {
        return Err(Error::Usage(format!("demo: the scan found no delay for channel {c}: {why}")));
    }
    let delays_file = dir.join("delays.toml");
    output::atomic::write_bytes(&delays_file, delays.to_toml().as_bytes(), true)?;
    let found = DelaySources { file: Some(delays_file.clone()), flags: vec![] };
    let coarse_block = coarse.block;

    let pairs = chsh::role_pairs(&m)?;
    let fine_block = scan::run(&scan_job(pairs.clone(), found.clone(), 2_000, 10, None))?.block;

    say(q, "sweeping the window on block ab");
    let sweep_job = SweepJob {
        ctx: inner.clone(),
        label: "ab".into(),
        inputs: block_inputs(ab),
        pass: PassMode::Auto,
        pairs: pairs.clone(),
        delays: found.clone(),
        windows_ps: window_range(50, 3000, 50)?,
        criterion: Criterion::MaxNetSignificance,
        offpeak: OffPeakChoice::Default,
        slice_ps: DEFAULT_SLICE_PS,
        document: false,
    };
    let sweep_block = sweep::run(&sweep_job)?.block;
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
    let chsh_job = |manifest: PathBuf| ChshJob {
        ctx: inner.clone(),
        manifest,
        window_ps: Some(Sourced { value: window_ps, from: "the sweep's recommended window".into() }),
        delays: found.clone(),
        offpeak: OffPeakChoice::Default,
        slice_ps: DEFAULT_SLICE_PS,
        read: ReadOptions::mapped(),
        pass: PassMode::Auto,
        convention: Convention::Correlated,
        document: false,
    };
    let counted = chsh::run(&chsh_job(summary.manifest.clone()))?;
    let car = counted.blocks[0].coincidences.iter().map(|r| ((r.a, r.b), r.car)).collect();
    let report = counted.chsh.clone().ok_or_else(|| Error::Usage("demo: CHSH settings missing".into()))?;
    let p = plots_dir.join("chsh-correlations.png");
    plot::plot_correlations(&report, Some(plot::ModelLine { visibility: run.source.visibility, source: "simulated" }), &p, true)?;
    plots.push(p);

    // Scans and the sweep go to /scans and /sweeps; /blocks holds the counted blocks.
    let mut scan_blocks = vec![coarse_block.clone(), fine_block.clone()];
    for (b, label) in scan_blocks.iter_mut().zip(["ab_wide", "ab_fine"]) {
        b.label = label.into();
    }
    let run_h5 = dir.join("run.h5");
    let prov = super::provenance(&inner, "demo", &[&counted.config], &counted.files)?;
    let mut doc = layout::run_document_parts(&counted.blocks, &scan_blocks, std::slice::from_ref(&sweep_block), &prov);
    doc.root.groups.push(layout_analysis::chsh_group(&report));
    output::write_document(&doc, Some(&run_h5), Format::Hdf5, true)?;

    say(q, "simulating and fitting a visibility series (Rowan 0°–180°)");
    let series = SimulateJob { ctx: inner.clone(), run: series_run(cfg), second_site: None, output: dir.join("series-run"), force: true };
    let ssum = simulate_job::run(&series)?;
    let sc = chsh::run(&chsh_job(ssum.manifest.clone()))?;
    for (f, pts) in &sc.visibility {
        let p = plots_dir.join(format!("visibility-{}.png", layout_analysis::sanitize(&f.label)));
        plot::plot_visibility(f, pts, &p, true)?;
        plots.push(p);
    }
    let series_h5 = dir.join("series.h5");
    let sprov = super::provenance(&inner, "demo", &[&sc.config], &sc.files)?;
    let mut sdoc = layout::run_document(&sc.blocks, &sprov);
    sdoc.root.groups.push(layout_analysis::visibility_group(&sc.visibility));
    if let Some((angles, r)) = &sc.bell3 {
        sdoc.root.groups.push(layout_analysis::bell3_group(r, *angles));
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
        visibility: sc.visibility.first().map(|(f, _)| (f.visibility.value, f.visibility.sigma)),
        tables: vec![run_h5, series_h5, delays_file],
        plots,
    })
}
