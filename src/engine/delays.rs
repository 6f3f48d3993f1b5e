//! Per-channel delays in ps: from `--delay CH=PS` flags or a delays file written by `scan`.
//!
//! Delays file (TOML): `reference = 1`, a `[delays_ps]` table of `CHANNEL = PS`, how each
//! was obtained (`[obtained]`), and the channels a scan looked for and did not find, with
//! the reason (`[not_found]`). A file holds only delays that were found or given: a channel
//! it lacks has no delay, and every pass that uses the file refuses a pair with such a
//! channel ([`Delays::require`]) instead of taking 0.

use crate::{Channel, Error, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Delay of each channel in ps (how late its signals arrive).
///
/// With no delays file ([`Delays::file`] `None`) an unlisted channel has delay 0, the
/// documented default of a command line without delays; once a file is involved every
/// channel used must be listed in it or given by a flag.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Delays {
    pub by_channel: BTreeMap<Channel, i64>,
    /// The channel the others were measured against, when known.
    pub reference: Option<Channel>,
    /// How each delay was obtained ("scan: peak of pair 1:3 …", "given with --delay").
    pub obtained: BTreeMap<Channel, String>,
    /// Channels a scan looked for and did not find, with the reason.
    pub not_found: BTreeMap<Channel, String>,
    /// The delays file these came from (the last one, when several were merged).
    pub file: Option<PathBuf>,
}

#[derive(serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
struct DelaysFile {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    reference: Option<Channel>,
    delays_ps: BTreeMap<String, i64>,
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    obtained: BTreeMap<String, String>,
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    not_found: BTreeMap<String, String>,
}

/// What `apply_flags` records as a flag's origin.
pub const FROM_FLAG: &str = "given with --delay";

impl Delays {
    /// The delay of `ch`; 0 for an unlisted channel (see [`Delays::require`] for when that
    /// is refused).
    pub fn get(&self, ch: Channel) -> i64 {
        self.by_channel.get(&ch).copied().unwrap_or(0)
    }

    /// δ = d_B − d_A for the pair (a, b).
    pub fn relative(&self, a: Channel, b: Channel) -> i64 {
        self.get(b) - self.get(a)
    }

    /// Parse `CH=PS` flags (e.g. `3=41250`, `2=-850`); later flags override the file.
    pub fn apply_flags(&mut self, flags: &[String]) -> Result<()> {
        for f in flags {
            let (ch, ps) = f
                .split_once('=')
                .ok_or_else(|| Error::setting("delay", f, "expected CH=PS, e.g. 3=41250"))?;
            let ch: Channel = ch.trim().parse().map_err(|_| Error::setting("delay", f, format!("channel '{ch}' is not a channel number")))?;
            let ps: i64 = ps.trim().parse().map_err(|_| Error::setting("delay", f, format!("'{ps}' is not a whole number of ps")))?;
            super::rule::check_shift(ps, &format!("delay {f}"))
                .map_err(|_| Error::setting("delay", f, format!("|{ps}| ps exceeds the limit of {} ps", super::rule::MAX_SPAN_PS)))?;
            self.by_channel.insert(ch, ps);
            self.obtained.insert(ch, FROM_FLAG.into());
            self.not_found.remove(&ch);
        }
        Ok(())
    }

    /// Lay `later` over these delays (manifest < delays file < flags): its channels replace
    /// ours, and its file, if any, becomes the one named in messages.
    pub fn overlay(&mut self, later: &Delays) {
        for (c, v) in &later.by_channel {
            self.by_channel.insert(*c, *v);
            self.not_found.remove(c);
            match later.obtained.get(c) {
                Some(o) => self.obtained.insert(*c, o.clone()),
                None => self.obtained.remove(c),
            };
        }
        for (c, why) in &later.not_found {
            if !self.by_channel.contains_key(c) {
                self.not_found.insert(*c, why.clone());
            }
        }
        if later.file.is_some() {
            self.file = later.file.clone();
            self.reference = later.reference;
        }
    }

    /// Refuse channels without a delay once a delays file is involved: a channel the file
    /// lacks (its scan found no peak, or it was never scanned) has no delay, and counting
    /// it at 0 would count at the wrong place without a word.
    pub fn require(&self, channels: impl IntoIterator<Item = Channel>) -> Result<()> {
        let Some(file) = &self.file else { return Ok(()) };
        let missing: std::collections::BTreeSet<Channel> = channels.into_iter().filter(|c| !self.by_channel.contains_key(c)).collect();
        let Some(&first) = missing.iter().next() else { return Ok(()) };
        let each: Vec<String> = missing
            .iter()
            .map(|c| match self.not_found.get(c) {
                Some(why) => format!("channel {c} ({why})"),
                None => format!("channel {c} (not in the file)"),
            })
            .collect();
        Err(Error::Usage(format!(
            "{}: no delay for {}, and no --delay flag gives one; expected a delay for every channel of the pairs counted. \
             Rescan (e.g. with a wider --half-range-ps) or give it with --delay {first}=PS",
            file.display(),
            each.join(", ")
        )))
    }

    /// Refuse a delay given with `--delay` for a channel that no input provides (a typo
    /// there would otherwise be ignored without a word).
    pub fn check_given(&self, present: &[Channel]) -> Result<()> {
        for (c, how) in &self.obtained {
            if how == FROM_FLAG && !present.contains(c) {
                let have: Vec<String> = present.iter().map(|c| c.to_string()).collect();
                return Err(Error::setting(
                    "delay",
                    format!("{c}={}", self.get(*c)),
                    format!("no input provides channel {c}; expected one of {}", have.join(", ")),
                ));
            }
        }
        Ok(())
    }

    /// Read a delays file.
    pub fn load(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Self::parse(&text, path)
    }

    pub fn parse(text: &str, path: &Path) -> Result<Self> {
        let f: DelaysFile = toml::from_str(text).map_err(|e| {
            let line = e.span().map(|s| text[..s.start.min(text.len())].lines().count().max(1)).unwrap_or(0);
            Error::Config { path: path.to_path_buf(), line, message: e.message().to_string() }
        })?;
        let channel = |k: &str| -> Result<Channel> {
            k.parse().map_err(|_| Error::Config { path: path.to_path_buf(), line: line_of(text, k), message: format!("'{k}' is not a channel number") })
        };
        let mut by_channel = BTreeMap::new();
        for (k, v) in f.delays_ps {
            let ch = channel(&k)?;
            super::rule::check_shift(v, &format!("{}: channel {ch}", path.display()))?;
            by_channel.insert(ch, v);
        }
        let obtained = f.obtained.into_iter().map(|(k, v)| Ok((channel(&k)?, v))).collect::<Result<_>>()?;
        let mut not_found = BTreeMap::new();
        for (k, v) in f.not_found {
            let ch = channel(&k)?;
            if by_channel.contains_key(&ch) {
                return Err(Error::Config {
                    path: path.to_path_buf(),
                    line: line_of(text, &k),
                    message: format!("channel {ch} is both in [delays_ps] and in [not_found]; expected one of them"),
                });
            }
            not_found.insert(ch, v);
        }
        Ok(Delays { by_channel, reference: f.reference, obtained, not_found, file: Some(path.to_path_buf()) })
    }

    /// The delays file text.
    pub fn to_toml(&self) -> String {
        let key = |m: &BTreeMap<Channel, String>| m.iter().map(|(k, v)| (k.to_string(), v.clone())).collect();
        let f = DelaysFile {
            reference: self.reference,
            delays_ps: self.by_channel.iter().map(|(k, v)| (k.to_string(), *v)).collect(),
            obtained: key(&self.obtained),
            not_found: key(&self.not_found),
        };
        let body = toml::to_string(&f).unwrap_or_default();
        format!(
            "# Per-channel delays in ps (how late each channel's signals arrive), written by tagsieve scan.\n\
             # Only delays that were found or given are listed; [not_found] says why a channel has none.\n{body}"
        )
    }
}

fn line_of(text: &str, key: &str) -> usize {
    text.lines().position(|l| l.trim_start().starts_with(key)).map(|i| i + 1).unwrap_or(0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn file_round_trip_and_flags() {
        let mut d = Delays { reference: Some(1), ..Default::default() };
        d.apply_flags(&["3=41250".into(), "2=-850".into()]).unwrap();
        let back = Delays::parse(&d.to_toml(), Path::new("d.toml")).unwrap();
        assert_eq!(back, Delays { file: Some("d.toml".into()), ..d.clone() });
        assert_eq!(d.relative(2, 3), 41250 + 850);
        assert!(d.apply_flags(&["x=1".into()]).is_err());
        let e = Delays::parse("reference = 1\n[delays_ps]\n1 = 0\nbogus = 3\n", Path::new("d.toml")).unwrap_err();
        assert!(e.to_string().contains("line 4"), "{e}");
    }

    #[test]
    fn a_file_without_a_channel_refuses_it() {
        let text = "reference = 1\n[delays_ps]\n1 = 0\n3 = 41250\n[not_found]\n4 = \"no peak\"\n";
        let mut d = Delays::parse(text, Path::new("d.toml")).unwrap();
        assert!(d.require([1, 3]).is_ok());
        let e = d.require([1, 4]).unwrap_err().to_string();
        assert!(e.contains("d.toml") && e.contains("channel 4 (no peak)") && e.contains("--delay 4=PS"), "{e}");
        let e = d.require([2]).unwrap_err().to_string();
        assert!(e.contains("channel 2 (not in the file)"), "{e}");
        d.apply_flags(&["4=40600".into()]).unwrap();
        assert!(d.require([1, 3, 4]).is_ok());
        assert_eq!(d.obtained[&4], FROM_FLAG);
        // Without a file, unlisted channels keep the documented default 0.
        assert!(Delays::default().require([7]).is_ok());
        // A channel both found and not found is a contradiction.
        assert!(Delays::parse("[delays_ps]\n4 = 1\n[not_found]\n4 = \"x\"\n", Path::new("d.toml")).is_err());
    }
}
