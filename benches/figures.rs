//! Prints the generation and model-load figures in one short run (what `benches/figures.sh`
//! shows beside the learn figures). Each timing is the median of several runs; memory is
//! counted exactly by a counting global allocator (stats_alloc).
//!
//! Run: `cargo bench --bench figures` (options after `--`: `--quick` for fewer repetitions).

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

/// Peak resident set size of this process so far (Linux), in MiB.
fn peak_rss_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

fn generation(runs: usize) {
    println!("generation (message-chain walk, one draw = one token, one core)");
    for name in ["shop-api", "mail"] {
        let c = common::compile(common::bundled_model(name));
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
            let (bytes, t) = timed(|| {
                (0..2000u64).map(|i| g.trace(run as u64, i).wire_bytes().len()).sum::<usize>()
            });
            rates.push(bytes as f64 / t.as_secs_f64());
        }
        println!("  {name:<9} Generator::trace end to end {:>6.1} MB/s", median(rates) / 1e6);
    }
}

fn load(runs: usize) {
    let dir = tempfile::tempdir().expect("temp dir");
    let (model, t) = timed(common::rich_model);
    let (bin, yaml) = common::save_both(&model, dir.path(), "rich");
    drop(model);
    let size = |p: &std::path::Path| std::fs::metadata(p).map(|m| m.len() as f64 / (1 << 20) as f64).unwrap_or(0.0);
    println!(
        "model load (large model learned from invented text in {:.1} s; binary {:.1} MiB, YAML {:.1} MiB)",
        t.as_secs_f64(),
        size(&bin),
        size(&yaml)
    );
    let before_rss = peak_rss_mib().unwrap_or(0.0);
    let region = Region::new(GLOBAL);
    let (compiled, _) = timed(|| common::load_compiled(&bin));
    let stats = region.change();
    let live = stats.bytes_allocated as i64 - stats.bytes_deallocated as i64 + stats.bytes_reallocated as i64;
    let transitions = common::transitions(&compiled);
    let chains = compiled.session.heap_bytes() + compiled.message.heap_bytes();
    println!(
        "  transitions {transitions} (session {} + message {}), contexts {}",
        compiled.session.transitions(),
        compiled.message.transitions(),
        compiled.session.contexts() + compiled.message.contexts()
    );
    println!(
        "  memory: chains {:.1} bytes/transition, whole compiled model {:.1} bytes/transition ({:.1} MiB live); peak RSS {:.0} MiB (before load {:.0} MiB)",
        chains as f64 / transitions as f64,
        live as f64 / transitions as f64,
        live as f64 / (1 << 20) as f64,
        peak_rss_mib().unwrap_or(0.0),
        before_rss
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
    generation(runs);
    load(if quick { 3 } else { 5 });
}
