//! Fuzz target: the same `httparse` request-stream harness as `httparse_stream`, with a custom
//! mutator driven by the shop model (arm d of the coverage figure): inputs are read back into
//! requests and changed by the model-driven operators; inputs the model cannot read get
//! libFuzzer's own byte mutation.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::{fuzz_mutator, fuzz_target};
use tracewalk::feed::InputMutator;

fn mutator() -> &'static InputMutator<'static> {
    static M: OnceLock<InputMutator<'static>> = OnceLock::new();
    M.get_or_init(|| InputMutator::new(tracewalk_fuzz::model()).expect("model read options compile"))
}

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::parse_request_stream(data);
});

fuzz_mutator!(|data: &mut [u8], size: usize, max_size: usize, seed: u32| {
    tracewalk_fuzz::mutate(mutator(), data, size, max_size, seed)
});
