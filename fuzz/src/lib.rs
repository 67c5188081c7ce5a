//! Shared pieces of the fuzz targets: the embedded models and the HTTP request-stream harness
//! around the third-party `httparse` crate.

use std::sync::OnceLock;

use tracewalk::feed::{InputMutator, Mutated};
use tracewalk::model::Compiled;

/// The models learned at build time from corpora/shop-api and corpora/lamp-control (build.rs).
static SHOP: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/shop.model"));
static LAMP: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/lamp.model"));

/// The model of the HTTP targets (httparse_*, shop_server_*): the file named by
/// TRACEWALK_FUZZ_MODEL, else the embedded shop model.
pub fn model() -> &'static Compiled {
    static MODEL: OnceLock<Compiled> = OnceLock::new();
    MODEL.get_or_init(|| load(SHOP, "embedded shop model"))
}

/// The model of the lamp hub targets (lamp_hub_*): the file named by TRACEWALK_FUZZ_MODEL, else
/// the embedded lamp-control model.
pub fn lamp_model() -> &'static Compiled {
    static MODEL: OnceLock<Compiled> = OnceLock::new();
    MODEL.get_or_init(|| load(LAMP, "embedded lamp model"))
}

fn load(embedded: &'static [u8], what: &str) -> Compiled {
    let (model, hash) = match std::env::var_os("TRACEWALK_FUZZ_MODEL") {
        Some(path) => tracewalk::model::load_with_hash(std::path::Path::new(&path)),
        None => tracewalk::model::from_bytes_with_hash(embedded, what),
    }
    .unwrap_or_else(|e| panic!("fuzz model: {e}"));
    Compiled::new(model, hash).unwrap_or_else(|e| panic!("fuzz model: {e}"))
}

/// Parses `data` as a stream of HTTP/1.1 requests with httparse, following each body's framing
/// (Content-Length or chunked), until the stream ends or stops parsing. Returns the number of
/// complete requests.
pub fn parse_request_stream(mut data: &[u8]) -> usize {
    let mut complete = 0;
    while !data.is_empty() {
        let mut headers = [httparse::EMPTY_HEADER; 32];
        let mut req = httparse::Request::new(&mut headers);
        let head = match req.parse(data) {
            Ok(httparse::Status::Complete(n)) => n,
            _ => return complete,
        };
        let mut body = &data[head..];
        let chunked = req.headers.iter().any(|h| {
            h.name.eq_ignore_ascii_case("transfer-encoding") && h.value.eq_ignore_ascii_case(b"chunked")
        });
        let length = req
            .headers
            .iter()
            .find(|h| h.name.eq_ignore_ascii_case("content-length"))
            .and_then(|h| std::str::from_utf8(h.value).ok()?.trim().parse::<usize>().ok());
        if chunked {
            loop {
                match httparse::parse_chunk_size(body) {
                    Ok(httparse::Status::Complete((used, 0))) => {
                        body = &body[used..];
                        match body.strip_prefix(b"\r\n") {
                            Some(rest) => body = rest,
                            None => return complete,
                        }
                        break;
                    }
                    Ok(httparse::Status::Complete((used, size))) => {
                        let end = used.saturating_add(size as usize).saturating_add(2);
                        if end > body.len() {
                            return complete;
                        }
                        body = &body[end..];
                    }
                    _ => return complete,
                }
            }
        } else if let Some(n) = length {
            if n > body.len() {
                return complete;
            }
            body = &body[n..];
        }
        complete += 1;
        data = body;
    }
    complete
}

/// The custom mutator of the `*_modeled` targets: three inputs in four are read back into
/// messages and changed by the model-driven operators of `mutator`; the fourth, and any input
/// the model cannot read, gets libFuzzer's own byte mutation, so the engine keeps exploring
/// around the learned paths as well as along them.
pub fn mutate(mutator: &InputMutator<'_>, data: &mut [u8], size: usize, max_size: usize, seed: u32) -> usize {
    if seed % 4 != 0
        && let Mutated::Modeled(n) = mutator.mutate(data, size, max_size, seed)
    {
        return n;
    }
    libfuzzer_sys::fuzzer_mutate(data, size, max_size)
}

/// Runs one input through a demo service. A panic (a planted bug) is a crash the engine stops
/// at, unless TRACEWALK_FUZZ_SURVIVE_PANICS is set: then it counts as an ordinary run, so the
/// coverage figure can compare runs of equal length (benches/fuzz_demo.sh).
pub fn run_demo(f: impl FnOnce() + std::panic::UnwindSafe) {
    static SURVIVE: OnceLock<bool> = OnceLock::new();
    let survive = *SURVIVE.get_or_init(|| {
        let on = std::env::var_os("TRACEWALK_FUZZ_SURVIVE_PANICS").is_some();
        if on {
            // Replaces libfuzzer-sys's hook, which aborts on any panic.
            std::panic::set_hook(Box::new(|_| {}));
        }
        on
    });
    if survive {
        let _ = std::panic::catch_unwind(f);
    } else {
        f();
    }
}
