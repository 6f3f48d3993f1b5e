//! Record layouts for interleaved fixed-size records: a small TOML file or one compact
//! command-line spec (`rec=16,skip=0,time=0:8:le,chan=8:2:le,tick_ps=1,wrap=32`), the
//! exact tick → picosecond rule, and the layout's own consistency checks.

use crate::{Error, Result};
use serde::Deserialize;
use std::path::Path;

/// Byte order of a field.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Endian {
    Little,
    Big,
}

impl Endian {
    fn parse(s: &str) -> Option<Endian> {
        match s {
            "le" | "little" => Some(Endian::Little),
            "be" | "big" => Some(Endian::Big),
            _ => None,
        }
    }
    pub fn short(self) -> &'static str {
        match self {
            Endian::Little => "le",
            Endian::Big => "be",
        }
    }
    pub fn other(self) -> Endian {
        match self {
            Endian::Little => Endian::Big,
            Endian::Big => Endian::Little,
        }
    }
}

/// An unsigned integer field inside a record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Field {
    pub offset_bytes: usize,
    pub width_bytes: usize,
    pub endian: Endian,
}

impl Field {
    /// Read this field from one record (`rec` holds at least `offset + width` bytes).
    #[inline]
    pub fn get(&self, rec: &[u8]) -> u64 {
        read_uint(&rec[self.offset_bytes..self.offset_bytes + self.width_bytes], self.endian)
    }
}

/// Decode 1..=8 bytes as an unsigned integer of the given byte order.
#[inline]
pub fn read_uint(b: &[u8], endian: Endian) -> u64 {
    let mut v = 0u64;
    match endian {
        Endian::Big => b.iter().for_each(|&x| v = (v << 8) | x as u64),
        Endian::Little => b.iter().rev().for_each(|&x| v = (v << 8) | x as u64),
    }
    v
}

/// A tick length held exactly in integer femtoseconds (e.g. "80.955" ps = 80 955 fs).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Tick {
    pub fs: u64,
}

impl Tick {
    /// Parse a decimal picosecond string exactly: at most three fractional digits that are
    /// not zero (femtosecond resolution); zero, negative or unparsable values are refused.
    pub fn parse_ps(s: &str) -> std::result::Result<Tick, String> {
        let t = s.trim();
        let bad = || format!("tick length {t:?}: expected a positive decimal number of picoseconds (e.g. 1 or 80.955)");
        if t.starts_with('-') {
            return Err(format!("tick length {t}: must be positive"));
        }
        let (int, frac) = t.split_once('.').unwrap_or((t, ""));
        if int.is_empty() && frac.is_empty() || !int.chars().chain(frac.chars()).all(|c| c.is_ascii_digit()) {
            return Err(bad());
        }
        let frac = frac.trim_end_matches('0');
        if frac.len() > 3 {
            return Err(format!("tick length {t}: finer than 1 fs (at most 3 decimal places of ps)"));
        }
        let int_ps: u64 = if int.is_empty() { 0 } else { int.parse().map_err(|_| bad())? };
        let frac_fs: u64 = format!("{frac:0<3}").parse().map_err(|_| bad())?;
        let fs = int_ps.checked_mul(1000).and_then(|v| v.checked_add(frac_fs)).ok_or_else(bad)?;
        if fs == 0 {
            return Err(format!("tick length {t}: must be positive, found zero"));
        }
        Ok(Tick { fs })
    }

    /// From a float number of ps (library callers); rounded to the nearest fs.
    pub fn from_ps_f64(tick_ps: f64) -> std::result::Result<Tick, String> {
        if !(tick_ps.is_finite() && tick_ps > 0.0) {
            return Err(format!("tick length {tick_ps} ps: must be positive and finite"));
        }
        let fs = (tick_ps * 1000.0).round();
        if fs < 1.0 || fs > u64::MAX as f64 {
            return Err(format!("tick length {tick_ps} ps: outside 1 fs .. 2^64 fs"));
        }
        Ok(Tick { fs: fs as u64 })
    }

    pub fn ps_f64(self) -> f64 {
        self.fs as f64 / 1000.0
    }

    /// Ticks → ps: `(ticks · tick_fs + 500) div 1000` in u128, i.e. round half up.
    #[inline]
    pub fn to_ps(self, ticks: u64) -> u128 {
        (ticks as u128 * self.fs as u128 + 500) / 1000
    }

    /// ps → ticks for writers: the nearest tick count. For ticks ≤ 1 ps `to_ps` gives `ps`
    /// back; for longer ticks it does whenever `ps` came from `to_ps` (lies on the grid).
    pub fn from_ps(self, ps: u64) -> u128 {
        (ps as u128 * 1000 + self.fs as u128 / 2) / self.fs as u128
    }

    /// A display form of the tick length in ps with no float error ("80.955").
    pub fn ps_string(self) -> String {
        let (i, f) = (self.fs / 1000, self.fs % 1000);
        if f == 0 {
            format!("{i}")
        } else {
            format!("{i}.{}", format!("{f:03}").trim_end_matches('0'))
        }
    }
}

/// Where the time and channel fields sit in one record, and how ticks become ps.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordLayout {
    pub record_bytes: usize,
    /// Bytes at the start of the file skipped before the first record.
    pub header_bytes: u64,
    pub time: Field,
    pub channel: Field,
    pub tick: Tick,
    /// Counter wrap: a decrease of the raw time counter between consecutive records adds
    /// `2^wrap_bits` ticks. `None`: the counter never wraps and a decrease is an error.
    pub wrap_bits: Option<u32>,
}

impl RecordLayout {
    /// `--layout FILE|SPEC`: an existing file is read as TOML; otherwise a string holding
    /// `=` is parsed as a compact spec.
    pub fn from_arg(arg: &str) -> Result<RecordLayout> {
        let p = Path::new(arg);
        if p.is_file() {
            let text = std::fs::read_to_string(p).map_err(|e| Error::io(p, e))?;
            return Self::from_toml(&text, p);
        }
        if arg.contains('=') {
            return Self::from_spec(arg);
        }
        Err(Error::Usage(format!(
            "--layout {arg}: no such file, and not a layout spec like rec=16,time=0:8:le,chan=8:2:le,tick_ps=1"
        )))
    }

    /// Parse the TOML form (keys in docs/formats.md); errors carry the line number.
    pub fn from_toml(text: &str, path: &Path) -> Result<RecordLayout> {
        let cfg_err = |line: usize, message: String| Error::Config { path: path.to_path_buf(), line, message };
        let raw: TomlLayout = toml::from_str(text).map_err(|e| {
            let line = e.span().map(|s| line_of(text, s.start)).unwrap_or(1);
            cfg_err(line, e.message().to_string())
        })?;
        let tick_text = match &raw.tick_ps {
            TomlTick::Text(s) => s.clone(),
            TomlTick::Int(i) => i.to_string(),
            // Shortest round-trip form: gives back the decimal as written for ≤ 15 digits.
            TomlTick::Float(f) => format!("{f}"),
        };
        let line_for = |key: &str| text.lines().position(|l| l.trim_start().starts_with(key)).map_or(1, |i| i + 1);
        let tick = Tick::parse_ps(&tick_text).map_err(|m| cfg_err(line_for("tick_ps"), m))?;
        let field = |f: &TomlField, key: &str| -> Result<Field> {
            let endian = Endian::parse(f.endian.as_deref().unwrap_or("little"))
                .ok_or_else(|| cfg_err(line_for(&format!("[{key}]")), format!("[{key}] endian: expected \"little\" or \"big\"")))?;
            Ok(Field { offset_bytes: f.offset, width_bytes: f.width, endian })
        };
        let layout = RecordLayout {
            record_bytes: raw.record_bytes,
            header_bytes: raw.header_bytes.unwrap_or(0),
            time: field(&raw.time, "time")?,
            channel: field(&raw.channel, "channel")?,
            tick,
            wrap_bits: raw.wrap_bits,
        };
        layout.validate().map_err(|m| {
            // Point at the key the consistency error is about.
            let key = [("time and", "[channel]"), ("time", "[time]"), ("channel", "[channel]"), ("wrap", "wrap_bits"), ("record", "record_bytes")]
                .iter()
                .find(|(start, _)| m.starts_with(start))
                .map_or("record_bytes", |(_, k)| k);
            cfg_err(line_for(key), m)
        })?;
        Ok(layout)
    }

    /// Parse the compact spec `rec=N,skip=N,time=OFF:WIDTH[:le|be],chan=OFF:WIDTH[:le|be],tick_ps=X[,wrap=BITS]`.
    pub fn from_spec(spec: &str) -> Result<RecordLayout> {
        let usage = |m: String| Error::Usage(format!("layout spec {spec:?}: {m}"));
        let (mut rec, mut skip, mut time, mut chan, mut tick, mut wrap) = (None, 0u64, None, None, None, None);
        for part in spec.split(',').map(str::trim).filter(|s| !s.is_empty()) {
            let (k, v) = part.split_once('=').ok_or_else(|| usage(format!("{part:?} is not key=value")))?;
            let num = |v: &str| v.parse::<u64>().map_err(|_| usage(format!("{k}={v}: expected a whole number")));
            match k {
                "rec" => rec = Some(num(v)? as usize),
                "skip" => skip = num(v)?,
                "time" => time = Some(parse_field_spec(v).map_err(|m| usage(format!("time={v}: {m}")))?),
                "chan" => chan = Some(parse_field_spec(v).map_err(|m| usage(format!("chan={v}: {m}")))?),
                "tick_ps" => tick = Some(Tick::parse_ps(v).map_err(usage)?),
                "wrap" => wrap = Some(u32::try_from(num(v)?).map_err(|_| usage(format!("wrap={v}: expected at most 64 bits")))?),
                _ => return Err(usage(format!("unknown key {k:?} (known: rec, skip, time, chan, tick_ps, wrap)"))),
            }
        }
        let need = |name: &str| usage(format!("missing {name}="));
        let layout = RecordLayout {
            record_bytes: rec.ok_or_else(|| need("rec"))?,
            header_bytes: skip,
            time: time.ok_or_else(|| need("time"))?,
            channel: chan.ok_or_else(|| need("chan"))?,
            tick: tick.ok_or_else(|| need("tick_ps"))?,
            wrap_bits: wrap,
        };
        layout.validate().map_err(usage)?;
        Ok(layout)
    }

    /// The compact spec of this layout (round-trips through [`RecordLayout::from_spec`]).
    pub fn to_spec(&self) -> String {
        let f = |x: &Field| format!("{}:{}:{}", x.offset_bytes, x.width_bytes, x.endian.short());
        let mut s = format!(
            "rec={},skip={},time={},chan={},tick_ps={}",
            self.record_bytes,
            self.header_bytes,
            f(&self.time),
            f(&self.channel),
            self.tick.ps_string()
        );
        if let Some(w) = self.wrap_bits {
            s.push_str(&format!(",wrap={w}"));
        }
        s
    }

    /// The layout's own consistency: widths, fields inside the record, no overlap, wrap fits.
    pub fn validate(&self) -> std::result::Result<(), String> {
        if self.record_bytes == 0 {
            return Err("record size must be at least 1 byte".into());
        }
        if ![4, 8].contains(&self.time.width_bytes) {
            return Err(format!("time field width {} bytes: expected 4 or 8", self.time.width_bytes));
        }
        if ![1, 2, 4].contains(&self.channel.width_bytes) {
            return Err(format!("channel field width {} bytes: expected 1, 2 or 4", self.channel.width_bytes));
        }
        for (name, f) in [("time", &self.time), ("channel", &self.channel)] {
            // checked: an offset near usize::MAX from a spec must not wrap round to "fits".
            if f.offset_bytes.checked_add(f.width_bytes).is_none_or(|end| end > self.record_bytes) {
                return Err(format!(
                    "{name} field (bytes {}..{}) is wider than the {}-byte record",
                    f.offset_bytes,
                    f.offset_bytes as u128 + f.width_bytes as u128,
                    self.record_bytes
                ));
            }
        }
        let (t, c) = (&self.time, &self.channel);
        if t.offset_bytes < c.offset_bytes + c.width_bytes && c.offset_bytes < t.offset_bytes + t.width_bytes {
            return Err("time and channel fields overlap".into());
        }
        if let Some(w) = self.wrap_bits {
            let max = 8 * self.time.width_bytes as u32;
            if w == 0 || w > max {
                return Err(format!("wrap={w} bits does not fit the {max}-bit time field (expected 1..={max})"));
            }
        }
        Ok(())
    }
}

/// `OFF:WIDTH[:le|be]` → a field (little-endian when the order is left out).
fn parse_field_spec(v: &str) -> std::result::Result<Field, String> {
    let parts: Vec<&str> = v.split(':').collect();
    if !(2..=3).contains(&parts.len()) {
        return Err("expected OFFSET:WIDTH[:le|be]".into());
    }
    let n = |s: &str| s.parse::<usize>().map_err(|_| format!("{s:?} is not a whole number of bytes"));
    let endian = match parts.get(2) {
        Some(e) => Endian::parse(e).ok_or_else(|| format!("byte order {e:?}: expected le or be"))?,
        None => Endian::Little,
    };
    Ok(Field { offset_bytes: n(parts[0])?, width_bytes: n(parts[1])?, endian })
}

fn line_of(text: &str, byte: usize) -> usize {
    text[..byte.min(text.len())].bytes().filter(|&b| b == b'\n').count() + 1
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TomlLayout {
    record_bytes: usize,
    header_bytes: Option<u64>,
    tick_ps: TomlTick,
    wrap_bits: Option<u32>,
    time: TomlField,
    channel: TomlField,
}

#[derive(Deserialize)]
#[serde(untagged)]
enum TomlTick {
    Int(u64),
    Float(f64),
    Text(String),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TomlField {
    offset: usize,
    width: usize,
    endian: Option<String>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_parses_exactly_to_femtoseconds() {
        assert_eq!(Tick::parse_ps("80.955").unwrap().fs, 80_955);
        assert_eq!(Tick::parse_ps("1").unwrap().fs, 1000);
        assert_eq!(Tick::parse_ps("0.5").unwrap().fs, 500);
        assert_eq!(Tick::parse_ps(".25").unwrap().fs, 250);
        assert_eq!(Tick::parse_ps("3.1250").unwrap().fs, 3125);
        for bad in ["0", "0.000", "-1", "abc", "", "1.2345", "1e3", "."] {
            assert!(Tick::parse_ps(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn tick_to_ps_rounds_half_up() {
        // 80.955 ps × 2 = 161.91 → 162; × 10 = 809.55 → 810 (half up); × 1 = 80.955 → 81.
        let t = Tick::parse_ps("80.955").unwrap();
        assert_eq!(t.to_ps(1), 81);
        assert_eq!(t.to_ps(2), 162);
        assert_eq!(t.to_ps(10), 810);
        assert_eq!(t.to_ps(100), 8096); // 8095.5 → 8096
        assert_eq!(Tick::parse_ps("0.5").unwrap().to_ps(3), 2); // 1.5 → 2
    }

    #[test]
    fn spec_round_trips_and_defaults_to_little_endian() {
        let l = RecordLayout::from_spec("rec=12,skip=16,time=0:4,chan=4:2:be,tick_ps=80.955,wrap=32").unwrap();
        assert_eq!(l.time.endian, Endian::Little);
        assert_eq!(l.channel.endian, Endian::Big);
        assert_eq!(RecordLayout::from_spec(&l.to_spec()).unwrap(), l);
    }

    #[test]
    fn layout_errors_say_what_is_wrong() {
        let cases = [
            ("rec=8,time=0:8,chan=8:2,tick_ps=1", "wider than the 8-byte record"),
            ("rec=16,time=0:4,chan=8:2,tick_ps=1,wrap=33", "does not fit the 32-bit time field"),
            ("rec=16,time=0:6,chan=8:2,tick_ps=1", "expected 4 or 8"),
            ("rec=16,time=0:8,chan=8:3,tick_ps=1", "expected 1, 2 or 4"),
            ("rec=16,time=0:8,chan=4:2,tick_ps=1", "overlap"),
            ("rec=16,time=0:8,chan=8:2,tick_ps=0", "must be positive"),
            ("rec=16,time=0:8,chan=8:2,tick_ps=-2", "must be positive"),
            ("rec=16,time=0:8,chan=8:2", "missing tick_ps"),
            ("rec=16,time=0:8,chan=8:2,tick_ps=1,colour=3", "unknown key"),
        ];
        for (spec, want) in cases {
            let e = RecordLayout::from_spec(spec).unwrap_err().to_string();
            assert!(e.contains(want), "{spec}: {e}");
        }
    }

    #[test]
    fn toml_layout_reports_line_of_unknown_key() {
        let text = "record_bytes = 16\ntick_ps = \"80.955\"\n[time]\noffset = 0\nwidth = 8\nendianness = \"big\"\n[channel]\noffset = 8\nwidth = 2\n";
        let e = RecordLayout::from_toml(text, Path::new("l.toml")).unwrap_err();
        match e {
            Error::Config { line, message, .. } => {
                assert_eq!(line, 6, "{message}");
                assert!(message.contains("endianness"), "{message}");
            }
            other => panic!("{other}"),
        }
        let ok = text.replace("endianness", "endian");
        let l = RecordLayout::from_toml(&ok, Path::new("l.toml")).unwrap();
        assert_eq!((l.tick.fs, l.time.endian), (80_955, Endian::Big));
        let wide = ok.replace("offset = 8\nwidth = 2", "offset = 15\nwidth = 2");
        match RecordLayout::from_toml(&wide, Path::new("l.toml")).unwrap_err() {
            Error::Config { line, message, .. } => assert_eq!(line, 7, "{message}"),
            other => panic!("{other}"),
        }
        let float = ok.replace("\"80.955\"", "80.955");
        assert_eq!(RecordLayout::from_toml(&float, Path::new("l.toml")).unwrap().tick.fs, 80_955);
    }
}
