//! `tracewalk learn`.

use std::path::PathBuf;
use std::sync::atomic::{AtomicU64, Ordering};

use anyhow::Context;
use tracewalk::chain::{OrderScore, Smoothing};
use tracewalk::model::{LearnOptions, OrderChoice};
use tracewalk::read::{self, Format, ReadOptions};
use tracewalk::token::RuleSet;

#[derive(Debug, clap::Args)]
pub struct Args {
    /// Files or directories of sample traffic. A directory with a corpus.yaml reads as it says.
    #[arg(required = true)]
    inputs: Vec<PathBuf>,
    /// Where to write the model.
    #[arg(short, long)]
    output: PathBuf,
    /// Input format: auto, lines, http or jsonl.
    #[arg(long, default_value = "auto")]
    format: String,
    /// Regex whose first capture group names the session of each line (interleaved logs).
    #[arg(long, value_name = "REGEX")]
    session_key: Option<String>,
    /// Start a new session after this much silence (needs timestamps in lines), e.g. 30m.
    #[arg(long, value_name = "DURATION", value_parser = super::parse_duration_ms)]
    idle_gap: Option<u64>,
    /// Regex marking reply lines (learned as replies, not generated).
    #[arg(long, value_name = "REGEX")]
    reply_pattern: Option<String>,
    /// Context order: N for both chains, S,M for session and message chain, or auto.
    #[arg(long, default_value = "auto")]
    order: String,
    /// Largest order tried by --order auto.
    #[arg(long, default_value_t = 4)]
    max_order: usize,
    /// Smoothing: kneser-ney, witten-bell or add-one.
    #[arg(long, default_value = "kneser-ney")]
    smoothing: Smoothing,
    /// Fixed Kneser–Ney discount in (0, 1] (default: estimated per level).
    #[arg(long)]
    discount: Option<f64>,
    /// Slot rules file (YAML); see `tracewalk rules`.
    #[arg(long, value_name = "FILE")]
    rules: Option<PathBuf>,
    /// Most distinct values kept per slot pool.
    #[arg(long, default_value_t = 256)]
    pool_cap: usize,
    /// Templates seen fewer times are one "novel message" symbol in the session chain.
    #[arg(long, default_value_t = 2)]
    min_template_count: u64,
    /// Write the compact binary encoding instead of YAML.
    #[arg(long)]
    binary: bool,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

fn parse_order(text: &str, max: usize) -> anyhow::Result<(OrderChoice, OrderChoice)> {
    let one = |t: &str| -> anyhow::Result<OrderChoice> {
        if t == "auto" {
            return Ok(OrderChoice::Auto { max });
        }
        let k: usize = t.parse().map_err(|_| anyhow::anyhow!("--order: `{t}` is not a number or auto"))?;
        anyhow::ensure!((1..=8).contains(&k), "--order: {k} is outside 1..=8");
        Ok(OrderChoice::Fixed(k))
    };
    match text.split_once(',') {
        Some((s, m)) => Ok((one(s)?, one(m)?)),
        None => Ok((one(text)?, one(text)?)),
    }
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    anyhow::ensure!((1..=8).contains(&a.max_order), "--max-order must be within 1..=8");
    anyhow::ensure!(a.min_template_count >= 1, "--min-template-count must be at least 1");
    anyhow::ensure!(a.pool_cap >= 1 && a.pool_cap <= 1 << 20, "--pool-cap must be within 1..=1048576");
    if let Some(d) = a.discount {
        anyhow::ensure!(d > 0.0 && d <= 1.0, "--discount must be within (0, 1]");
    }
    let (session_order, message_order) = parse_order(&a.order, a.max_order)?;
    let rules = match &a.rules {
        Some(path) => {
            let text =
                std::fs::read_to_string(path).with_context(|| format!("{}: cannot read", path.display()))?;
            RuleSet::from_yaml(&text, &path.display().to_string())?
        }
        None => RuleSet::builtin(),
    };
    let manifest = read::options_from_manifests(&a.inputs)?;
    let format = match a.format.as_str() {
        "auto" => manifest.format,
        f => Some(f.parse::<Format>().map_err(anyhow::Error::msg)?),
    };
    let options = ReadOptions {
        format,
        session_key: a.session_key.or(manifest.session_key),
        idle_gap_ms: a.idle_gap.or(manifest.idle_gap_ms),
        reply_pattern: a.reply_pattern.or(manifest.reply_pattern),
    };
    let files = read::list_files(&a.inputs)?;
    let what = a.inputs.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ");
    anyhow::ensure!(!files.is_empty(), "{what}: no files to learn from");
    let corpus = read::read(read::load_sources(&files)?, &options, &what)?;

    let total: u64 = corpus.sources.iter().map(|s| s.bytes.len() as u64).sum();
    let bar =
        (!a.quiet && total > (8 << 20) && std::io::IsTerminal::is_terminal(&std::io::stderr())).then(|| {
            let bar = indicatif::ProgressBar::new(total);
            bar.set_style(
                indicatif::ProgressStyle::with_template(
                    "learning {bar:40} {bytes}/{total_bytes} {bytes_per_sec} eta {eta}",
                )
                .expect("valid template"),
            );
            bar
        });
    let done = AtomicU64::new(0);
    let progress = |n: u64| {
        let now = done.fetch_add(n, Ordering::Relaxed) + n;
        if let Some(b) = &bar {
            b.set_position(now);
        }
    };
    let learn_options = LearnOptions {
        session_order,
        message_order,
        smoothing: a.smoothing,
        discount: a.discount,
        pool_cap: a.pool_cap,
        min_template_count: a.min_template_count,
        rules,
    };
    let (model, report) = tracewalk::model::learn(&corpus, &learn_options, Some(&progress))?;
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    super::save_model(&model, &a.output, a.binary)?;
    if !a.quiet {
        eprintln!(
            "read {} files ({} bytes) as {}: {} sessions, {} messages, {} replies",
            corpus.sources.len(),
            total,
            corpus.format.name(),
            model.totals.sessions,
            model.totals.messages,
            model.totals.replies
        );
        if report.skips.total() > 0 {
            eprintln!("skipped: {}", report.skips.summary());
        }
        print_scores("session chain", "message", &report.session_scores, model.session_chain.order);
        print_scores("message chain", "token", &report.message_scores, model.message_chain.order);
        eprintln!(
            "learned {} templates, {} tokens; orders {} (sessions) and {} (messages)",
            model.templates.len(),
            model.tokens.len(),
            model.session_chain.order,
            model.message_chain.order
        );
        eprintln!("wrote {} ({})", a.output.display(), &tracewalk::model::content_hash(&model)[..16]);
    }
    Ok(0)
}

fn print_scores(what: &str, unit: &str, scores: &[OrderScore], chosen: usize) {
    if scores.is_empty() {
        return;
    }
    let parts: Vec<String> = scores
        .iter()
        .map(|s| match s.perplexity() {
            Some(p) => format!("{}: {:.3}{}", s.order, p, if s.order == chosen { " *" } else { "" }),
            None => format!("{}: n/a", s.order),
        })
        .collect();
    eprintln!("{what} held-out perplexity per {unit} by order: {}", parts.join(", "));
}
