//! `tracewalk show`.

use std::path::PathBuf;

use tracewalk::escape;
use tracewalk::inspect::{self, ChainSummary, Summary};

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// How many entries each list shows.
    #[arg(long, default_value_t = 10)]
    top: usize,
    /// A message of the session so far (repeat in order); lists the likeliest next messages.
    #[arg(long = "next", value_name = "MESSAGE")]
    next: Vec<String>,
    /// Print the summary as one JSON object.
    #[arg(long)]
    json: bool,
    /// Write the session chain as a Graphviz DOT graph to this file.
    #[arg(long, value_name = "FILE")]
    dot: Option<PathBuf>,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let (model, hash) = tracewalk::model::load_with_hash(&a.model)?;
    if let Some(path) = &a.dot {
        tracewalk::atomic::write(path, inspect::dot(&model).as_bytes())
            .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?;
    }
    if !a.next.is_empty() {
        let compiled = tracewalk::model::Compiled::new(model, hash)?;
        let history: Vec<Vec<u8>> =
            a.next.iter().map(|m| with_line_end(&compiled, m)).collect::<Result<_, _>>()?;
        let next = inspect::next_messages(&compiled, &history, a.top);
        if a.json {
            let rows: Vec<serde_json::Value> =
                next.iter().map(|(t, p)| serde_json::json!({"message": t, "probability": p})).collect();
            println!("{}", serde_json::Value::Array(rows));
        } else {
            println!("likeliest next messages:");
            for (text, p) in next {
                println!("  {p:>7.4}  {text}");
            }
        }
        return Ok(0);
    }
    let summary = inspect::summarize(&model, &hash, a.top);
    if a.json {
        println!("{}", serde_json::to_string_pretty(&summary)?);
    } else {
        print_summary(&summary);
    }
    Ok(0)
}

/// Messages given on the command line are unescaped (`\r\n` allowed) and get the line ending
/// the model's lines mostly use when they have none.
fn with_line_end(model: &tracewalk::model::Compiled, text: &str) -> anyhow::Result<Vec<u8>> {
    let mut bytes = escape::unescape(text).map_err(|e| anyhow::anyhow!("--next `{text}`: {e}"))?;
    if model.tokenizer.format() != tracewalk::read::Format::Http && !bytes.ends_with(b"\n") {
        let crlf = model.vocab.lit(b"\r\n").is_some() && model.vocab.lit(b"\n").is_none();
        bytes.extend_from_slice(if crlf { b"\r\n" } else { b"\n" });
    }
    Ok(bytes)
}

fn print_chain(name: &str, unit: &str, c: &ChainSummary) {
    println!("{name}: order {}, {} contexts, {} transitions", c.order, c.contexts, c.transitions);
    println!("  entropy rate      {:.3} bits per {unit}", c.entropy_rate_bits);
    let held: Vec<String> = c
        .held_out
        .iter()
        .map(|h| match h.perplexity {
            Some(p) => format!("order {} → {:.3}", h.order, p),
            None => format!("order {} → n/a", h.order),
        })
        .collect();
    println!("  held-out perplexity per {unit}: {}", held.join(", "));
    if c.discounts.iter().any(|d| *d > 0.0) {
        let d: Vec<String> = c.discounts.iter().map(|d| format!("{d:.3}")).collect();
        println!("  Kneser–Ney discounts by context length 0..: {}", d.join(" "));
    }
}

fn print_summary(s: &Summary) {
    println!("model {}  format {}  smoothing {}", &s.hash[..16], s.format, s.smoothing);
    println!(
        "learned from {} sessions, {} messages ({} tokens), {} replies",
        s.sessions, s.messages, s.tokens, s.replies
    );
    println!(
        "vocabulary: {} tokens ({} literals; slots: {}); {} templates ({} frequent enough for the session chain)",
        s.vocabulary,
        s.literals,
        if s.slot_classes.is_empty() { "none".to_string() } else { s.slot_classes.join(", ") },
        s.templates,
        s.frequent_templates
    );
    println!();
    print_chain("session chain", "message", &s.session_chain);
    print_chain("message chain", "token", &s.message_chain);
    println!();
    println!("most frequent templates:");
    for t in &s.top_templates {
        println!("  {:>8}  {:>6.2}%  {}", t.count, 100.0 * t.probability, clip(&t.text, 110));
    }
    println!();
    println!("top transitions of the most frequent session contexts:");
    for row in &s.top_contexts {
        let ctx = if row.context.is_empty() {
            "<session start>".to_string()
        } else {
            row.context.iter().map(|c| clip(c, 50)).collect::<Vec<_>>().join("  ⟶  ")
        };
        println!("  after {ctx}  ({} times)", row.count);
        for succ in &row.successors {
            println!("      {:>6.3}  {}", succ.probability, clip(&succ.text, 100));
        }
    }
    println!();
    println!("slot pools (class @ anchor: seen, kept, commonest values):");
    for p in &s.pools {
        let top: Vec<String> = p.top.iter().map(|(v, n)| format!("{v} ×{n}")).collect();
        println!(
            "  {} @ {}: {} seen, {} kept; {}",
            p.class,
            p.anchor.as_deref().unwrap_or("<start>"),
            p.seen,
            p.kept,
            top.join(", ")
        );
    }
}

fn clip(text: &str, max: usize) -> String {
    if text.chars().count() <= max {
        text.to_string()
    } else {
        text.chars().take(max - 1).chain(['…']).collect()
    }
}
