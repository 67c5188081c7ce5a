//! Fuzz target over the demo shop server of examples/shop_server.rs, run in-process: the input
//! is the byte stream of one connection (HTTP/1.1 requests), served with the server's own
//! request reader and handler; a planted bug's panic is the crash. Custom mutator: the shop
//! model's operators (as `httparse_modeled`). A crash file is the raw connection:
//! `tracewalk shrink CRASH --tcp … --spawn …` reads it directly.
#![no_main]

use std::sync::OnceLock;

use libfuzzer_sys::{fuzz_mutator, fuzz_target};
use tracewalk::feed::InputMutator;

#[path = "../../examples/shop_server.rs"]
#[allow(dead_code)]
mod shop_server;

fn mutator() -> &'static InputMutator<'static> {
    static M: OnceLock<InputMutator<'static>> = OnceLock::new();
    M.get_or_init(|| InputMutator::new(tracewalk_fuzz::model()).expect("model read options compile"))
}

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::run_demo(|| shop_server::serve_connection(data, std::io::sink()));
});

fuzz_mutator!(|data: &mut [u8], size: usize, max_size: usize, seed: u32| {
    tracewalk_fuzz::mutate(mutator(), data, size, max_size, seed)
});
