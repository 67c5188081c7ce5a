//! Model load: reading, verifying and compiling (`model::load_with_hash` + `Compiled::new`) a
//! model with over a million transitions, from the binary encoding and from YAML.

mod common;

use std::time::Duration;

use criterion::{Criterion, criterion_group, criterion_main};

fn load(c: &mut Criterion) {
    let dir = tempfile::tempdir().expect("temp dir");
    let (bin, yaml) = common::save_both(&common::rich_model(), dir.path(), "large");
    let transitions = common::transitions(&common::load_compiled(&bin));
    eprintln!("large model: {transitions} transitions");
    let mut group = c.benchmark_group("load_compile");
    group.sample_size(10).measurement_time(Duration::from_secs(8));
    group.bench_function("binary", |b| b.iter(|| common::load_compiled(&bin)));
    group.measurement_time(Duration::from_secs(20));
    group.bench_function("yaml", |b| b.iter(|| common::load_compiled(&yaml)));
    group.finish();
}

criterion_group!(benches, load);
criterion_main!(benches);
