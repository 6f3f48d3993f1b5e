//! `tagsieve chsh RUN.toml`: count every block of a run, then E per setting pair, S with
//! σ_S and significance (raw and accidental-corrected), visibility fits and the
//! three-setting form where the blocks allow.

use super::common::{self, AccidentalArgs, OutputArgs};
use super::Global;
use std::path::PathBuf;
use tagsieve::analysis::bell3::Convention;
use tagsieve::analysis::chsh::{model_visibility, ChshReport};
use tagsieve::output::plot::ModelLine;
use tagsieve::analysis::visibility::{fit_visibility, AnglePoint, VisibilityFit};
use tagsieve::engine::{tables::BlockTables, CountConfig, Delays};
use tagsieve::manifest::Manifest;
use tagsieve::output::{layout_analysis, provenance::Provenance, AttrValue, Group};
use tagsieve::{pipeline, Error, Result};

/// Cautions: the p-value assumes independent, identically distributed trials and fair
/// sampling; the result is not a loophole-free Bell test and not a key-security certificate.
#[derive(clap::Args, Debug)]
#[command(after_long_help = "CAUTION: the p-value assumes independent, identically distributed trials and fair \
sampling of the detected pairs. An S value from such statistics is not a loophole-free Bell test and not a \
security certificate for key distribution.")]
pub struct Args {
    /// Run manifest (TOML; see docs/manifest.md).
    #[arg(value_name = "RUN.toml")]
    pub manifest: PathBuf,
    /// Coincidence window w, ps (2·|Δ| ≤ w); overrides the manifest's window_ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, short = 'w', value_name = "PS")]
    pub window_ps: Option<u64>,
    /// Delay of a channel in ps, `CH=PS`; overrides the manifest (repeatable).
    #[arg(long = "delay", value_name = "CH=PS")]
    pub delay: Vec<String>,
    /// Delays file from `tagsieve scan` (overrides the manifest's).
    #[arg(long, value_name = "FILE")]
    pub delays: Option<PathBuf>,
    #[command(flatten)]
    pub acc: AccidentalArgs,
    /// Pass over the data: auto, whole or stream (see `count --help`).
    #[arg(long = "pass", default_value = "auto", value_name = "MODE")]
    pub pass: String,
    #[command(flatten)]
    pub read: super::ReadArgs,
    /// Sign convention for the three-setting form: `correlated` (E(a,a) = +1, as for
    /// (|HH⟩+|VV⟩)/√2; the form is applied to −E) or `anti-correlated` (singlet-type).
    #[arg(long, default_value = "correlated", value_name = "CONV")]
    pub bell3_convention: String,
    /// Plot E per setting pair with error bars and S (PNG or SVG by extension).
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
    /// Plot the visibility fits (`NAME-BASIS.png` when several bases).
    #[arg(long, value_name = "FILE")]
    pub plot_visibility: Option<PathBuf>,
    #[command(flatten)]
    pub out: OutputArgs,
}

/// Everything the command computes.
pub struct ChshOutcome {
    pub blocks: Vec<BlockTables>,
    pub chsh: Option<ChshReport>,
    pub visibility: Vec<(VisibilityFit, Vec<AnglePoint>)>,
    pub bell3: Option<([f64; 3], tagsieve::analysis::bell3::Bell3Result)>,
    pub window_ps: u64,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    args.out.precheck()?;
    let m = Manifest::load(&args.manifest)?;
    check_chsh_blocks(&m, &args.manifest)?;
    let mut overrides = match &args.delays {
        Some(p) => Delays::load(p)?,
        None => Delays::default(),
    };
    overrides.apply_flags(&args.delay)?;
    let delays = pipeline::manifest_delays(&m, &overrides)?;
    let window_ps = args.window_ps.or(m.window_ps).ok_or_else(|| {
        Error::Usage(format!("{}: no window: give --window-ps or set window_ps in the manifest (pick one with `tagsieve sweep`)", args.manifest.display()))
    })?;
    let cfg = CountConfig { pairs: vec![], delays, window_ps, offsets_ps: args.acc.offsets_ps(window_ps), slice_ps: args.acc.slice_ps()? };
    let conv = match args.bell3_convention.as_str() {
        "correlated" => Convention::Correlated,
        "anti-correlated" => Convention::AntiCorrelated,
        o => return Err(Error::Usage(format!("--bell3-convention {o}: expected correlated or anti-correlated"))),
    };
    let (blocks, files) = pipeline::count_run(&m, &cfg, args.read.read_options(), pipeline::PassMode::parse(&args.pass)?, g.quiet)?;
    let outcome = analyse(&m, blocks, window_ps, conv)?;
    if let Some(p) = &args.plot {
        match &outcome.chsh {
            Some(r) => {
                let model = model_visibility(r).map(|v| ModelLine { visibility: v.value, source: "fitted to E" });
                tagsieve::output::plot::plot_correlations(r, model, p, true)?
            }
            None => eprintln!("tagsieve: no CHSH settings in this run; {} not drawn", p.display()),
        }
    }
    if let Some(p) = &args.plot_visibility {
        for (fit, pts) in &outcome.visibility {
            let path = if outcome.visibility.len() > 1 { suffixed(p, &layout_analysis::sanitize(&fit.label)) } else { p.clone() };
            tagsieve::output::plot::plot_visibility(fit, pts, &path, true)?;
        }
    }
    if super::wants_tables(&args.out, g) {
        let mut prov = Provenance::new(common::command_line())
            .param("command", AttrValue::Str("chsh".into()))
            .param("manifest", AttrValue::Str(args.manifest.display().to_string()))
            .param("window_ps", AttrValue::U64(window_ps))
            .param_json("delays_ps", &cfg.delays.by_channel)
            .param_json("acc_offsets_ps", &cfg.offsets_ps)
            .param("slice_s", AttrValue::F64(args.acc.slice_s))
            .param("bell3_convention", AttrValue::Str(args.bell3_convention.clone()));
        prov = prov.input(&args.manifest)?;
        for f in &files {
            prov = prov.input(f)?;
        }
        super::write_tables(&outcome.blocks, prov, analysis_groups(&outcome), &args.out, g)?;
    }
    if !args.out.to_stdout() {
        print(&outcome, g);
    }
    Ok(())
}

/// Two Alice and two Bob settings declare a CHSH set: each of the four setting pairs needs
/// a block, else nothing could be computed. The line given is the end of the file, where
/// the missing [[block]] table would go.
fn check_chsh_blocks(m: &Manifest, path: &std::path::Path) -> Result<()> {
    if m.settings.alice.len() != 2 || m.settings.bob.len() != 2 {
        return Ok(());
    }
    for a in m.settings.alice.keys() {
        for b in m.settings.bob.keys() {
            if !m.blocks.iter().any(|k| &k.alice == a && &k.bob == b) {
                let line = std::fs::read_to_string(path).map_or(1, |t| t.lines().count().max(1));
                let message = format!(
                    "missing block: the settings form a CHSH set, but no [[block]] has alice = {a:?} and bob = {b:?}; \
                     CHSH needs a block for each of the four setting pairs"
                );
                return Err(Error::Config { path: path.to_path_buf(), line, message });
            }
        }
    }
    Ok(())
}

/// CHSH, visibility and three-setting results from counted blocks.
pub fn analyse(m: &Manifest, blocks: Vec<BlockTables>, window_ps: u64, conv: Convention) -> Result<ChshOutcome> {
    let settings = pipeline::setting_counts(m, &blocks)?;
    let chsh = pipeline::chsh_report(&settings).transpose()?;
    let visibility = pipeline::visibility_series(m, &blocks)?
        .into_iter()
        .map(|(basis, pts)| fit_visibility(&basis, &pts).map(|f| (f, pts)))
        .collect::<Result<Vec<_>>>()?;
    let bell3 = pipeline::bell3_search(&settings, conv);
    Ok(ChshOutcome { blocks, chsh, visibility, bell3, window_ps })
}

/// The `/chsh`, `/visibility` and `/bell3` groups that exist for this run.
pub fn analysis_groups(o: &ChshOutcome) -> Vec<Group> {
    let mut v = Vec::new();
    if let Some(r) = &o.chsh {
        v.push(layout_analysis::chsh_group(r));
    }
    if !o.visibility.is_empty() {
        v.push(layout_analysis::visibility_group(&o.visibility));
    }
    if let Some((angles, r)) = &o.bell3 {
        v.push(layout_analysis::bell3_group(r, *angles));
    }
    v
}

fn suffixed(p: &std::path::Path, tag: &str) -> PathBuf {
    let stem = p.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = p.extension().map(|s| format!(".{}", s.to_string_lossy())).unwrap_or_default();
    p.with_file_name(format!("{stem}-{tag}{ext}"))
}

fn print(o: &ChshOutcome, g: &Global) {
    if g.json {
        return; // the Document went out
    }
    println!("window {}", common::ps(o.window_ps as f64));
    if let Some(r) = &o.chsh {
        println!("{:>8} {:>7} {:>7} {:>8} {:>8} {:>8} {:>8} {:>18} {:>18}", "setting", "α", "β", "N++", "N+-", "N-+", "N--", "E (raw)", "E (acc-corrected)");
        for c in r.correlation_rows() {
            let corr = c.e_corrected.map(|e| format!("{:+.4} ± {:.4}", e.value, e.sigma)).unwrap_or_default();
            println!(
                "{:>8} {:>7.1} {:>7.1} {:>8} {:>8} {:>8} {:>8} {:>18} {:>18}",
                c.pair, c.angle_a_deg, c.angle_b_deg, c.counts[0], c.counts[1], c.counts[2], c.counts[3],
                format!("{:+.4} ± {:.4}", c.e_raw.value, c.e_raw.sigma), corr
            );
        }
        for v in r.variant_rows() {
            let flag = match (v.is_primary, v.is_max) {
                (true, true) => " (chosen convention, largest |S|)",
                (true, false) => " (chosen convention)",
                (false, true) => " (largest |S|)",
                _ => "",
            };
            println!("  S = {:<38} {:<20} {:+.4} ± {:.4}  {}{flag}", v.formula, v.kind, v.variant.s, v.variant.sigma, v.variant.verdict());
        }
        println!("  caution: {}", layout_analysis::CAUTION);
    }
    for (f, _) in &o.visibility {
        println!(
            "visibility ({}): V = {:.4} ± {:.4}, θ0 = {:.2} ± {:.2}°, χ²/dof = {:.2}",
            f.label, f.visibility.value, f.visibility.sigma, f.phase_deg.value, f.phase_deg.sigma, f.reduced_chi2
        );
    }
    if let Some((a, r)) = &o.bell3 {
        println!(
            "three-setting form at {:?}°: |E(a,b) − E(a,c)| = {:.4}, 1 + E(b,c) = {:.4}; margin {:+.4} ± {:.4} ({:+.1} σ)",
            a, r.lhs, r.rhs, r.margin.value, r.margin.sigma, r.violation_sigma
        );
    }
}
