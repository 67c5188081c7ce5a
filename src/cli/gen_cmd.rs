//! `tracewalk gen`.

use std::io::Write;
use std::path::PathBuf;

use tracewalk::generate::{GenOptions, Generator, Mode};

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// Number of traces.
    #[arg(short = 'n', long, default_value_t = 10)]
    count: u64,
    /// Seed; the same model, seed and options give byte-identical output.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// What to generate: plausible.
    #[arg(long, default_value = "plausible")]
    mode: Mode,
    /// Next-step weights become p^(1/T): below 1 sharpens, above 1 flattens.
    #[arg(long, default_value_t = 1.0)]
    temperature: f64,
    /// Longest trace in messages.
    #[arg(long, default_value_t = 200)]
    max_messages: usize,
    /// Write one file per trace into this directory instead of standard output.
    #[arg(short, long, value_name = "DIR")]
    output: Option<PathBuf>,
    /// Write wire bytes instead of annotated trace text.
    #[arg(long)]
    raw: bool,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let model = super::load_compiled(&a.model)?;
    let options = GenOptions {
        mode: a.mode,
        temperature: a.temperature,
        max_messages: a.max_messages,
        ..GenOptions::default()
    };
    let mut generator = Generator::new(&model, options)?;
    if let Some(dir) = &a.output {
        std::fs::create_dir_all(dir).map_err(|e| anyhow::anyhow!("{}: cannot create: {e}", dir.display()))?;
    }
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    let width = a.count.max(1).to_string().len().max(4);
    for i in 0..a.count {
        let trace = generator.trace(a.seed, i);
        let bytes = if a.raw { trace.wire_bytes() } else { trace.to_text().into_bytes() };
        match &a.output {
            Some(dir) => {
                let name = format!("{:0width$}.{}", i + 1, if a.raw { "raw" } else { "trace" });
                let path = dir.join(name);
                tracewalk::atomic::write(&path, &bytes)
                    .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?;
            }
            None => {
                if let Err(e) = out.write_all(&bytes) {
                    if e.kind() == std::io::ErrorKind::BrokenPipe {
                        return Ok(0);
                    }
                    return Err(e.into());
                }
            }
        }
    }
    if let Err(e) = out.flush()
        && e.kind() != std::io::ErrorKind::BrokenPipe
    {
        return Err(e.into());
    }
    Ok(0)
}
