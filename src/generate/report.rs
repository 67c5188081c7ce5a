//! Measuring a batch of traces: the trade-off between plausibility and rarity.
//!
//! Everything is measured on the wire bytes of the traces, the way a target and
//! `tracewalk score` see them, so the same report applies to generated, mutated or captured
//! traffic:
//!
//! - **well-formed**: the message passes the format's reference parser. HTTP: `httparse`
//!   parses a complete request head, and the body is exactly what its framing says (Content-Length
//!   bytes, a complete chunked body, or nothing). JSON lines: one line (no LF before the
//!   terminator) whose text `serde_json` parses as one JSON value. Lines: there is no reference
//!   parser for an arbitrary line protocol, so the check is the model's own framing only: the
//!   message is one line (no LF except a final one). It catches CR/LF injection, not much else.
//! - **new templates**: the message's tokens are unknown to the model or form a template it
//!   never saw in training (templates seen only rarely, which the session chain folds into its
//!   novel-message symbol, are not new).
//! - **transitions**: learned session transitions (see [`super::transitions`]) the traces take,
//!   out of all learned ones; a trace cut at the message limit takes no end transition. A
//!   message maps to its template's session symbol, or to the novel-message symbol.
//! - **surprise**: per message, as `tracewalk score` computes it.
//! - forced rare steps and hostile values, counted from the trace marks.

use std::fmt;

use super::transitions::Transitions;
use crate::model::Compiled;
use crate::read::Format;
use crate::score::Scorer;
use crate::symbol::NOVEL;
use crate::token::Tokenized;
use crate::trace::Trace;

/// What a batch measured (see the module documentation).
#[derive(Debug, Clone, PartialEq)]
pub struct Report {
    pub traces: usize,
    pub messages: usize,
    pub well_formed: usize,
    pub new_templates: usize,
    pub transitions_learned: usize,
    pub transitions_covered: usize,
    /// Messages plus one end step per trace that ended.
    pub steps: usize,
    pub surprise_sum: f64,
    pub surprise_max: f64,
    pub rare_steps: usize,
    pub traces_with_rare: usize,
    pub hostile_values: usize,
    /// How well-formedness was decided.
    pub check: &'static str,
}

impl Report {
    pub fn well_formed_fraction(&self) -> f64 {
        ratio(self.well_formed, self.messages)
    }

    pub fn new_template_fraction(&self) -> f64 {
        ratio(self.new_templates, self.messages)
    }

    pub fn coverage(&self) -> f64 {
        ratio(self.transitions_covered, self.transitions_learned)
    }

    pub fn mean_surprise(&self) -> f64 {
        if self.messages == 0 { 0.0 } else { self.surprise_sum / self.messages as f64 }
    }

    /// Measures a batch at once.
    pub fn measure<'a>(model: &Compiled, traces: impl IntoIterator<Item = &'a Trace>) -> Report {
        let mut b = ReportBuilder::new(model);
        for t in traces {
            b.add(t);
        }
        b.finish()
    }
}

fn ratio(a: usize, b: usize) -> f64 {
    if b == 0 { 0.0 } else { a as f64 / b as f64 }
}

/// Describes the well-formedness check of a format.
pub fn check_name(format: Format) -> &'static str {
    match format {
        Format::Http => "httparse request head, body exactly as framed",
        Format::Jsonl => "serde_json parses the line as one JSON value",
        Format::Lines => "model's own framing only: one line (no reference parser)",
    }
}

/// Whether one message is well-formed for the format (see the module documentation).
pub fn well_formed(format: Format, message: &[u8]) -> bool {
    match format {
        Format::Http => http_well_formed(message),
        Format::Jsonl => {
            let line = crate::read::trim_line_end(message);
            !line.contains(&b'\n') && serde_json::from_slice::<serde_json::Value>(line).is_ok()
        }
        Format::Lines => crate::read::trim_line_end(message).iter().all(|&b| b != b'\n'),
    }
}

fn http_well_formed(message: &[u8]) -> bool {
    use crate::read::{BodyFraming, chunked_len, http::body_framing};
    let mut headers = [httparse::EMPTY_HEADER; 128];
    let mut request = httparse::Request::new(&mut headers);
    let head = match request.parse(message) {
        Ok(httparse::Status::Complete(n)) => n,
        _ => return false,
    };
    let body = &message[head..];
    match body_framing(request.headers) {
        Ok(BodyFraming::None) => body.is_empty(),
        Ok(BodyFraming::Length(n)) => body.len() == n,
        Ok(BodyFraming::Chunked) => matches!(chunked_len(body), Ok(Some(n)) if n == body.len()),
        Err(_) => false,
    }
}

/// Builds a [`Report`] one trace at a time (bounded memory).
#[derive(Debug)]
pub struct ReportBuilder<'m> {
    model: &'m Compiled,
    graph: Transitions,
    covered: Vec<bool>,
    scorer: Scorer<'m>,
    scratch: Tokenized,
    report: Report,
}

impl<'m> ReportBuilder<'m> {
    pub fn new(model: &'m Compiled) -> ReportBuilder<'m> {
        let graph = Transitions::of(&model.session);
        let format = model.tokenizer.format();
        let report = Report {
            traces: 0,
            messages: 0,
            well_formed: 0,
            new_templates: 0,
            transitions_learned: graph.len(),
            transitions_covered: 0,
            steps: 0,
            surprise_sum: 0.0,
            surprise_max: 0.0,
            rare_steps: 0,
            traces_with_rare: 0,
            hostile_values: 0,
            check: check_name(format),
        };
        ReportBuilder {
            model,
            covered: vec![false; graph.len()],
            graph,
            scorer: Scorer::new(model),
            scratch: Tokenized::default(),
            report,
        }
    }

    /// Adds one trace (a session). A trace whose header says it was cut takes no end step.
    pub fn add(&mut self, trace: &Trace) {
        let format = self.model.tokenizer.format();
        let r = &mut self.report;
        r.traces += 1;
        self.scorer.reset();
        let mut templates = Vec::with_capacity(trace.messages.len());
        let mut rare = 0;
        for m in &trace.messages {
            r.messages += 1;
            r.well_formed += usize::from(well_formed(format, &m.bytes));
            let (bits, _) = self.scorer.next(&m.bytes);
            r.surprise_sum += bits;
            r.surprise_max = r.surprise_max.max(bits);
            let symbols: Option<Vec<u32>> =
                self.model.symbols_of(&m.bytes, &mut self.scratch).into_iter().collect();
            let symbols = symbols.as_deref();
            r.new_templates += usize::from(symbols.and_then(|s| self.model.learned_template(s)).is_none());
            templates.push(symbols.and_then(|s| self.model.template_symbol(s)).unwrap_or(NOVEL));
            rare += m.marks.iter().filter(|k| *k == "rare").count();
            r.hostile_values += m.marks.iter().filter(|k| k.starts_with("hostile:")).count();
        }
        r.rare_steps += rare;
        r.traces_with_rare += usize::from(rare > 0);
        let ended = trace.get("cut").is_none();
        r.steps += templates.len() + usize::from(ended);
        for e in self.graph.taken(&templates, ended) {
            if !self.covered[e] {
                self.covered[e] = true;
                r.transitions_covered += 1;
            }
        }
    }

    /// The report so far.
    pub fn report(&self) -> &Report {
        &self.report
    }

    pub fn finish(self) -> Report {
        self.report
    }
}

impl fmt::Display for Report {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let pct = |x: f64| format!("{:.2}%", 100.0 * x);
        writeln!(f, "batch          {} traces, {} messages", self.traces, self.messages)?;
        writeln!(
            f,
            "well-formed    {} ({} of {}; {})",
            pct(self.well_formed_fraction()),
            self.well_formed,
            self.messages,
            self.check
        )?;
        writeln!(
            f,
            "new templates  {} ({} of {} messages)",
            pct(self.new_template_fraction()),
            self.new_templates,
            self.messages
        )?;
        writeln!(
            f,
            "transitions    {} of {} learned covered ({})",
            self.transitions_covered,
            self.transitions_learned,
            pct(self.coverage())
        )?;
        writeln!(
            f,
            "steps          {} (messages + one end per ended trace); lower bound for full coverage {} ({:.2}×)",
            self.steps,
            self.transitions_learned,
            ratio(self.steps, self.transitions_learned)
        )?;
        writeln!(
            f,
            "surprise       mean {:.2} bits, max {:.2} bits per message",
            self.mean_surprise(),
            self.surprise_max
        )?;
        write!(
            f,
            "rare           {} forced steps in {} of {} traces; {} hostile values",
            self.rare_steps, self.traces_with_rare, self.traces, self.hostile_values
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Request syntax per RFC 9112 §3 and §6.3, checked by httparse.
    #[test]
    fn http_check_needs_a_complete_head_and_an_exactly_framed_body() {
        let ok = b"POST /a HTTP/1.1\r\nHost: x.example\r\nContent-Length: 3\r\n\r\nabc";
        assert!(well_formed(Format::Http, ok));
        assert!(!well_formed(Format::Http, b"POST /a HTTP/1.1\r\nHost: x\r\nContent-Length: 4\r\n\r\nabc"));
        assert!(!well_formed(Format::Http, b"POST /a HTTP/1.1\r\nHost: x\r\nContent-Length: 2\r\n\r\nabc"));
        assert!(!well_formed(Format::Http, b"GET /a HTTP/1.1\r\nHost: x\x00y\r\n\r\n"));
        assert!(!well_formed(Format::Http, b"GET /a HTTP/1.1\r\nHost: x\r\n"));
        assert!(well_formed(
            Format::Http,
            b"PUT /b HTTP/1.1\r\nTransfer-Encoding: chunked\r\n\r\n3\r\nabc\r\n0\r\n\r\n"
        ));
        assert!(!well_formed(Format::Http, b"GET /a HTTP/1.1\r\nHost: x\r\n\r\ntrailing"));
    }

    // JSON text per RFC 8259, checked by serde_json.
    #[test]
    fn json_lines_check_parses_one_line() {
        assert!(well_formed(Format::Jsonl, b"{\"a\":1}\n"));
        assert!(!well_formed(Format::Jsonl, b"{\"a\":\"x\ny\"}\n"));
        assert!(!well_formed(Format::Jsonl, b"{\"a\":\"\xff\"}\n"));
        assert!(!well_formed(Format::Jsonl, b"{\"a\":1\n"));
        assert!(well_formed(Format::Lines, b"SET zone=1\r\n"));
        assert!(!well_formed(Format::Lines, b"SET zone=1\nX\n"));
    }
}
