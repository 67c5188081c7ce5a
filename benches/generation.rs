//! Generation speed: the message-chain walk with the alias sampler against the linear-scan
//! baseline (`Chain::sample_linear`, same distribution), in tokens (draws) per second on one
//! core; and `Generator::trace` end to end in bytes of generated traffic per second.

mod common;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use tracewalk::generate::{GenOptions, Generator};

const STEPS: u64 = 100_000;

fn walks(c: &mut Criterion) {
    let models = [
        ("shop-api", common::compile(common::bundled_model("shop-api"))),
        ("mail", common::compile(common::bundled_model("mail"))),
        ("large", common::compile(common::rich_model())),
    ];
    let mut group = c.benchmark_group("message_walk");
    group.throughput(Throughput::Elements(STEPS));
    for (name, model) in &models {
        for (sampler, linear) in [("alias", false), ("linear_scan", true)] {
            group.bench_with_input(BenchmarkId::new(sampler, name), model, |b, m| {
                let mut rng = common::seeded(1);
                b.iter(|| common::message_walk(&m.message, STEPS, &mut rng, linear))
            });
        }
    }
    group.finish();

    let mut group = c.benchmark_group("trace");
    for (name, model) in models.iter().take(2) {
        let mut g = Generator::new(model, GenOptions::default()).expect("default options");
        let batch = 200u64;
        let bytes: usize = (0..batch).map(|i| g.trace(1, i).wire_bytes().len()).sum();
        group.throughput(Throughput::Bytes(bytes as u64));
        group.bench_function(BenchmarkId::new("plausible", name), |b| {
            b.iter(|| (0..batch).map(|i| g.trace(1, i).wire_bytes().len()).sum::<usize>())
        });
    }
    group.finish();
}

criterion_group!(benches, walks);
criterion_main!(benches);
