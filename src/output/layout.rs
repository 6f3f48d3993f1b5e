//! The file layout: engine and analysis results → Document. docs/hdf5-layout.md is generated from here
//! ([`describe_layout`] renders a sample Document), so the documentation cannot drift from the code.
//! Other stages add their own groups beside `/blocks` with `doc.root.groups.push(group)`.

use super::provenance::Provenance;
use super::{AttrValue, ColumnData, Document, Group, Table};
use crate::engine::tables::{BlockSpan, BlockTables, CoincidenceRow, Estimate, PeakFit, ScanResult, SinglesRow, SweepTable};
use crate::units::ps_to_s;
use crate::Channel;

/// Bumped whenever a path, dtype or unit below changes. 2: tables with no rows and empty
/// `scans`/`sweeps` groups are left out; the demo's scan and sweep blocks moved out of
/// `/blocks` into `/scans` and `/sweeps`. 3: `/proposed_delays` (scan with a reference);
/// list and map parameters as JSON text; `param.slice_s` in the unit given (was
/// `param.slice_ps`); `/bell3@convention` as typed, `/bell3@angles_deg` as JSON text;
/// `off_peak_windows` holds the sweep rows' off-peak windows too.
pub const LAYOUT_VERSION: u64 = 3;

/// The whole output of a run: provenance at the root, `/provenance/inputs`, and one
/// group per block under `/blocks/<label>`.
pub fn run_document(blocks: &[BlockTables], provenance: &Provenance) -> Document {
    run_document_parts(blocks, &[], &[], provenance)
}

/// [`run_document`] with delay-scan and window-sweep blocks kept apart from the counted
/// blocks (the demo): `/scans/<label>` and `/sweeps/<label>`, each laid out like a
/// `/blocks/<label>` group; either group is left out when it has no blocks.
pub fn run_document_parts(blocks: &[BlockTables], scans: &[BlockTables], sweeps: &[BlockTables], provenance: &Provenance) -> Document {
    let mut root = Group::new("");
    root.attrs = provenance.to_attrs();
    root.attrs.push(("layout_version".into(), AttrValue::U64(LAYOUT_VERSION)));
    root.groups.push(provenance.to_group());
    let mut all = Group::new("blocks");
    all.groups = blocks.iter().map(block_group).collect();
    root.groups.push(all);
    for (name, part) in [(SCAN_BLOCKS, scans), (SWEEP_BLOCKS, sweeps)] {
        if !part.is_empty() {
            let mut g = Group::new(name);
            g.groups = part.iter().map(block_group).collect();
            root.groups.push(g);
        }
    }
    Document { root }
}

/// `/proposed_delays`, beside `/blocks` when `scan --reference` proposes delays: the
/// reference channel and the delays file as attributes, a `found` table (the delays
/// written, each with how it was obtained) and a `not_found` table (channels left out, with
/// the reason); a table with no rows is left out.
pub fn proposal_group(d: &crate::engine::Delays, delays_file: &std::path::Path) -> Group {
    let mut g = Group::new(PROPOSED_DELAYS);
    if let Some(r) = d.reference {
        g.attrs.push(("reference".into(), AttrValue::U64(u64::from(r))));
    }
    g.attrs.push(("delays_file".into(), AttrValue::Str(delays_file.display().to_string())));
    let found: Vec<(Channel, i64)> = d.by_channel.iter().map(|(&c, &v)| (c, v)).collect();
    let obtained = found.iter().map(|(c, _)| d.obtained.get(c).cloned().unwrap_or_default()).collect();
    let missing: Vec<(Channel, &String)> = d.not_found.iter().map(|(&c, why)| (c, why)).collect();
    g.tables = [
        Table::new("found")
            .col("channel", "", u64s(&found, |f| u64::from(f.0)))
            .col("delay_ps", "ps", i64s(&found, |f| f.1))
            .col("obtained", "", ColumnData::Str(obtained)),
        Table::new("not_found")
            .col("channel", "", u64s(&missing, |f| u64::from(f.0)))
            .col("reason", "", ColumnData::Str(missing.iter().map(|f| f.1.clone()).collect())),
    ]
    .into_iter()
    .filter(|t| t.rows() > 0)
    .collect();
    g
}

/// Root group of [`proposal_group`].
pub const PROPOSED_DELAYS: &str = "proposed_delays";

/// Root groups of [`run_document_parts`] for scan and sweep blocks.
pub const SCAN_BLOCKS: &str = "scans";
pub const SWEEP_BLOCKS: &str = "sweeps";

/// Group name of a channel pair: `<a>-<b>`.
pub fn pair_name(a: Channel, b: Channel) -> String {
    format!("{a}-{b}")
}

/// `/blocks/<label>`: span and window attributes, singles, delays, coincidences,
/// off-peak windows, `scans/<a>-<b>` histograms and `sweeps/<a>-<b>` tables. A table with
/// no rows and a `scans`/`sweeps` group with no tables are left out (a scan has no
/// coincidences; `--no-offpeak` counts no off-peak windows).
pub fn block_group(b: &BlockTables) -> Group {
    let mut g = Group::new(b.label.clone());
    g.attrs = block_attrs(b);
    g.tables = [
        singles_table(&b.singles),
        delays_table(&b.delays_ps),
        coincidence_table("coincidences", &b.coincidences),
        off_peak_table(b.coincidences.iter().chain(b.sweeps.iter().flat_map(|s| &s.rows))),
    ]
    .into_iter()
    .filter(|t| t.rows() > 0)
    .collect();
    let mut scans = Group::new("scans");
    scans.tables = b.scans.iter().map(scan_table).collect();
    let mut sweeps = Group::new("sweeps");
    sweeps.tables = b.sweeps.iter().map(sweep_table).collect();
    g.groups = [scans, sweeps].into_iter().filter(|s| !s.tables.is_empty()).collect();
    g
}

fn block_attrs(b: &BlockTables) -> Vec<(String, AttrValue)> {
    let mut a = vec![("label".to_string(), AttrValue::Str(b.label.clone()))];
    if let Some(w) = b.window_ps {
        a.push(("window_ps".into(), AttrValue::U64(w)));
    }
    if let Some(BlockSpan { start_ps, end_ps }) = b.span {
        a.push(("span_start_ps".into(), AttrValue::U64(start_ps)));
        a.push(("span_end_ps".into(), AttrValue::U64(end_ps)));
        a.push(("span_s".into(), AttrValue::F64(ps_to_s(end_ps - start_ps))));
    }
    a
}

fn u64s<T>(rows: &[T], f: impl Fn(&T) -> u64) -> ColumnData {
    ColumnData::U64(rows.iter().map(f).collect())
}

fn i64s<T>(rows: &[T], f: impl Fn(&T) -> i64) -> ColumnData {
    ColumnData::I64(rows.iter().map(f).collect())
}

fn f64s<T>(rows: &[T], f: impl Fn(&T) -> f64) -> ColumnData {
    ColumnData::F64(rows.iter().map(f).collect())
}

fn singles_table(rows: &[SinglesRow]) -> Table {
    Table::new("singles")
        .col("channel", "", u64s(rows, |r| u64::from(r.channel)))
        .col("name", "", ColumnData::Str(rows.iter().map(|r| r.name.clone()).collect()))
        .col("events", "counts", u64s(rows, |r| r.events))
        .col("first_ps", "ps", u64s(rows, |r| r.first_ps))
        .col("last_ps", "ps", u64s(rows, |r| r.last_ps))
        .col("live_time_s", "s", f64s(rows, |r| ps_to_s(r.live_time_ps)))
        .col("rate_hz", "Hz", f64s(rows, |r| r.rate_hz))
}

fn delays_table(delays: &[(Channel, i64)]) -> Table {
    Table::new("delays")
        .col("channel", "", u64s(delays, |d| u64::from(d.0)))
        .col("delay_ps", "ps", i64s(delays, |d| d.1))
}

/// One row per (pair, window): the block's coincidences and each sweep use this shape.
fn coincidence_table(name: &str, rows: &[CoincidenceRow]) -> Table {
    let est = |f: fn(&CoincidenceRow) -> Estimate| (f64s(rows, move |r| f(r).value), f64s(rows, move |r| f(r).sigma));
    let (acc_a, acc_a_s) = est(|r| r.acc_analytic);
    let (acc_m, acc_m_s) = est(|r| r.acc_measured);
    let (net, net_s) = est(|r| r.net);
    Table::new(name)
        .col("a", "", u64s(rows, |r| u64::from(r.a)))
        .col("b", "", u64s(rows, |r| u64::from(r.b)))
        .col("rel_delay_ps", "ps", i64s(rows, |r| r.rel_delay_ps))
        .col("window_ps", "ps", u64s(rows, |r| r.window_ps))
        .col("coincidences", "counts", u64s(rows, |r| r.coincidences))
        .col("heralded", "counts", u64s(rows, |r| r.heralded))
        .col("acc_analytic", "counts", acc_a)
        .col("acc_analytic_sigma", "counts", acc_a_s)
        .col("acc_measured", "counts", acc_m)
        .col("acc_measured_sigma", "counts", acc_m_s)
        .col("net", "counts", net)
        .col("net_sigma", "counts", net_s)
        .col("car", "1", f64s(rows, |r| r.car))
        .col("acc_agreement_sigma", "1", f64s(rows, |r| r.acc_agreement_sigma))
}

/// The raw off-peak window counts behind `acc_measured`: one row per pair, window and
/// offset, for the block's coincidences and every sweep row alike.
fn off_peak_table<'a>(rows: impl IntoIterator<Item = &'a CoincidenceRow>) -> Table {
    let flat: Vec<(&CoincidenceRow, i64, u64)> = rows
        .into_iter()
        .flat_map(|r| r.acc_offsets_ps.iter().zip(&r.acc_offset_counts).map(move |(&o, &n)| (r, o, n)))
        .collect();
    Table::new("off_peak_windows")
        .col("a", "", u64s(&flat, |f| u64::from(f.0.a)))
        .col("b", "", u64s(&flat, |f| u64::from(f.0.b)))
        .col("window_ps", "ps", u64s(&flat, |f| f.0.window_ps))
        .col("offset_ps", "ps", i64s(&flat, |f| f.1))
        .col("counts", "counts", u64s(&flat, |f| f.2))
}

fn scan_table(s: &ScanResult) -> Table {
    let mut t = Table::new(pair_name(s.a, s.b))
        .col("counts", "counts", ColumnData::U64(s.counts.clone()))
        .col("bin_edges_ps", "ps", ColumnData::I64(s.bin_edges_ps()))
        .attr("a", AttrValue::U64(u64::from(s.a)))
        .attr("b", AttrValue::U64(u64::from(s.b)))
        .attr("rel_delay_ps", AttrValue::I64(s.rel_delay_ps))
        .attr("half_range_ps", AttrValue::U64(s.half_range_ps))
        .attr("bin_ps", AttrValue::U64(s.bin_ps))
        .attr("peak_found", AttrValue::U64(u64::from(s.peak.is_some())));
    if let Some(p) = &s.peak {
        t.attrs.extend(peak_attrs(p));
    }
    t
}

fn peak_attrs(p: &PeakFit) -> Vec<(String, AttrValue)> {
    [
        ("peak_delay_ps", p.delay_ps),
        ("peak_delay_sigma_ps", p.delay_sigma_ps),
        ("peak_fwhm_ps", p.fwhm_ps),
        ("peak_height", p.height),
        ("peak_background", p.background),
        ("peak_net_counts", p.net_counts),
    ]
    .into_iter()
    .map(|(k, v)| (k.to_string(), AttrValue::F64(v)))
    .collect()
}

fn sweep_table(s: &SweepTable) -> Table {
    let mut t = coincidence_table(&pair_name(s.a, s.b), &s.rows);
    t.attrs = vec![
        ("a".into(), AttrValue::U64(u64::from(s.a))),
        ("b".into(), AttrValue::U64(u64::from(s.b))),
        ("rel_delay_ps".into(), AttrValue::I64(s.rel_delay_ps)),
        ("recommended_window_ps".into(), AttrValue::U64(s.recommended_window_ps)),
        ("criterion".into(), AttrValue::Str(s.criterion.clone())),
    ];
    t
}

// ---------------------------------------------------------------------------------------
// The documented layout.

/// What an entry of the documented layout is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum EntryKind {
    Group,
    Attribute,
    Dataset,
}

/// One documented path: a group, an attribute (`path@name`) or a dataset.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub struct LayoutEntry {
    pub kind: EntryKind,
    pub path: String,
    /// `u64`, `i64`, `f64`, `string`; empty for groups.
    pub dtype: String,
    /// Datasets only: the `units` attribute.
    pub unit: String,
    /// Datasets only: what one element of the 1-D dataset is.
    pub rows: String,
    /// What the value means (documentation only).
    pub note: String,
}

/// A sample run with one block and one pair of each kind; names that vary per run are
/// placeholders (`{label}`, `{a}-{b}`, `param.{key}`).
pub fn sample_document() -> Document {
    let mut prov = Provenance::new(vec!["tagsieve".into(), "{subcommand}".into(), "...".into()])
        .param("{key}", AttrValue::Str("{value}".into()));
    prov.created_utc = "{created_utc}".into();
    prov.tool_version = "{version}".into();
    prov.inputs.push(super::provenance::InputRecord { path: "{input}".into(), size_bytes: 0, xxh3: "{xxh3}".into() });
    let mut doc = run_document(&[sample_block()], &prov);
    rename_pairs(&mut doc.root);
    let mut proposal = crate::engine::Delays { reference: Some(1), ..Default::default() };
    proposal.by_channel.insert(1, 0);
    proposal.obtained.insert(1, "reference channel".into());
    proposal.not_found.insert(2, "no peak".into());
    doc.root.groups.push(proposal_group(&proposal, std::path::Path::new("{delays_file}")));
    doc.root.groups.extend(sample_analysis_groups());
    doc
}

/// `/chsh`, `/visibility` and `/bell3` as `tagsieve chsh` adds them (see
/// [`super::layout_analysis`]), built from fixed sample counts.
fn sample_analysis_groups() -> Vec<Group> {
    use super::layout_analysis::{bell3_group, chsh_group, visibility_group};
    use crate::analysis::{bell3, chsh, visibility};
    let one = Estimate { value: 1.0, sigma: 1.0 };
    let setting = |label_a: &str, label_b: &str, angle_a_deg: f64, angle_b_deg: f64| chsh::SettingCounts {
        label_a: label_a.into(),
        label_b: label_b.into(),
        angle_a_deg,
        angle_b_deg,
        counts: [40, 10, 10, 40],
        accidentals: Some([one; 4]),
        live_time_s: None,
    };
    let settings = [setting("a", "b", 0.0, 22.5), setting("a", "b'", 0.0, 67.5), setting("a'", "b", 45.0, 22.5), setting("a'", "b'", 45.0, 67.5)];
    let mut groups = Vec::new();
    if let Ok(report) = chsh::evaluate(&settings) {
        groups.push(chsh_group(&report));
    }
    let points: Vec<visibility::AnglePoint> =
        [0.0, 45.0, 90.0, 135.0].iter().zip([90, 50, 10, 50]).map(|(&angle_deg, counts)| visibility::AnglePoint { angle_deg, counts }).collect();
    if let Ok(fit) = visibility::fit_visibility("basis", &points) {
        let mut g = visibility_group(&[(fit, points)]);
        for t in g.tables.iter_mut().filter(|t| t.name.starts_with("points_")) {
            t.name = "points_{basis}".into();
        }
        groups.push(g);
    }
    groups.push(bell3_group(&bell3::evaluate(one, one, one, bell3::Convention::AntiCorrelated), [0.0, 22.5, 45.0]));
    groups
}

fn rename_pairs(g: &mut Group) {
    if g.name == "scans" || g.name == "sweeps" {
        for t in &mut g.tables {
            t.name = "{a}-{b}".into();
        }
    }
    g.groups.iter_mut().for_each(rename_pairs);
}

fn sample_block() -> BlockTables {
    let est = Estimate { value: 1.0, sigma: 1.0 };
    let row = CoincidenceRow {
        a: 1,
        b: 2,
        rel_delay_ps: 0,
        window_ps: 1000,
        coincidences: 10,
        heralded: 10,
        acc_analytic: est,
        acc_measured: est,
        acc_offset_counts: vec![1],
        acc_offsets_ps: vec![100_000],
        net: est,
        car: 10.0,
        acc_agreement_sigma: 0.0,
    };
    let peak = PeakFit { delay_ps: 0.0, delay_sigma_ps: 1.0, fwhm_ps: 1.0, height: 1.0, background: 0.0, net_counts: 1.0 };
    BlockTables {
        label: "{label}".into(),
        span: Some(BlockSpan { start_ps: 0, end_ps: 1 }),
        singles: vec![SinglesRow { channel: 1, name: "A".into(), events: 1, first_ps: 0, last_ps: 0, live_time_ps: 1, rate_hz: 1.0 }],
        delays_ps: vec![(1, 0)],
        window_ps: Some(1000),
        coincidences: vec![row.clone()],
        scans: vec![ScanResult { a: 1, b: 2, rel_delay_ps: 0, half_range_ps: 10, bin_ps: 10, counts: vec![1, 2], peak: Some(peak) }],
        sweeps: vec![SweepTable { a: 1, b: 2, rel_delay_ps: 0, rows: vec![row], recommended_window_ps: 1000, criterion: "max-net-significance".into() }],
    }
}

/// Every group, attribute and dataset of `doc`, in document order.
pub fn layout_entries(doc: &Document) -> Vec<LayoutEntry> {
    let mut out = Vec::new();
    walk_group(&doc.root, "/", &mut out);
    out
}

fn entry(kind: EntryKind, path: String, dtype: &str) -> LayoutEntry {
    let note = note_for(kind, &path).into();
    LayoutEntry { kind, path, dtype: dtype.into(), unit: String::new(), rows: String::new(), note }
}

fn push_attrs(path: &str, attrs: &[(String, AttrValue)], out: &mut Vec<LayoutEntry>) {
    out.extend(attrs.iter().map(|(k, v)| entry(EntryKind::Attribute, format!("{path}@{k}"), v.dtype_name())));
}

fn walk_group(g: &Group, path: &str, out: &mut Vec<LayoutEntry>) {
    out.push(entry(EntryKind::Group, path.to_string(), ""));
    push_attrs(path, &g.attrs, out);
    for t in &g.tables {
        let tpath = child(path, &t.name);
        out.push(entry(EntryKind::Group, tpath.clone(), ""));
        push_attrs(&tpath, &t.attrs, out);
        for c in &t.columns {
            let mut e = entry(EntryKind::Dataset, child(&tpath, &c.name), c.data.dtype_name());
            e.unit = c.unit.clone();
            e.rows = rows_meaning(&tpath, &c.name).into();
            out.push(e);
        }
    }
    for sub in &g.groups {
        walk_group(sub, &child(path, &sub.name), out);
    }
}

fn child(path: &str, name: &str) -> String {
    if path.ends_with('/') {
        format!("{path}{name}")
    } else {
        format!("{path}/{name}")
    }
}

/// What one element of a dataset is, by where the table sits.
fn rows_meaning(table_path: &str, column: &str) -> &'static str {
    let table = table_path.rsplit('/').next().unwrap_or("");
    match (table, column) {
        _ if table_path.contains("/scans/") && column == "bin_edges_ps" => "histogram bins + 1",
        _ if table_path.contains("/scans/") => "histogram bins",
        _ if table_path.contains("/sweeps/") => "windows swept",
        ("inputs", _) => "input files",
        ("singles", _) | ("delays", _) => "channels",
        ("coincidences", _) => "channel pairs",
        ("off_peak_windows", _) => "(pair, window) rows of coincidences and sweeps × off-peak windows",
        ("correlations", _) => "setting pairs",
        ("s_values", _) => "S variants × (raw, corrected)",
        ("fits", _) => "bases",
        ("points_{basis}", _) => "angles measured",
        ("found", _) => "channels given a delay",
        ("not_found", _) => "channels left without one",
        _ => "rows",
    }
}

/// The meaning of a group, attribute or column, by its name and where it sits.
fn note_for(kind: EntryKind, path: &str) -> &'static str {
    let (parent, name) = path.rsplit_once(['/', '@']).unwrap_or(("", path));
    if ["/chsh", "/visibility", "/bell3"].iter().any(|g| path.starts_with(g)) {
        return analysis_note(path, name);
    }
    let in_scan = parent.contains("/scans/");
    match name {
        "" => "root: provenance attributes",
        "provenance" => "where the data came from",
        "inputs" => "every input file as read",
        "blocks" => "one group per block (setting pair or input set)",
        "{label}" => "one block",
        "singles" => "per-channel singles of the block",
        "delays" => "per-channel delay d applied before pairing",
        "coincidences" if kind == EntryKind::Group => "one row per channel pair at the block's window",
        "off_peak_windows" => "raw counts behind acc_measured, of the coincidences and of every sweep row (a, b, window_ps)",
        "scans" => "delay histograms, one table per pair",
        "sweeps" => "window sweeps, one table per pair",
        "{a}-{b}" if in_scan || parent.ends_with("scans") => "histogram of Δ; fitted peak as attributes",
        "{a}-{b}" => "one row per window swept",
        "tool" => "program that wrote the file (`tagsieve`)",
        "tool_version" => "version of the program (Cargo package version)",
        "command_line" => "full command line, shell-quoted",
        "created_utc" => "creation time, ISO 8601 UTC",
        "param.{key}" => "one attribute per run parameter (type follows the value; lists and maps as JSON text)",
        "layout_version" => "version of this layout",
        "checksum" => "checksum algorithm of the xxh3 column",
        "path" => "input path as given",
        "size_bytes" => "file size when read",
        "xxh3" => "XXH3-64 of the file bytes (seed 0), 16 hex digits",
        "label" => "block label",
        "window_ps" => "coincidence window w: pairs with 2·abs(Δ) ≤ w count",
        "span_start_ps" | "span_end_ps" => "acquisition span [start, end) over all channels",
        "span_s" => "span length",
        "channel" | "a" | "b" => "channel number",
        "name" => "channel name",
        "events" => "time tags in the block",
        "first_ps" | "last_ps" => "first and last time tag",
        "live_time_s" => "live time (the block span)",
        "rate_hz" => "events / live time",
        "delay_ps" => "delay d of the channel",
        "rel_delay_ps" => "d_B − d_A",
        "coincidences" => "pairs with 2·abs(Δ) ≤ w",
        "heralded" => "A events with at least one partner",
        "acc_analytic" | "acc_analytic_sigma" => "accidentals from singles rates, ±1σ",
        "acc_measured" | "acc_measured_sigma" => "mean of the off-peak windows, ±1σ",
        "net" | "net_sigma" => "coincidences − acc_analytic, ±1σ",
        "car" => "coincidences / acc_analytic (NaN when 0)",
        "acc_agreement_sigma" => "(acc_analytic − acc_measured) / combined σ",
        "offset_ps" => "offset of the off-peak window from the peak",
        "counts" if in_scan => "counts per bin",
        "counts" => "pairs in the off-peak window",
        "bin_edges_ps" => "bin i covers [edge i, edge i+1) of Δ",
        "half_range_ps" | "bin_ps" => "histogram half-range and bin width",
        "peak_found" => "1 when the peak fit succeeded",
        "peak_delay_ps" | "peak_delay_sigma_ps" => "peak centre in Δ, ±1σ",
        "peak_fwhm_ps" => "full width at half maximum",
        "peak_height" | "peak_background" => "peak height and flat background, counts per bin",
        "peak_net_counts" => "background-subtracted counts in the peak",
        "recommended_window_ps" => "window chosen by the criterion",
        "proposed_delays" => "delays proposed by `scan --reference` (written to the delays file)",
        "found" => "the delays written, relative to the reference",
        "not_found" => "channels the scan found no delay for",
        "reference" => "reference channel (its delay is 0)",
        "delays_file" => "delays file written, path as given",
        "obtained" => "how the delay was obtained",
        "reason" => "why no delay was found",
        "criterion" => "how the window was chosen",
        _ => "",
    }
}

/// Meanings under `/chsh`, `/visibility` and `/bell3` (definitions in src/analysis).
fn analysis_note(path: &str, name: &str) -> &'static str {
    let chsh = path.starts_with("/chsh");
    match name {
        "chsh" => "CHSH S from four setting pairs (primary convention S = E(a,b) − E(a,b') + E(a',b) + E(a',b'))",
        "s_raw" | "s_raw_sigma" => "primary S from raw counts, ±1σ",
        "violation_raw_sigma" => "(abs(S) − 2)/σ of the raw primary S",
        "p_value_raw" => "one-sided normal p-value of violation_raw_sigma",
        "from_rates" => "1 when E was formed from rates (per-run live times)",
        "caution" => "what the p-values assume",
        "s_corrected" | "s_corrected_sigma" => "primary S after subtracting accidentals, ±1σ (only with accidental estimates)",
        "correlations" => "one row per setting pair: ab, ab', a'b, a'b'",
        "setting_pair" => "setting pair label",
        "angle_a_deg" | "angle_b_deg" => "analyzer angles of the two sides",
        "n_pp" | "n_pm" | "n_mp" | "n_mm" => "coincidences per outcome ++, +−, −+, −−",
        "e_raw" | "e_raw_sigma" => "correlation E from raw counts, ±1σ",
        "e_corrected" | "e_corrected_sigma" => "E after subtracting accidentals, ±1σ (NaN without estimates)",
        "s_values" => "the four sign variants of S, raw and corrected",
        "kind" => "raw or accidental-corrected",
        "formula" => "which term carries the minus sign",
        "s" | "s_sigma" => "S of the variant, ±1σ",
        "violation_sigma" if chsh => "(abs(S) − 2)/σ",
        "p_value" if chsh => "one-sided normal p-value of violation_sigma",
        "is_primary" => "1 for the primary convention",
        "is_max" => "1 for the variant with the largest abs(S) (a look-elsewhere choice)",
        "visibility" if path == "/visibility" => "fringe fits N(θ) = A + B cos 2θ + C sin 2θ per basis",
        "fits" => "one row per basis",
        "basis" => "basis or pair name",
        "amplitude" | "amplitude_sigma" => "mean count A, ±1σ",
        "visibility" | "visibility_sigma" => "fringe visibility, ±1σ",
        "theta0_deg" | "theta0_sigma_deg" => "fringe phase θ0 in (−90°, 90°], ±1σ",
        "reduced_chi2" => "χ²/dof of the fit (NaN when dof = 0)",
        "points_{basis}" => "the measured points of one basis",
        "angle_deg" => "analyzer angle",
        "counts" => "coincidences at the angle",
        "bell3" => "three-setting form abs(E(a,b) − E(a,c)) ≤ 1 + E(b,c)",
        "convention" => "as `--bell3-convention`: anti-correlated applies the form to E, correlated to −E",
        "angles_deg" => "the three settings a, b, c (JSON text, e.g. `[0.0,22.5,45.0]`)",
        "e_ab" | "e_ac" | "e_bc" => "measured correlations before any sign flip",
        "lhs" | "rhs" => "the two sides of the form",
        "margin" | "margin_sigma" => "lhs − rhs, ±1σ; > 0 is a violation",
        "violation_sigma" => "margin / σ",
        "p_value" => "one-sided normal p-value of violation_sigma",
        _ => "",
    }
}

/// docs/hdf5-layout.md: every group, attribute and dataset with dtype, shape and unit.
pub fn describe_layout() -> String {
    let entries = layout_entries(&sample_document());
    let mut md = LAYOUT_PREAMBLE.replace("{LAYOUT_VERSION}", &LAYOUT_VERSION.to_string());
    md.push_str("\n## Groups and their attributes\n\n| group | attribute | type | meaning |\n|---|---|---|---|\n");
    let mut current = String::new();
    for e in &entries {
        match e.kind {
            EntryKind::Group => {
                current = e.path.clone();
                md.push_str(&format!("| `{}` | | | {} |\n", e.path, e.note));
            }
            EntryKind::Attribute => {
                let name = e.path.strip_prefix(&format!("{current}@")).unwrap_or(&e.path);
                md.push_str(&format!("| | `{name}` | {} | {} |\n", e.dtype, e.note));
            }
            EntryKind::Dataset => {}
        }
    }
    md.push_str("\n## Datasets (each 1-D, with a string attribute `units`)\n\n| dataset | type | shape | units | meaning |\n|---|---|---|---|---|\n");
    for e in entries.iter().filter(|e| e.kind == EntryKind::Dataset) {
        md.push_str(&format!("| `{}` | {} | ({}) | {} | {} |\n", e.path, e.dtype, e.rows, unit_text(&e.unit), e.note));
    }
    md
}

fn unit_text(unit: &str) -> String {
    if unit.is_empty() {
        "`\"\"` (label)".into()
    } else {
        format!("`{unit}`")
    }
}

const LAYOUT_PREAMBLE: &str = "# Layout of tagsieve output files

<!-- Generated by tagsieve::output::layout::describe_layout(); do not edit by hand.
     `TAGSIEVE_BLESS=1 cargo test --test output_layout` rewrites it; the test fails when it drifts. -->

Layout version {LAYOUT_VERSION} (root attribute `layout_version`).

- A **table** is a group holding one 1-D dataset per column, all of one length except a
  histogram's `bin_edges_ps` (one more than `counts`). Every dataset has a string attribute
  `units`: `ps`, `s`, `Hz`, `counts`, `bytes`, `deg`, `1` (dimensionless) or `\"\"` (a label or index).
- Types: `u64`/`i64` little-endian integers, `f64` IEEE doubles, `string` variable-length UTF-8.
  Times inside the engine are integer picoseconds; only derived quantities are floats.
- Datasets longer than 4096 elements are chunked (up to 65536 elements a chunk), shuffled and
  deflate-compressed (level 4); shorter ones are contiguous.
- Placeholders: `{label}` is a block label, `{a}-{b}` a channel pair (e.g. `1-2`),
  `param.{key}` one root attribute per parameter of the run. Groups and attributes appear in
  creation order (tracked in the file).
- A scan whose peak fit failed has `peak_found = 0` and no `peak_*` attributes.
- Coincidence rule: Δ = (b − d_B) − (a − d_A) in integer ps; a pair counts when 2·|Δ| ≤ w.
  `rel_delay_ps` is d_B − d_A.
- A table with no rows is not written (a scan's block has no `coincidences`; `--no-offpeak`
  leaves out `off_peak_windows`), nor a `scans` or `sweeps` group with no tables.
- The demo's `run.h5` keeps its delay scans under `/scans/{label}` and its window sweep under
  `/sweeps/{label}`, each group laid out like `/blocks/{label}`; `/blocks` holds only the
  counted blocks.
- Provenance: the root attributes name the tool (`tool`, the program name) and its version
  (`tool_version`), the full command line and the UTC creation time; `/provenance/inputs` lists every input file with its size and XXH3-64 checksum.
- Parameters (`param.{key}`): numbers as `u64`/`i64`/`f64`; choices as typed on the command
  line (`param.criterion = net-significance`, `param.bell3_convention = anti-correlated`);
  durations in the unit of their flag (`param.window_ps`, `param.slice_s`); lists and maps
  as JSON text (`param.delays_ps = {\"1\":0,\"2\":850}`, `param.acc_offsets_ps`,
  `param.windows_ps`), read with `json.loads(f.attrs[\"param.delays_ps\"])`. A sweep that
  places each window's own off-peak windows stores that rule as plain text in
  `param.acc_offsets_ps` (it starts `per window`).
- `tagsieve scan --reference CH` adds `/proposed_delays`: what it wrote to the delays file.
- `tagsieve chsh` adds `/chsh`, `/visibility` and `/bell3` beside `/blocks` (documented
  below from a sample); `points_{basis}` is one table per fitted basis.
- CSV output (`--format csv`) holds the same tree in one file: `# group /path` and
  `# table /path` comment lines, attributes as `# key = value`, a header of `name [unit]`
  cells. `--format csv-dir -o DIR` writes one plain CSV per table instead, at the table's
  path (`DIR/blocks/{label}/singles.csv`, `DIR/blocks/{label}/scans/{a}-{b}.csv`): one
  header line of the column names above, no comment lines, the rows (a histogram's last
  `counts` cell is empty); `DIR/attributes.json` holds every group's and table's attributes
  (provenance at `/`) and each column's unit, type and row count.
- JSON (`--format json`, and `--json` on stdout for `count`, `scan`, `sweep` and `chsh`:
  the same Document through the same writer) nests `{\"attrs\", \"tables\", \"groups\"}`
  objects in the order above; a table is `{\"attrs\", \"columns\"}` and a column
  `{\"unit\", \"dtype\", \"data\"}` (names, units and dtypes as listed below); an attribute is
  a plain JSON number or string; NaN and infinities become `null`. Path `/blocks/{label}/singles`
  is `doc[\"groups\"][\"blocks\"][\"groups\"][\"{label}\"][\"tables\"][\"singles\"]`. Commands
  with no tables (`inspect`, `import`, `simulate`, `clock-fit`, `demo`) print a summary of
  their own with `--json`, under the same conventions (units in names, `x` beside `x_sigma`).
";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_column_has_a_known_unit_and_equal_lengths() {
        let doc = sample_document();
        // Units of the trade (common practice, no source) plus "" for labels.
        let known = ["ps", "s", "Hz", "counts", "1", "bytes", "deg", ""];
        for e in layout_entries(&doc).iter().filter(|e| e.kind == EntryKind::Dataset) {
            assert!(known.contains(&e.unit.as_str()), "{} has unit {:?}", e.path, e.unit);
        }
        let blocks = doc.root.group("blocks").unwrap();
        let block = &blocks.groups[0];
        for t in &block.tables {
            let lens: Vec<usize> = t.columns.iter().map(|c| c.data.len()).collect();
            assert!(lens.windows(2).all(|w| w[0] == w[1]), "{}: {lens:?}", t.name);
        }
        let scan = &block.group("scans").unwrap().tables[0];
        assert_eq!(scan.column("bin_edges_ps").unwrap().data.len(), scan.column("counts").unwrap().data.len() + 1);
    }

    #[test]
    fn every_documented_entry_has_a_meaning() {
        for e in layout_entries(&sample_document()) {
            assert!(!e.note.is_empty(), "{} has no meaning in note_for()", e.path);
            // A bare '|' would split a Markdown table cell.
            assert!(!e.note.contains('|'), "{}", e.note);
        }
    }

    #[test]
    fn live_time_is_converted_from_ps_to_seconds() {
        let mut b = sample_block();
        b.singles[0].live_time_ps = 2_500_000_000_000; // 2.5 s
        let t = singles_table(&b.singles);
        assert_eq!(t.column("live_time_s").unwrap().data, ColumnData::F64(vec![2.5]));
    }

    #[test]
    fn off_peak_rows_flatten_every_offset() {
        let mut b = sample_block();
        b.coincidences[0].acc_offsets_ps = vec![-200, 200, 400];
        b.coincidences[0].acc_offset_counts = vec![3, 5, 7];
        let t = off_peak_table(&b.coincidences);
        assert_eq!(t.column("counts").unwrap().data, ColumnData::U64(vec![3, 5, 7]));
        assert_eq!(t.column("offset_ps").unwrap().data, ColumnData::I64(vec![-200, 200, 400]));
    }
}
