//! `tracewalk replay` and `tracewalk shrink`.

use std::io::Write;
use std::path::PathBuf;

use tracewalk::harness::oracle::describe;
use tracewalk::hunt::shrink_failure;
use tracewalk::shrink::ShrinkOptions;

use super::target::{TargetArgs, load_input, messages_of};

#[derive(Debug, clap::Args)]
pub struct ReplayArgs {
    /// A trace file (as hunt stores them), or raw traffic holding one session.
    trace: PathBuf,
    #[command(flatten)]
    target: TargetArgs,
    /// Model whose reader splits raw traffic into messages (and sets the reply framing).
    #[arg(long, value_name = "FILE")]
    model: Option<PathBuf>,
    /// Format of raw traffic without a model: lines, http or jsonl (default: sniffed).
    #[arg(long)]
    format: Option<String>,
    /// Print only the verdict, not what the target wrote.
    #[arg(short, long)]
    quiet: bool,
}

#[derive(Debug, clap::Args)]
pub struct ShrinkArgs {
    /// A failing trace file, or raw traffic holding one session (e.g. a production session).
    trace: PathBuf,
    #[command(flatten)]
    target: TargetArgs,
    /// Model to shrink tokens and slot values inside messages (without it only whole messages
    /// are removed); its reader also splits raw traffic.
    #[arg(long, value_name = "FILE")]
    model: Option<PathBuf>,
    /// Format of raw traffic without a model: lines, http or jsonl (default: sniffed).
    #[arg(long)]
    format: Option<String>,
    /// Most target runs to spend.
    #[arg(long, default_value_t = 2000, value_name = "RUNS")]
    shrink_runs: usize,
    /// Reruns that must reproduce each failing candidate (0 trusts a single run).
    #[arg(long, default_value_t = 1)]
    confirm: u32,
    /// Write the shrunk trace here instead of standard output.
    #[arg(short, long, value_name = "FILE")]
    output: Option<PathBuf>,
}

fn model(path: &Option<PathBuf>) -> anyhow::Result<Option<tracewalk::model::Compiled>> {
    path.as_deref().map(super::load_compiled).transpose()
}

/// Exit 1 when the trace fails, 0 when it passes.
pub fn replay(a: ReplayArgs) -> anyhow::Result<i32> {
    let model = model(&a.model)?;
    let (trace, format) = load_input(&a.trace, model.as_ref(), a.format.as_deref())?;
    let spec = a.target.spec(format)?;
    let mut target = spec.build(0)?;
    let report = target.run(&messages_of(&trace))?;
    if !a.quiet {
        let mut out = std::io::stdout().lock();
        let _ = out.write_all(&report.transcript);
        let _ = out.flush();
    }
    let n = trace.wire_messages();
    match &report.failure {
        Some(f) => {
            println!("FAIL after {n} messages in {} ms: {}", report.elapsed.as_millis(), describe(f));
            if let Some(expected) = trace.get("signature")
                && expected != f.signature()
            {
                println!("(the trace was stored with a different signature: {expected})");
            }
            Ok(1)
        }
        None => {
            println!("pass: {n} messages in {} ms", report.elapsed.as_millis());
            Ok(0)
        }
    }
}

/// Exit 1 when the trace fails (and was shrunk), 0 when it does not fail.
pub fn shrink(a: ShrinkArgs) -> anyhow::Result<i32> {
    let model = model(&a.model)?;
    let (mut trace, format) = load_input(&a.trace, model.as_ref(), a.format.as_deref())?;
    let spec = a.target.spec(format)?;
    let mut target = spec.build(0)?;
    let options =
        ShrinkOptions { max_calls: a.shrink_runs, stop: Some(tracewalk::harness::interrupt_flag()) };
    let messages = messages_of(&trace);
    let Some((report, shrunk)) =
        shrink_failure(target.as_mut(), &messages, model.as_ref(), &options, a.confirm)?
    else {
        eprintln!("{}: does not fail ({} messages); nothing to shrink", a.trace.display(), messages.len());
        return Ok(0);
    };
    let failure = report.failure.expect("shrink_failure returns failing reports");
    trace.set("outcome", "fail");
    trace.set("kind", failure.kind.clone());
    trace.set("signature", failure.signature());
    let mut small = shrunk.to_trace(&trace, model.as_ref());
    small.set("shrunk-from", format!("{} messages", messages.len()));
    small.set("shrink-runs", shrunk.calls.to_string());
    if !shrunk.complete {
        small.set("shrink-cut", "stopped before the trace was 1-minimal");
    }
    let text = small.to_text();
    match &a.output {
        Some(path) => tracewalk::atomic::write(path, text.as_bytes())
            .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?,
        None => print!("{text}"),
    }
    eprintln!(
        "{}: shrunk from {} to {} messages in {} runs ({} answered from the cache): {}",
        a.trace.display(),
        messages.len(),
        small.messages.len(),
        shrunk.calls,
        shrunk.cache_hits,
        describe(&failure)
    );
    Ok(1)
}
