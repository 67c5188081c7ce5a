//! `tracewalk mutate`.

use std::path::{Path, PathBuf};

use anyhow::Context;
use rand::RngExt;
use tracewalk::generate::mutate::{Mutator, Operator, walk_of_messages};
use tracewalk::generate::{Walk, trace_rng};
use tracewalk::model::Compiled;
use tracewalk::read::{self, Role};
use tracewalk::trace::Trace;

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// Traces to mutate: trace files (as `gen` writes them; several per file allowed) or raw
    /// traffic, read the way the model was learned.
    #[arg(required = true)]
    inputs: Vec<PathBuf>,
    /// Number of mutants.
    #[arg(short = 'n', long, default_value_t = 10)]
    count: u64,
    /// Seed; the same model, inputs, seed and options give byte-identical output.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Most mutations stacked on one mutant (each mutant gets 1 to this many).
    #[arg(long, default_value_t = 3, value_name = "N")]
    stack: u32,
    /// Only these operators (comma-separated): replace-token, replace-message, splice, delete,
    /// duplicate, reorder, swap-values, hostile-value.
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    operators: Vec<Operator>,
    /// Largest mutant in wire bytes.
    #[arg(long, default_value_t = 1 << 20, value_name = "BYTES")]
    max_bytes: usize,
    /// Write one file per mutant into this directory instead of standard output.
    #[arg(short, long, value_name = "DIR")]
    output: Option<PathBuf>,
}

/// One input session and where it came from.
struct Input {
    origin: String,
    walk: Walk,
}

fn is_trace_text(bytes: &[u8]) -> bool {
    bytes.trim_ascii_start().starts_with(b"%tracewalk-trace")
}

fn read_inputs(model: &Compiled, path: &Path, out: &mut Vec<Input>) -> anyhow::Result<()> {
    let bytes = std::fs::read(path).with_context(|| format!("{}: cannot read", path.display()))?;
    let name = path.display().to_string();
    if is_trace_text(&bytes) {
        let text =
            std::str::from_utf8(&bytes).map_err(|_| anyhow::anyhow!("{name}: trace text is not UTF-8"))?;
        let traces = Trace::parse_all(text).map_err(|e| anyhow::anyhow!("{name}: {e}"))?;
        let several = traces.len() > 1;
        for (k, t) in traces.into_iter().enumerate() {
            let messages: Vec<Vec<u8>> = t
                .messages
                .into_iter()
                .filter(|m| !m.marks.iter().any(|x| x == "reply"))
                .map(|m| m.bytes)
                .collect();
            let origin = if several { format!("{name}#{}", k + 1) } else { name.clone() };
            out.push(Input { origin, walk: walk_of_messages(model, &messages) });
        }
        return Ok(());
    }
    let corpus = read::read_paths(&[path.to_path_buf()], &model.settings.read)?;
    let several = corpus.sessions.len() > 1;
    for (k, session) in corpus.sessions.iter().enumerate() {
        let messages: Vec<Vec<u8>> = session
            .frames
            .iter()
            .filter(|f| f.role == Role::Request)
            .map(|f| corpus.bytes(session, f).to_vec())
            .collect();
        let origin = if several { format!("{name}#{}", k + 1) } else { name.clone() };
        out.push(Input { origin, walk: walk_of_messages(model, &messages) });
    }
    Ok(())
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    anyhow::ensure!(a.stack >= 1, "--stack must be at least 1");
    let model = super::load_compiled(&a.model)?;
    let mut inputs = Vec::new();
    for path in &a.inputs {
        read_inputs(&model, path, &mut inputs)?;
    }
    inputs.retain(|i| !i.walk.steps.is_empty());
    anyhow::ensure!(!inputs.is_empty(), "{}: no messages to mutate", a.inputs[0].display());
    let operators = if a.operators.is_empty() { Operator::ALL.to_vec() } else { a.operators.clone() };
    let mutator = Mutator::new(&model).with_operators(operators);
    if let Some(dir) = &a.output {
        std::fs::create_dir_all(dir).map_err(|e| anyhow::anyhow!("{}: cannot create: {e}", dir.display()))?;
    }
    let width = a.count.max(1).to_string().len().max(4);
    let mut text = String::new();
    let mut unchanged = 0u64;
    for i in 0..a.count {
        let mut rng = trace_rng(a.seed, i);
        let input = &inputs[rng.random_range(0..inputs.len())];
        let partner = &inputs[rng.random_range(0..inputs.len())];
        let mut walk = input.walk.clone();
        let stack = rng.random_range(1..=a.stack);
        let applied: Vec<String> = (0..stack)
            .filter_map(|_| mutator.mutate(&mut walk, Some(&partner.walk), a.max_bytes, &mut rng))
            .map(|m| m.to_string())
            .collect();
        unchanged += u64::from(applied.is_empty());
        let mut trace = walk.to_trace(&model);
        trace.header = vec![
            ("model".into(), model.short_hash().to_string()),
            ("seed".into(), a.seed.to_string()),
            ("index".into(), i.to_string()),
            ("mode".into(), "mutate".into()),
            ("source".into(), input.origin.clone()),
        ];
        if partner.origin != input.origin && applied.iter().any(|m| m.starts_with("splice")) {
            trace.set("partner", partner.origin.clone());
        }
        trace.set(
            "mutations",
            if applied.is_empty() { "none applied".to_string() } else { applied.join(" ") },
        );
        match &a.output {
            Some(dir) => {
                let path = dir.join(format!("{:0width$}.trace", i + 1));
                tracewalk::atomic::write(&path, trace.to_text().as_bytes())
                    .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?;
            }
            None => text.push_str(&trace.to_text()),
        }
    }
    if a.output.is_none() {
        use std::io::Write;
        let mut out = std::io::stdout().lock();
        if let Err(e) = out.write_all(text.as_bytes()).and_then(|_| out.flush())
            && e.kind() != std::io::ErrorKind::BrokenPipe
        {
            return Err(e.into());
        }
    }
    eprintln!(
        "mutate: {} mutants from {} input sessions ({} without an applicable mutation)",
        a.count,
        inputs.len(),
        unchanged
    );
    Ok(0)
}
