//! Shared pieces of the fuzz targets: the embedded model and the HTTP request-stream harness
//! around the third-party `httparse` crate.

use std::sync::OnceLock;

use tracewalk::model::Compiled;

/// The model learned at build time from corpora/shop-api (see build.rs).
static EMBEDDED: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/shop.model"));

/// The model of the HTTP targets: the file named by TRACEWALK_FUZZ_MODEL, else the embedded one.
pub fn model() -> &'static Compiled {
    static MODEL: OnceLock<Compiled> = OnceLock::new();
    MODEL.get_or_init(|| {
        let (model, hash) = match std::env::var_os("TRACEWALK_FUZZ_MODEL") {
            Some(path) => tracewalk::model::load_with_hash(std::path::Path::new(&path)),
            None => tracewalk::model::from_bytes_with_hash(EMBEDDED, "embedded shop model"),
        }
        .unwrap_or_else(|e| panic!("fuzz model: {e}"));
        Compiled::new(model, hash).unwrap_or_else(|e| panic!("fuzz model: {e}"))
    })
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
