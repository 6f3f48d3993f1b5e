//! `tagsieve simulate`: parse the model parameters (scenario defaults), build a run
//! configuration and hand it to `simulate::write_run`; print a summary.

use super::Global;
use clap::ValueEnum;
use tagsieve::manifest::{InputFormat, Settings, Setup};
use tagsieve::jobs::simulate::SimulateJob;
use tagsieve::simulate::{self, chsh_labels, plan_blocks, Correlation, DetectorModel, RunConfig, SettingLabel, SourceModel};
use tagsieve::{Error, Result};

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Output directory (created if missing); gets the block files and run.toml.
    #[arg(short = 'o', long = "output", value_name = "DIR", required_unless_present = "out")]
    pub output: Option<std::path::PathBuf>,
    /// Deprecated spelling of --output.
    #[arg(long = "out", value_name = "DIR", hide = true, conflicts_with = "output")]
    pub out: Option<std::path::PathBuf>,
    /// Replace existing files in DIR.
    #[arg(long)]
    pub force: bool,
    /// Random seed (integer); the same seed gives the same tags on any thread count.
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub seed: u64,
    /// Correlation model: quantum (V·cos 2(α−β)) or lhv (local hidden variables, |S| ≤ 2).
    #[arg(long, value_enum, default_value_t = ModelArg::Quantum)]
    pub model: ModelArg,
    /// Detector set-up: four (two per side) or one-per-side (only the + detectors; four blocks per setting pair).
    #[arg(long, value_enum, default_value_t = SetupArg::Four)]
    pub setup: SetupArg,
    /// Pair emission rate (pairs per second, Hz).
    #[arg(long, default_value_t = 250_000.0, value_name = "HZ")]
    pub pair_rate_hz: f64,
    /// Source visibility V (dimensionless, 0 to 1).
    #[arg(long, default_value_t = 0.95, value_name = "V")]
    pub visibility: f64,
    /// Length of each block, s.
    #[arg(long, default_value_t = 2.0, value_name = "S")]
    pub duration_s: f64,
    /// CHSH analyzer angles a,a',b,b' (degrees).
    #[arg(long, value_name = "DEG,DEG,DEG,DEG", default_value = "0,45,22.5,67.5", value_delimiter = ',')]
    pub angles: Vec<f64>,
    /// Visibility series instead of CHSH: Alice (Larch) fixed at a, Bob (Rowan) at each of
    /// these angles (degrees), e.g. 0,22.5,45,67.5,90. Default: none (the four CHSH blocks).
    #[arg(long, value_name = "DEG,...", value_delimiter = ',')]
    pub series: Option<Vec<f64>>,
    /// Override a detector, CH:key=value[,key=value...] (repeatable). Keys (units):
    /// name, efficiency (0–1), dark_rate_hz (Hz), jitter_sigma_ps (ps), dead_time_ps (ps),
    /// delay_ps (ps). Defaults: the Larch–Rowan scenario, channels 1–4.
    #[arg(long = "detector", value_name = "CH:KEY=VALUE,...")]
    pub detectors: Vec<String>,
    /// File format of the blocks: container (one .tsieve file), arrays (one u64 file per
    /// channel) or records (16-byte interleaved records).
    #[arg(long, value_enum, default_value_t = FormatArg::Container)]
    pub format: FormatArg,
    /// Coincidence window w to record in run.toml, ps; default: none, chosen later by a sweep.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, short = 'w', value_name = "PS")]
    pub window_ps: Option<u64>,
    /// Leave the true cable delays out of run.toml (so they must be found with scan).
    #[arg(long)]
    pub omit_delays: bool,
    /// Two recorders: re-stamp these channels (comma-separated) on a second recorder's own
    /// clock, and write each block's true clock map beside it as BLOCK.clock-true.toml.
    /// Default: one recorder. The field deployment's second site is 3,4.
    #[arg(long, value_name = "CH,...", value_delimiter = ',')]
    pub second_site: Option<Vec<u32>>,
    /// Second recorder: frequency offset ε, ppm (positive: its clock runs fast).
    #[arg(long, default_value_t = 7.3, value_name = "PPM", allow_negative_numbers = true, requires = "second_site")]
    pub clock_ppm: f64,
    /// Second recorder: its time at the first recorder's time 0, s (the start offset).
    #[arg(long, default_value_t = 0.4, value_name = "S", allow_negative_numbers = true, requires = "second_site")]
    pub clock_offset_s: f64,
    /// Second recorder: Allan deviation of its wander at 1 s (random walk in frequency; 0: none).
    #[arg(long, default_value_t = 1e-10, value_name = "ADEV", requires = "second_site")]
    pub clock_adev: f64,
    /// Second recorder: a forward jump of its clock at this time, s (with --clock-step-ps).
    #[arg(long, value_name = "S", requires_all = ["second_site", "clock_step_ps"])]
    pub clock_step_at_s: Option<f64>,
    /// Second recorder: size of that jump, ps (≥ 0).
    #[arg(long, value_name = "PS", requires = "clock_step_at_s")]
    pub clock_step_ps: Option<f64>,
    #[command(flatten)]
    pub threads: super::ThreadArgs,
}

impl Args {
    /// The output directory, from --output or its deprecated spelling --out.
    fn output_dir(&self) -> Result<std::path::PathBuf> {
        super::deprecated(self.out.clone(), "--out", "-o/--output")
            .or_else(|| self.output.clone())
            .ok_or_else(|| Error::Usage("simulate: give the output directory with -o/--output DIR".into()))
    }
}

#[derive(ValueEnum, Clone, Copy, Debug)]
pub enum ModelArg {
    Quantum,
    Lhv,
}

#[derive(ValueEnum, Clone, Copy, Debug)]
pub enum SetupArg {
    Four,
    OnePerSide,
}

#[derive(ValueEnum, Clone, Copy, Debug)]
pub enum FormatArg {
    Container,
    Arrays,
    Records,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    let job = SimulateJob { ctx: super::context(g), run: config(&args)?, second_site: second_site(&args), output: args.output_dir()?, force: args.force };
    let summary = tagsieve::jobs::simulate::run(&job)?;
    if g.json {
        let text = serde_json::to_string_pretty(&summary).map_err(|e| Error::Usage(format!("simulate: JSON summary: {e}")))?;
        println!("{text}");
    } else if !g.quiet {
        for b in &summary.blocks {
            let counts: Vec<String> = b.tags_per_channel.iter().map(|(ch, n)| format!("ch{ch} {n}")).collect();
            println!("{:<10} α {:>6}° β {:>6}°  {}", b.name, b.alpha_deg, b.beta_deg, counts.join(", "));
        }
        println!("{} blocks, {} tags; manifest {}", summary.blocks.len(), summary.total_tags, summary.manifest.display());
    }
    Ok(())
}

fn second_site(args: &Args) -> Option<simulate::SecondSite> {
    let channels = args.second_site.clone()?;
    let step = args.clock_step_at_s.zip(args.clock_step_ps).map(|(at_s, size_ps)| simulate::clocks::ClockStep { at_s, size_ps });
    let clock = simulate::clocks::SiteClock {
        ppm: args.clock_ppm,
        start_offset_ps: args.clock_offset_s * 1e12,
        adev_1s: args.clock_adev,
        step,
        seed: args.seed,
    };
    Some(simulate::SecondSite { channels, clock })
}

fn config(args: &Args) -> Result<RunConfig> {
    let setup = match args.setup {
        SetupArg::Four => Setup::FourDetectors,
        SetupArg::OnePerSide => Setup::OnePerSide,
    };
    let correlation = match args.model {
        ModelArg::Quantum => Correlation::Quantum,
        ModelArg::Lhv => Correlation::LocalHiddenVariable,
    };
    let source = SourceModel { pair_rate_hz: args.pair_rate_hz, visibility: args.visibility, correlation };
    let mut detectors = simulate::scenario_detectors();
    for spec in &args.detectors {
        apply_override(&mut detectors, spec)?;
    }
    if setup == Setup::OnePerSide {
        detectors.retain(|d| d.port == tagsieve::manifest::Port::Plus);
    }
    let [a, a2, b, b2] = args.angles[..] else {
        return Err(Error::Usage("--angles: expected four angles a,a',b,b' in degrees".into()));
    };
    let (alice, bob) = match &args.series {
        None => chsh_labels(a, a2, b, b2),
        Some(betas) => (
            vec![SettingLabel::new("a", a)],
            betas.iter().enumerate().map(|(i, &beta)| SettingLabel::new(&format!("b{i}"), beta)).collect(),
        ),
    };
    let settings = Settings {
        alice: alice.iter().map(|s| (s.label.clone(), s.angle_deg)).collect(),
        bob: bob.iter().map(|s| (s.label.clone(), s.angle_deg)).collect(),
    };
    let description = format!(
        "simulated by tagsieve simulate {}: model {}, seed {}, {} pairs/s, V = {}, {} s per block",
        env!("CARGO_PKG_VERSION"),
        args.model.to_possible_value().map_or_else(String::new, |v| v.get_name().to_string()),
        args.seed,
        args.pair_rate_hz,
        args.visibility,
        args.duration_s
    );
    Ok(RunConfig {
        source,
        detectors,
        setup,
        settings,
        blocks: plan_blocks(setup, &alice, &bob),
        duration_s: args.duration_s,
        seed: args.seed,
        format: match args.format {
            FormatArg::Container => InputFormat::Container,
            FormatArg::Arrays => InputFormat::Arrays,
            FormatArg::Records => InputFormat::Records,
        },
        window_ps: args.window_ps,
        omit_delays: args.omit_delays,
        description,
    })
}

/// `CH:key=value,...` applied to the detector on channel CH.
fn apply_override(detectors: &mut [DetectorModel], spec: &str) -> Result<()> {
    let usage = |m: String| Error::Usage(format!("--detector {spec:?}: {m}"));
    let (ch, rest) = spec.split_once(':').ok_or_else(|| usage("expected CH:key=value[,key=value...]".into()))?;
    let ch: u32 = ch.trim().parse().map_err(|_| usage(format!("{ch:?} is not a channel number")))?;
    let known: Vec<String> = detectors.iter().map(|d| d.channel.to_string()).collect();
    let det = detectors
        .iter_mut()
        .find(|d| d.channel == ch)
        .ok_or_else(|| usage(format!("no detector on channel {ch} (known: {})", known.join(", "))))?;
    for kv in rest.split(',').map(str::trim).filter(|s| !s.is_empty()) {
        let (k, v) = kv.split_once('=').ok_or_else(|| usage(format!("{kv:?} is not key=value")))?;
        let float = || v.parse::<f64>().map_err(|_| usage(format!("{k}={v}: expected a number")));
        let int = || v.parse::<u64>().map_err(|_| usage(format!("{k}={v}: expected a whole number of ps")));
        match k {
            "name" => det.name = v.to_string(),
            "efficiency" => det.efficiency = float()?,
            "dark_rate_hz" => det.dark_rate_hz = float()?,
            "jitter_sigma_ps" => det.jitter_sigma_ps = float()?,
            "dead_time_ps" => det.dead_time_ps = int()?,
            "delay_ps" => det.delay_ps = int()?,
            _ => {
                return Err(usage(format!(
                    "unknown key {k:?} (known: name, efficiency, dark_rate_hz, jitter_sigma_ps, dead_time_ps, delay_ps)"
                )))
            }
        }
    }
    Ok(())
}
