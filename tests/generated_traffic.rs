//! Plausible traffic generated from models of the bundled corpora, checked against published
//! standards and general-purpose reference parsers.

mod common;

use tracewalk::generate::{GenOptions, Generator};

const TRACES: u64 = 300;

fn messages(model: &tracewalk::model::Compiled, seed: u64) -> Vec<Vec<Vec<u8>>> {
    let mut g = Generator::new(model, GenOptions::default()).unwrap();
    (0..TRACES).map(|i| g.trace(seed, i).messages.into_iter().map(|m| m.bytes).collect()).collect()
}

/// True when `msg` is exactly one complete HTTP/1.1 request per the httparse crate, with a body
/// framed as its header fields say (RFC 9112 §6.3: Content-Length, or chunked per §7.1).
fn is_wellformed_request(msg: &[u8]) -> bool {
    let mut headers = [httparse::EMPTY_HEADER; 64];
    let mut req = httparse::Request::new(&mut headers);
    let Ok(httparse::Status::Complete(head)) = req.parse(msg) else { return false };
    let body = &msg[head..];
    let field = |name: &str| req.headers.iter().find(|h| h.name.eq_ignore_ascii_case(name)).map(|h| h.value);
    if field("transfer-encoding").is_some_and(|v| v.eq_ignore_ascii_case(b"chunked")) {
        let mut pos = 0;
        loop {
            let Ok(httparse::Status::Complete((used, size))) = httparse::parse_chunk_size(&body[pos..])
            else {
                return false;
            };
            pos += used;
            if size == 0 {
                return &body[pos..] == b"\r\n";
            }
            pos += size as usize;
            if body.get(pos..pos + 2) != Some(b"\r\n") {
                return false;
            }
            pos += 2;
        }
    }
    match field("content-length") {
        Some(v) => std::str::from_utf8(v).ok().and_then(|t| t.parse::<usize>().ok()) == Some(body.len()),
        None => body.is_empty(),
    }
}

// Reference parser: the httparse crate (crates.io), framing rules of RFC 9112.
#[test]
fn plausible_http_requests_parse_with_httparse() {
    let model = common::learn_corpus("shop-api", 2);
    let all: Vec<Vec<u8>> = messages(&model, 1).into_iter().flatten().collect();
    let good = all.iter().filter(|m| is_wellformed_request(m)).count();
    let share = good as f64 / all.len() as f64;
    assert!(all.len() > 1000, "{} messages", all.len());
    assert!(share >= 0.99, "{good} of {} requests well-formed ({share:.4})", all.len());
}

// Reference parser: serde_json (crates.io), which implements RFC 8259.
#[test]
fn plausible_json_lines_parse_with_serde_json() {
    let model = common::learn_corpus("events", 2);
    let all: Vec<Vec<u8>> = messages(&model, 2).into_iter().flatten().collect();
    let good = all
        .iter()
        .filter(|m| {
            m.ends_with(b"\n") && serde_json::from_slice::<serde_json::Value>(&m[..m.len() - 1]).is_ok()
        })
        .count();
    let share = good as f64 / all.len() as f64;
    assert!(all.len() > 1000);
    assert!(share >= 0.99, "{good} of {} lines are JSON texts ({share:.4})", all.len());
}

/// Checks the client side of an SMTP session against the command order of RFC 5321 §3.3 and
/// §4.1.4: EHLO or HELO first; a mail transaction is MAIL, then one or more RCPT, then DATA, the
/// content and a line holding only "."; RSET ends a transaction; NOOP, VRFY and HELP may appear
/// outside the content; QUIT is the last command. Lines must end with CRLF (§2.3.8). Seeing only
/// the client side, a MAIL directly after a MAIL is allowed: a rejected MAIL (e.g. 552 for a
/// SIZE too large, §4.5.3.1.10) opens no transaction, and replies are not part of the traffic.
fn follows_smtp_order(lines: &[Vec<u8>]) -> bool {
    #[derive(PartialEq)]
    enum State {
        Start,
        Ready,
        Mail,
        Rcpt,
        Data,
        Quit,
    }
    let mut state = State::Start;
    for line in lines {
        let Some(text) = line.strip_suffix(b"\r\n") else { return false };
        if state == State::Data {
            if text == b"." {
                state = State::Ready;
            }
            continue;
        }
        let verb = String::from_utf8_lossy(text.split(|&b| b == b' ' || b == b':').next().unwrap_or(b""))
            .to_ascii_uppercase();
        state = match (state, verb.as_str()) {
            (State::Quit, _) => return false,
            (_, "EHLO" | "HELO") => State::Ready,
            (State::Start, _) => return false,
            (_, "QUIT") => State::Quit,
            (s, "NOOP" | "VRFY" | "HELP") => s,
            (_, "RSET") => State::Ready,
            (State::Ready | State::Mail, "MAIL") => State::Mail,
            (State::Mail | State::Rcpt, "RCPT") => State::Rcpt,
            (State::Rcpt, "DATA") => State::Data,
            _ => return false,
        };
    }
    state == State::Quit
}

// Published standard: RFC 5321 (SMTP), command order; domains in the corpus are RFC 2606 names.
#[test]
fn plausible_smtp_dialogues_follow_rfc5321_command_order() {
    let model = common::learn_corpus("mail", 3);
    let sessions = messages(&model, 3);
    let good = sessions.iter().filter(|s| follows_smtp_order(s)).count();
    let share = good as f64 / sessions.len() as f64;
    assert!(share >= 0.99, "{good} of {} sessions follow RFC 5321 order ({share:.4})", sessions.len());
    // The checker itself rejects what it must.
    let lines = |v: &[&str]| v.iter().map(|l| format!("{l}\r\n").into_bytes()).collect::<Vec<_>>();
    assert!(follows_smtp_order(&lines(&[
        "EHLO a.example",
        "MAIL FROM:<x@a.example>",
        "RCPT TO:<y@b.example>",
        "DATA",
        "Hi",
        ".",
        "QUIT"
    ])));
    assert!(!follows_smtp_order(&lines(&["MAIL FROM:<x@a.example>", "QUIT"])));
    assert!(!follows_smtp_order(&lines(&["HELO a.example", "RCPT TO:<y@b.example>", "QUIT"])));
    assert!(!follows_smtp_order(&lines(&["HELO a.example", "QUIT", "NOOP"])));
}

// RFC 2606 reserves example.com/.net/.org and the .example, .test and .invalid TLDs; generated
// mail traffic must only ever name such domains (the corpus does, and slot values come from it).
#[test]
fn generated_mail_addresses_use_reserved_domains_only() {
    let model = common::learn_corpus("mail", 2);
    let re = regex::bytes::Regex::new(r"@([A-Za-z0-9.-]+)").unwrap();
    for session in messages(&model, 4) {
        for line in session {
            for cap in re.captures_iter(&line) {
                let domain = String::from_utf8_lossy(&cap[1]).to_ascii_lowercase();
                let reserved = ["example.com", "example.net", "example.org"]
                    .iter()
                    .any(|d| domain == *d || domain.ends_with(&format!(".{d}")))
                    || [".example", ".test", ".invalid"].iter().any(|t| domain.ends_with(t));
                assert!(reserved, "non-reserved domain {domain} in {}", String::from_utf8_lossy(&line));
            }
        }
    }
}
