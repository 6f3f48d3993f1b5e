//! `tagsieve demo`: arguments → the demo job ([`tagsieve::jobs::demo`], the same jobs a
//! user runs, on simulated Larch–Rowan data); its summary → text or JSON on stdout.

use super::common;
use super::Global;
use std::path::PathBuf;
use tagsieve::jobs::demo::{run_demo, DemoConfig, DemoSummary};
use tagsieve::Result;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Folder for the simulated run, the tables and the plots (created; files the demo
    /// writes there are replaced).
    #[arg(short = 'o', long = "output", default_value = "tagsieve-demo", value_name = "DIR")]
    pub output: PathBuf,
    /// Deprecated spelling of --output.
    #[arg(long = "out", value_name = "DIR", hide = true, conflicts_with = "output")]
    pub out: Option<PathBuf>,
    /// Random seed of the simulation (integer).
    #[arg(long, default_value_t = 2026, value_name = "N")]
    pub seed: u64,
    /// Length of each CHSH block, s.
    #[arg(long, default_value_t = 2.0, value_name = "S")]
    pub duration_s: f64,
    /// Deprecated spelling of --duration-s.
    #[arg(long = "block-s", value_name = "S", hide = true, conflicts_with = "duration_s")]
    pub block_s: Option<f64>,
    #[command(flatten)]
    pub threads: super::ThreadArgs,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    let out_dir = super::deprecated(args.out.clone(), "--out", "-o/--output").unwrap_or_else(|| args.output.clone());
    let duration_s = super::deprecated(args.block_s, "--block-s", "--duration-s").unwrap_or(args.duration_s);
    let s = run_demo(&DemoConfig { out_dir, seed: args.seed, duration_s, quiet: g.quiet || g.json, command_line: common::command_line() })?;
    if g.json {
        common::print_json(&summary_json(&s));
        return Ok(());
    }
    println!("tagsieve demo — simulated Larch–Rowan link, {} tags in 4 blocks", tagsieve::units::fmt_count(s.events));
    println!("delays found by scan (reference channel 1):");
    for d in &s.delays {
        println!("  channel {}: {:>7} ps   (simulated {:>7} ps)", d.channel, d.found_ps, d.true_ps);
    }
    for ((a, b), f) in &s.fwhm_ps {
        println!("  pair {a}:{b} peak FWHM {}", common::ps(*f));
    }
    let each: Vec<String> = s.recommended_ps.iter().map(|((a, b), w)| format!("{a}:{b} {}", common::ps(*w as f64))).collect();
    println!("window: {}, the widest of the pairs' sweep recommendations (largest net/σ: {})", common::ps(s.window_ps as f64), each.join(", "));
    let cars: Vec<String> = s.car.iter().map(|((a, b), c)| format!("{a}:{b} {c:.0}")).collect();
    println!("CAR in block ab: {}", cars.join(", "));
    println!("S = {:.4} ± {:.4} (raw), {}", s.s_raw.0, s.s_raw.1, s.verdict);
    if let Some((v, e)) = s.s_corrected {
        println!("S = {v:.4} ± {e:.4} (accidental-corrected)");
    }
    if let Some((v, e)) = s.visibility {
        println!("visibility from the series: V = {v:.4} ± {e:.4}");
    }
    println!("(i.i.d. statistics: not a loophole-free Bell test, not a security certificate)");
    println!("tables:");
    for p in &s.tables {
        println!("  {}", p.display());
    }
    println!("plots:");
    for p in &s.plots {
        println!("  {}", p.display());
    }
    Ok(())
}

/// The demo's summary for `--json`, under the Document's conventions (docs/hdf5-layout.md):
/// units in names, each estimate `x` beside `x_sigma`, per-pair values as `{a, b, …}` rows;
/// the S names are those of `/chsh`, the visibility's those of `/visibility/fits`.
fn summary_json(s: &DemoSummary) -> serde_json::Value {
    use serde_json::json;
    let per_pair = |key: &str, v: Vec<((u32, u32), serde_json::Value)>| -> Vec<serde_json::Value> {
        v.into_iter().map(|((a, b), x)| json!({ "a": a, "b": b, key: x })).collect()
    };
    json!({
        "events": s.events,
        "delays": s.delays,
        "peaks": per_pair("peak_fwhm_ps", s.fwhm_ps.iter().map(|&(p, f)| (p, json!(f))).collect()),
        "window_ps": s.window_ps,
        "recommended": per_pair("recommended_window_ps", s.recommended_ps.iter().map(|&(p, w)| (p, json!(w))).collect()),
        "car": per_pair("car", s.car.iter().map(|&(p, c)| (p, json!(c))).collect()),
        "s_raw": s.s_raw.0,
        "s_raw_sigma": s.s_raw.1,
        "violation_raw_sigma": s.violation_sigma,
        "s_corrected": s.s_corrected.map(|x| x.0),
        "s_corrected_sigma": s.s_corrected.map(|x| x.1),
        "verdict": s.verdict,
        "visibility": s.visibility.map(|x| x.0),
        "visibility_sigma": s.visibility.map(|x| x.1),
        "tables": s.tables,
        "plots": s.plots,
    })
}
