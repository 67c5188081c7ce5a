//! `tracewalk seed`.

use std::path::PathBuf;

use tracewalk::generate::{GenOptions, Generator, Mode};

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// Number of traces to generate (identical ones collapse into one file).
    #[arg(short = 'n', long, default_value_t = 100)]
    count: u64,
    /// Directory to write the seed corpus into (created if missing).
    #[arg(short, long, value_name = "DIR")]
    output: PathBuf,
    /// Seed of the generator.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// What to generate (see `tracewalk gen --help`).
    #[arg(long, default_value = "plausible")]
    mode: Mode,
    /// Longest trace in messages.
    #[arg(long, default_value_t = 64)]
    max_messages: usize,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let model = super::load_compiled(&a.model)?;
    let options = GenOptions { mode: a.mode, max_messages: a.max_messages, ..GenOptions::default() };
    let mut generator = Generator::new(&model, options)?;
    let files = tracewalk::feed::write_seeds(&mut generator, a.seed, a.count, &a.output)
        .map_err(|e| anyhow::anyhow!("{}: cannot write seeds: {e}", a.output.display()))?;
    eprintln!("wrote {files} seed files ({} traces) to {}", a.count, a.output.display());
    Ok(0)
}
