//! Fuzz target over the demo lamp hub of examples/lamp_hub.rs, run in-process: the input is one
//! client session (command lines) as the hub would read it on stdin; a planted bug's panic is
//! the crash. The engine's own byte mutations drive it (arms a–c of the coverage figure).
#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../../examples/lamp_hub.rs"]
#[allow(dead_code)]
mod lamp_hub;

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::run_demo(|| lamp_hub::serve(data, std::io::sink()));
});
