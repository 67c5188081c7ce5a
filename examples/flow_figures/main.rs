//! The value-flow figures of the README (section "Value flow"), measured through the library.
//!
//! 1. shop-api: the share of sessions whose id references all point to ids introduced earlier
//!    in the session (definition in `shop_ids.rs`), in the corpus and in generated sessions with
//!    value flow on and off.
//! 2. ticket desk: runs until the planted bug of `examples/ticket_desk.rs` shows, with value
//!    flow on and off, the target's replies fed back into each session.
//!
//! Run: `cargo run --release --example flow_figures [SESSIONS] [SEED]` (defaults 2000 and 1).

#[path = "../ticket_desk.rs"]
mod desk;
mod desk_hunt;
mod shop_ids;

use std::path::Path;

use tracewalk::model::{Compiled, LearnOptions};
use tracewalk::read::{self, Corpus};

fn read_corpus(name: &str) -> Corpus {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("corpora").join(name);
    let options = read::options_from_manifests(std::slice::from_ref(&path)).expect("manifest");
    read::read_paths(&[path], &options).expect("corpus reads")
}

fn learn(corpus: &Corpus) -> Compiled {
    // As `tracewalk learn corpora/NAME` does.
    let (model, _) = tracewalk::model::learn(corpus, &LearnOptions::default(), None).expect("learns");
    let hash = tracewalk::model::content_hash(&model);
    Compiled::new(model, hash).expect("compiles")
}

fn print_row(what: &str, t: &shop_ids::Tally) {
    println!(
        "{what:<22} {:>6} sessions, {:>5} with id references ({:.1} per session); all introduced in {:>5} ({:.2}%); references introduced {:.2}%",
        t.sessions,
        t.with_references,
        t.references as f64 / t.with_references.max(1) as f64,
        t.passing,
        100.0 * t.fraction(),
        100.0 * t.introduced as f64 / t.references.max(1) as f64
    );
}

fn main() {
    let mut args = std::env::args().skip(1);
    let n: u64 = args.next().map_or(2000, |a| a.parse().expect("SESSIONS is a number"));
    let seed: u64 = args.next().map_or(1, |a| a.parse().expect("SEED is a number"));

    let corpus = read_corpus("shop-api");
    let model = learn(&corpus);
    let real = shop_ids::corpus_tally(&corpus);
    let on = shop_ids::generated_tally(&model, true, n, seed);
    let off = shop_ids::generated_tally(&model, false, n, seed);
    println!("figure 1: shop-api sessions whose id references all point to ids introduced earlier");
    print_row("corpus", &real);
    print_row("generated, flow on", &on);
    print_row("generated, flow off", &off);
    println!(
        "failing sessions whose failures all come before any id of their kind: corpus {}, flow on {}, flow off {}",
        real.failing_none_introduced, on.failing_none_introduced, off.failing_none_introduced
    );
    println!(
        "flow on reaches {:.1}% of the corpus's fraction (goal: at least 95%); flow off {:.1}%",
        100.0 * on.fraction() / real.fraction(),
        100.0 * off.fraction() / real.fraction()
    );

    println!();
    let budget = 20_000;
    let seeds: Vec<u64> = (1..=7).collect();
    let desk_model = learn(&read_corpus("ticket-desk"));
    println!(
        "figure 2: runs until the ticket desk's planted bug shows (plausible mode, {} seeds, at most {budget} runs each)",
        seeds.len()
    );
    for feed in [desk_hunt::Feed::Live, desk_hunt::Feed::Offline, desk_hunt::Feed::NoFlow] {
        let runs: Vec<Option<u64>> =
            seeds.iter().map(|&s| desk_hunt::runs_to_find(&desk_model, feed, s, budget)).collect();
        let mut sorted: Vec<u64> = runs.iter().map(|r| r.unwrap_or(u64::MAX)).collect();
        sorted.sort_unstable();
        let median = sorted[sorted.len() / 2];
        let text: Vec<String> =
            runs.iter().map(|r| r.map_or(format!(">{budget}"), |n| n.to_string())).collect();
        let median = if median == u64::MAX { format!(">{budget}") } else { median.to_string() };
        println!("{:<28} median {median:>7}   per seed: {}", feed.name(), text.join(" "));
    }
}
