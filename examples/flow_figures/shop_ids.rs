//! Id references in sessions of the bundled shop-api corpus: the definition behind the first
//! value-flow figure, applied identically to the corpus and to generated sessions.
//!
//! - An **id reference** is a cart or order id a request names: the number after `/v1/carts/`
//!   or `/v1/orders/` in the request target, or the value of `"cart_id"` in a request's JSON
//!   body (de-chunked when the body is chunked).
//! - An id is **introduced** by a reply with status 201 to `POST /v1/carts` (its `"cart_id"`) or
//!   to `POST /v1/orders` (its `"order_id"`). A reply belongs to the request before it.
//! - A reference **points to an introduced id** when an earlier reply of the same session
//!   introduced that id, of the same kind (cart or order).
//! - A session **passes** when it has at least one id reference and all of them point to
//!   introduced ids. Sessions without any reference are counted apart, not as passing.

use std::collections::HashSet;

use tracewalk::generate::{GenOptions, Generator};
use tracewalk::model::Compiled;
use tracewalk::read::{Corpus, Role};

/// One message of a session: whether it is a reply, and its bytes.
pub type Message<'a> = (bool, &'a [u8]);

/// What one session holds.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SessionIds {
    pub references: usize,
    /// References pointing to an id introduced earlier in the session.
    pub introduced: usize,
    /// Positions of the messages holding a reference to an id not introduced.
    pub failing: Vec<usize>,
    /// References to an id not introduced where no id of that kind was introduced before.
    pub none_introduced: usize,
}

impl SessionIds {
    pub fn passes(&self) -> bool {
        self.references > 0 && self.references == self.introduced
    }
}

/// Totals over sessions.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Tally {
    pub sessions: usize,
    pub with_references: usize,
    pub passing: usize,
    pub references: usize,
    pub introduced: usize,
    /// Sessions failing only on references made before any id of their kind was introduced.
    pub failing_none_introduced: usize,
}

impl Tally {
    pub fn add(&mut self, s: &SessionIds) {
        self.sessions += 1;
        self.with_references += usize::from(s.references > 0);
        self.passing += usize::from(s.passes());
        self.references += s.references;
        self.introduced += s.introduced;
        self.failing_none_introduced +=
            usize::from(!s.failing.is_empty() && s.none_introduced == s.failing.len());
    }

    /// Passing sessions among those with at least one reference.
    pub fn fraction(&self) -> f64 {
        self.passing as f64 / self.with_references.max(1) as f64
    }
}

#[derive(Clone, Copy, PartialEq, Eq, Hash)]
enum Kind {
    Cart,
    Order,
}

/// (head, body) of an HTTP message; the body de-chunked when its head says chunked.
fn split(message: &[u8]) -> (&[u8], Vec<u8>) {
    let Some(at) = message.windows(4).position(|w| w == b"\r\n\r\n") else { return (message, Vec::new()) };
    let (head, body) = (&message[..at], &message[at + 4..]);
    let chunked = head.split(|&b| b == b'\n').any(|l| {
        let l = String::from_utf8_lossy(l).to_ascii_lowercase();
        l.starts_with("transfer-encoding:") && l.trim_end().ends_with("chunked")
    });
    let body = if chunked { tracewalk::read::dechunk(body).unwrap_or_default() } else { body.to_vec() };
    (head, body)
}

fn json_number(body: &[u8], key: &str) -> Option<String> {
    let v: serde_json::Value = serde_json::from_slice(body).ok()?;
    v.get(key).filter(|n| n.is_number()).map(|n| n.to_string())
}

/// The id references of a request, with their kinds.
fn references(request: &[u8]) -> (String, Vec<(Kind, String)>) {
    let (head, body) = split(request);
    let line = head.split(|&b| b == b'\r' || b == b'\n').next().unwrap_or(b"");
    let line = String::from_utf8_lossy(line).into_owned();
    let mut words = line.split(' ');
    let method = words.next().unwrap_or("").to_string();
    let target = words.next().unwrap_or("").to_string();
    let mut refs = Vec::new();
    for (prefix, kind) in [("/v1/carts/", Kind::Cart), ("/v1/orders/", Kind::Order)] {
        if let Some(rest) = target.strip_prefix(prefix) {
            let digits: String = rest.chars().take_while(|c| c.is_ascii_digit()).collect();
            if !digits.is_empty() {
                refs.push((kind, digits));
            }
        }
    }
    if let Some(id) = json_number(&body, "cart_id") {
        refs.push((Kind::Cart, id));
    }
    (format!("{method} {}", target.split('?').next().unwrap_or("")), refs)
}

/// Checks one session (messages in the order they travelled).
pub fn check(messages: &[Message<'_>]) -> SessionIds {
    let mut introduced: HashSet<(Kind, String)> = HashSet::new();
    let mut last_request = String::new();
    let mut out = SessionIds::default();
    for (at, &(is_reply, bytes)) in messages.iter().enumerate() {
        if !is_reply {
            let (call, refs) = references(bytes);
            for r in refs {
                out.references += 1;
                if introduced.contains(&r) {
                    out.introduced += 1;
                } else {
                    out.failing.push(at);
                    out.none_introduced += usize::from(!introduced.iter().any(|(k, _)| *k == r.0));
                }
            }
            last_request = call;
            continue;
        }
        if !bytes.starts_with(b"HTTP/1.1 201 ") {
            continue;
        }
        let (_, body) = split(bytes);
        let issued = match last_request.as_str() {
            "POST /v1/carts" => json_number(&body, "cart_id").map(|id| (Kind::Cart, id)),
            "POST /v1/orders" => json_number(&body, "order_id").map(|id| (Kind::Order, id)),
            _ => None,
        };
        introduced.extend(issued);
    }
    out
}

/// Figure 1 on the corpus itself.
pub fn corpus_tally(corpus: &Corpus) -> Tally {
    let mut tally = Tally::default();
    for s in &corpus.sessions {
        let messages: Vec<Message<'_>> =
            s.frames.iter().map(|f| (f.role == Role::Reply, corpus.bytes(s, f))).collect();
        tally.add(&check(&messages));
    }
    tally
}

/// Figure 1 on `n` generated sessions (expected replies included, as they introduce the ids).
pub fn generated_tally(model: &Compiled, flow: bool, n: u64, seed: u64) -> Tally {
    let options = GenOptions { flow, replies: true, ..GenOptions::default() };
    let mut generator = Generator::new(model, options).expect("options");
    let mut tally = Tally::default();
    for i in 0..n {
        let trace = generator.trace(seed, i);
        let messages: Vec<Message<'_>> =
            trace.messages.iter().map(|m| (m.is_reply(), m.bytes.as_slice())).collect();
        tally.add(&check(&messages));
    }
    tally
}
