//! Per-channel delays in ps: from `--delay CH=PS` flags or a delays file written by `scan`.
//!
//! Delays file (TOML): `reference = 1` and a `[delays_ps]` table of `CHANNEL = PS`.

use crate::{Channel, Error, Result};
use std::collections::BTreeMap;
use std::path::Path;

/// Delay of each channel in ps (how late its signals arrive); unlisted channels have 0.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Delays {
    pub by_channel: BTreeMap<Channel, i64>,
    /// The channel the others were measured against, when known.
    pub reference: Option<Channel>,
}

#[derive(serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
struct DelaysFile {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    reference: Option<Channel>,
    delays_ps: BTreeMap<String, i64>,
}

impl Delays {
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
                .ok_or_else(|| Error::Usage(format!("--delay {f}: expected CH=PS, e.g. 3=41250")))?;
            let ch: Channel = ch.trim().parse().map_err(|_| Error::Usage(format!("--delay {f}: channel '{ch}' is not a channel number")))?;
            let ps: i64 = ps.trim().parse().map_err(|_| Error::Usage(format!("--delay {f}: '{ps}' is not a whole number of ps")))?;
            super::rule::check_shift(ps, &format!("--delay {f}"))?;
            self.by_channel.insert(ch, ps);
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
        let mut by_channel = BTreeMap::new();
        for (k, v) in f.delays_ps {
            let ch: Channel = k.parse().map_err(|_| Error::Config {
                path: path.to_path_buf(),
                line: line_of(text, &k),
                message: format!("'{k}' is not a channel number"),
            })?;
            super::rule::check_shift(v, &format!("{}: channel {ch}", path.display()))?;
            by_channel.insert(ch, v);
        }
        Ok(Delays { by_channel, reference: f.reference })
    }

    /// The delays file text.
    pub fn to_toml(&self) -> String {
        let f = DelaysFile {
            reference: self.reference,
            delays_ps: self.by_channel.iter().map(|(k, v)| (k.to_string(), *v)).collect(),
        };
        let body = toml::to_string(&f).unwrap_or_default();
        format!("# Per-channel delays in ps (how late each channel's signals arrive), written by tagsieve scan.\n{body}")
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
        assert_eq!(back, d);
        assert_eq!(d.relative(2, 3), 41250 + 850);
        assert!(d.apply_flags(&["x=1".into()]).is_err());
        let e = Delays::parse("reference = 1\n[delays_ps]\n1 = 0\nbogus = 3\n", Path::new("d.toml")).unwrap_err();
        assert!(e.to_string().contains("line 4"), "{e}");
    }
}
