//! The import job: any inputs → one container file, in one streaming pass with bounded
//! memory. Each channel spills to a temporary beside the output; the container is then
//! assembled from the spills and renamed into place (all temporaries removed on any exit).

use crate::read::channel_array::write_u64s_le;
use crate::read::container::{unix_now_s, ContainerInfo, ContainerWriter};
use super::inputs::BlockInputs;
use super::Context;
use crate::read::layout::{RecordLayout, Tick};
use crate::read::TagSource;
use crate::sys::atomic::AtomicOutput;
use crate::sys::progress::Progress;
use crate::{Channel, Error, Result};
use std::collections::BTreeMap;
use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Write};
use std::path::{Path, PathBuf};

/// Convert inputs into one container file.
#[derive(Debug, Clone)]
pub struct ImportJob {
    pub ctx: Context,
    pub inputs: BlockInputs,
    /// The container to write (convention: `.tsieve`).
    pub output: PathBuf,
    /// Replace `output` if it exists.
    pub force: bool,
}

/// Import the job's inputs; the header records the record layout's tick (per-channel
/// arrays are 1 ps already).
pub fn run(job: &ImportJob) -> Result<ImportSummary> {
    let layout = job.inputs.layout.as_deref().map(RecordLayout::from_arg).transpose()?;
    let sources = BlockInputs { clock: None, ..job.inputs.clone() }.open(job.ctx.quiet)?;
    let tick = layout.as_ref().map_or(Tick { fs: 1000 }, |l| l.tick);
    let total: u64 = sources.iter().map(|s| s.event_count()).sum();
    let progress = Progress::items("import", total, job.ctx.quiet);
    let summary = import(&sources, &job.output, job.force, tick, &progress)?;
    progress.finish();
    Ok(summary)
}

/// Events per chunk read from the inputs.
const CHUNK_EVENTS: usize = 1 << 20;
/// Write/read buffer per spill file.
const SPILL_BUFFER_BYTES: usize = 256 << 10;

/// What an import wrote.
#[derive(Debug, Clone, PartialEq)]
pub struct ImportSummary {
    pub path: PathBuf,
    /// (channel, events) in container order (ascending channel).
    pub channels: Vec<(Channel, u64)>,
}

/// One channel's temporary: raw u64 LE timestamps in arrival order.
struct Spill {
    name: String,
    source: usize,
    count: u64,
    file: AtomicOutput,
    w: BufWriter<File>,
}

/// Convert `sources` (opened strict) into a container at `out`. `tick` is recorded in the
/// header as the source's tick length. `force`: replace an existing `out`.
pub fn import(sources: &[Box<dyn TagSource>], out: &Path, force: bool, tick: Tick, progress: &Progress) -> Result<ImportSummary> {
    if out.exists() && !force {
        return Err(Error::OutputExists(out.to_path_buf()));
    }
    let mut spills: BTreeMap<Channel, Spill> = BTreeMap::new();
    for (k, s) in sources.iter().enumerate() {
        for chunk in s.chunks(CHUNK_EVENTS)? {
            for c in chunk? {
                let spill = match spills.get_mut(&c.channel) {
                    Some(sp) => sp,
                    None => spills.entry(c.channel).or_insert(new_spill(out, c.channel, &c.name, k)?),
                };
                if spill.source != k {
                    let first = sources[spill.source].file().path;
                    return Err(Error::Usage(format!("channel {} appears twice: in {} and in {}", c.channel, first.display(), s.file().path.display())));
                }
                write_u64s_le(&mut spill.w, &c.times_ps).map_err(|e| Error::io(out, e))?;
                spill.count += c.len() as u64;
                progress.inc(c.len() as u64);
            }
        }
        s.check_unchanged()?;
    }
    assemble(out, force, tick, spills)
}

fn new_spill(out: &Path, channel: Channel, name: &str, source: usize) -> Result<Spill> {
    let stem = out.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let spill_name = out.with_file_name(format!("{stem}.ch{channel}.spill"));
    let file = AtomicOutput::prepare(&spill_name, true)?;
    let f = File::create(file.temp_path()).map_err(|e| Error::io(file.temp_path(), e))?;
    Ok(Spill { name: name.to_string(), source, count: 0, w: BufWriter::with_capacity(SPILL_BUFFER_BYTES, f), file })
}

/// Header and table from the spill counts, then each spill copied in as its section.
fn assemble(out: &Path, force: bool, tick: Tick, spills: BTreeMap<Channel, Spill>) -> Result<ImportSummary> {
    let creator = format!("tagsieve {} import", env!("CARGO_PKG_VERSION"));
    let info = ContainerInfo { tick, created_unix_s: unix_now_s(), creator };
    let table: Vec<(Channel, String, u64)> = spills.iter().map(|(&c, s)| (c, s.name.clone(), s.count)).collect();
    let mut w = ContainerWriter::create(out, force, &info, &table)?;
    for (_, mut s) in spills {
        s.w.flush().map_err(|e| Error::io(out, e))?;
        drop(s.w);
        copy_spill(s.file.temp_path(), &mut w)?;
    }
    w.finish()?;
    Ok(ImportSummary { path: out.to_path_buf(), channels: table.iter().map(|t| (t.0, t.2)).collect() })
}

fn copy_spill(path: &Path, w: &mut ContainerWriter) -> Result<()> {
    let mut r = BufReader::with_capacity(SPILL_BUFFER_BYTES, File::open(path).map_err(|e| Error::io(path, e))?);
    let mut buf = vec![0u8; SPILL_BUFFER_BYTES];
    loop {
        let n = read_full(&mut r, &mut buf).map_err(|e| Error::io(path, e))?;
        if n == 0 {
            return Ok(());
        }
        w.push(&crate::read::mapping::decode_u64s_le(&buf[..n]))?;
    }
}

/// Fill `buf` as far as the reader allows (a multiple of 8 unless the file is cut short).
fn read_full(r: &mut impl Read, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match r.read(&mut buf[n..])? {
            0 => break,
            k => n += k,
        }
    }
    Ok(n)
}
