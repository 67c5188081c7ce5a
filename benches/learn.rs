//! Learning throughput (read corpus in memory → model, orders fixed at 3) on the bundled
//! corpora and, when `TRACEWALK_BENCH_LOG` names an access log, on a 16 MB slice of it.

mod common;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use tracewalk::model::{self, LearnOptions, OrderChoice};
use tracewalk::read::Corpus;

fn learn(c: &mut Criterion) {
    let options = LearnOptions {
        session_order: OrderChoice::Fixed(3),
        message_order: OrderChoice::Fixed(3),
        ..LearnOptions::default()
    };
    let mut corpora: Vec<(String, Corpus)> = ["shop-api", "events", "mail"]
        .iter()
        .map(|name| (name.to_string(), common::bundled_corpus(name)))
        .collect();
    if let Some(slice) = common::access_log_slice(16 << 20) {
        corpora.push(("access-log-16MB".into(), common::lines_corpus(slice)));
    }
    let mut group = c.benchmark_group("learn");
    group.sample_size(10);
    for (name, corpus) in &corpora {
        let bytes: usize = corpus.sources.iter().map(|s| s.bytes.len()).sum();
        group.throughput(Throughput::Bytes(bytes as u64));
        group.bench_with_input(BenchmarkId::new("order3", name), corpus, |b, corpus| {
            b.iter(|| model::learn(corpus, &options, None).expect("learns"))
        });
    }
    group.finish();
}

criterion_group!(benches, learn);
criterion_main!(benches);
