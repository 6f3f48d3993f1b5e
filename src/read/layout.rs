//! Record layouts for interleaved fixed-size records: a small TOML file or one compact
//! command-line spec (`rec=16,time=0:8:le,chan=8:2:le,tick_ps=1`), with bit fields packed
//! in words, record kinds, a channel map, edge flags and a reorder tolerance; the exact
//! tick → picosecond rule; and the layout's own consistency checks.

use crate::{Channel, Error, Result};
use byteorder::{BigEndian, ByteOrder, LittleEndian};
use std::collections::BTreeMap;
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

/// A bit range inside one word of a record: the word is `width_bytes` (1..=8) bytes at
/// `offset_bytes` in `endian` order; the field is its bits `shift_bits .. shift_bits +
/// bits` (bit 0 the least significant). A whole-word field has shift 0 and `8·width` bits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Field {
    pub offset_bytes: usize,
    pub width_bytes: usize,
    pub endian: Endian,
    pub shift_bits: u32,
    pub bits: u32,
    /// Two's complement: the field's top bit is its sign (channel fields with a map only).
    pub signed: bool,
}

impl Field {
    /// A whole word of `width_bytes` at `offset_bytes`.
    pub fn word(offset_bytes: usize, width_bytes: usize, endian: Endian) -> Field {
        Field { offset_bytes, width_bytes, endian, shift_bits: 0, bits: (width_bytes.min(1 << 20) * 8) as u32, signed: false }
    }

    /// Whether the field is its whole word (no shift, all bits).
    pub fn is_whole_word(&self) -> bool {
        self.shift_bits == 0 && self.bits as usize == self.width_bytes.saturating_mul(8)
    }

    /// The mask of the field's bits after the shift.
    #[inline]
    pub fn mask(&self) -> u64 {
        u64::MAX >> (64 - self.bits.clamp(1, 64))
    }

    /// Read this field from one record (`rec` holds at least `offset + width` bytes).
    #[inline]
    pub fn get(&self, rec: &[u8]) -> u64 {
        let word = read_uint(&rec[self.offset_bytes..self.offset_bytes + self.width_bytes], self.endian);
        (word >> self.shift_bits.min(63)) & self.mask()
    }

    /// [`Field::get`] as a signed value when the field is signed (sign-extended).
    #[inline]
    pub fn get_signed(&self, rec: &[u8]) -> i64 {
        let v = self.get(rec);
        if self.signed && self.bits < 64 && v >> (self.bits - 1) & 1 == 1 {
            (v | !self.mask()) as i64
        } else {
            v as i64
        }
    }

    /// Write `v` (already inside the field's bits) into the field's place in `rec`,
    /// keeping the word's other bits.
    pub fn put(&self, rec: &mut [u8], v: u64) {
        let b = &mut rec[self.offset_bytes..self.offset_bytes + self.width_bytes];
        let keep = read_uint(b, self.endian) & !(self.mask() << self.shift_bits.min(63));
        let word = keep | (v & self.mask()) << self.shift_bits.min(63);
        match self.endian {
            Endian::Little => LittleEndian::write_uint(b, word, self.width_bytes),
            Endian::Big => BigEndian::write_uint(b, word, self.width_bytes),
        }
    }

    /// The record bits this field covers, as one mask byte per record byte.
    fn record_bits(&self, record_bytes: usize) -> Vec<u8> {
        let mut m = vec![0u8; record_bytes];
        for k in self.shift_bits..self.shift_bits + self.bits {
            let byte_in_word = (k / 8) as usize;
            let at = match self.endian {
                Endian::Little => self.offset_bytes + byte_in_word,
                Endian::Big => self.offset_bytes + self.width_bytes - 1 - byte_in_word,
            };
            m[at] |= 1 << (k % 8);
        }
        m
    }

    /// `OFF:WIDTH:le|be[:signed][[A..B]]`, the compact spec form.
    pub fn spec(&self) -> String {
        let mut s = format!("{}:{}:{}", self.offset_bytes, self.width_bytes, self.endian.short());
        if self.signed {
            s.push_str(":signed");
        }
        if !self.is_whole_word() {
            s.push_str(&format!("[{}..{}]", self.shift_bits, self.shift_bits as u64 + self.bits as u64));
        }
        s
    }
}

/// Decode 1..=8 bytes as an unsigned integer of the given byte order.
#[inline]
pub fn read_uint(b: &[u8], endian: Endian) -> u64 {
    match endian {
        Endian::Little => LittleEndian::read_uint(b, b.len()),
        Endian::Big => BigEndian::read_uint(b, b.len()),
    }
}

/// A tick length held exactly in integer femtoseconds (e.g. "12.345" ps = 12 345 fs).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Tick {
    pub fs: u64,
}

impl Tick {
    /// Parse a decimal picosecond string exactly: at most three fractional digits that are
    /// not zero (femtosecond resolution); zero, negative or unparsable values are refused.
    pub fn parse_ps(s: &str) -> std::result::Result<Tick, String> {
        let t = s.trim();
        let bad = || format!("tick length {t:?}: expected a positive decimal number of picoseconds (e.g. 1 or 12.345)");
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

    /// A display form of the tick length in ps with no float error ("12.345").
    pub fn ps_string(self) -> String {
        let (i, f) = (self.fs / 1000, self.fs % 1000);
        if f == 0 {
            format!("{i}")
        } else {
            format!("{i}.{}", format!("{f:03}").trim_end_matches('0'))
        }
    }
}

/// What a record of one kind value stands for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum KindAction {
    /// A time tag on the record's channel (through the map and the edge flag).
    Event,
    /// The counter wrapped once: adds 2^B ticks to the epoch (B = [`RecordLayout::period_bits`]).
    Overflow,
    /// The counter wrapped `count` times, `count` read from [`Kinds::overflow_count`].
    OverflowCounted,
    /// A time tag on this fixed channel (an external trigger input, say).
    Marker(Channel),
    /// Not a time tag: skipped without reading its time.
    Ignore,
}

/// The record-kind field and what each of its values means.
#[derive(Debug, Clone, PartialEq)]
pub struct Kinds {
    pub field: Field,
    pub table: BTreeMap<u64, KindAction>,
    /// Where overflow records of [`KindAction::OverflowCounted`] hold their count.
    pub overflow_count: Option<Field>,
    /// A value not in the table is skipped and counted (true) or an error (false).
    pub skip_unknown: bool,
}

/// Which edges of an edge-flagged record become time tags.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EdgeKeep {
    Rising,
    Falling,
    Both,
}

impl EdgeKeep {
    fn parse(s: &str) -> Option<EdgeKeep> {
        match s {
            "rising" => Some(EdgeKeep::Rising),
            "falling" => Some(EdgeKeep::Falling),
            "both" => Some(EdgeKeep::Both),
            _ => None,
        }
    }
    pub fn name(self) -> &'static str {
        match self {
            EdgeKeep::Rising => "rising",
            EdgeKeep::Falling => "falling",
            EdgeKeep::Both => "both",
        }
    }
}

/// An edge flag: its field, the value that marks a falling edge (any other is rising),
/// which edges are kept, and what falling edges add to their channel number.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Edge {
    pub field: Field,
    pub falling_value: u64,
    pub keep: EdgeKeep,
    pub falling_add: Channel,
}

/// Where the fields sit in one record, what the records mean, and how ticks become ps.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordLayout {
    pub record_bytes: usize,
    /// Bytes at the start of the file skipped before the first record.
    pub header_bytes: u64,
    pub time: Field,
    pub channel: Field,
    pub tick: Tick,
    /// Counter period 2^wrap_bits. Without overflow kinds, a decrease of the raw counter
    /// between consecutive records adds one period; with them, only overflow records do.
    /// `None` and no overflow kinds: the counter never wraps and a decrease is an error.
    pub wrap_bits: Option<u32>,
    pub kinds: Option<Kinds>,
    /// Raw channel value → our channel number; a raw value not listed is an error.
    pub channel_map: Option<BTreeMap<i64, Channel>>,
    pub edge: Option<Edge>,
    /// Records of different channels may arrive up to this many ps out of order.
    pub reorder_ps: u64,
}

/// The part of a layout a consistency error is about: names the TOML key (table, key)
/// and the spec key in messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    Record,
    Tick,
    Wrap,
    Time,
    Channel,
    Map,
    Kind,
    KindValue(u64),
    Count,
    Edge,
    Reorder,
}

impl Part {
    /// (TOML table, key) where the part is written; key `None` means the table header.
    fn toml_place(self) -> (Option<&'static str>, Option<String>) {
        match self {
            Part::Record => (None, Some("record_bytes".into())),
            Part::Tick => (None, Some("tick_ps".into())),
            Part::Wrap => (None, Some("wrap_bits".into())),
            Part::Reorder => (None, Some("reorder_ps".into())),
            Part::Time => (Some("time"), None),
            Part::Channel => (Some("channel"), None),
            Part::Map => (Some("channel.map"), None),
            Part::Kind => (Some("kind"), None),
            Part::KindValue(v) => (Some("kinds"), Some(v.to_string())),
            Part::Count => (Some("overflow_count"), None),
            Part::Edge => (Some("edge"), None),
        }
    }
    /// The TOML key as a message names it.
    fn toml_key(self) -> String {
        match self.toml_place() {
            (None, Some(k)) => k,
            (Some(t), None) => format!("[{t}]"),
            (Some(t), Some(k)) => format!("[{t}] {k}"),
            (None, None) => String::new(),
        }
    }
    /// The spec key as a message names it.
    fn spec_key(self) -> String {
        match self {
            Part::Record => "rec".into(),
            Part::Tick => "tick_ps".into(),
            Part::Wrap => "wrap".into(),
            Part::Reorder => "reorder_ps".into(),
            Part::Time => "time".into(),
            Part::Channel => "chan".into(),
            Part::Map => "map".into(),
            Part::Kind => "kind".into(),
            Part::KindValue(v) => format!("kind value {v}"),
            Part::Count => "count".into(),
            Part::Edge => "edge".into(),
        }
    }
}

/// A consistency error: the part it is about and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    pub part: Part,
    pub message: String,
}

fn problem(part: Part, message: impl Into<String>) -> Problem {
    Problem { part, message: message.into() }
}

impl RecordLayout {
    /// A plain layout: whole-word time and channel fields, no kinds, map, edge or reorder.
    pub fn plain(record_bytes: usize, time: Field, channel: Field, tick: Tick, wrap_bits: Option<u32>) -> RecordLayout {
        RecordLayout { record_bytes, header_bytes: 0, time, channel, tick, wrap_bits, kinds: None, channel_map: None, edge: None, reorder_ps: 0 }
    }

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

    /// Whether only the time and channel fields matter (the fastest demultiplexer).
    pub fn is_plain(&self) -> bool {
        self.kinds.is_none() && self.channel_map.is_none() && self.edge.is_none() && self.reorder_ps == 0 && !self.channel.signed
    }

    /// Bits B of the counter period 2^B: `wrap_bits`, else (with overflow kinds) the
    /// time field's width.
    pub fn period_bits(&self) -> Option<u32> {
        self.wrap_bits.or_else(|| self.has_overflow_kinds().then_some(self.time.bits))
    }

    /// Whether some kind value is an overflow record.
    pub fn has_overflow_kinds(&self) -> bool {
        self.kinds.as_ref().is_some_and(|k| k.table.values().any(|a| matches!(a, KindAction::Overflow | KindAction::OverflowCounted)))
    }

    /// The reorder tolerance in whole ticks: the largest tick count whose ps (rounded as
    /// [`Tick::to_ps`] does) is at most `reorder_ps`.
    pub fn reorder_ticks(&self) -> u64 {
        if self.reorder_ps == 0 {
            return 0;
        }
        // ticks·fs + 500 < (T + 1)·1000  ⇔  ticks ≤ ((T + 1)·1000 − 501) / fs
        let t = ((self.reorder_ps as u128 + 1) * 1000 - 501) / self.tick.fs as u128;
        t.min(u64::MAX as u128) as u64
    }

    /// Parse the TOML form (keys in docs/formats.md); every error carries the key and line.
    pub fn from_toml(text: &str, path: &Path) -> Result<RecordLayout> {
        let cfg_err = |line: usize, message: String| Error::Config { path: path.to_path_buf(), line, message };
        let raw: TomlLayout = toml::from_str(text).map_err(|e| {
            let line = e.span().map(|s| line_of(text, s.start)).unwrap_or(1);
            cfg_err(line, e.message().to_string())
        })?;
        let at = |table: Option<&str>, key: Option<&str>| line_of_key(text, table, key);
        let tick_text = match &raw.tick_ps {
            TomlTick::Text(s) => s.clone(),
            TomlTick::Int(i) => i.to_string(),
            // Shortest round-trip form: gives back the decimal as written for ≤ 15 digits.
            TomlTick::Float(f) => format!("{f}"),
        };
        let tick = Tick::parse_ps(&tick_text).map_err(|m| cfg_err(at(None, Some("tick_ps")), format!("tick_ps: {m}")))?;
        let field = |f: &TomlField, table: &str| -> Result<Field> {
            let allowed: &[&str] = match table {
                "channel" => &["signed", "map"],
                "kind" => &["unknown"],
                "edge" => &["keep", "falling", "falling_add"],
                _ => &[],
            };
            if let Some(k) = f.stray(allowed) {
                return Err(cfg_err(at(Some(table), Some(k)), format!("[{table}] {k}: not a key of this table")));
            }
            let endian = Endian::parse(f.endian.as_deref().unwrap_or("little"))
                .ok_or_else(|| cfg_err(at(Some(table), Some("endian")), format!("[{table}] endian: expected \"little\" or \"big\"")))?;
            let shift_bits = f.shift.unwrap_or(0);
            let bits = match f.bits {
                Some(b) => b,
                None => (f.width as u64).saturating_mul(8).saturating_sub(shift_bits as u64).min(u32::MAX as u64) as u32,
            };
            Ok(Field { offset_bytes: f.offset, width_bytes: f.width, endian, shift_bits, bits, signed: f.signed.unwrap_or(false) })
        };
        let channel = field(&raw.channel, "channel")?;
        let channel_map = match &raw.channel.map {
            None => None,
            Some(m) => {
                let mut out = BTreeMap::new();
                for (k, &v) in m {
                    let raw_value: i64 = k.trim().parse().map_err(|_| {
                        cfg_err(at(Some("channel.map"), Some(k)), format!("[channel.map] {k}: expected a whole number (a raw channel value) as the key"))
                    })?;
                    out.insert(raw_value, v);
                }
                Some(out)
            }
        };
        let kinds = match (&raw.kind, &raw.kinds) {
            (None, None) => None,
            (Some(_), None) => return Err(cfg_err(at(Some("kind"), None), "[kind] needs a [kinds] table saying what each kind value means".into())),
            (None, Some(_)) => return Err(cfg_err(at(Some("kinds"), None), "[kinds] needs a [kind] field saying where the kind value sits".into())),
            (Some(k), Some(table)) => {
                let unknown = k.unknown.as_deref().unwrap_or("error");
                let skip_unknown = match unknown {
                    "error" => false,
                    "skip" => true,
                    other => return Err(cfg_err(at(Some("kind"), Some("unknown")), format!("[kind] unknown = {other:?}: expected \"error\" or \"skip\""))),
                };
                let mut out = BTreeMap::new();
                for (key, action) in table {
                    let place = at(Some("kinds"), Some(key));
                    let value: u64 = key.trim().parse().map_err(|_| cfg_err(place, format!("[kinds] {key}: expected a whole number (a kind value) as the key")))?;
                    let a = match action {
                        TomlKind::Name(n) => match n.as_str() {
                            "event" => KindAction::Event,
                            "overflow" => KindAction::Overflow,
                            "overflow_count" => KindAction::OverflowCounted,
                            "ignore" => KindAction::Ignore,
                            other => {
                                return Err(cfg_err(
                                    place,
                                    format!("[kinds] {key} = {other:?}: expected \"event\", \"overflow\", \"overflow_count\", \"ignore\" or {{ marker = CHANNEL }}"),
                                ))
                            }
                        },
                        TomlKind::Marker { marker } => KindAction::Marker(*marker),
                    };
                    out.insert(value, a);
                }
                let overflow_count = raw.overflow_count.as_ref().map(|f| field(f, "overflow_count")).transpose()?;
                Some(Kinds { field: field(k, "kind")?, table: out, overflow_count, skip_unknown })
            }
        };
        if kinds.is_none() && raw.overflow_count.is_some() {
            return Err(cfg_err(at(Some("overflow_count"), None), "[overflow_count] needs [kind] and [kinds] with an \"overflow_count\" kind".into()));
        }
        let edge = match &raw.edge {
            None => None,
            Some(e) => {
                let keep = match e.keep.as_deref() {
                    None => EdgeKeep::Rising,
                    Some(s) => EdgeKeep::parse(s)
                        .ok_or_else(|| cfg_err(at(Some("edge"), Some("keep")), format!("[edge] keep = {s:?}: expected \"rising\", \"falling\" or \"both\"")))?,
                };
                Some(Edge { field: field(e, "edge")?, falling_value: e.falling.unwrap_or(1), keep, falling_add: e.falling_add.unwrap_or(0) })
            }
        };
        let layout = RecordLayout {
            record_bytes: raw.record_bytes,
            header_bytes: raw.header_bytes.unwrap_or(0),
            time: field(&raw.time, "time")?,
            channel,
            tick,
            wrap_bits: raw.wrap_bits,
            kinds,
            channel_map,
            edge,
            reorder_ps: raw.reorder_ps.unwrap_or(0),
        };
        layout.check().map_err(|p| {
            let (table, key) = p.part.toml_place();
            cfg_err(at(table, key.as_deref()), format!("{}: {}", p.part.toml_key(), p.message))
        })?;
        Ok(layout)
    }

    /// Parse the compact spec (docs/formats.md):
    /// `rec=N,skip=N,time=FIELD,chan=FIELD,tick_ps=X[,wrap=BITS]` and the optional keys
    /// `kind`, `event`, `overflow`, `overflow_count`, `ignore`, `marker`, `unknown`,
    /// `count`, `map`, `edge`, `edge_keep`, `edge_falling`, `edge_falling_add`, `reorder_ps`.
    pub fn from_spec(spec: &str) -> Result<RecordLayout> {
        let usage = |m: String| Error::Usage(format!("layout spec {spec:?}: {m}"));
        let (mut rec, mut skip, mut time, mut chan, mut tick, mut wrap) = (None, 0u64, None, None, None, None);
        let (mut kind, mut table, mut unknown, mut count) = (None, BTreeMap::new(), false, None);
        let (mut map, mut edge, mut keep, mut falling, mut falling_add, mut reorder) = (None, None, EdgeKeep::Rising, 1u64, 0, 0u64);
        for part in spec.split(',').map(str::trim).filter(|s| !s.is_empty()) {
            let (k, v) = part.split_once('=').ok_or_else(|| usage(format!("{part:?} is not key=value")))?;
            let num = |v: &str| v.parse::<u64>().map_err(|_| usage(format!("{k}={v}: expected a whole number")));
            let fld = |v: &str| parse_field_spec(v).map_err(|m| usage(format!("{k}={v}: {m}")));
            let mut kinds_of = |v: &str, a: KindAction| -> Result<()> {
                for x in v.split('+') {
                    let value = x.parse::<u64>().map_err(|_| usage(format!("{k}={v}: {x:?} is not a whole number (a kind value)")))?;
                    if table.insert(value, a).is_some() {
                        return Err(usage(format!("{k}={v}: kind value {value} is given twice")));
                    }
                }
                Ok(())
            };
            match k {
                "rec" => rec = Some(num(v)? as usize),
                "skip" => skip = num(v)?,
                "time" => time = Some(fld(v)?),
                "chan" => chan = Some(fld(v)?),
                "tick_ps" => tick = Some(Tick::parse_ps(v).map_err(|m| usage(format!("tick_ps={v}: {m}")))?),
                "wrap" => wrap = Some(u32::try_from(num(v)?).map_err(|_| usage(format!("wrap={v}: expected at most 64 bits")))?),
                "kind" => kind = Some(fld(v)?),
                "count" => count = Some(fld(v)?),
                "edge" => edge = Some(fld(v)?),
                "event" => kinds_of(v, KindAction::Event)?,
                "overflow" => kinds_of(v, KindAction::Overflow)?,
                "overflow_count" => kinds_of(v, KindAction::OverflowCounted)?,
                "ignore" => kinds_of(v, KindAction::Ignore)?,
                "marker" => {
                    for x in v.split('+') {
                        let (value, ch) = x.split_once('>').ok_or_else(|| usage(format!("marker={v}: {x:?} is not KIND>CHANNEL")))?;
                        let value = value.parse::<u64>().map_err(|_| usage(format!("marker={v}: {value:?} is not a whole number (a kind value)")))?;
                        let ch = ch.parse::<Channel>().map_err(|_| usage(format!("marker={v}: {ch:?} is not a channel number")))?;
                        if table.insert(value, KindAction::Marker(ch)).is_some() {
                            return Err(usage(format!("marker={v}: kind value {value} is given twice")));
                        }
                    }
                }
                "unknown" => {
                    unknown = match v {
                        "skip" => true,
                        "error" => false,
                        _ => return Err(usage(format!("unknown={v}: expected skip or error"))),
                    }
                }
                "map" => {
                    let mut m = BTreeMap::new();
                    for x in v.split('+') {
                        let (raw, ch) = x.split_once('>').ok_or_else(|| usage(format!("map={v}: {x:?} is not RAW>CHANNEL")))?;
                        let raw = raw.parse::<i64>().map_err(|_| usage(format!("map={v}: {raw:?} is not a whole number (a raw channel value)")))?;
                        let ch = ch.parse::<Channel>().map_err(|_| usage(format!("map={v}: {ch:?} is not a channel number")))?;
                        if m.insert(raw, ch).is_some() {
                            return Err(usage(format!("map={v}: raw value {raw} is given twice")));
                        }
                    }
                    map = Some(m);
                }
                "edge_keep" => keep = EdgeKeep::parse(v).ok_or_else(|| usage(format!("edge_keep={v}: expected rising, falling or both")))?,
                "edge_falling" => falling = num(v)?,
                "edge_falling_add" => falling_add = Channel::try_from(num(v)?).map_err(|_| usage(format!("edge_falling_add={v}: too large")))?,
                "reorder_ps" => reorder = num(v)?,
                _ => {
                    return Err(usage(format!(
                        "unknown key {k:?} (known: rec, skip, time, chan, tick_ps, wrap, kind, event, overflow, overflow_count, marker, ignore, \
                         unknown, count, map, edge, edge_keep, edge_falling, edge_falling_add, reorder_ps)"
                    )))
                }
            }
        }
        let need = |name: &str| usage(format!("missing {name}="));
        let kinds = match kind {
            Some(field) => Some(Kinds { field, table, overflow_count: count, skip_unknown: unknown }),
            None if !table.is_empty() => return Err(usage("kind values are given but no kind= field says where the kind sits".into())),
            None if count.is_some() => return Err(usage("count= needs kind= and an overflow_count= kind value".into())),
            None => None,
        };
        let layout = RecordLayout {
            record_bytes: rec.ok_or_else(|| need("rec"))?,
            header_bytes: skip,
            time: time.ok_or_else(|| need("time"))?,
            channel: chan.ok_or_else(|| need("chan"))?,
            tick: tick.ok_or_else(|| need("tick_ps"))?,
            wrap_bits: wrap,
            kinds,
            channel_map: map,
            edge: edge.map(|field| Edge { field, falling_value: falling, keep, falling_add }),
            reorder_ps: reorder,
        };
        layout.check().map_err(|p| usage(format!("{}: {}", p.part.spec_key(), p.message)))?;
        Ok(layout)
    }

    /// The compact spec of this layout (round-trips through [`RecordLayout::from_spec`]).
    pub fn to_spec(&self) -> String {
        let mut s = format!(
            "rec={},skip={},time={},chan={},tick_ps={}",
            self.record_bytes,
            self.header_bytes,
            self.time.spec(),
            self.channel.spec(),
            self.tick.ps_string()
        );
        if let Some(w) = self.wrap_bits {
            s.push_str(&format!(",wrap={w}"));
        }
        if let Some(k) = &self.kinds {
            s.push_str(&format!(",kind={}", k.field.spec()));
            let list = |want: fn(&KindAction) -> bool| k.table.iter().filter(|(_, a)| want(a)).map(|(v, _)| v.to_string()).collect::<Vec<_>>().join("+");
            for (key, want) in [
                ("event", (|a: &KindAction| *a == KindAction::Event) as fn(&KindAction) -> bool),
                ("overflow", |a| *a == KindAction::Overflow),
                ("overflow_count", |a| *a == KindAction::OverflowCounted),
                ("ignore", |a| *a == KindAction::Ignore),
            ] {
                let l = list(want);
                if !l.is_empty() {
                    s.push_str(&format!(",{key}={l}"));
                }
            }
            let markers: Vec<String> = k.table.iter().filter_map(|(v, a)| if let KindAction::Marker(c) = a { Some(format!("{v}>{c}")) } else { None }).collect();
            if !markers.is_empty() {
                s.push_str(&format!(",marker={}", markers.join("+")));
            }
            if k.skip_unknown {
                s.push_str(",unknown=skip");
            }
            if let Some(c) = &k.overflow_count {
                s.push_str(&format!(",count={}", c.spec()));
            }
        }
        if let Some(m) = &self.channel_map {
            s.push_str(&format!(",map={}", m.iter().map(|(r, c)| format!("{r}>{c}")).collect::<Vec<_>>().join("+")));
        }
        if let Some(e) = &self.edge {
            s.push_str(&format!(",edge={},edge_keep={},edge_falling={},edge_falling_add={}", e.field.spec(), e.keep.name(), e.falling_value, e.falling_add));
        }
        if self.reorder_ps > 0 {
            s.push_str(&format!(",reorder_ps={}", self.reorder_ps));
        }
        s
    }

    /// The layout's own consistency, as text (the part's spec key first).
    pub fn validate(&self) -> std::result::Result<(), String> {
        self.check().map_err(|p| format!("{}: {}", p.part.spec_key(), p.message))
    }

    /// The layout's own consistency: words inside the record, bit ranges inside their
    /// words, no two fields sharing a bit, wrap and kinds that fit, a map where needed.
    pub fn check(&self) -> std::result::Result<(), Problem> {
        if self.record_bytes == 0 {
            return Err(problem(Part::Record, "record size must be at least 1 byte"));
        }
        let mut fields = vec![("time", Part::Time, self.time), ("channel", Part::Channel, self.channel)];
        if let Some(k) = &self.kinds {
            fields.push(("kind", Part::Kind, k.field));
            if let Some(c) = k.overflow_count {
                fields.push(("overflow count", Part::Count, c));
            }
        }
        if let Some(e) = &self.edge {
            fields.push(("edge", Part::Edge, e.field));
        }
        for &(name, part, f) in &fields {
            if !(1..=8).contains(&f.width_bytes) {
                return Err(problem(part, format!("{name} field word of {} bytes: expected 1 to 8 bytes", f.width_bytes)));
            }
            // checked: an offset near usize::MAX from a spec must not wrap round to "fits".
            if f.offset_bytes.checked_add(f.width_bytes).is_none_or(|end| end > self.record_bytes) {
                return Err(problem(
                    part,
                    format!(
                        "{name} field (bytes {}..{}) is wider than the {}-byte record",
                        f.offset_bytes,
                        f.offset_bytes as u128 + f.width_bytes as u128,
                        self.record_bytes
                    ),
                ));
            }
            let word_bits = 8 * f.width_bytes as u64; // 1..=8 bytes, checked just above
            if f.bits == 0 || f.shift_bits as u64 + f.bits as u64 > word_bits {
                return Err(problem(
                    part,
                    format!("{name} field bits {}..{} run past its {word_bits}-bit word (expected at least 1 bit, ending by bit {word_bits})", f.shift_bits, f.shift_bits as u64 + f.bits as u64),
                ));
            }
        }
        for (i, &(a, _, fa)) in fields.iter().enumerate() {
            let ma = fa.record_bits(self.record_bytes);
            for &(b, part, fb) in &fields[i + 1..] {
                let mb = fb.record_bits(self.record_bytes);
                if let Some(at) = ma.iter().zip(&mb).position(|(x, y)| x & y != 0) {
                    return Err(problem(part, format!("{a} and {b} fields overlap (both use bits of record byte {at})")));
                }
            }
        }
        if self.time.signed {
            return Err(problem(Part::Time, "the time field cannot be signed"));
        }
        if let Some(w) = self.wrap_bits {
            let max = self.time.bits;
            if w == 0 || w > max {
                return Err(problem(Part::Wrap, format!("wrap={w} bits does not fit the {max}-bit time field (expected 1..={max})")));
            }
        }
        match &self.channel_map {
            None if self.channel.signed => return Err(problem(Part::Channel, "a signed channel field needs a channel map (raw value → channel)")),
            None if self.channel.bits > 32 => {
                return Err(problem(Part::Channel, format!("a {}-bit channel field needs a channel map (channel numbers have at most 32 bits)", self.channel.bits)))
            }
            Some(m) if m.is_empty() => return Err(problem(Part::Map, "the channel map is empty")),
            Some(m) => {
                let (lo, hi) = if self.channel.signed {
                    (-(1i128 << (self.channel.bits - 1)), (1i128 << (self.channel.bits - 1)) - 1)
                } else {
                    (0, (1i128 << self.channel.bits) - 1)
                };
                if let Some(r) = m.keys().find(|&&r| (r as i128) < lo || (r as i128) > hi) {
                    return Err(problem(Part::Map, format!("raw value {r} does not fit the {}-bit {}channel field ({lo}..={hi})", self.channel.bits, if self.channel.signed { "signed " } else { "" })));
                }
            }
            None => {}
        }
        if let Some(k) = &self.kinds {
            if k.table.is_empty() {
                return Err(problem(Part::Kind, "no kind values are given (expected at least one event or marker kind)"));
            }
            if let Some((&v, _)) = k.table.iter().find(|(&v, _)| v > k.field.mask()) {
                return Err(problem(Part::KindValue(v), format!("kind value {v} does not fit the {}-bit kind field", k.field.bits)));
            }
            let counted = k.table.iter().find(|(_, a)| **a == KindAction::OverflowCounted);
            match (counted, k.overflow_count) {
                (Some((&v, _)), None) => return Err(problem(Part::KindValue(v), format!("kind value {v} is an overflow with a count, but the layout has no overflow count field"))),
                (None, Some(_)) => return Err(problem(Part::Count, "an overflow count field, but no kind value is an overflow with a count")),
                _ => {}
            }
            if !k.table.values().any(|a| matches!(a, KindAction::Event | KindAction::Marker(_))) {
                return Err(problem(Part::Kind, "no kind value is an event or a marker: the file could hold no time tags"));
            }
        }
        if let Some(e) = &self.edge {
            if e.falling_value > e.field.mask() {
                return Err(problem(Part::Edge, format!("falling value {} does not fit the {}-bit edge field", e.falling_value, e.field.bits)));
            }
            if e.keep == EdgeKeep::Both && e.falling_add == 0 {
                return Err(problem(Part::Edge, "keeping both edges needs falling edges on their own channels: give a falling_add of 1 or more"));
            }
        }
        if self.reorder_ps > 0 {
            if let Some(b) = self.period_bits().filter(|&b| b < 64) {
                let period = 1u64 << b;
                if self.reorder_ticks() >= period / 4 {
                    return Err(problem(
                        Part::Reorder,
                        format!("reorder_ps={} is {} ticks, not below a quarter of the 2^{b}-tick counter period", self.reorder_ps, self.reorder_ticks()),
                    ));
                }
            }
        }
        Ok(())
    }
}

/// `OFF:WIDTH[:le|be][:signed][[A..B]]` → a field (little-endian when the order is left
/// out; the whole word when no bit range is given).
fn parse_field_spec(v: &str) -> std::result::Result<Field, String> {
    let (word, range) = match v.split_once('[') {
        Some((w, r)) => (w, Some(r.strip_suffix(']').ok_or("a bit range is written [FIRST..END]")?)),
        None => (v, None),
    };
    let parts: Vec<&str> = word.split(':').collect();
    if !(2..=4).contains(&parts.len()) {
        return Err("expected OFFSET:WIDTH[:le|be][:signed][[FIRST..END]]".into());
    }
    let n = |s: &str| s.parse::<usize>().map_err(|_| format!("{s:?} is not a whole number of bytes"));
    let (mut endian, mut signed) = (Endian::Little, false);
    for t in &parts[2..] {
        match *t {
            "signed" => signed = true,
            e => endian = Endian::parse(e).ok_or_else(|| format!("{e:?}: expected le, be or signed"))?,
        }
    }
    let mut f = Field::word(n(parts[0])?, n(parts[1])?, endian);
    f.signed = signed;
    if let Some(r) = range {
        let (a, b) = r.split_once("..").ok_or("a bit range is written [FIRST..END], e.g. [56..64]")?;
        let bit = |s: &str| s.parse::<u32>().map_err(|_| format!("{s:?} is not a bit number"));
        let (a, b) = (bit(a)?, bit(b)?);
        if b <= a {
            return Err(format!("bit range {a}..{b} is empty (END must be above FIRST)"));
        }
        (f.shift_bits, f.bits) = (a, b - a);
    }
    Ok(f)
}

fn line_of(text: &str, byte: usize) -> usize {
    text[..byte.min(text.len())].bytes().filter(|&b| b == b'\n').count() + 1
}

/// The line of `key` inside `[table]` (top level when `table` is `None`), else of the
/// table's header, else 1.
fn line_of_key(text: &str, table: Option<&str>, key: Option<&str>) -> usize {
    let mut current: Option<String> = None;
    let mut header = None;
    for (i, l) in text.lines().enumerate() {
        let t = l.trim();
        if let Some(name) = t.strip_prefix('[').and_then(|r| r.split(']').next()) {
            current = Some(name.trim().to_string());
            if table == Some(name.trim()) && header.is_none() {
                header = Some(i + 1);
                if key.is_none() {
                    return i + 1;
                }
            }
            continue;
        }
        if current.as_deref() != table {
            continue;
        }
        if let Some(k) = key {
            let rest = t.strip_prefix(k).or_else(|| t.strip_prefix(&format!("\"{k}\"")));
            if rest.is_some_and(|r| r.trim_start().starts_with('=')) {
                return i + 1;
            }
        }
    }
    header.unwrap_or(1)
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TomlLayout {
    record_bytes: usize,
    header_bytes: Option<u64>,
    tick_ps: TomlTick,
    wrap_bits: Option<u32>,
    reorder_ps: Option<u64>,
    time: TomlField,
    channel: TomlField,
    kind: Option<TomlField>,
    kinds: Option<BTreeMap<String, TomlKind>>,
    overflow_count: Option<TomlField>,
    edge: Option<TomlField>,
}

#[derive(Deserialize)]
#[serde(untagged)]
enum TomlTick {
    Int(u64),
    Float(f64),
    Text(String),
}

/// Every field table's keys; keys that belong to another table are refused by name
/// ([`TomlField::only`]).
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TomlField {
    offset: usize,
    width: usize,
    endian: Option<String>,
    shift: Option<u32>,
    bits: Option<u32>,
    signed: Option<bool>,
    map: Option<BTreeMap<String, Channel>>,
    unknown: Option<String>,
    keep: Option<String>,
    falling: Option<u64>,
    falling_add: Option<Channel>,
}

impl TomlField {
    /// The first key given here that is not in `allowed` (beyond the word keys).
    fn stray(&self, allowed: &[&str]) -> Option<&'static str> {
        let given = [
            ("signed", self.signed.is_some()),
            ("map", self.map.is_some()),
            ("unknown", self.unknown.is_some()),
            ("keep", self.keep.is_some()),
            ("falling", self.falling.is_some()),
            ("falling_add", self.falling_add.is_some()),
        ];
        given.into_iter().find(|(k, g)| *g && !allowed.contains(k)).map(|(k, _)| k)
    }
}

#[derive(Deserialize)]
#[serde(untagged)]
enum TomlKind {
    Name(String),
    Marker { marker: Channel },
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_parses_exactly_to_femtoseconds() {
        assert_eq!(Tick::parse_ps("12.345").unwrap().fs, 12_345);
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
        // 12.345 ps × 1 = 12.345 → 12; × 2 = 24.69 → 25; × 10 = 123.45 → 123;
        // × 100 = 1234.5 → 1235 (half up); × 200 = 2469 exactly.
        let t = Tick::parse_ps("12.345").unwrap();
        assert_eq!(t.to_ps(1), 12);
        assert_eq!(t.to_ps(2), 25);
        assert_eq!(t.to_ps(10), 123);
        assert_eq!(t.to_ps(100), 1235); // 1234.5 → 1235
        assert_eq!(t.to_ps(200), 2469);
        assert_eq!(Tick::parse_ps("0.5").unwrap().to_ps(3), 2); // 1.5 → 2
    }

    #[test]
    fn spec_round_trips_and_defaults_to_little_endian() {
        let l = RecordLayout::from_spec("rec=12,skip=16,time=0:4,chan=4:2:be,tick_ps=12.345,wrap=32").unwrap();
        assert_eq!(l.time.endian, Endian::Little);
        assert_eq!(l.channel.endian, Endian::Big);
        assert_eq!(RecordLayout::from_spec(&l.to_spec()).unwrap(), l);
    }

    #[test]
    fn layout_errors_say_what_is_wrong() {
        let cases = [
            ("rec=8,time=0:8,chan=8:2,tick_ps=1", "wider than the 8-byte record"),
            ("rec=16,time=0:4,chan=8:2,tick_ps=1,wrap=33", "does not fit the 32-bit time field"),
            // Words of 1..=8 bytes are allowed since bit fields (a 6-byte time word is fine).
            ("rec=16,time=0:9,chan=9:2,tick_ps=1", "expected 1 to 8 bytes"),
            ("rec=16,time=0:8,chan=8:2[4..17],tick_ps=1", "bits 4..17 run past its 16-bit word"),
            ("rec=8,time=0:8:le[0..57],chan=0:8:le[56..64],tick_ps=1", "time and channel fields overlap"),
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
        let text = "record_bytes = 16\ntick_ps = \"12.345\"\n[time]\noffset = 0\nwidth = 8\nendianness = \"big\"\n[channel]\noffset = 8\nwidth = 2\n";
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
        assert_eq!((l.tick.fs, l.time.endian), (12_345, Endian::Big));
        let wide = ok.replace("offset = 8\nwidth = 2", "offset = 15\nwidth = 2");
        match RecordLayout::from_toml(&wide, Path::new("l.toml")).unwrap_err() {
            Error::Config { line, message, .. } => assert_eq!(line, 7, "{message}"),
            other => panic!("{other}"),
        }
        let float = ok.replace("\"12.345\"", "12.345");
        assert_eq!(RecordLayout::from_toml(&float, Path::new("l.toml")).unwrap().tick.fs, 12_345);
    }
}
