//! Fuzz target: slot rules files. Parsing and compiling never panic; compiled rules tokenize
//! a fixed sample line without panicking.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::read::Format;
use tracewalk::token::{RuleSet, Tokenized, Tokenizer};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    let Ok(rules) = RuleSet::from_yaml(text, "fuzz") else { return };
    let tokenizer = Tokenizer::new(Format::Lines, &rules, "fuzz").expect("from_yaml compiled these rules");
    let mut out = Tokenized::default();
    tokenizer.tokenize(b"SET zone=4 level=70 at 2026-11-30T08:15:02Z from 192.0.2.7 \"x\"\r\n", &mut out);
});
