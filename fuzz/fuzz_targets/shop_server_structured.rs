//! Fuzz target: the demo shop server's connection handling (in-process, as
//! `shop_server_modeled`) fed requests decoded from the input as a walk of the shop model.
//! `tracewalk decode shop.model CRASH` (model of `tracewalk learn corpora/shop-api --order 2,3`)
//! renders the connection a crash file ran.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::feed::{DecodeOptions, decode_bytes};

#[path = "../../examples/shop_server.rs"]
#[allow(dead_code)]
mod shop_server;

fuzz_target!(|data: &[u8]| {
    let connection = decode_bytes(tracewalk_fuzz::model(), data, &DecodeOptions::default());
    tracewalk_fuzz::run_demo(|| shop_server::serve_connection(connection.as_slice(), std::io::sink()));
});
