//! Jobs: one file per thing a user asks for (inspect, import, simulate, scan, sweep, count,
//! chsh, clock-fit, demo). A job is a typed struct and `run(&job) -> Result<Outcome>`; the
//! command line only builds the job and prints or writes its outcome. Adding a job: one file
//! here and one thin file in `src/cli/` (DEVELOPERS.md, "Adding a job").

pub mod chsh;
pub mod clock_fit;
pub mod count;
pub mod demo;
pub mod import;
pub mod inputs;
pub mod inspect;
pub mod pass;
pub mod scan;
pub mod simulate;
pub mod sweep;

use crate::output::{provenance::Provenance, AttrValue};
use crate::Result;
use std::path::PathBuf;

/// What every job is told besides its own settings.
#[derive(Debug, Clone, Default)]
pub struct Context {
    /// No progress bars or notes on stderr.
    pub quiet: bool,
    /// The command line recorded in provenance.
    pub command_line: Vec<String>,
}

/// A job's settings as provenance parameters (`param.<name>` in every output). Each
/// configuration lists all of its own settings once, here, so every job (and the demo,
/// which runs the same jobs) records the same names.
pub trait Params {
    fn params(&self) -> Vec<(&'static str, AttrValue)>;
}

/// The provenance of a job's output: the command line, `command`, the parameters of each
/// configuration in `params`, and every input file (path, size and checksum).
pub fn provenance(ctx: &Context, command: &str, params: &[&dyn Params], inputs: &[PathBuf]) -> Result<Provenance> {
    let mut p = Provenance::new(ctx.command_line.clone()).param("command", AttrValue::Str(command.into()));
    for set in params {
        for (k, v) in set.params() {
            p = p.param(k, v);
        }
    }
    for f in inputs {
        p = p.input(f)?;
    }
    Ok(p)
}

/// The provenance and Document of a one-block job when `wanted` (provenance reads every
/// input once for its checksum, so a job builds them only when they will be written).
pub fn block_document(
    wanted: bool,
    ctx: &Context,
    command: &str,
    params: &[&dyn Params],
    sources: &[Box<dyn crate::read::TagSource>],
    block: &crate::engine::tables::BlockTables,
) -> Result<(Option<Provenance>, Option<crate::output::Document>)> {
    if !wanted {
        return Ok((None, None));
    }
    let p = provenance(ctx, command, params, &inputs::paths(sources))?;
    let doc = crate::output::layout::run_document(std::slice::from_ref(block), &p);
    Ok((Some(p), Some(doc)))
}

/// Extra parameters given by name (a manifest path, a record layout).
impl Params for Vec<(&'static str, AttrValue)> {
    fn params(&self) -> Vec<(&'static str, AttrValue)> {
        self.clone()
    }
}
