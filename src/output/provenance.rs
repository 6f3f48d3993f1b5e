//! Provenance: tool version, command line, UTC time, parameters, and each input's path, size and checksum.
//! Root attributes carry the run (`tool`, `tool_version`, `command_line`, `created_utc`,
//! `param.<key>`); the table `/provenance/inputs` traces every input to its bytes (xxh3-64).

use super::{AttrValue, ColumnData, Group, Table};
use crate::{Error, Result};
use std::io::Read;
use std::path::{Path, PathBuf};
use std::time::{SystemTime, UNIX_EPOCH};

/// One input file as it was when read.
#[derive(Debug, Clone, PartialEq)]
pub struct InputRecord {
    pub path: PathBuf,
    pub size_bytes: u64,
    /// XXH3-64 of the whole file, 16 lower-case hex digits.
    pub xxh3: String,
}

/// What produced an output file.
#[derive(Debug, Clone, PartialEq)]
pub struct Provenance {
    pub tool_version: String,
    pub command_line: Vec<String>,
    /// ISO 8601 UTC, e.g. `2026-12-01T21:50:07Z`.
    pub created_utc: String,
    pub params: Vec<(String, AttrValue)>,
    pub inputs: Vec<InputRecord>,
}

impl Provenance {
    /// Start a record for this run, stamped with the current UTC time.
    pub fn new(command_line: Vec<String>) -> Self {
        let secs = SystemTime::now().duration_since(UNIX_EPOCH).map(|d| d.as_secs() as i64).unwrap_or(0);
        Provenance {
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            command_line,
            created_utc: iso8601_utc(secs),
            params: Vec::new(),
            inputs: Vec::new(),
        }
    }

    /// Record a parameter (builder style).
    pub fn param(mut self, key: impl Into<String>, value: AttrValue) -> Self {
        self.params.push((key.into(), value));
        self
    }

    /// Record a list or map parameter as JSON text (a string attribute that `json.loads`
    /// reads back; map keys become strings: `{"1":0,"2":850}`), never Rust debug text.
    pub fn param_json(self, key: impl Into<String>, value: &impl serde::Serialize) -> Self {
        self.param(key, AttrValue::json_text(value))
    }

    /// Record an input: reads the whole file once for its checksum.
    pub fn input(mut self, path: &Path) -> Result<Self> {
        self.inputs.push(InputRecord::of(path)?);
        Ok(self)
    }

    /// The root attributes: tool, version, command line, creation time, `param.<key>`.
    pub fn to_attrs(&self) -> Vec<(String, AttrValue)> {
        let mut a = vec![
            ("tool".to_string(), AttrValue::Str("tagsieve".into())),
            ("tool_version".to_string(), AttrValue::Str(self.tool_version.clone())),
            ("command_line".to_string(), AttrValue::Str(shell_join(&self.command_line))),
            ("created_utc".to_string(), AttrValue::Str(self.created_utc.clone())),
        ];
        a.extend(self.params.iter().map(|(k, v)| (format!("param.{k}"), v.clone())));
        a
    }

    /// The `/provenance` group: the `inputs` table (path, size_bytes, xxh3).
    pub fn to_group(&self) -> Group {
        let inputs = Table::new("inputs")
            .col("path", "", ColumnData::Str(self.inputs.iter().map(|i| i.path.display().to_string()).collect()))
            .col("size_bytes", "bytes", ColumnData::U64(self.inputs.iter().map(|i| i.size_bytes).collect()))
            .col("xxh3", "", ColumnData::Str(self.inputs.iter().map(|i| i.xxh3.clone()).collect()))
            .attr("checksum", AttrValue::Str("XXH3-64 of the whole file, seed 0, hex".into()));
        Group { name: "provenance".into(), tables: vec![inputs], ..Default::default() }
    }
}

impl InputRecord {
    /// Size and checksum of `path`, read with plain buffered reads (no mapping: the
    /// checksum must see the bytes as they are now, and this runs once per file).
    pub fn of(path: &Path) -> Result<Self> {
        let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
        let mut hasher = xxhash_rust::xxh3::Xxh3::new();
        let mut buf = vec![0u8; 1 << 20];
        let mut size_bytes = 0u64;
        loop {
            let n = f.read(&mut buf).map_err(|e| Error::io(path, e))?;
            if n == 0 {
                break;
            }
            hasher.update(&buf[..n]);
            size_bytes += n as u64;
        }
        Ok(InputRecord { path: path.to_path_buf(), size_bytes, xxh3: format!("{:016x}", hasher.digest()) })
    }
}

/// Join arguments so the line can be pasted into a POSIX shell: arguments with
/// anything beyond `[A-Za-z0-9_./=:,+-]` are single-quoted.
pub fn shell_join(args: &[String]) -> String {
    let safe = |c: char| c.is_ascii_alphanumeric() || "_./=:,+-@%".contains(c);
    args.iter()
        .map(|a| if !a.is_empty() && a.chars().all(safe) { a.clone() } else { format!("'{}'", a.replace('\'', "'\\''")) })
        .collect::<Vec<_>>()
        .join(" ")
}

/// Seconds since the Unix epoch → `YYYY-MM-DDThh:mm:ssZ`.
pub fn iso8601_utc(unix_s: i64) -> String {
    let (days, secs) = (unix_s.div_euclid(86_400), unix_s.rem_euclid(86_400));
    let (y, m, d) = civil_from_days(days);
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", secs / 3600, secs % 3600 / 60, secs % 60)
}

/// Days since 1970-01-01 → proleptic Gregorian (year, month, day). The 400-year era
/// method of H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (2013).
pub fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468; // shift the epoch to 0000-03-01
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097); // day of era [0, 146096]
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365; // year of era [0, 399]
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100); // day of year from March 1 [0, 365]
    let mp = (5 * doy + 2) / 153; // month from March [0, 11]
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_instants() {
        // 10^9 s after the epoch is 2001-09-09T01:46:40Z (widely reported; from memory).
        assert_eq!(iso8601_utc(1_000_000_000), "2001-09-09T01:46:40Z");
        assert_eq!(iso8601_utc(0), "1970-01-01T00:00:00Z");
        // 2^31 − 1 s is 2038-01-19T03:14:07Z, the 32-bit time_t limit (from memory).
        assert_eq!(iso8601_utc(2_147_483_647), "2038-01-19T03:14:07Z");
        // One second before the epoch.
        assert_eq!(iso8601_utc(-1), "1969-12-31T23:59:59Z");
    }

    #[test]
    fn leap_days() {
        // 2000 is a leap year (divisible by 400), 2100 is not (Gregorian rule; common practice).
        let d2000 = days_from_civil(2000, 2, 29);
        assert_eq!(civil_from_days(d2000), (2000, 2, 29));
        assert_eq!(civil_from_days(d2000 + 1), (2000, 3, 1));
        let d2100 = days_from_civil(2100, 2, 28);
        assert_eq!(civil_from_days(d2100 + 1), (2100, 3, 1));
    }

    /// Naive day count for the leap-day test: a different algorithm (year-by-year sum).
    fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
        let leap = |y: i64| (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
        let mut days: i64 = (1970..y).map(|yy| if leap(yy) { 366 } else { 365 }).sum();
        let month_len = [31, if leap(y) { 29 } else { 28 }, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
        days += month_len[..(m - 1) as usize].iter().sum::<i64>();
        days + i64::from(d) - 1
    }

    #[test]
    fn xxh3_of_empty_input_matches_reference_vector() {
        // XXH3_64bits("") with seed 0 = 0x2D06800538D394C2 (xxHash sanity-check vector; from memory).
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("empty");
        std::fs::write(&p, b"").unwrap();
        let r = InputRecord::of(&p).unwrap();
        assert_eq!((r.size_bytes, r.xxh3.as_str()), (0, "2d06800538d394c2"));
    }

    #[test]
    fn streaming_checksum_equals_one_shot_across_buffer_boundaries() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("x");
        let bytes: Vec<u8> = (0..(3 << 20) + 17).map(|i: u32| (i.wrapping_mul(2_654_435_761) >> 13) as u8).collect();
        std::fs::write(&p, &bytes).unwrap();
        let r = InputRecord::of(&p).unwrap();
        assert_eq!(r.size_bytes, bytes.len() as u64);
        assert_eq!(r.xxh3, format!("{:016x}", xxhash_rust::xxh3::xxh3_64(&bytes)));
    }

    #[test]
    fn missing_input_names_the_file() {
        let e = Provenance::new(vec![]).input(Path::new("/no/such/file.tags")).unwrap_err();
        assert!(e.to_string().contains("/no/such/file.tags"));
        assert_eq!(e.exit_code(), 2);
    }

    #[test]
    fn attrs_carry_command_line_and_params() {
        let p = Provenance::new(vec!["tagsieve".into(), "count".into(), "a b.tags".into()])
            .param("window_ps", AttrValue::U64(800));
        let a = p.to_attrs();
        let get = |k: &str| a.iter().find(|(kk, _)| kk == k).map(|(_, v)| v.clone());
        assert_eq!(get("command_line"), Some(AttrValue::Str("tagsieve count 'a b.tags'".into())));
        assert_eq!(get("param.window_ps"), Some(AttrValue::U64(800)));
        assert_eq!(get("tool_version"), Some(AttrValue::Str(env!("CARGO_PKG_VERSION").into())));
    }

    #[test]
    fn list_and_map_params_are_json_text() {
        let delays: std::collections::BTreeMap<u32, i64> = [(1, 0), (2, 850)].into_iter().collect();
        let p = Provenance::new(vec![]).param_json("delays_ps", &delays).param_json("acc_offsets_ps", &vec![-2_000_000i64, 2_000_000]);
        // JSON (RFC 8259) object keys are strings; arrays are comma-separated in brackets.
        assert_eq!(p.params[0].1, AttrValue::Str(r#"{"1":0,"2":850}"#.into()));
        assert_eq!(p.params[1].1, AttrValue::Str("[-2000000,2000000]".into()));
    }
}
