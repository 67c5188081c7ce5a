//! Fuzz target over a third-party parser no one here wrote: the `httparse` crate, fed a byte
//! stream of HTTP/1.1 requests. The engine's own byte mutations drive it (arms a–c of the
//! coverage figure: empty corpus, training samples, or a `tracewalk seed` corpus).
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    tracewalk_fuzz::parse_request_stream(data);
});
