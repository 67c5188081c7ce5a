//! Fuzz target: the lamp hub session harness of `lamp_hub_stream` with the model-driven custom
//! mutator (lamp-control model; arm d of the coverage figure). A crash file is the raw session:
//! `tracewalk shrink CRASH --exec lamp_hub` reads it directly.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::{fuzz_mutator, fuzz_target};
use tracewalk::feed::InputMutator;

#[path = "../../examples/lamp_hub.rs"]
#[allow(dead_code)]
mod lamp_hub;

fn mutator() -> &'static InputMutator<'static> {
    static M: OnceLock<InputMutator<'static>> = OnceLock::new();
    M.get_or_init(|| InputMutator::new(tracewalk_fuzz::lamp_model()).expect("model read options compile"))
}

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::run_demo(|| lamp_hub::serve(data, std::io::sink()));
});

fuzz_mutator!(|data: &mut [u8], size: usize, max_size: usize, seed: u32| {
    tracewalk_fuzz::mutate(mutator(), data, size, max_size, seed)
});
