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

/// One learned value-flow coupling, in words and numbers.
#[derive(Debug, Clone, Serialize)]
pub struct CouplingRow {
    /// `request` or `reply`.
    pub target_side: String,
    /// First line of the target template.
    pub target_template: String,
    /// 1-based slot number in the target template.
    pub target_slot: u32,
    /// The slot's class and anchor, e.g. `{int} after carts`.
    pub target_slot_text: String,
    pub source_side: String,
    pub source_template: String,
    pub source_slot: u32,
    pub source_slot_text: String,
    /// For a reply source: the request template it most often answered.
    pub source_answers: Option<String>,
    pub copies: u64,
    pub occurrences: u64,
    pub rate: f64,
    pub chance: f64,
    /// `null` in JSON when chance is 0.
    pub lift: Option<f64>,
    /// Commonest distance in messages (requests and replies).
    pub typical_distance: u32,
    /// Which holder of a value the target's occurrences are credited to: `oldest holder` (the
    /// slot that introduced the value) or `newest holder` (the latest slot that held it).
    pub reading: String,
    /// The coupling in one sentence.
    pub sentence: String,
}

/// What value flow learned.
#[derive(Debug, Clone, Serialize)]
pub struct FlowSummary {
    /// Messages looked back (0: flow was not learned).
    pub window: u32,
    pub reply_templates: usize,
    /// Candidate couplings (pairs with at least one copy) and those kept as real.
    pub candidates: usize,
    pub kept: usize,
    /// Kept couplings, those of request slots first, then most copies first (all of them,
    /// whatever `top`).
    pub couplings: Vec<CouplingRow>,
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
    pub flow: FlowSummary,
}

/// A template as `show` prints it: the template text, except that an HTTP template is cut to its
/// start line, the number of header fields, the body and the template's number, since templates
/// differing only in header values share the rest (`GET /v1/x HTTP/1.1 ⟨4 fields⟩ {…} #12`).
pub fn template_label(model: &Model, symbol: u32) -> String {
    let text = model.template_text(symbol);
    if model.settings.read.format != Some(crate::read::Format::Http) || model.template(symbol).is_none() {
        return text;
    }
    http_label(&text, &format!("#{}", symbol - crate::symbol::FIRST_TEMPLATE + 1))
}

/// [`template_label`] for a reply template; HTTP reply templates are numbered `#r1`, `#r2`, ….
pub fn reply_template_label(model: &Model, symbol: u32) -> String {
    let text = model.replies.template_text(symbol);
    if model.settings.read.format != Some(crate::read::Format::Http)
        || model.replies.template(symbol).is_none()
    {
        return text;
    }
    http_label(&text, &format!("#r{}", symbol - crate::symbol::FIRST_TEMPLATE + 1))
}

/// An HTTP template's text cut to its start line, field count and body, then `number`.
fn http_label(text: &str, number: &str) -> String {
    let (head, body) = match text.find("{body") {
        Some(i) => {
            let rest = &text[i..];
            let after = rest.find('}').map_or("", |j| &rest[j + 1..]);
            (&text[..i], after)
        }
        None => (text, ""),
    };
    let mut lines = head.split("\\r\\n").filter(|l| !l.is_empty());
    let start = lines.next().unwrap_or("");
    let fields = lines.count();
    let mut label = format!("{start} ⟨{fields} fields⟩");
    if !body.is_empty() {
        label.push(' ');
        label.push_str(body);
    }
    label.push(' ');
    label.push_str(number);
    label
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
            text: template_label(model, g[0]),
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
                    text: template_label(model, s),
                    count: n,
                    probability: chain.prob(&ctx, s),
                })
                .collect();
            successors.sort_by(|a, b| b.probability.total_cmp(&a.probability));
            successors.truncate(5);
            ContextRow {
                context: ctx.iter().filter(|&&s| s != BEGIN).map(|&s| template_label(model, s)).collect(),
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

    let flow = flow_summary(model);
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
        flow,
    }
}

/// The first line of a template (tokens up to the first line break), slots as `{class}`.
fn first_line(tokens: &[Token], template: &[u32]) -> String {
    let mut out = String::new();
    for &s in template {
        let Some(t) = s.checked_sub(crate::symbol::FIRST_TOKEN).and_then(|i| tokens.get(i as usize)) else {
            continue;
        };
        if let Token::Lit(b) = t
            && let Some(i) = b.iter().position(|&c| c == b'\n' || c == b'\r')
        {
            out.push_str(&escape::escape(&b[..i]));
            break;
        }
        out.push_str(&t.display());
    }
    out
}

/// A template for the value-flow list: HTTP templates as [`template_label`] gives them, others
/// as their first line.
fn flow_label(model: &Model, side: crate::model::flow::Side, symbol: u32) -> String {
    use crate::model::flow::Side;
    let http = model.settings.read.format == Some(crate::read::Format::Http);
    match (side, http) {
        (Side::Request, true) => template_label(model, symbol),
        (Side::Reply, true) => reply_template_label(model, symbol),
        (Side::Request, false) => first_line(&model.tokens, model.template(symbol).unwrap_or_default()),
        (Side::Reply, false) => {
            first_line(&model.replies.tokens, model.replies.template(symbol).unwrap_or_default())
        }
    }
}

/// The value-flow part of [`summarize`].
pub fn flow_summary(model: &Model) -> FlowSummary {
    use crate::model::flow::{Side, SlotKey, couplings, slot_anchors};
    let all = couplings(model);
    let side_of = |k: &SlotKey| match k.side {
        Side::Request => (&model.tokens, model.template(k.template).unwrap_or_default()),
        Side::Reply => (&model.replies.tokens, model.replies.template(k.template).unwrap_or_default()),
    };
    let slot_text = |k: &SlotKey| {
        let (tokens, template) = side_of(k);
        match slot_anchors(tokens, template).get(k.slot as usize) {
            Some((class, Some(a))) => {
                let anchor = a
                    .checked_sub(crate::symbol::FIRST_TOKEN)
                    .and_then(|i| tokens.get(i as usize))
                    .map(Token::display);
                format!("{{{class}}} after `{}`", anchor.unwrap_or_default().trim())
            }
            Some((class, None)) => format!("{{{class}}}"),
            None => "?".into(),
        }
    };
    // The request each reply template most often answered.
    let mut answers: std::collections::BTreeMap<u32, (u64, u32)> = Default::default();
    let mut per_pair: std::collections::BTreeMap<(u32, u32), u64> = Default::default();
    for run in &model.replies.runs {
        for &r in &run.replies.0 {
            *per_pair.entry((r, run.request)).or_default() += run.count;
        }
    }
    for ((reply, request), n) in per_pair {
        let e = answers.entry(reply).or_insert((0, request));
        if n > e.0 {
            *e = (n, request);
        }
    }
    let mut rows: Vec<CouplingRow> = all
        .iter()
        .filter(|c| c.accepted)
        .map(|c| {
            let source_answers = match c.source.side {
                Side::Reply => answers.get(&c.source.template).map(|&(_, q)| flow_label(model, Side::Request, q)),
                Side::Request => None,
            };
            let target_template = flow_label(model, c.target.side, c.target.template);
            let source_template = flow_label(model, c.source.side, c.source.template);
            let source_words = match (&c.source.side, &source_answers) {
                (Side::Reply, Some(q)) => format!("the reply `{source_template}` to `{q}`"),
                (Side::Reply, None) => format!("the reply `{source_template}`"),
                (Side::Request, _) if c.source == c.target => "the same slot of an earlier such message".into(),
                (Side::Request, _) => format!("`{source_template}`"),
            };
            let back = if c.distance == 1 { "1 message".to_string() } else { format!("{} messages", c.distance) };
            let sentence = format!(
                "slot {} ({}) of {}`{}` reuses slot {} ({}) of {} in {:.0}% of occurrences ({} of {}; chance {:.2}%), typically {} back",
                c.target.slot + 1,
                slot_text(&c.target),
                if c.target.side == Side::Reply { "the reply " } else { "" },
                target_template,
                c.source.slot + 1,
                slot_text(&c.source),
                source_words,
                100.0 * c.rate,
                c.copies,
                c.occurrences,
                100.0 * c.chance,
                back
            );
            CouplingRow {
                target_side: c.target.side.name().into(),
                target_template,
                target_slot: c.target.slot + 1,
                target_slot_text: slot_text(&c.target),
                source_side: c.source.side.name().into(),
                source_template,
                source_slot: c.source.slot + 1,
                source_slot_text: slot_text(&c.source),
                source_answers,
                copies: c.copies,
                occurrences: c.occurrences,
                rate: c.rate,
                chance: c.chance,
                lift: c.lift.is_finite().then_some(c.lift),
                typical_distance: c.distance,
                reading: c.reading.name().into(),
                sentence,
            }
        })
        .collect();
    // Requests first: their couplings are what generated traffic reproduces.
    rows.sort_by(|a, b| {
        (a.target_side != "request")
            .cmp(&(b.target_side != "request"))
            .then(b.copies.cmp(&a.copies))
            .then_with(|| a.sentence.cmp(&b.sentence))
    });
    FlowSummary {
        window: model.settings.flow_window,
        reply_templates: model.replies.templates.len(),
        candidates: all.len(),
        kept: rows.len(),
        couplings: rows,
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
            _ => template_label(model, s),
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
