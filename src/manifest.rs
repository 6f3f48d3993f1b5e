//! The run manifest: which files hold each block, the channels and their roles, delays,
//! the coincidence window and each block's analyzer settings (TOML, our own schema,
//! documented in docs/manifest.md). Loading rejects unknown keys and inconsistencies with line numbers.

use crate::{Channel, Error, Result};
use serde::de::IgnoredAny;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The schema version this build reads and writes.
pub const MANIFEST_VERSION: u32 = 1;

/// The two ends of the link: Alice (Larch in the demo) and Bob (Rowan).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Side {
    Alice = 0,
    Bob = 1,
}

/// An analyzer output, i.e. an outcome: + (x = +1) or − (x = −1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Port {
    Plus = 0,
    Minus = 1,
}

impl Port {
    pub fn other(self) -> Port {
        match self {
            Port::Plus => Port::Minus,
            Port::Minus => Port::Plus,
        }
    }
    /// +1 or −1.
    pub fn sign(self) -> i32 {
        match self {
            Port::Plus => 1,
            Port::Minus => -1,
        }
    }
    /// The analyzer rotation that sends this outcome to the + output: 0° or 90°.
    pub fn extra_angle_deg(self) -> f64 {
        match self {
            Port::Plus => 0.0,
            Port::Minus => 90.0,
        }
    }
    fn symbol(self) -> char {
        match self {
            Port::Plus => '+',
            Port::Minus => '-',
        }
    }
    fn from_symbol(c: char) -> Option<Port> {
        match c {
            '+' => Some(Port::Plus),
            '-' => Some(Port::Minus),
            _ => None,
        }
    }
}

/// A channel's job: one side's + or − output.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Role {
    pub side: Side,
    pub port: Port,
}

impl Role {
    pub const ALICE_PLUS: Role = Role { side: Side::Alice, port: Port::Plus };
    pub const ALICE_MINUS: Role = Role { side: Side::Alice, port: Port::Minus };
    pub const BOB_PLUS: Role = Role { side: Side::Bob, port: Port::Plus };
    pub const BOB_MINUS: Role = Role { side: Side::Bob, port: Port::Minus };
    pub const ALL: [Role; 4] = [Role::ALICE_PLUS, Role::ALICE_MINUS, Role::BOB_PLUS, Role::BOB_MINUS];
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let side = match self.side {
            Side::Alice => "alice",
            Side::Bob => "bob",
        };
        write!(f, "{side}{}", self.port.symbol())
    }
}

/// How a setting pair is measured.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Setup {
    /// Two detectors per side: each block gives all four outcome combinations.
    #[serde(rename = "four-detectors")]
    FourDetectors,
    /// Only the + detectors: each setting pair is four blocks with the analyzers at α or
    /// α+90°, β or β+90°; counts are compared per live time.
    #[serde(rename = "one-per-side")]
    OnePerSide,
}

impl Setup {
    /// The roles that must have a channel.
    pub fn required_roles(self) -> &'static [Role] {
        match self {
            Setup::FourDetectors => &Role::ALL,
            Setup::OnePerSide => &[Role::ALICE_PLUS, Role::BOB_PLUS],
        }
    }
}

/// The outcome pair a one-detector-per-side block stands for, written `"+-"` (Alice +, Bob −).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub struct Outcomes {
    pub alice: Port,
    pub bob: Port,
}

impl Outcomes {
    pub const ALL: [Outcomes; 4] = [
        Outcomes { alice: Port::Plus, bob: Port::Plus },
        Outcomes { alice: Port::Plus, bob: Port::Minus },
        Outcomes { alice: Port::Minus, bob: Port::Plus },
        Outcomes { alice: Port::Minus, bob: Port::Minus },
    ];
}

impl TryFrom<String> for Outcomes {
    type Error = String;
    fn try_from(s: String) -> std::result::Result<Self, String> {
        let mut cs = s.chars().map(Port::from_symbol);
        match (cs.next(), cs.next(), cs.next()) {
            (Some(Some(alice)), Some(Some(bob)), None) => Ok(Outcomes { alice, bob }),
            _ => Err(format!("outcomes = {s:?}: expected two of + and -, Alice first (\"++\", \"+-\", \"-+\", \"--\")")),
        }
    }
}

impl From<Outcomes> for String {
    fn from(o: Outcomes) -> String {
        format!("{}{}", o.alice.symbol(), o.bob.symbol())
    }
}

/// How a block's `inputs` strings are to be read (the reader layer parses them).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum InputFormat {
    /// One container file.
    Container,
    /// Per-channel u64 arrays, each input `CH=PATH`.
    Arrays,
    /// Interleaved records; needs `layout`.
    Records,
}

/// One detector channel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChannelSpec {
    pub number: Channel,
    pub name: String,
    /// Delay subtracted from this channel's tags (ps); absent when `delays_file` is used.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub delay_ps: Option<i64>,
}

/// Which channel plays which role.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Roles {
    #[serde(rename = "alice+", default, skip_serializing_if = "Option::is_none")]
    pub alice_plus: Option<Channel>,
    #[serde(rename = "alice-", default, skip_serializing_if = "Option::is_none")]
    pub alice_minus: Option<Channel>,
    #[serde(rename = "bob+", default, skip_serializing_if = "Option::is_none")]
    pub bob_plus: Option<Channel>,
    #[serde(rename = "bob-", default, skip_serializing_if = "Option::is_none")]
    pub bob_minus: Option<Channel>,
}

impl Roles {
    pub fn get(&self, role: Role) -> Option<Channel> {
        *self.slot(role)
    }
    pub fn set(&mut self, role: Role, channel: Option<Channel>) {
        *self.slot_mut(role) = channel;
    }
    fn slot(&self, role: Role) -> &Option<Channel> {
        match (role.side, role.port) {
            (Side::Alice, Port::Plus) => &self.alice_plus,
            (Side::Alice, Port::Minus) => &self.alice_minus,
            (Side::Bob, Port::Plus) => &self.bob_plus,
            (Side::Bob, Port::Minus) => &self.bob_minus,
        }
    }
    fn slot_mut(&mut self, role: Role) -> &mut Option<Channel> {
        match (role.side, role.port) {
            (Side::Alice, Port::Plus) => &mut self.alice_plus,
            (Side::Alice, Port::Minus) => &mut self.alice_minus,
            (Side::Bob, Port::Plus) => &mut self.bob_plus,
            (Side::Bob, Port::Minus) => &mut self.bob_minus,
        }
    }
}

/// Analyzer settings by label, angles in degrees, per side. Written in natural label order
/// (b0, b1, b2, b10: digit runs compare as numbers).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Settings {
    #[serde(default, serialize_with = "in_natural_order")]
    pub alice: BTreeMap<String, f64>,
    #[serde(default, serialize_with = "in_natural_order")]
    pub bob: BTreeMap<String, f64>,
}

fn in_natural_order<S: serde::Serializer>(m: &BTreeMap<String, f64>, s: S) -> std::result::Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut keys: Vec<&String> = m.keys().collect();
    keys.sort_by(|a, b| natural_cmp(a, b));
    let mut map = s.serialize_map(Some(keys.len()))?;
    for k in keys {
        map.serialize_entry(k, &m[k])?;
    }
    map.end()
}

/// Natural order of labels: runs of ASCII digits compare by value, everything else by
/// character ("b2" < "b10"); ties broken by plain string order so the order is total.
pub fn natural_cmp(a: &str, b: &str) -> std::cmp::Ordering {
    fn runs(s: &str) -> Vec<(bool, &str)> {
        let mut out = Vec::new();
        let mut start = 0;
        let bytes = s.as_bytes();
        for i in 1..=bytes.len() {
            if i == bytes.len() || bytes[i].is_ascii_digit() != bytes[start].is_ascii_digit() {
                out.push((bytes[start].is_ascii_digit(), &s[start..i]));
                start = i;
            }
        }
        out
    }
    let (ra, rb) = (runs(a), runs(b));
    for (x, y) in ra.iter().zip(&rb) {
        let o = match (x, y) {
            ((true, dx), (true, dy)) => {
                let (tx, ty) = (dx.trim_start_matches('0'), dy.trim_start_matches('0'));
                tx.len().cmp(&ty.len()).then_with(|| tx.cmp(ty))
            }
            ((_, sx), (_, sy)) => sx.cmp(sy),
        };
        if o.is_ne() {
            return o;
        }
    }
    ra.len().cmp(&rb.len()).then_with(|| a.cmp(b))
}

/// One block of tags: a stretch of time at one setting pair.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BlockSpec {
    pub name: String,
    /// Alice's setting label (a key of `[settings.alice]`).
    pub alice: String,
    /// Bob's setting label (a key of `[settings.bob]`).
    pub bob: String,
    /// One detector per side only: the outcome pair this block measures.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub outcomes: Option<Outcomes>,
    pub format: InputFormat,
    /// Input strings for the reader, paths relative to the manifest's directory.
    pub inputs: Vec<String>,
    /// Record layout (format `records` only): a layout file relative to the manifest's
    /// directory, or a compact layout spec such as `rec=16,time=0:8:le,chan=8:4:le,tick_ps=1`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub layout: Option<String>,
    /// Live time of the block (s), when known; otherwise taken from the tags.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub live_time_s: Option<f64>,
}

/// A run manifest. Field order is the TOML order: plain keys first, then tables.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Manifest {
    pub manifest_version: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub description: Option<String>,
    pub setup: Setup,
    /// Coincidence window (ps); absent → chosen by a sweep.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub window_ps: Option<u64>,
    /// Delays file written by `scan`, relative to the manifest's directory.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub delays_file: Option<String>,
    pub roles: Roles,
    pub settings: Settings,
    #[serde(rename = "channel", default)]
    pub channels: Vec<ChannelSpec>,
    #[serde(rename = "block", default)]
    pub blocks: Vec<BlockSpec>,
    /// Directory the relative paths are resolved against (the manifest's own).
    #[serde(skip)]
    pub base_dir: PathBuf,
}

/// The blocks of one (Alice label, Bob label) pair.
#[derive(Debug, Clone, PartialEq)]
pub struct SettingPair {
    pub alice: String,
    pub bob: String,
    pub alpha_deg: f64,
    pub beta_deg: f64,
    /// Indices into [`Manifest::blocks`], in manifest order.
    pub blocks: Vec<usize>,
}

impl Manifest {
    /// Read and validate a manifest; relative paths resolve against its directory.
    pub fn load(path: &Path) -> Result<Manifest> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let base = path.parent().map(Path::to_path_buf).unwrap_or_default();
        Manifest::parse(&text, path, &base)
    }

    /// Parse and validate manifest text; `path` names it in errors, `base_dir` anchors paths.
    pub fn parse(text: &str, path: &Path, base_dir: &Path) -> Result<Manifest> {
        let config_error = |line, message: String| Error::Config { path: path.to_path_buf(), line, message };
        let mut m: Manifest = toml::from_str(text).map_err(|e| {
            let line = e.span().map_or(1, |s| line_of(text, s.start));
            config_error(line, e.message().to_string())
        })?;
        let spans: SpanIndex = toml::from_str(text).unwrap_or_default();
        m.base_dir = base_dir.to_path_buf();
        m.validate(&Lines { text, spans: &spans }).map_err(|(line, msg)| config_error(line, msg))?;
        Ok(m)
    }

    /// The manifest as TOML text (what [`Manifest::save`] writes).
    pub fn to_toml_string(&self) -> Result<String> {
        let body = toml::to_string(self).map_err(|e| Error::Usage(format!("manifest: cannot write TOML: {e}")))?;
        Ok(format!("# tagsieve run manifest (schema: docs/manifest.md)\n{}", quote_role_keys(&body)))
    }

    /// Write the manifest atomically to `path` (refusing to replace it unless `force`).
    pub fn save(&self, path: &Path, force: bool) -> Result<()> {
        crate::sys::atomic::write_bytes(path, self.to_toml_string()?.as_bytes(), force)
    }

    /// `p` resolved against the manifest's directory (absolute paths stay as they are).
    pub fn resolve(&self, p: &str) -> PathBuf {
        self.base_dir.join(p)
    }

    /// The block's inputs as the reader takes them, with paths resolved (`CH=PATH` keeps `CH=`).
    pub fn block_inputs(&self, block: &BlockSpec) -> Vec<String> {
        block
            .inputs
            .iter()
            .map(|s| match (block.format, split_channel_arg(s)) {
                (InputFormat::Arrays, Some((ch, p))) => format!("{ch}={}", self.resolve(p).display()),
                _ => self.resolve(s).display().to_string(),
            })
            .collect()
    }

    /// The block's record layout as `RecordLayout::from_arg` takes it: a file path resolved
    /// against the manifest's directory, or a compact spec (holds `=`) unchanged.
    pub fn block_layout(&self, block: &BlockSpec) -> Option<String> {
        let l = block.layout.as_deref()?;
        Some(if l.contains('=') { l.to_string() } else { self.resolve(l).display().to_string() })
    }

    /// The delays file, resolved.
    pub fn delays_file_path(&self) -> Option<PathBuf> {
        self.delays_file.as_deref().map(|p| self.resolve(p))
    }

    /// Per-channel delays given in the manifest (channels without `delay_ps` are left out).
    pub fn channel_delays_ps(&self) -> BTreeMap<Channel, i64> {
        self.channels.iter().filter_map(|c| c.delay_ps.map(|d| (c.number, d))).collect()
    }

    pub fn channel(&self, number: Channel) -> Option<&ChannelSpec> {
        self.channels.iter().find(|c| c.number == number)
    }

    /// The channel playing `role`.
    pub fn channel_of(&self, role: Role) -> Option<Channel> {
        self.roles.get(role)
    }

    /// The role of `channel`, if any.
    pub fn role_of(&self, channel: Channel) -> Option<Role> {
        Role::ALL.into_iter().find(|r| self.roles.get(*r) == Some(channel))
    }

    /// The physical analyzer angles of a block (degrees): setting angles, plus 90° for a −
    /// outcome of a one-detector-per-side block. `None` for an unknown label.
    pub fn block_angles_deg(&self, block: &BlockSpec) -> Option<(f64, f64)> {
        let a = self.settings.alice.get(&block.alice)?;
        let b = self.settings.bob.get(&block.bob)?;
        let (ea, eb) = block.outcomes.map_or((0.0, 0.0), |o| (o.alice.extra_angle_deg(), o.bob.extra_angle_deg()));
        Some((a + ea, b + eb))
    }

    /// The setting pairs that have blocks, in order of first appearance.
    pub fn setting_pairs(&self) -> Vec<SettingPair> {
        let mut pairs: Vec<SettingPair> = Vec::new();
        for (i, b) in self.blocks.iter().enumerate() {
            if let Some(p) = pairs.iter_mut().find(|p| p.alice == b.alice && p.bob == b.bob) {
                p.blocks.push(i);
                continue;
            }
            pairs.push(SettingPair {
                alice: b.alice.clone(),
                bob: b.bob.clone(),
                alpha_deg: self.settings.alice.get(&b.alice).copied().unwrap_or(f64::NAN),
                beta_deg: self.settings.bob.get(&b.bob).copied().unwrap_or(f64::NAN),
                blocks: vec![i],
            });
        }
        pairs
    }
}

/// The role keys quoted alike: the TOML writer must quote `"alice+"` but would leave
/// `alice-` bare (a valid bare key), which reads as two conventions. Only the `[roles]`
/// table's own `alice±`/`bob±` lines are touched.
fn quote_role_keys(toml_text: &str) -> String {
    let mut in_roles = false;
    let mut out = String::with_capacity(toml_text.len() + 8);
    for line in toml_text.split_inclusive('\n') {
        if line.starts_with('[') {
            in_roles = line.trim_end() == "[roles]";
        }
        let bare = Role::ALL.iter().map(|r| r.to_string()).find(|k| line.starts_with(&format!("{k} = ")));
        match bare {
            Some(k) if in_roles => out.push_str(&format!("\"{k}\"{}", &line[k.len()..])),
            _ => out.push_str(line),
        }
    }
    out
}

/// `CH=PATH` → (CH, PATH) when CH is a channel number.
pub fn split_channel_arg(s: &str) -> Option<(Channel, &str)> {
    let (ch, p) = s.split_once('=')?;
    Some((ch.trim().parse().ok()?, p))
}

fn line_of(text: &str, offset: usize) -> usize {
    text.as_bytes()[..offset.min(text.len())].iter().filter(|&&b| b == b'\n').count() + 1
}

type Invalid = (usize, String);

mod validate;
use validate::{Lines, SpanIndex};
