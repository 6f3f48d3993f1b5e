//! `tagsieve completions SHELL`: print a completion script (clap_complete).

use tagsieve::Result;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Shell to generate for.
    #[arg(value_enum)]
    pub shell: clap_complete::Shell,
}

pub fn run<C: clap::CommandFactory>(args: Args) -> Result<()> {
    let mut cmd = C::command();
    let name = cmd.get_name().to_string();
    clap_complete::generate(args.shell, &mut cmd, name, &mut std::io::stdout());
    Ok(())
}
