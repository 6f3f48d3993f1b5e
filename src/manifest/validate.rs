//! Checks of a parsed manifest beyond what serde enforces (duplicate channels, roles
//! without channels, unknown setting labels, incomplete setting pairs), each with a line.

use super::{line_of, split_channel_arg, InputFormat, Invalid, Manifest, Outcomes, Role, Setup, MANIFEST_VERSION};
use serde::Deserialize;
use toml::Spanned;
use super::IgnoredAny;

type Span = Option<Spanned<IgnoredAny>>;

/// Where things sit in the text: a second, lenient parse that keeps only spans.
#[derive(Deserialize, Default)]
#[serde(default)]
pub(super) struct SpanIndex {
    manifest_version: Span,
    roles: Option<Spanned<RoleSpans>>,
    channel: Vec<ChannelSpans>,
    block: Vec<Spanned<BlockSpans>>,
}

#[derive(Deserialize, Default)]
#[serde(default)]
struct RoleSpans {
    #[serde(rename = "alice+")]
    alice_plus: Span,
    #[serde(rename = "alice-")]
    alice_minus: Span,
    #[serde(rename = "bob+")]
    bob_plus: Span,
    #[serde(rename = "bob-")]
    bob_minus: Span,
}

#[derive(Deserialize, Default)]
#[serde(default)]
struct ChannelSpans {
    number: Span,
    name: Span,
    delay_ps: Span,
}

#[derive(Deserialize, Default)]
#[serde(default)]
struct BlockSpans {
    name: Span,
    alice: Span,
    bob: Span,
    outcomes: Span,
    inputs: Span,
    layout: Span,
    live_time_s: Span,
}

/// Line lookup for validation messages; line 1 when a span is unknown.
pub(super) struct Lines<'a> {
    pub text: &'a str,
    pub spans: &'a SpanIndex,
}

impl Lines<'_> {
    fn at(&self, s: Option<&Spanned<IgnoredAny>>) -> usize {
        s.map_or(1, |s| line_of(self.text, s.span().start))
    }
    fn roles(&self, role: Option<Role>) -> usize {
        let Some(r) = &self.spans.roles else { return 1 };
        let table = line_of(self.text, r.span().start);
        let v = r.get_ref();
        let s = match role {
            Some(Role::ALICE_PLUS) => &v.alice_plus,
            Some(Role::ALICE_MINUS) => &v.alice_minus,
            Some(Role::BOB_PLUS) => &v.bob_plus,
            Some(Role::BOB_MINUS) => &v.bob_minus,
            _ => &None,
        };
        s.as_ref().map_or(table, |s| line_of(self.text, s.span().start))
    }
    fn channel(&self, i: usize) -> Option<&ChannelSpans> {
        self.spans.channel.get(i)
    }
    fn block(&self, i: usize) -> Option<&BlockSpans> {
        self.spans.block.get(i).map(|b| b.get_ref())
    }
    fn block_line(&self, i: usize, pick: fn(&BlockSpans) -> &Span) -> usize {
        let field = self.block(i).and_then(|b| pick(b).as_ref());
        match field {
            Some(s) => line_of(self.text, s.span().start),
            None => self.spans.block.get(i).map_or(1, |b| line_of(self.text, b.span().start)),
        }
    }
}

impl Manifest {
    pub(super) fn validate(&self, lines: &Lines) -> Result<(), Invalid> {
        if self.manifest_version != MANIFEST_VERSION {
            return Err((
                lines.at(lines.spans.manifest_version.as_ref()),
                format!("manifest_version = {}, expected {MANIFEST_VERSION}", self.manifest_version),
            ));
        }
        self.check_channels(lines)?;
        self.check_roles(lines)?;
        self.check_settings()?;
        self.check_blocks(lines)?;
        self.check_pairs_complete(lines)
    }

    fn check_channels(&self, lines: &Lines) -> Result<(), Invalid> {
        if self.channels.is_empty() {
            return Err((1, "no channels: add one [[channel]] table (number, name) per detector".into()));
        }
        for (i, c) in self.channels.iter().enumerate() {
            let spans = lines.channel(i);
            if let Some(first) = self.channels[..i].iter().position(|o| o.number == c.number) {
                let line = lines.at(spans.and_then(|s| s.number.as_ref()));
                let first_line = lines.at(lines.channel(first).and_then(|s| s.number.as_ref()));
                return Err((line, format!("duplicate channel {} (first given on line {first_line})", c.number)));
            }
            if !c.name.is_empty() && self.channels[..i].iter().any(|o| o.name == c.name) {
                return Err((lines.at(spans.and_then(|s| s.name.as_ref())), format!("duplicate channel name {:?}", c.name)));
            }
            if c.delay_ps.is_some() && self.delays_file.is_some() {
                return Err((
                    lines.at(spans.and_then(|s| s.delay_ps.as_ref())),
                    format!("channel {} has delay_ps and the manifest names delays_file: give delays one way only", c.number),
                ));
            }
        }
        Ok(())
    }

    fn check_roles(&self, lines: &Lines) -> Result<(), Invalid> {
        for role in Role::ALL {
            let Some(ch) = self.roles.get(role) else { continue };
            if self.channel(ch).is_none() {
                return Err((lines.roles(Some(role)), format!("role {role} names channel {ch}, which no [[channel]] table defines")));
            }
            if let Some(other) = Role::ALL.into_iter().find(|r| *r < role && self.roles.get(*r) == Some(ch)) {
                return Err((lines.roles(Some(role)), format!("channel {ch} is given two roles ({other} and {role})")));
            }
        }
        for role in self.setup.required_roles() {
            if self.roles.get(*role).is_none() {
                return Err((lines.roles(None), format!("role {role} has no channel; the {} set-up needs {}", setup_word(self.setup), role_list(self.setup))));
            }
        }
        Ok(())
    }

    fn check_settings(&self) -> Result<(), Invalid> {
        for (side, map) in [("alice", &self.settings.alice), ("bob", &self.settings.bob)] {
            if let Some((label, angle)) = map.iter().find(|(_, a)| !a.is_finite()) {
                return Err((1, format!("settings.{side}.{label} = {angle}: expected a finite angle in degrees")));
            }
        }
        Ok(())
    }

    fn check_blocks(&self, lines: &Lines) -> Result<(), Invalid> {
        if self.blocks.is_empty() {
            return Err((line_of(lines.text, lines.text.len()), "no blocks: add one [[block]] table per block of tags".into()));
        }
        for (i, b) in self.blocks.iter().enumerate() {
            if self.blocks[..i].iter().any(|o| o.name == b.name) {
                return Err((lines.block_line(i, |s| &s.name), format!("duplicate block name {:?}", b.name)));
            }
            if !self.settings.alice.contains_key(&b.alice) {
                return Err((lines.block_line(i, |s| &s.alice), unknown_label(&b.name, "alice", &b.alice, &self.settings.alice)));
            }
            if !self.settings.bob.contains_key(&b.bob) {
                return Err((lines.block_line(i, |s| &s.bob), unknown_label(&b.name, "bob", &b.bob, &self.settings.bob)));
            }
            self.check_block_outcomes(i, lines)?;
            self.check_block_inputs(i, lines)?;
        }
        Ok(())
    }

    fn check_block_outcomes(&self, i: usize, lines: &Lines) -> Result<(), Invalid> {
        let b = &self.blocks[i];
        match (self.setup, b.outcomes) {
            (Setup::OnePerSide, None) => Err((
                lines.block_line(i, |s| &s.name),
                format!("block {:?}: the one-per-side set-up needs outcomes = \"++\", \"+-\", \"-+\" or \"--\"", b.name),
            )),
            (Setup::FourDetectors, Some(_)) => Err((
                lines.block_line(i, |s| &s.outcomes),
                format!("block {:?}: outcomes is only for the one-per-side set-up (each four-detector block holds all four)", b.name),
            )),
            _ => Ok(()),
        }
    }

    fn check_block_inputs(&self, i: usize, lines: &Lines) -> Result<(), Invalid> {
        let b = &self.blocks[i];
        let line = lines.block_line(i, |s| &s.inputs);
        if b.inputs.is_empty() {
            return Err((line, format!("block {:?}: inputs is empty", b.name)));
        }
        if b.format == InputFormat::Arrays {
            for s in &b.inputs {
                match split_channel_arg(s) {
                    Some((ch, _)) if self.channel(ch).is_some() => {}
                    Some((ch, _)) => return Err((line, format!("block {:?}: input {s:?} names channel {ch}, which no [[channel]] table defines", b.name))),
                    None => return Err((line, format!("block {:?}: input {s:?}: format arrays expects CH=PATH", b.name))),
                }
            }
        }
        match (b.format, &b.layout) {
            (InputFormat::Records, None) => Err((line, format!("block {:?}: format records needs layout = \"FILE\"", b.name))),
            (InputFormat::Container | InputFormat::Arrays, Some(_)) => {
                Err((lines.block_line(i, |s| &s.layout), format!("block {:?}: layout is only for format records", b.name)))
            }
            _ => match b.live_time_s {
                Some(t) if !(t.is_finite() && t > 0.0) => {
                    Err((lines.block_line(i, |s| &s.live_time_s), format!("block {:?}: live_time_s = {t}, expected > 0", b.name)))
                }
                _ => Ok(()),
            },
        }
    }

    /// One detector per side: every setting pair needs its four outcome blocks.
    fn check_pairs_complete(&self, lines: &Lines) -> Result<(), Invalid> {
        if self.setup != Setup::OnePerSide {
            return Ok(());
        }
        for pair in self.setting_pairs() {
            let have: Vec<Outcomes> = pair.blocks.iter().filter_map(|&i| self.blocks[i].outcomes).collect();
            let missing: Vec<String> = Outcomes::ALL.iter().filter(|o| !have.contains(o)).map(|o| String::from(*o)).collect();
            if !missing.is_empty() {
                return Err((
                    lines.block_line(pair.blocks[0], |s| &s.name),
                    format!(
                        "setting pair ({}, {}) lacks the block(s) for outcomes {}: one-per-side needs ++, +-, -+ and --",
                        pair.alice,
                        pair.bob,
                        missing.join(", ")
                    ),
                ));
            }
        }
        Ok(())
    }
}

fn unknown_label(block: &str, side: &str, label: &str, known: &std::collections::BTreeMap<String, f64>) -> String {
    let known: Vec<&str> = known.keys().map(String::as_str).collect();
    format!("block {block:?}: {side} = {label:?} is not a label of [settings.{side}] (known: {})", known.join(", "))
}

fn setup_word(s: Setup) -> &'static str {
    match s {
        Setup::FourDetectors => "four-detectors",
        Setup::OnePerSide => "one-per-side",
    }
}

fn role_list(s: Setup) -> String {
    s.required_roles().iter().map(|r| r.to_string()).collect::<Vec<_>>().join(", ")
}
