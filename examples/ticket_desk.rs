//! A simulated repair-ticket desk of an invented bicycle workshop (the line protocol of
//! `corpora/ticket-desk`), reading one client session on stdin and answering on stdout, one
//! reply line (or several) per command. A demo target for value flow: small, std only, and
//! with one planted bug that needs a ticket id the desk issued carried across three messages.
//!
//! Ticket ids are six-digit numbers the desk draws at random for each ticket, so a client
//! can only name a ticket by reusing the id a reply gave it.
//!
//! **Planted bug.** `ASSIGN` a ticket to a mechanic, then add a `PART` to that ticket, then
//! `CLOSE` it. Assigning sizes the mechanic's fitting sheet to the parts known at that moment;
//! closing prices every part of the ticket against the sheet, and a part added after the
//! assignment has no row on it: the desk panics (exit code 101). Minimal session: `OPEN`,
//! then `ASSIGN`, `PART` and `CLOSE` naming the ticket id of the `OPEN` reply (4 messages).
//! [`Desk::handle`] returns the crash as an error so that it can also be driven in process;
//! `main` turns it into the panic.
//!
//! Build: `cargo build --example ticket_desk`, or with `rustc --edition 2024 -O
//! examples/ticket_desk.rs` (std only). Run:
//! `printf 'HELLO counter-1\nOPEN bike=4411 issue=brakes\n' | target/debug/examples/ticket_desk`
//! (one session on stdin), or `ticket_desk --port 7410` (a loopback TCP server, one session per
//! connection). `TICKET_DESK_SEED=N` fixes the ids it issues (default: a per-process random
//! seed): a hunt needs it fixed, since its findings are replayed and shrunk as the bytes sent,
//! ids included (`tracewalk hunt desk.model --exec ticket_desk --per-message --env
//! TICKET_DESK_SEED=1`, or `--tcp 127.0.0.1:7410 --spawn 'ticket_desk --port {port}'`).

use std::collections::BTreeMap;
use std::io::{self, BufRead, Write};

/// One repair ticket.
#[derive(Debug, Clone)]
pub struct Ticket {
    pub issue: String,
    pub parts: Vec<String>,
    pub mechanic: Option<String>,
    /// Fitting minutes per part, one row per part known when the ticket was assigned.
    pub sheet: Vec<u32>,
    pub closed: bool,
}

/// The planted bug was reached; the text is what the desk panics with.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Crash(pub String);

/// The desk: tickets opened during this session, and the generator of ticket ids.
#[derive(Debug, Clone)]
pub struct Desk {
    pub tickets: BTreeMap<u32, Ticket>,
    state: u64,
}

/// Value of `key=` among the words of a command (quoted values may hold spaces).
fn arg(line: &str, key: &str) -> Option<String> {
    let at = line.find(&format!(" {key}="))? + key.len() + 2;
    let rest = &line[at..];
    if let Some(quoted) = rest.strip_prefix('"') {
        return quoted.find('"').map(|end| quoted[..end].to_string());
    }
    Some(rest.split(' ').next().unwrap_or("").to_string())
}

fn price_of(sku: &str) -> u32 {
    sku.bytes().fold(7u32, |h, b| h.wrapping_mul(31).wrapping_add(b as u32)) % 4000 + 300
}

impl Desk {
    /// A desk whose ticket ids come from `seed`.
    pub fn new(seed: u64) -> Desk {
        Desk { tickets: BTreeMap::new(), state: seed ^ 0x9E37_79B9_7F4A_7C15 }
    }

    /// A fresh six-digit ticket id (xorshift64*).
    fn draw_id(&mut self) -> u32 {
        loop {
            self.state ^= self.state >> 12;
            self.state ^= self.state << 25;
            self.state ^= self.state >> 27;
            let id = (self.state.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 33) as u32 % 900_000 + 100_000;
            if !self.tickets.contains_key(&id) {
                return id;
            }
        }
    }

    fn ticket(&mut self, line: &str) -> Result<(u32, &mut Ticket), String> {
        let text = arg(line, "ticket").ok_or("ERR 400 missing ticket")?;
        let id: u32 = text.parse().map_err(|_| format!("ERR 400 bad ticket={text}"))?;
        match self.tickets.get_mut(&id) {
            Some(t) if t.closed => Err(format!("ERR 409 ticket={id} closed")),
            Some(t) => Ok((id, t)),
            None => Err(format!("ERR 404 no ticket={id}")),
        }
    }

    /// The reply lines to one command line (without its line end), or the planted crash.
    pub fn handle(&mut self, line: &str) -> Result<Vec<String>, Crash> {
        let verb = line.split(' ').next().unwrap_or("");
        let reply = match verb {
            "HELLO" => Ok(vec!["OK HELLO desk=spoke-and-sprocket".to_string()]),
            "OPEN" => match (arg(line, "bike"), arg(line, "issue")) {
                (Some(bike), Some(issue)) if bike.parse::<u32>().is_ok() => {
                    let id = self.draw_id();
                    let t =
                        Ticket { issue, parts: Vec::new(), mechanic: None, sheet: Vec::new(), closed: false };
                    self.tickets.insert(id, t);
                    Ok(vec![format!("OK OPEN ticket={id}")])
                }
                _ => Err("ERR 400 OPEN needs bike= and issue=".to_string()),
            },
            "NOTE" => self.ticket(line).map(|(id, _)| vec![format!("OK NOTE ticket={id}")]),
            "PART" => match arg(line, "sku") {
                Some(sku) => self.ticket(line).map(|(id, t)| {
                    t.parts.push(sku);
                    vec![format!("OK PART ticket={id} parts={}", t.parts.len())]
                }),
                None => Err("ERR 400 PART needs sku=".to_string()),
            },
            "ASSIGN" => match arg(line, "mechanic") {
                Some(m) => self.ticket(line).map(|(id, t)| {
                    t.sheet = t.parts.iter().map(|p| 15 + price_of(p) % 45).collect();
                    t.mechanic = Some(m.clone());
                    vec![format!("OK ASSIGN ticket={id} mechanic={m}")]
                }),
                None => Err("ERR 400 ASSIGN needs mechanic=".to_string()),
            },
            "STATUS" => self.ticket(line).map(|(id, t)| {
                let state = if t.mechanic.is_some() { "assigned" } else { "open" };
                vec![format!("VAL ticket={id} state={state} parts={}", t.parts.len())]
            }),
            "CLOSE" => match self.ticket(line) {
                Ok((id, t)) => {
                    let mut total = 0u32;
                    if t.mechanic.is_some() {
                        for (i, part) in t.parts.iter().enumerate() {
                            // The planted bug: the sheet has no row for parts added after ASSIGN.
                            let Some(minutes) = t.sheet.get(i) else {
                                return Err(Crash(format!(
                                    "index out of bounds: the len is {} but the index is {i}",
                                    t.sheet.len()
                                )));
                            };
                            total += price_of(part) + minutes * 90;
                        }
                    } else {
                        total = t.parts.iter().map(|p| price_of(p)).sum();
                    }
                    t.closed = true;
                    Ok(vec![format!("OK CLOSE ticket={id} invoice={}.{:02}", total / 100, total % 100)])
                }
                Err(e) => Err(e),
            },
            "LIST" => {
                let mut lines: Vec<String> = self
                    .tickets
                    .iter()
                    .filter(|(_, t)| !t.closed)
                    .map(|(id, t)| format!("VAL ticket={id} issue={} parts={}", t.issue, t.parts.len()))
                    .collect();
                lines.push(format!("OK LIST count={}", lines.len()));
                Ok(lines)
            }
            "BYE" => Ok(vec!["OK BYE".to_string()]),
            "" => Err("ERR 400 empty command".to_string()),
            _ => Err(format!("ERR 400 unknown command {verb}")),
        };
        Ok(reply.unwrap_or_else(|e| vec![e]))
    }
}

/// Answers one client session: command lines from `input`, reply lines to `output`, until
/// `BYE` or the end of the input. The planted crash panics.
#[allow(dead_code)]
fn serve(desk: &mut Desk, input: impl BufRead, mut output: impl Write) {
    for line in input.lines() {
        let Ok(line) = line else { break };
        let line = line.trim_end_matches('\r');
        let replies = match desk.handle(line) {
            Ok(r) => r,
            Err(Crash(text)) => panic!("{text}"),
        };
        for reply in replies {
            if writeln!(output, "{reply}").and_then(|_| output.flush()).is_err() {
                return;
            }
        }
        if line == "BYE" {
            break;
        }
    }
}

#[allow(dead_code)]
fn main() {
    let seed = std::env::var("TICKET_DESK_SEED").ok().and_then(|s| s.parse().ok()).unwrap_or_else(|| {
        use std::hash::{BuildHasher, Hasher};
        let mut h = std::collections::hash_map::RandomState::new().build_hasher();
        h.write_u32(std::process::id());
        h.finish()
    });
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.as_slice() {
        [] => serve(&mut Desk::new(seed), io::stdin().lock(), io::stdout().lock()),
        [flag, port] if flag == "--port" => {
            let Ok(port) = port.parse::<u16>() else {
                eprintln!("ticket_desk: --port {port}: not a port number");
                std::process::exit(2);
            };
            let listener = match std::net::TcpListener::bind(("127.0.0.1", port)) {
                Ok(l) => l,
                Err(e) => {
                    eprintln!("ticket_desk: cannot listen on 127.0.0.1:{port}: {e}");
                    std::process::exit(2);
                }
            };
            // One connection at a time, each a session with a desk of its own (same seed, so
            // the same session gets the same ids); the planted crash takes the server down.
            for stream in listener.incoming() {
                let Ok(stream) = stream else { continue };
                let Ok(reader) = stream.try_clone() else { continue };
                // Whole lines per write: a line in two segments would wait on the peer's ack.
                serve(&mut Desk::new(seed), io::BufReader::new(reader), io::BufWriter::new(stream));
            }
        }
        _ => {
            eprintln!("usage: ticket_desk [--port PORT]   (without --port: one session on stdin)");
            std::process::exit(2);
        }
    }
}
