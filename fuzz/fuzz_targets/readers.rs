//! Fuzz target: the readers and tokenizers. Any bytes, read in every format, with and without
//! session keys, idle gaps and a reply pattern: framing never panics and keeps frames in input
//! order; tokenizing every frame never panics and is lossless for line formats.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;
use tracewalk::read::{Format, ReadOptions, Reader, Source};
use tracewalk::token::{RuleSet, Tokenized, Tokenizer};

const FORMATS: [Format; 3] = [Format::Lines, Format::Http, Format::Jsonl];

/// Per format: a tokenizer, a plain reader and a reader splitting sessions.
fn tools() -> &'static Vec<(Format, Tokenizer, Reader, Reader)> {
    static T: OnceLock<Vec<(Format, Tokenizer, Reader, Reader)>> = OnceLock::new();
    T.get_or_init(|| {
        let rules = RuleSet::builtin();
        FORMATS
            .iter()
            .map(|&format| {
                let plain = ReadOptions { format: Some(format), ..ReadOptions::default() };
                let split = ReadOptions {
                    format: Some(format),
                    session_key: Some("(?-u)^(\\w+) ".into()),
                    reply_pattern: Some("^OK".into()),
                    idle_gap_ms: Some(1000),
                };
                (
                    format,
                    Tokenizer::new(format, &rules, "builtin").expect("built-in rules compile"),
                    Reader::new(&plain).expect("valid options"),
                    Reader::new(&split).expect("valid options"),
                )
            })
            .collect()
    })
}

fuzz_target!(|data: &[u8]| {
    let mut out = Tokenized::default();
    for (format, tokenizer, plain, split) in tools() {
        let splitting = data.len() % 2 == 0;
        let reader = if splitting { split } else { plain };
        let source = Source { path: "fuzz".into(), bytes: data.to_vec() };
        let Ok(corpus) = reader.read(vec![source], "fuzz") else { continue };
        for session in &corpus.sessions {
            let mut last_end = 0;
            for frame in &session.frames {
                assert!(frame.range.start >= last_end, "frames of a session in input order");
                last_end = frame.range.end;
                let bytes = corpus.bytes(session, frame);
                tokenizer.tokenize(bytes, &mut out);
                if *format == Format::Lines {
                    let back: Vec<u8> = out.pieces.iter().flat_map(|p| out.bytes(p).to_vec()).collect();
                    assert_eq!(back, bytes, "line tokenization is lossless");
                }
            }
        }
        let (messages, _) = plain.messages(data);
        assert!(messages.iter().map(|m| m.0.len()).sum::<usize>() <= data.len());
    }
});
