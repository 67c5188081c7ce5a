//! Set-up shared by the benchmarks: models learned from the bundled corpora, and a large model
//! learned from an invented, vocabulary-rich text protocol generated here (seeded, in memory).
//! Nothing here checks a figure; the benches and `figures` print them.
#![allow(dead_code)] // each bench uses a different part

use std::path::{Path, PathBuf};

use rand::{RngExt, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use tracewalk::chain::Chain;
use tracewalk::model::{self, Compiled, LearnOptions, Model, OrderChoice};
use tracewalk::read::{self, Corpus, Format, ReadOptions, Source};
use tracewalk::symbol::END;

/// The repository root (benches run with the package directory as working directory).
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Reads a bundled corpus the way `tracewalk learn corpora/NAME` does.
pub fn bundled_corpus(name: &str) -> Corpus {
    let dir = root().join("corpora").join(name);
    let options = read::options_from_manifests(std::slice::from_ref(&dir)).expect("manifest");
    read::read_paths(&[dir], &options).expect("bundled corpus reads")
}

/// A model learned from a bundled corpus with the default options (orders chosen by held-out
/// perplexity), as `tracewalk learn corpora/NAME` makes it.
pub fn bundled_model(name: &str) -> Model {
    model::learn(&bundled_corpus(name), &LearnOptions::default(), None).expect("learns").0
}

pub fn compile(model: Model) -> Compiled {
    let hash = model::content_hash(&model);
    Compiled::new(model, hash).expect("compiles")
}

/// Transitions of both chains over all levels: the size measure of the load figure.
pub fn transitions(c: &Compiled) -> usize {
    c.session.transitions() + c.message.transitions()
}

/// Sessions of an invented catalogue-browsing text protocol with a large vocabulary: `words`
/// made-up words (syllable strings), lines of 4–12 words, each next word drawn from 48
/// successors of the current word with Zipf-like weights, 24 lines per session, one source per
/// session. About `bytes` bytes in all. Deterministic for a seed.
pub fn rich_sources(seed: u64, words: usize, bytes: usize) -> Vec<Source> {
    const SYLLABLES: [&str; 16] =
        ["ka", "lo", "mi", "ru", "te", "so", "vi", "nu", "po", "gu", "zo", "hy", "wa", "qe", "jo", "xi"];
    let word = |i: usize| -> String {
        let mut w = String::new();
        let mut i = i;
        for _ in 0..4 {
            w.push_str(SYLLABLES[i % 16]);
            i /= 16;
        }
        w
    };
    let vocab: Vec<String> = (0..words).map(word).collect();
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    // Successor lists: 48 per word, spread over the vocabulary.
    let successors: Vec<[u32; 48]> =
        (0..words).map(|_| std::array::from_fn(|_| rng.random_range(0..words as u32))).collect();
    // Zipf-like rank choice: rank r with weight 1/(r+1), by inverting the cumulative sum.
    let cumulative: Vec<f64> = (0..48)
        .scan(0.0, |acc, r| {
            *acc += 1.0 / (r as f64 + 1.0);
            Some(*acc)
        })
        .collect();
    let total = cumulative[47];
    let mut sources = Vec::new();
    let mut written = 0;
    while written < bytes {
        let mut text = Vec::new();
        for _ in 0..24 {
            let mut w = rng.random_range(0..words);
            for k in 0..rng.random_range(4..=12) {
                if k > 0 {
                    text.push(b' ');
                }
                text.extend_from_slice(vocab[w].as_bytes());
                let u = rng.random::<f64>() * total;
                let rank = cumulative.partition_point(|&c| c < u).min(47);
                w = successors[w][rank] as usize;
            }
            text.push(b'\n');
        }
        written += text.len();
        sources.push(Source { path: PathBuf::from(format!("session-{}", sources.len())), bytes: text });
    }
    sources
}

/// The large model of the load figure: learned (orders 3 and 3) from `rich_sources`.
pub fn rich_model() -> Model {
    let sources = rich_sources(5, 20_000, 7 << 20);
    let options = ReadOptions { format: Some(Format::Lines), ..Default::default() };
    let corpus = read::read(sources, &options, "rich").expect("reads");
    let options = LearnOptions {
        session_order: OrderChoice::Fixed(3),
        message_order: OrderChoice::Fixed(3),
        ..LearnOptions::default()
    };
    model::learn(&corpus, &options, None).expect("learns").0
}

/// Saves `model` in both encodings under `dir`; returns (binary path, YAML path).
pub fn save_both(model: &Model, dir: &Path, name: &str) -> (PathBuf, PathBuf) {
    let bin = dir.join(format!("{name}.bin"));
    let yaml = dir.join(format!("{name}.yaml"));
    model::save(model, &bin, model::Encoding::Binary).expect("saves");
    model::save(model, &yaml, model::Encoding::Yaml).expect("saves");
    (bin, yaml)
}

/// Load and compile, as every command that uses a model does.
pub fn load_compiled(path: &Path) -> Compiled {
    let (model, hash) = model::load_with_hash(path).expect("loads");
    Compiled::new(model, hash).expect("compiles")
}

/// Walks the message chain for `steps` steps (a step is one draw), starting a new message after
/// END or 256 tokens. `linear` picks the linear-scan baseline sampler. Returns a checksum so
/// that the work cannot be optimised away.
pub fn message_walk(chain: &Chain, steps: u64, rng: &mut Xoshiro256PlusPlus, linear: bool) -> u64 {
    let mut history: Vec<u32> = Vec::with_capacity(256);
    let mut sum = 0u64;
    for _ in 0..steps {
        let s = if linear { chain.sample_linear(&history, rng) } else { chain.sample(&history, rng) };
        sum = sum.wrapping_add(s as u64);
        if s == END || history.len() >= 256 {
            history.clear();
        } else {
            history.push(s);
        }
    }
    sum
}

pub fn seeded(seed: u64) -> Xoshiro256PlusPlus {
    Xoshiro256PlusPlus::seed_from_u64(seed)
}

/// The request messages of a corpus, as byte strings.
pub fn messages(corpus: &Corpus) -> Vec<Vec<u8>> {
    corpus
        .sessions
        .iter()
        .flat_map(|s| s.frames.iter().filter(|f| f.role == read::Role::Request).map(move |f| (s, f)))
        .map(|(s, f)| corpus.bytes(s, f).to_vec())
        .collect()
}

/// The first `bytes` bytes (whole lines) of the access log named by `TRACEWALK_BENCH_LOG`, if
/// set (`benches/figures.sh` sets it to the log it generates).
pub fn access_log_slice(bytes: usize) -> Option<Vec<u8>> {
    let path = std::env::var_os("TRACEWALK_BENCH_LOG")?;
    let mut data = std::fs::read(path).ok()?;
    if data.len() > bytes {
        let cut = data[..bytes].iter().rposition(|&b| b == b'\n').map_or(bytes, |i| i + 1);
        data.truncate(cut);
    }
    Some(data)
}

/// A corpus of one in-memory source read as lines.
pub fn lines_corpus(bytes: Vec<u8>) -> Corpus {
    let options = ReadOptions { format: Some(Format::Lines), ..Default::default() };
    read::read(vec![Source { path: PathBuf::from("access-log-slice"), bytes }], &options, "slice")
        .expect("reads")
}
