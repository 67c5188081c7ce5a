//! Fuzz target: `httparse` fed requests decoded from the input as a walk of the shop model
//! (structured decoding: every input is a walk, byte mutations change choices).
#![no_main]

use arbitrary::Unstructured;
use libfuzzer_sys::fuzz_target;
use tracewalk::feed::{DecodeOptions, decode};

fuzz_target!(|data: &[u8]| {
    let model = tracewalk_fuzz::model();
    let mut u = Unstructured::new(data);
    let walk = decode(model, &mut u, &DecodeOptions::default());
    let bytes: Vec<u8> = walk.steps.iter().flat_map(|s| s.render(model)).collect();
    tracewalk_fuzz::parse_request_stream(&bytes);
});
