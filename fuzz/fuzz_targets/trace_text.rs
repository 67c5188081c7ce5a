//! Fuzz target: the readable trace format. Parsing never panics, and whatever parses writes
//! back to a text that parses to the same trace.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::trace::Trace;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    if let Ok(traces) = Trace::parse_all(text) {
        for t in traces {
            let again = Trace::parse(&t.to_text()).expect("written traces parse");
            assert_eq!(again, t);
        }
    }
});
