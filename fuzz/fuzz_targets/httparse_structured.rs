//! Fuzz target: `httparse` fed requests decoded from the input as a walk of the shop model
//! (structured decoding: every input is a walk, byte mutations change choices).
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::feed::{DecodeOptions, decode_bytes};

fuzz_target!(|data: &[u8]| {
    let bytes = decode_bytes(tracewalk_fuzz::model(), data, &DecodeOptions::default());
    tracewalk_fuzz::parse_request_stream(&bytes);
});
