//! Fuzz target over the demo shop server of examples/shop_server.rs, run in-process: the input
//! is the byte stream of one connection (HTTP/1.1 requests), served with the server's own
//! request reader and handler; a planted bug's panic is the crash. The engine's own byte
//! mutations drive it (arms a–c of the demo coverage figure).
#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../../examples/shop_server.rs"]
#[allow(dead_code)]
mod shop_server;

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::run_demo(|| shop_server::serve_connection(data, std::io::sink()));
});
