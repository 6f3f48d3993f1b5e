//! `tagsieve chsh RUN.toml`: arguments → a chsh job ([`tagsieve::jobs::chsh`]: every block
//! counted, E per setting pair, S with σ_S, visibility fits, the three-setting form); its
//! outcome → the tables, plots and the report on stdout.

use super::common::{self, AccidentalArgs, OutputArgs};
use super::Global;
use std::path::PathBuf;
use tagsieve::analysis::bell3::Convention;
use tagsieve::analysis::chsh::model_visibility;
use tagsieve::jobs::chsh::{self, ChshJob, ChshOutcome};
use tagsieve::jobs::count::Sourced;
use tagsieve::jobs::inputs::DelaySources;
use tagsieve::output::layout_analysis;
use tagsieve::output::plot::ModelLine;
use tagsieve::{Error, Result};

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

pub fn run(args: Args, g: &Global) -> Result<()> {
    args.out.precheck()?;
    let convention = match args.bell3_convention.as_str() {
        "correlated" => Convention::Correlated,
        "anti-correlated" => Convention::AntiCorrelated,
        o => return Err(Error::Usage(format!("--bell3-convention {o}: expected correlated or anti-correlated"))),
    };
    let job = ChshJob {
        ctx: super::context(g),
        manifest: args.manifest.clone(),
        window_ps: args.window_ps.map(|value| Sourced { value, from: "--window-ps".into() }),
        delays: DelaySources { file: args.delays.clone(), flags: args.delay.clone() },
        offpeak: args.acc.offpeak(),
        slice_ps: args.acc.slice_ps()?,
        read: args.read.read_options(),
        pass: common::pass_mode(&args.pass)?,
        convention,
        document: super::wants_document(&args.out, g),
    };
    let outcome = chsh::run(&job)?;
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
    super::emit_document(outcome.document.as_ref(), &args.out, g)?;
    if !args.out.to_stdout() {
        print(&outcome, g);
    }
    Ok(())
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
