//! Fuzz target: the lamp hub fed a session decoded from the input as a walk of the lamp-control
//! model (structured decoding: every input is a walk, byte mutations change choices). A crash
//! file holds choices, not the session: `tracewalk decode lamp.model CRASH` (with the model of
//! `tracewalk learn corpora/lamp-control --order 2,3`) renders the session this target ran.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::feed::{DecodeOptions, decode_bytes};

#[path = "../../examples/lamp_hub.rs"]
#[allow(dead_code)]
mod lamp_hub;

fuzz_target!(|data: &[u8]| {
    let session = decode_bytes(tracewalk_fuzz::lamp_model(), data, &DecodeOptions::default());
    tracewalk_fuzz::run_demo(|| lamp_hub::serve(session.as_slice(), std::io::sink()));
});
