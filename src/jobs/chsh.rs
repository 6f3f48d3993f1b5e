//! The chsh job: count every block of a run manifest at one window, then E per setting
//! pair, S with σ_S and significance (raw and accidental-corrected), visibility fits and
//! the three-setting form where the blocks allow; tables, provenance and the Document.

use super::count::{count_block, OffPeakChoice, Sourced};
use super::inputs::{open_block, DelaySources};
use super::pass::PassMode;
use super::Context;
use crate::analysis::bell3::{Bell3Result, Convention};
use crate::analysis::chsh::{ChshReport, SettingCounts};
use crate::analysis::visibility::{fit_visibility, AnglePoint, VisibilityFit};
use crate::engine::tables::{BlockTables, CoincidenceRow, Estimate};
use crate::engine::CountConfig;
use crate::manifest::{Manifest, Port, Role, Setup};
use crate::output::{layout, layout_analysis, provenance::Provenance, AttrValue, Document, Group};
use crate::read::ReadOptions;
use crate::{Channel, Error, Result};
use std::path::{Path, PathBuf};

/// CHSH analysis of a run.
#[derive(Debug, Clone)]
pub struct ChshJob {
    pub ctx: Context,
    /// The run manifest (TOML; docs/manifest.md).
    pub manifest: PathBuf,
    /// The window; `None`: the manifest's `window_ps`.
    pub window_ps: Option<Sourced<u64>>,
    /// Delays given by the user, over the manifest's.
    pub delays: DelaySources,
    pub offpeak: OffPeakChoice,
    pub slice_ps: u64,
    pub read: ReadOptions,
    pub pass: PassMode,
    pub convention: Convention,
    pub document: bool,
}

/// Everything the job computes.
#[derive(Debug, Clone)]
pub struct ChshOutcome {
    pub blocks: Vec<BlockTables>,
    pub chsh: Option<ChshReport>,
    pub visibility: Vec<(VisibilityFit, Vec<AnglePoint>)>,
    pub bell3: Option<([f64; 3], Bell3Result)>,
    pub window_ps: u64,
    pub config: CountConfig,
    /// The manifest and every block's input files.
    pub files: Vec<PathBuf>,
    pub provenance: Option<Provenance>,
    pub document: Option<Document>,
}

pub fn run(job: &ChshJob) -> Result<ChshOutcome> {
    let m = Manifest::load(&job.manifest)?;
    check_chsh_blocks(&m, &job.manifest)?;
    let delays = job.delays.resolve(Some(&m))?;
    let window = match &job.window_ps {
        Some(w) => w.clone(),
        None => Sourced {
            value: m.window_ps.ok_or_else(|| {
                Error::Usage(format!("{}: no window: give one, or set window_ps in the manifest (pick one with a sweep)", job.manifest.display()))
            })?,
            from: manifest_line(&job.manifest, "window_ps"),
        },
    };
    let window_ps = window.checked_window()?;
    let cfg = CountConfig { pairs: vec![], delays, window_ps, offsets_ps: job.offpeak.offsets_ps(window_ps), slice_ps: job.slice_ps };
    let (blocks, files) = count_run(&m, &cfg, job.read, job.pass, job.ctx.quiet)?;
    let mut outcome = analyse(&m, blocks, window_ps, job.convention)?;
    outcome.config = CountConfig { pairs: role_pairs(&m)?, ..cfg };
    outcome.files = std::iter::once(job.manifest.clone()).chain(files).collect();
    if job.document {
        let manifest_param: Vec<(&'static str, AttrValue)> = vec![("manifest", AttrValue::Str(job.manifest.display().to_string()))];
        let convention_param: Vec<(&'static str, AttrValue)> = vec![("bell3_convention", AttrValue::Str(layout_analysis::convention_name(job.convention).into()))];
        let p = super::provenance(&job.ctx, "chsh", &[&manifest_param, &outcome.config, &convention_param], &outcome.files)?;
        let mut doc = layout::run_document(&outcome.blocks, &p);
        doc.root.groups.extend(analysis_groups(&outcome));
        outcome.provenance = Some(p);
        outcome.document = Some(doc);
    }
    Ok(outcome)
}

/// Where a manifest sets `key`, for messages: `run.toml: line 7: window_ps` (the line
/// left out when the file cannot be read again).
fn manifest_line(path: &Path, key: &str) -> String {
    let text = std::fs::read_to_string(path).unwrap_or_default();
    let line = text.lines().position(|l| l.trim_start().strip_prefix(key).is_some_and(|rest| rest.trim_start().starts_with('=')));
    match line {
        Some(i) => format!("{}: line {}: {key}", path.display(), i + 1),
        None => format!("{}: {key}", path.display()),
    }
}

/// Two Alice and two Bob settings declare a CHSH set: each of the four setting pairs needs
/// a block, else nothing could be computed. The line given is the end of the file, where
/// the missing [[block]] table would go.
fn check_chsh_blocks(m: &Manifest, path: &Path) -> Result<()> {
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
    let settings = setting_counts(m, &blocks)?;
    let chsh = chsh_report(&settings).transpose()?;
    let visibility = visibility_series(m, &blocks)?
        .into_iter()
        .map(|(basis, pts)| fit_visibility(&basis, &pts).map(|f| (f, pts)))
        .collect::<Result<Vec<_>>>()?;
    let bell3 = bell3_search(&settings, conv);
    Ok(ChshOutcome {
        blocks,
        chsh,
        visibility,
        bell3,
        window_ps,
        config: CountConfig { pairs: vec![], delays: Default::default(), window_ps, offsets_ps: vec![], slice_ps: 0 },
        files: vec![],
        provenance: None,
        document: None,
    })
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

/// Channel pairs a run's CHSH needs: (A±, B±) for four detectors, (A+, B+) for one per side,
/// in the order ++, +−, −+, −−.
pub fn role_pairs(m: &Manifest) -> Result<Vec<(Channel, Channel)>> {
    let ch = |r: Role| m.channel_of(r).ok_or_else(|| Error::Usage(format!("manifest: no channel for role {r:?}")));
    Ok(match m.setup {
        Setup::FourDetectors => vec![
            (ch(Role::ALICE_PLUS)?, ch(Role::BOB_PLUS)?),
            (ch(Role::ALICE_PLUS)?, ch(Role::BOB_MINUS)?),
            (ch(Role::ALICE_MINUS)?, ch(Role::BOB_PLUS)?),
            (ch(Role::ALICE_MINUS)?, ch(Role::BOB_MINUS)?),
        ],
        Setup::OnePerSide => vec![(ch(Role::ALICE_PLUS)?, ch(Role::BOB_PLUS)?)],
    })
}

/// Count every block of a run at one window. `base.pairs` is replaced by the role pairs.
pub fn count_run(m: &Manifest, base: &CountConfig, opts: ReadOptions, mode: PassMode, quiet: bool) -> Result<(Vec<BlockTables>, Vec<PathBuf>)> {
    let cfg = CountConfig { pairs: role_pairs(m)?, ..base.clone() };
    let mut blocks = Vec::with_capacity(m.blocks.len());
    let mut files = Vec::new();
    for b in &m.blocks {
        let sources = open_block(&m.block_inputs(b), m.block_layout(b).as_deref(), opts)?;
        files.extend(sources.iter().map(|s| s.file().path));
        blocks.push(count_block(&b.name, &sources, &cfg, mode, quiet)?);
    }
    Ok((blocks, files))
}

fn row_of(block: &BlockTables, pair: (Channel, Channel)) -> Result<&CoincidenceRow> {
    block
        .coincidences
        .iter()
        .find(|r| (r.a, r.b) == pair)
        .ok_or_else(|| Error::Usage(format!("block {}: no coincidences for pair {}:{}", block.label, pair.0, pair.1)))
}

/// CHSH inputs, one per setting pair, from counted blocks (same order as `m.blocks`).
pub fn setting_counts(m: &Manifest, blocks: &[BlockTables]) -> Result<Vec<SettingCounts>> {
    let pairs = role_pairs(m)?;
    let mut out = Vec::new();
    for sp in m.setting_pairs() {
        let mut counts = [0u64; 4];
        let mut acc = [Estimate { value: 0.0, sigma: 0.0 }; 4];
        let mut live: Option<[f64; 4]> = None;
        match m.setup {
            Setup::FourDetectors => {
                let [i] = sp.blocks[..] else {
                    return Err(Error::Usage(format!("manifest: setting pair ({},{}) needs exactly one block in a four-detector set-up", sp.alice, sp.bob)));
                };
                for (k, &p) in pairs.iter().enumerate() {
                    let r = row_of(&blocks[i], p)?;
                    counts[k] = r.coincidences;
                    acc[k] = r.acc_analytic;
                }
            }
            Setup::OnePerSide => {
                let mut l = [0.0f64; 4];
                for &i in &sp.blocks {
                    let spec = &m.blocks[i];
                    let o = spec.outcomes.ok_or_else(|| Error::Usage(format!("manifest: block {} has no outcomes", spec.name)))?;
                    let k = match (o.alice, o.bob) {
                        (Port::Plus, Port::Plus) => 0,
                        (Port::Plus, Port::Minus) => 1,
                        (Port::Minus, Port::Plus) => 2,
                        (Port::Minus, Port::Minus) => 3,
                    };
                    let r = row_of(&blocks[i], pairs[0])?;
                    counts[k] = r.coincidences;
                    acc[k] = r.acc_analytic;
                    l[k] = spec.live_time_s.unwrap_or_else(|| blocks[i].span.map(|s| crate::units::ps_to_s(s.duration_ps())).unwrap_or(0.0));
                }
                live = Some(l);
            }
        }
        out.push(SettingCounts {
            label_a: sp.alice.clone(),
            label_b: sp.bob.clone(),
            angle_a_deg: sp.alpha_deg,
            angle_b_deg: sp.beta_deg,
            counts,
            accidentals: Some(acc),
            live_time_s: live,
        });
    }
    Ok(out)
}

/// Visibility series: for each Alice setting with ≥ 3 distinct Bob angles, the raw
/// (A+, B+) coincidences against Bob's analyzer angle β (the fit models the background).
pub fn visibility_series(m: &Manifest, blocks: &[BlockTables]) -> Result<Vec<(String, Vec<AnglePoint>)>> {
    let pair = role_pairs(m)?[0];
    let mut by_alice: std::collections::BTreeMap<String, Vec<AnglePoint>> = Default::default();
    for (spec, block) in m.blocks.iter().zip(blocks) {
        if spec.outcomes.is_some_and(|o| o.alice == Port::Minus) {
            continue;
        }
        let Some((_, beta)) = m.block_angles_deg(spec) else { continue };
        let r = row_of(block, pair)?;
        by_alice.entry(spec.alice.clone()).or_default().push(AnglePoint { angle_deg: beta, counts: r.coincidences });
    }
    Ok(by_alice
        .into_iter()
        .filter(|(_, pts)| {
            let mut a: Vec<i64> = pts.iter().map(|p| (p.angle_deg * 1e6).round() as i64).collect();
            a.sort_unstable();
            a.dedup();
            a.len() >= 3
        })
        .collect())
}

/// CHSH on the standard setting pairs (a,b), (a,b'), (a',b), (a',b') when all four are
/// present; `None` when the run has no CHSH settings (e.g. a visibility series).
pub fn chsh_report(settings: &[SettingCounts]) -> Option<Result<ChshReport>> {
    let chosen: Vec<SettingCounts> = settings
        .iter()
        .filter(|s| crate::analysis::chsh::PAIR_ORDER.iter().any(|(a, b)| s.label_a == *a && s.label_b == *b))
        .cloned()
        .collect();
    (chosen.len() == 4).then(|| crate::analysis::chsh::evaluate(&chosen))
}

/// The three-setting form for the first angle triple (x, y, z) whose blocks (x,y), (x,z)
/// and (y,z) all exist, trying Alice angles for x and y and Bob angles for y and z.
pub fn bell3_search(
    settings: &[SettingCounts],
    convention: Convention,
) -> Option<([f64; 3], Bell3Result)> {
    let mut alice: Vec<f64> = settings.iter().map(|s| s.angle_a_deg).collect();
    let mut bob: Vec<f64> = settings.iter().map(|s| s.angle_b_deg).collect();
    for v in [&mut alice, &mut bob] {
        v.sort_by(f64::total_cmp);
        v.dedup();
    }
    for &x in &alice {
        for &y in alice.iter().filter(|&&y| y != x) {
            for &z in bob.iter().filter(|&&z| z != y && z != x) {
                if let Ok(r) = crate::analysis::bell3::evaluate_blocks(settings, [x, y, z], convention, false) {
                    return Some(([x, y, z], r));
                }
            }
        }
    }
    None
}

