//! Every parser of untrusted input — readers and session splitting, slot rules, hostile-value
//! files, model files, traces — fed random bytes, every truncation (or a dense sample of them) of
//! a valid file, random byte flips, invalid UTF-8, deep nesting and YAML alias bombs: the result
//! is a value or a one-line error naming the input, never a panic, and fast (bounded work).

mod common;

use rand::{Rng, RngExt, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use tracewalk::generate::hostile::HostileLibrary;
use tracewalk::read::{Format, ReadOptions, Reader, Source};
use tracewalk::token::{RuleSet, Tokenized, Tokenizer};
use tracewalk::trace::Trace;

/// Inputs derived from `valid`: truncations (all when short, else `samples` evenly spread),
/// `samples` single-byte flips, `samples` random byte strings and a few invalid UTF-8 splices.
fn mangled(valid: &[u8], samples: usize, seed: u64) -> Vec<Vec<u8>> {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let mut out = Vec::new();
    let step = (valid.len() / samples.max(1)).max(1);
    for cut in (0..valid.len()).step_by(step) {
        out.push(valid[..cut].to_vec());
    }
    for _ in 0..samples {
        let mut v = valid.to_vec();
        if !v.is_empty() {
            let i = rng.random_range(0..v.len());
            v[i] ^= 1 << rng.random_range(0..8u8);
        }
        out.push(v);
    }
    for _ in 0..samples {
        let mut v = vec![0u8; rng.random_range(0..512)];
        rng.fill_bytes(&mut v);
        out.push(v);
    }
    for bad in [&b"\xff\xfe"[..], b"\xc3", b"\xed\xa0\x80", b"\x00"] {
        let mut v = valid.to_vec();
        let at = v.len() / 2;
        v.splice(at..at, bad.iter().copied());
        out.push(v);
    }
    out
}

fn assert_one_line(err: &str, origin: &str) {
    assert!(!err.contains('\n'), "multi-line error: {err}");
    assert!(err.contains(origin), "error does not name `{origin}`: {err}");
}

#[test]
fn readers_and_tokenizers_take_any_bytes() {
    let samples: [(Format, &str); 3] = [
        (Format::Http, "shop-api/sessions/0001.http"),
        (Format::Lines, "lamp-control/sessions/0001.txt"),
        (Format::Jsonl, "events/events.jsonl"),
    ];
    let rules = RuleSet::builtin();
    let mut tok = Tokenized::default();
    for (format, file) in samples {
        let mut valid = std::fs::read(common::corpus(file)).unwrap();
        valid.truncate(6000);
        let tokenizer = Tokenizer::new(format, &rules, "builtin").unwrap();
        let readers = [
            Reader::new(&ReadOptions { format: Some(format), ..Default::default() }).unwrap(),
            Reader::new(&ReadOptions {
                format: Some(format),
                session_key: Some(r#"(?:"visit":"|^)([0-9a-f-]{4,})"#.into()),
                idle_gap_ms: Some(5000),
                reply_pattern: Some("^(OK|ERR|HTTP/)".into()),
            })
            .unwrap(),
        ];
        for input in mangled(&valid, 150, 7) {
            for reader in &readers {
                let source = Source { path: "input.bin".into(), bytes: input.clone() };
                match reader.read(vec![source], "input.bin") {
                    Ok(corpus) => {
                        for s in &corpus.sessions {
                            for f in &s.frames {
                                tokenizer.tokenize(corpus.bytes(s, f), &mut tok);
                            }
                        }
                    }
                    Err(e) => assert_one_line(&e.to_string(), "input.bin"),
                }
                let (messages, _) = reader.messages(&input);
                assert!(messages.iter().map(|m| m.0.len()).sum::<usize>() <= input.len());
            }
        }
    }
    // Deep nesting: a JSON line of a million brackets is not learned as JSON, and tokenizing it
    // needs no recursion.
    let deep = "[".repeat(1_000_000) + &"]".repeat(1_000_000) + "\n";
    let reader = Reader::new(&ReadOptions { format: Some(Format::Jsonl), ..Default::default() }).unwrap();
    let err = reader
        .read(vec![Source { path: "deep.jsonl".into(), bytes: deep.clone().into_bytes() }], "deep.jsonl");
    assert!(err.is_err(), "beyond serde_json's recursion limit: skipped as not JSON");
    Tokenizer::new(Format::Jsonl, &rules, "builtin").unwrap().tokenize(deep.as_bytes(), &mut tok);
    assert_eq!(tok.pieces.len(), 2_000_001);
}

/// A YAML "billion laughs" document: nine levels of aliases, each repeating the one below nine
/// times (9^9 ≈ 387 million leaves if expanded).
fn alias_bomb(prefix: &str) -> String {
    let mut doc = String::from(prefix);
    doc.push_str("a: &a [\"lol\",\"lol\",\"lol\",\"lol\",\"lol\",\"lol\",\"lol\",\"lol\",\"lol\"]\n");
    let names = ["b", "c", "d", "e", "f", "g", "h", "i"];
    let mut prev = "a";
    for n in names {
        doc.push_str(&format!(
            "{n}: &{n} [*{prev},*{prev},*{prev},*{prev},*{prev},*{prev},*{prev},*{prev},*{prev}]\n"
        ));
        prev = n;
    }
    doc.push_str("classes: *i\n");
    doc
}

#[test]
fn rules_and_hostile_value_files_take_any_text() {
    let valid = tracewalk::token::rules::BUILTIN_RULES_YAML.as_bytes();
    for input in mangled(valid, 200, 11) {
        let text = String::from_utf8_lossy(&input);
        if let Err(e) = RuleSet::from_yaml(&text, "rules.yaml") {
            assert_one_line(&e.to_string(), "rules.yaml");
        }
        if let Err(e) = HostileLibrary::from_yaml(&text, "hostile.yaml") {
            assert_one_line(&e.to_string(), "hostile.yaml");
        }
    }
    let started = std::time::Instant::now();
    let e = RuleSet::from_yaml(&alias_bomb(""), "bomb.yaml").unwrap_err();
    assert_one_line(&e.to_string(), "bomb.yaml");
    assert!(started.elapsed().as_secs() < 10, "the alias bomb was expanded");
}

#[test]
fn model_files_take_any_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let yaml = dir.path().join("m.model");
    let bin = dir.path().join("m.bin");
    for (path, extra) in [(&yaml, None), (&bin, Some("--binary"))] {
        let mut args = vec!["learn", "--order", "2", "-q", "-o", path.to_str().unwrap()];
        let lamp = common::corpus("lamp-control");
        args.push(lamp.to_str().unwrap());
        args.extend(extra);
        assert!(common::tracewalk(&args).status.success());
    }
    for path in [&yaml, &bin] {
        let valid = std::fs::read(path).unwrap();
        for input in mangled(&valid, 300, 13) {
            if input == valid {
                continue;
            }
            let e = tracewalk::model::from_bytes(&input, "input.model").err();
            let e = e.expect("a damaged model never loads (the content hash covers everything)");
            assert_one_line(&e.to_string(), "input.model");
        }
    }
    // A binary model with a valid header and hash whose body claims 2^40 tokens: refused after
    // reading what is there, without reserving memory for the claim.
    let mut body = Vec::new();
    body.extend_from_slice(&[0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x40]); // varint 2^40 as a length
    body.extend_from_slice(&[7u8; 64]);
    let mut file = b"TRACEWALK-MODEL\0".to_vec();
    file.extend_from_slice(&tracewalk::model::MODEL_FORMAT_VERSION.to_le_bytes());
    file.extend_from_slice(blake3::hash(&body).as_bytes());
    file.extend_from_slice(&body);
    let started = std::time::Instant::now();
    let e = tracewalk::model::from_bytes(&file, "huge.model").unwrap_err();
    assert_one_line(&e.to_string(), "huge.model");
    assert!(started.elapsed().as_secs() < 5);
    let bomb = alias_bomb(&format!("tracewalk_model: {}\nhash: x\n", tracewalk::model::MODEL_FORMAT_VERSION));
    let started = std::time::Instant::now();
    let e = tracewalk::model::from_bytes(bomb.as_bytes(), "bomb.model").unwrap_err();
    assert_one_line(&e.to_string(), "bomb.model");
    assert!(started.elapsed().as_secs() < 10, "the alias bomb was expanded");
}

#[test]
fn traces_take_any_text() {
    let model = common::learn_corpus("lamp-control", 2);
    let mut generator = tracewalk::generate::Generator::new(&model, Default::default()).unwrap();
    let text = generator.trace(1, 0).to_text();
    let mut parsed = 0;
    for input in mangled(text.as_bytes(), 300, 17) {
        let Ok(text) = std::str::from_utf8(&input) else { continue };
        match Trace::parse_all(text) {
            Ok(traces) => {
                parsed += 1;
                for t in traces {
                    assert_eq!(Trace::parse(&t.to_text()).unwrap(), t, "what parses writes back the same");
                }
            }
            Err(e) => assert!(!e.to_string().contains('\n')),
        }
    }
    assert!(parsed > 0);
}
