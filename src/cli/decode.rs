//! `tracewalk decode`.

use std::path::PathBuf;

use anyhow::Context;
use tracewalk::feed::{DecodeOptions, decode_bytes, decode_trace};

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model the structured fuzz target embeds (the same model, or the walk differs).
    model: PathBuf,
    /// An engine input (e.g. a crash file) of a structured fuzz target.
    input: PathBuf,
    /// Write here instead of standard output.
    #[arg(short, long, value_name = "FILE")]
    output: Option<PathBuf>,
    /// Write the session's raw wire bytes instead of a trace.
    #[arg(long)]
    raw: bool,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let model = super::load_compiled(&a.model)?;
    let data = std::fs::read(&a.input).with_context(|| format!("{}: cannot read", a.input.display()))?;
    let options = DecodeOptions::default();
    let bytes = if a.raw {
        decode_bytes(&model, &data, &options)
    } else {
        let mut trace = decode_trace(&model, &data, &options);
        trace.header = vec![
            ("model".into(), model.short_hash().to_string()),
            ("decoded-from".into(), a.input.display().to_string()),
        ];
        trace.to_text().into_bytes()
    };
    match &a.output {
        Some(path) => tracewalk::atomic::write(path, &bytes)
            .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?,
        None => {
            use std::io::Write;
            let mut out = std::io::stdout().lock();
            out.write_all(&bytes).and_then(|_| out.flush()).context("standard output")?;
        }
    }
    Ok(0)
}
