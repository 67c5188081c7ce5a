//! Prints the generation and model-load figures in one short run (what `benches/figures.sh`
//! shows beside the learn figures). Each timing is the median of several runs; memory is
//! counted exactly by a counting global allocator (stats_alloc).
//!
//! Run: `cargo bench --bench figures` (after `--`: `--quick` for 3 runs instead of 5, and
//! `generation` or `load` for one part only).

mod common;

use std::alloc::System;
use std::time::{Duration, Instant};

use stats_alloc::{INSTRUMENTED_SYSTEM, Region, StatsAlloc};
use tracewalk::generate::{GenOptions, Generator};

#[global_allocator]
static GLOBAL: &StatsAlloc<System> = &INSTRUMENTED_SYSTEM;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    v[v.len() / 2]
}

fn timed<T>(f: impl FnOnce() -> T) -> (T, Duration) {
    let start = Instant::now();
    let out = f();
    (out, start.elapsed())
}

fn generation(runs: usize, large: &tracewalk::model::Model) {
    println!("generation (message-chain walk, one draw = one token, one core)");
    for name in ["shop-api", "mail", "large"] {
        let c = match name {
            "large" => common::compile(large.clone()),
            _ => common::compile(common::bundled_model(name)),
        };
        let steps = 5_000_000u64;
        let mut rates = [Vec::new(), Vec::new()];
        for run in 0..runs {
            for (k, linear) in [false, true].into_iter().enumerate() {
                let mut rng = common::seeded(run as u64);
                let (sum, t) = timed(|| common::message_walk(&c.message, steps, &mut rng, linear));
                std::hint::black_box(sum);
                rates[k].push(steps as f64 / t.as_secs_f64());
            }
        }
        let (alias, linear) = (median(rates[0].clone()), median(rates[1].clone()));
        println!(
            "  {name:<9} order {} {:>6} transitions  alias {:>6.1} M tokens/s  linear scan {:>6.1} M tokens/s  ratio {:.2}",
            c.message.order(),
            c.message.transitions(),
            alias / 1e6,
            linear / 1e6,
            alias / linear
        );
        let mut g = Generator::new(&c, GenOptions::default()).expect("options");
        let mut rates = Vec::new();
        for run in 0..runs {
            let (bytes, t) =
                timed(|| (0..2000u64).map(|i| g.trace(run as u64, i).wire_bytes().len()).sum::<usize>());
            rates.push(bytes as f64 / t.as_secs_f64());
        }
        println!("  {name:<9} Generator::trace end to end {:>6.1} MB/s", median(rates) / 1e6);
    }
}

fn load(runs: usize, model: tracewalk::model::Model, learned_in: Duration) {
    let dir = tempfile::tempdir().expect("temp dir");
    // `figures.sh` sets this to time a fresh `tracewalk` process loading the same files.
    let keep = std::env::var_os("TRACEWALK_FIGURES_DIR").map(std::path::PathBuf::from);
    let out = keep.as_deref().unwrap_or(dir.path());
    let t = learned_in;
    let (bin, yaml) = common::save_both(&model, out, "large");
    let size = |p: &std::path::Path| std::fs::metadata(p).map_or(0.0, |m| m.len() as f64 / (1 << 20) as f64);
    println!(
        "model load (large model learned from invented text in {:.1} s; binary {:.1} MiB, YAML {:.1} MiB)",
        t.as_secs_f64(),
        size(&bin),
        size(&yaml)
    );
    // Live bytes of the two chains, counted by the allocator while they are built.
    let config = tracewalk::chain::ChainConfig {
        smoothing: model.settings.smoothing,
        discount: model.settings.discount,
        parts: tracewalk::chain::Parts::All,
    };
    let region = Region::new(GLOBAL);
    let session =
        tracewalk::chain::Chain::build(&model.session_chain_grams(), model.session_symbols(), &config);
    let message = tracewalk::chain::Chain::build(&model.message_chain, model.token_symbols(), &config);
    let stats = region.change();
    // Reallocations are already counted in both totals (their net change is just a summary).
    let chains_live = stats.bytes_allocated as f64 - stats.bytes_deallocated as f64;
    let chain_transitions = (session.transitions() + message.transitions()) as f64;
    drop((session, message, model));

    let region = Region::new(GLOBAL);
    let compiled = common::load_compiled(&bin);
    let stats = region.change();
    let live = stats.bytes_allocated as f64 - stats.bytes_deallocated as f64;
    let transitions = common::transitions(&compiled);
    assert_eq!(transitions as f64, chain_transitions, "the same model");
    println!(
        "  transitions {transitions} (session {} + message {}), contexts {}",
        compiled.session.transitions(),
        compiled.message.transitions(),
        compiled.session.contexts() + compiled.message.contexts()
    );
    println!(
        "  memory: chains {:.1} bytes/transition ({:.1} MiB); whole compiled model with templates, vocabulary, pools and regexes {:.1} bytes/transition ({:.1} MiB)",
        chains_live / chain_transitions,
        chains_live / (1 << 20) as f64,
        live / transitions as f64,
        live / (1 << 20) as f64,
    );
    drop(compiled);
    for (what, path) in [("binary", &bin), ("YAML", &yaml)] {
        let mut times = Vec::new();
        for _ in 0..runs {
            let (c, t) = timed(|| common::load_compiled(path));
            std::hint::black_box(c);
            times.push(t.as_secs_f64());
        }
        println!("  load + compile from {what:<6} median {:.3} s over {runs} runs", median(times));
    }
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick");
    let runs = if quick { 3 } else { 5 };
    let only = |what: &str| std::env::args().any(|a| a == what);
    let all = !only("generation") && !only("load");
    let (large, learned_in) = timed(common::rich_model);
    if all || only("generation") {
        generation(runs, &large);
    }
    if all || only("load") {
        load(runs, large, learned_in);
    }
}
