//! What a model learned, in numbers: the library behind `tracewalk show`.

use serde::Serialize;

use crate::chain::{Chain, ChainConfig, Grams, Parts, cross_entropy, entropy_rate};
use crate::escape;
use crate::model::{Compiled, Model};
use crate::symbol::{BEGIN, END};
use crate::token::{Token, Tokenized};

/// Summary of one chain.
#[derive(Debug, Clone, Serialize)]
pub struct ChainSummary {
    pub order: usize,
    pub contexts: usize,
    pub transitions: usize,
    /// Entropy rate, bits per symbol (per message for the session chain, per token for the
    /// message chain).
    pub entropy_rate_bits: f64,
    /// Held-out figures per order 1..=order (fitted without the check part).
    pub held_out: Vec<HeldOut>,
    /// Kneser–Ney discount per context length 0..=order (zeros for other methods).
    pub discounts: Vec<f64>,
}

/// Held-out cross-entropy and perplexity of one order.
#[derive(Debug, Clone, Serialize)]
pub struct HeldOut {
    pub order: usize,
    pub bits: Option<f64>,
    pub perplexity: Option<f64>,
}

/// A successor with its probability.
#[derive(Debug, Clone, Serialize)]
pub struct Successor {
    pub text: String,
    pub count: u64,
    pub probability: f64,
}

/// The most frequent successors of one context.
#[derive(Debug, Clone, Serialize)]
pub struct ContextRow {
    pub context: Vec<String>,
    pub count: u64,
    pub successors: Vec<Successor>,
}

/// One pool, briefly.
#[derive(Debug, Clone, Serialize)]
pub struct PoolRow {
    pub class: String,
    pub anchor: Option<String>,
    pub seen: u64,
    pub kept: usize,
    pub top: Vec<(String, u64)>,
}

/// Everything `show` prints.
#[derive(Debug, Clone, Serialize)]
pub struct Summary {
    pub hash: String,
    pub format: String,
    pub smoothing: String,
    pub sessions: u64,
    pub messages: u64,
    pub replies: u64,
    pub tokens: u64,
    pub vocabulary: usize,
    pub literals: usize,
    pub slot_classes: Vec<String>,
    pub templates: usize,
    /// Templates frequent enough to be their own symbol in the session chain.
    pub frequent_templates: usize,
    pub session_chain: ChainSummary,
    pub message_chain: ChainSummary,
    pub top_templates: Vec<Successor>,
    pub top_contexts: Vec<ContextRow>,
    pub pools: Vec<PoolRow>,
}

fn chain_summary(grams: &Grams, symbols: u32, config: &ChainConfig) -> ChainSummary {
    let chain = Chain::build(grams, symbols, config);
    let fit = ChainConfig { parts: Parts::Fit, ..*config };
    let held_out = (1..=grams.order)
        .map(|k| {
            let g = grams.marginal(k);
            let bits = cross_entropy(&Chain::build(&g, symbols, &fit), &g);
            HeldOut { order: k, bits, perplexity: bits.map(f64::exp2) }
        })
        .collect();
    ChainSummary {
        order: grams.order,
        contexts: chain.contexts(),
        transitions: chain.transitions(),
        entropy_rate_bits: entropy_rate(&chain, grams),
        held_out,
        discounts: chain.discounts(),
    }
}

/// Summarises a model; `top` limits the lists.
pub fn summarize(model: &Model, hash: &str, top: usize) -> Summary {
    let config = ChainConfig {
        smoothing: model.settings.smoothing,
        discount: model.settings.discount,
        parts: Parts::All,
    };
    let session_grams = model.session_chain_grams();
    let session_chain = chain_summary(&session_grams, model.session_symbols(), &config);
    let message_chain = chain_summary(&model.message_chain, model.token_symbols(), &config);
    let chain = Chain::build(&session_grams, model.session_symbols(), &config);

    // Template frequencies: unigram marginal of the session table.
    let unigrams = session_grams.marginal(0);
    let total: u64 = unigrams.counts.iter().map(|c| c[0] + c[1]).sum();
    let mut top_templates: Vec<Successor> = unigrams
        .rows()
        .filter(|(g, _)| g[0] != END)
        .map(|(g, c)| Successor {
            text: model.template_text(g[0]),
            count: c[0] + c[1],
            probability: (c[0] + c[1]) as f64 / total.max(1) as f64,
        })
        .collect();
    top_templates.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| a.text.cmp(&b.text)));
    top_templates.truncate(top);

    // Most frequent contexts of the top order with their likeliest successors.
    let order = session_grams.order;
    let mut contexts: Vec<(Vec<u32>, u64)> = Vec::new();
    for (g, c) in session_grams.rows() {
        let ctx = &g[..order];
        match contexts.last_mut() {
            Some((last, n)) if last.as_slice() == ctx => *n += c[0] + c[1],
            _ => contexts.push((ctx.to_vec(), c[0] + c[1])),
        }
    }
    contexts.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    let top_contexts = contexts
        .into_iter()
        .take(top)
        .map(|(ctx, count)| {
            let mut successors: Vec<Successor> = chain
                .successors(&ctx)
                .into_iter()
                .map(|(s, n)| Successor {
                    text: model.template_text(s),
                    count: n,
                    probability: chain.prob(&ctx, s),
                })
                .collect();
            successors.sort_by(|a, b| b.probability.total_cmp(&a.probability));
            successors.truncate(5);
            ContextRow {
                context: ctx.iter().filter(|&&s| s != BEGIN).map(|&s| model.template_text(s)).collect(),
                count,
                successors,
            }
        })
        .collect();

    let mut pools: Vec<PoolRow> = model
        .pools
        .iter()
        .map(|p| PoolRow {
            class: p.class.clone(),
            anchor: p.anchor.and_then(|a| model.token(a)).map(Token::display),
            seen: p.seen,
            kept: p.values.len(),
            top: p.values.iter().take(3).map(|v| (escape::preview(&v.value, 40), v.count)).collect(),
        })
        .collect();
    pools.sort_by(|a, b| b.seen.cmp(&a.seen).then_with(|| a.class.cmp(&b.class)));
    pools.truncate(top.max(1) * 2);

    Summary {
        hash: hash.to_string(),
        format: model.settings.read.format.map_or("?", |f| f.name()).to_string(),
        smoothing: model.settings.smoothing.name().to_string(),
        sessions: model.totals.sessions,
        messages: model.totals.messages,
        replies: model.totals.replies,
        tokens: model.totals.tokens,
        vocabulary: model.tokens.len(),
        literals: model.tokens.iter().filter(|t| matches!(t, Token::Lit(_))).count(),
        slot_classes: model
            .tokens
            .iter()
            .filter_map(|t| match t {
                Token::Slot(c) => Some(c.clone()),
                _ => None,
            })
            .collect(),
        templates: model.templates.len(),
        frequent_templates: model.frequent_templates().iter().filter(|&&f| f).count(),
        session_chain,
        message_chain,
        top_templates,
        top_contexts,
        pools,
    }
}

/// The likeliest next messages after a session that so far holds `history` (raw messages).
/// Returns template texts with probabilities, likeliest first.
pub fn next_messages(model: &Compiled, history: &[Vec<u8>], top: usize) -> Vec<(String, f64)> {
    let mut scratch = Tokenized::default();
    let symbols: Vec<u32> = history
        .iter()
        .map(|m| {
            let toks: Option<Vec<u32>> = model.symbols_of(m, &mut scratch).into_iter().collect();
            toks.and_then(|t| model.template_symbol(&t)).unwrap_or(crate::symbol::NOVEL)
        })
        .collect();
    let mut dist = Vec::new();
    model.session.distribution(&symbols, &mut dist);
    dist.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    dist.into_iter()
        .take(top)
        .map(|(s, p)| {
            let text = match model.template(s) {
                Some(t) => t.iter().filter_map(|&x| model.vocab.token(x)).map(Token::display).collect(),
                None if s == END => "<end of session>".to_string(),
                None => "<novel message>".to_string(),
            };
            (text, p)
        })
        .collect()
}

/// The session chain as a Graphviz DOT graph: first-order transitions seen in training, edge
/// width and label by smoothed probability.
pub fn dot(model: &Model) -> String {
    let config = ChainConfig {
        smoothing: model.settings.smoothing,
        discount: model.settings.discount,
        parts: Parts::All,
    };
    let grams = model.session_chain_grams().marginal(1);
    let chain = Chain::build(&grams, model.session_symbols(), &config);
    let quote = |s: &str| {
        let short: String =
            if s.chars().count() > 60 { s.chars().take(59).chain(['…']).collect() } else { s.to_string() };
        format!("\"{}\"", short.replace('\\', "\\\\").replace('"', "\\\""))
    };
    let mut out =
        String::from("digraph session_chain {\n  rankdir=LR;\n  node [shape=box, fontname=\"monospace\"];\n");
    let mut nodes: Vec<u32> = grams.ids.clone();
    nodes.sort_unstable();
    nodes.dedup();
    for s in nodes {
        let label = match s {
            BEGIN => "begin".to_string(),
            END => "end".to_string(),
            _ => model.template_text(s),
        };
        out.push_str(&format!("  n{s} [label={}];\n", quote(&label)));
    }
    for (g, _) in grams.rows() {
        let p = chain.prob(&g[..1], g[1]);
        out.push_str(&format!(
            "  n{} -> n{} [penwidth={:.2}, label=\"{:.2}\"];\n",
            g[0],
            g[1],
            0.3 + 5.0 * p,
            p
        ));
    }
    out.push_str("}\n");
    out
}
