//! Command-line interface.

mod decode;
mod gen_cmd;
mod hunt;
mod learn;
mod mutate;
mod replay;
mod score;
mod seed;
mod show;
mod target;
mod walk_args;

use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// Learn the grammar of protocol traffic as Markov chains and use it to test software.
#[derive(Debug, Parser)]
#[command(name = "tracewalk", version, about, max_term_width = 100)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Learn a model from sample traffic (files or directories).
    Learn(learn::Args),
    /// Print what a model learned.
    Show(show::Args),
    /// Generate traces from a model.
    Gen(gen_cmd::Args),
    /// Edit traces or captured traffic with operators the model vouches for.
    Mutate(mutate::Args),
    /// Print each message's surprise under a model and flag the unusual ones.
    Score(score::Args),
    /// Drive a target with generated traces; keep, shrink and store every distinct failure.
    Hunt(hunt::Args),
    /// Run one trace (or one session of raw traffic) on a target and report the verdict.
    Replay(replay::ReplayArgs),
    /// Shrink a failing trace (or raw session) to a small one that fails the same way.
    Shrink(replay::ShrinkArgs),
    /// Write generated traces as a seed corpus for a coverage-guided engine (raw bytes, one
    /// file per trace, named by content hash).
    Seed(seed::Args),
    /// Turn an input of a structured fuzz target (e.g. a crash file) into the session it ran:
    /// a trace, or raw bytes.
    Decode(decode::Args),
    /// Add models learned on separate shards of data.
    Merge(MergeArgs),
    /// Print the built-in slot rules (a starting point for a rules file of your own).
    Rules(RulesArgs),
}

#[derive(Debug, clap::Args)]
struct RulesArgs {
    /// Print the built-in hostile values of `gen --mode rare` instead.
    #[arg(long)]
    hostile: bool,
}

#[derive(Debug, clap::Args)]
struct MergeArgs {
    /// Models to add (at least two).
    #[arg(required = true, num_args = 2..)]
    models: Vec<PathBuf>,
    /// Where to write the merged model.
    #[arg(short, long)]
    output: PathBuf,
    /// Write the compact binary encoding instead of YAML.
    #[arg(long)]
    binary: bool,
}

/// Runs the command line; returns the exit code.
pub fn run() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() { 2 } else { 0 };
        }
    };
    // Commands that drive a target keep SIGPIPE ignored (a target closing its pipe fails one
    // write); the others end quietly when their reader goes away, like any Unix filter.
    if !matches!(cli.command, Command::Hunt(_) | Command::Replay(_) | Command::Shrink(_)) {
        tracewalk::harness::default_sigpipe();
    }
    let result = match cli.command {
        Command::Learn(a) => learn::run(a),
        Command::Show(a) => show::run(a),
        Command::Gen(a) => gen_cmd::run(a),
        Command::Mutate(a) => mutate::run(a),
        Command::Score(a) => score::run(a),
        Command::Hunt(a) => hunt::run(a),
        Command::Replay(a) => replay::replay(a),
        Command::Shrink(a) => replay::shrink(a),
        Command::Seed(a) => seed::run(a),
        Command::Decode(a) => decode::run(a),
        Command::Merge(a) => merge(a),
        Command::Rules(a) if a.hostile => {
            print!("{}", tracewalk::generate::hostile::BUILTIN_HOSTILE_YAML);
            Ok(0)
        }
        Command::Rules(_) => {
            print!("{}", tracewalk::token::rules::BUILTIN_RULES_YAML);
            Ok(0)
        }
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("tracewalk: {}", one_line(&e));
            2
        }
    }
}

/// The error and its causes on one line, each cause once: library errors often name their
/// source in their own message already.
fn one_line(e: &anyhow::Error) -> String {
    let mut text = String::new();
    for cause in e.chain() {
        let part = cause.to_string();
        let part = part.lines().next().unwrap_or("").trim();
        if part.is_empty() || text.contains(part) {
            continue;
        }
        if !text.is_empty() {
            text.push_str(": ");
        }
        text.push_str(part);
    }
    if text.is_empty() { "error".to_string() } else { text }
}

fn merge(args: MergeArgs) -> anyhow::Result<i32> {
    let mut merged = tracewalk::model::load(&args.models[0])?;
    for path in &args.models[1..] {
        let next = tracewalk::model::load(path)?;
        merged = merged.merge(&next).map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    }
    save_model(&merged, &args.output, args.binary)?;
    eprintln!(
        "merged {} models: {} sessions, {} messages; wrote {} ({})",
        args.models.len(),
        merged.totals.sessions,
        merged.totals.messages,
        args.output.display(),
        &tracewalk::model::content_hash(&merged)[..16]
    );
    Ok(0)
}

fn save_model(model: &tracewalk::model::Model, path: &std::path::Path, binary: bool) -> anyhow::Result<()> {
    let encoding = if binary { tracewalk::model::Encoding::Binary } else { tracewalk::model::Encoding::Yaml };
    tracewalk::model::save(model, path, encoding)?;
    Ok(())
}

/// Loads and compiles a model file.
fn load_compiled(path: &std::path::Path) -> anyhow::Result<tracewalk::model::Compiled> {
    let (model, hash) = tracewalk::model::load_with_hash(path)?;
    Ok(tracewalk::model::Compiled::new(model, hash)?)
}

/// Parses durations like `250ms`, `30s`, `5m`, `2h` (a bare number is seconds).
fn parse_duration_ms(text: &str) -> Result<u64, String> {
    let text = text.trim();
    let split = text.find(|c: char| !c.is_ascii_digit() && c != '.').unwrap_or(text.len());
    let (num, unit) = text.split_at(split);
    let value: f64 = num.parse().map_err(|_| format!("bad duration `{text}`"))?;
    let scale = match unit {
        "ms" => 1.0,
        "" | "s" => 1000.0,
        "m" | "min" => 60_000.0,
        "h" => 3_600_000.0,
        _ => return Err(format!("bad duration unit in `{text}` (use ms, s, m or h)")),
    };
    Ok((value * scale).round() as u64)
}
