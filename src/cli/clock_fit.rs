//! `tagsieve clock-fit`: arguments → a clock-fit job ([`tagsieve::jobs::clock_fit`]); its
//! map → the clock file (docs/clocks.md) and a summary on stdout. No peak: exit 2.

use super::Global;
use std::path::PathBuf;
use tagsieve::jobs::clock_fit::{self, ClockFitJob, ClockFitOutcome};
use tagsieve::jobs::inputs::DelaySources;
use tagsieve::Result;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Inputs holding both sites' channels: CH=PATH or CH:NAME=PATH for a per-channel u64
    /// array (ps), a container file, or an interleaved-record file (needs --layout).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<String>,
    /// Record layout for interleaved-record inputs (file or compact spec, docs/formats.md).
    #[arg(long, value_name = "FILE|SPEC")]
    pub layout: Option<String>,
    /// Channels recorded on the second recorder's clock (comma-separated); all others are the first's.
    #[arg(long, value_name = "CH,...", value_delimiter = ',', required = true)]
    pub second_site: Vec<u32>,
    /// Delay of a channel in ps, `CH=PS`; repeatable (the same delays `count` will use).
    #[arg(long = "delay", value_name = "CH=PS")]
    pub delay: Vec<String>,
    /// Delays file written by `tagsieve scan --reference`.
    #[arg(long, value_name = "FILE")]
    pub delays: Option<PathBuf>,
    /// Offsets searched: ± this many seconds.
    #[arg(long, default_value_t = 1.0, value_name = "S")]
    pub offset_range_s: f64,
    /// Frequency offsets searched: ± this many ppm.
    #[arg(long, default_value_t = 50.0, value_name = "PPM")]
    pub ppm_range: f64,
    /// Clock file to write (TOML, docs/clocks.md).
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: PathBuf,
    /// Replace an existing clock file.
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub read: super::ReadArgs,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    super::common::precheck_output(&args.output, args.force)?;
    let job = ClockFitJob {
        inputs: args.inputs.clone(),
        layout: args.layout.clone(),
        read: args.read.read_options(),
        second_site: args.second_site.clone(),
        delays: DelaySources { file: args.delays.clone(), flags: args.delay.clone() },
        offset_range_s: args.offset_range_s,
        ppm_range: args.ppm_range,
    };
    let ClockFitOutcome { map, coarse } = clock_fit::run(&job)?;
    map.save(&args.output, args.force)?;
    if g.json {
        super::common::print_json(&serde_json::json!({ "coarse": coarse, "knots": map.knots.len(), "lost": map.lost, "steps": map.steps, "residual_rms_ps": map.residual_rms_ps, "clock_file": args.output }));
    } else if !g.quiet {
        println!("coarse: offset {:.6} s, {:+.1} ppm, peak {:.1} σ ({:.1} σ required, {} bins)", coarse.offset_ps * 1e-12, coarse.ppm, coarse.significance, coarse.threshold, super::common::ps(coarse.bin_ps as f64));
        let (k0, k1) = (map.knots[0], map.knots[map.knots.len() - 1]);
        let ppm = ((k1.site_ps - k0.site_ps) as f64 / (k1.first_ps - k0.first_ps) as f64 - 1.0) * 1e6;
        println!("map: {} knots over {:.3} s, mean frequency offset {:+.4} ppm, pair residual RMS {}", map.knots.len(), (k1.site_ps - k0.site_ps) as f64 * 1e-12, ppm, super::common::ps(map.residual_rms_ps.unwrap_or(f64::NAN)));
        println!("segments without a peak: {}; steps: {}", map.lost.len() - map.steps.len(), map.steps.len());
        for s in &map.steps {
            println!("  step at {:.6} s (second-site time) of {}", s.at_site_ps as f64 * 1e-12, super::common::ps(s.size_ps));
        }
        println!("clock file {}", args.output.display());
    }
    Ok(())
}
