//! `tagsieve inspect`.

use super::Global;
use tagsieve::Result;

#[derive(clap::Args, Debug)]
pub struct Args {}

pub fn run(_args: Args, _g: &Global) -> Result<()> {
    Err(tagsieve::Error::Usage("inspect: not built yet".into()))
}
