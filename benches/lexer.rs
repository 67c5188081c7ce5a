//! The lexer's fast path (`Lexer::lex`: skip the regex where no rule can start) against its
//! definition (`Lexer::lex_anchored`: an anchored multi-pattern search at every boundary), on
//! the request messages of the bundled corpora and, when `TRACEWALK_BENCH_LOG` is set, 4 MB of
//! an access log. Both give the same pieces (a unit test checks it).

mod common;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use tracewalk::token::{Lexer, RuleSet, Tokenized};

fn lex_all(lexer: &Lexer, messages: &[Vec<u8>], out: &mut Tokenized, anchored: bool) -> usize {
    let mut pieces = 0;
    for m in messages {
        out.arena.clear();
        out.arena.extend_from_slice(m);
        out.pieces.clear();
        if anchored {
            lexer.lex_anchored(out, 0, m.len());
        } else {
            lexer.lex(out, 0, m.len());
        }
        pieces += out.pieces.len();
    }
    pieces
}

fn lexer(c: &mut Criterion) {
    let lexer = Lexer::new(&RuleSet::builtin(), "built-in rules").expect("compiles");
    let mut sets: Vec<(String, Vec<Vec<u8>>)> = ["shop-api", "lamp-control", "mail"]
        .iter()
        .map(|name| (name.to_string(), common::messages(&common::bundled_corpus(name))))
        .collect();
    if let Some(slice) = common::access_log_slice(4 << 20) {
        sets.push(("access-log-4MB".into(), common::messages(&common::lines_corpus(slice))));
    }
    let mut group = c.benchmark_group("lexer");
    group.sample_size(20);
    for (name, messages) in &sets {
        let bytes: usize = messages.iter().map(Vec::len).sum();
        group.throughput(Throughput::Bytes(bytes as u64));
        for (how, anchored) in [("fast_path", false), ("anchored_every_boundary", true)] {
            group.bench_with_input(BenchmarkId::new(how, name), messages, |b, messages| {
                let mut out = Tokenized::default();
                b.iter(|| lex_all(&lexer, messages, &mut out, anchored))
            });
        }
    }
    group.finish();
}

criterion_group!(benches, lexer);
criterion_main!(benches);
