//! Scoring traffic: the surprise of each message under a model.
//!
//! The surprise of a message is −log2 of its probability given the session so far: the session
//! chain's probability of its template, or, for a template the model never saw, the probability
//! of the novel-message step times the message chain's probability of its tokens (tokens the
//! model never saw get the chain's uniform floor). Slot values do not count: a message is
//! unusual by its shape and place, not by the number in it.

use crate::model::Compiled;
use crate::read::{Corpus, Role};
use crate::symbol::NOVEL;
use crate::token::Tokenized;

/// Symbol standing in the message chain's history for a token the model never saw.
const UNKNOWN: u32 = u32::MAX;

/// The score of one message.
#[derive(Debug, Clone, PartialEq)]
pub struct MessageScore {
    /// Index of the session in the corpus.
    pub session: usize,
    /// Index of the message among the session's requests.
    pub index: usize,
    pub bytes: Vec<u8>,
    /// −log2 probability in bits.
    pub surprise: f64,
    /// Whether the model knows the message's template.
    pub known_template: bool,
}

/// Scores messages one session at a time.
#[derive(Debug)]
pub struct Scorer<'m> {
    model: &'m Compiled,
    history: Vec<u32>,
    scratch: Tokenized,
}

impl<'m> Scorer<'m> {
    pub fn new(model: &'m Compiled) -> Scorer<'m> {
        Scorer { model, history: Vec::new(), scratch: Tokenized::default() }
    }

    /// Starts a new session.
    pub fn reset(&mut self) {
        self.history.clear();
    }

    /// The surprise of the next message of the current session, and whether its template is
    /// known.
    pub fn next(&mut self, message: &[u8]) -> (f64, bool) {
        let symbols = self.model.symbols_of(message, &mut self.scratch);
        let known: Option<Vec<u32>> = symbols.iter().copied().collect();
        let template = known.as_deref().and_then(|t| self.model.template_symbol(t));
        let session = &self.model.session;
        let bits = match template {
            Some(t) => {
                let b = -session.prob(&self.history, t).log2();
                self.history.push(t);
                b
            }
            None => {
                let mut b = -session.prob(&self.history, NOVEL).log2();
                let chain = &self.model.message;
                let mut tokens: Vec<u32> = Vec::with_capacity(symbols.len());
                for s in symbols.iter().copied().chain(std::iter::once(Some(crate::symbol::END))) {
                    let p = match s {
                        Some(s) => chain.prob(&tokens, s),
                        None => chain.floor(&tokens),
                    };
                    b -= p.log2();
                    tokens.push(s.unwrap_or(UNKNOWN));
                }
                self.history.push(NOVEL);
                b
            }
        };
        (bits, template.is_some())
    }
}

/// Scores every request message of a corpus.
pub fn score_corpus(model: &Compiled, corpus: &Corpus) -> Vec<MessageScore> {
    let mut scorer = Scorer::new(model);
    let mut out = Vec::new();
    for (si, session) in corpus.sessions.iter().enumerate() {
        scorer.reset();
        let requests = session.frames.iter().filter(|f| f.role == Role::Request);
        for (index, frame) in requests.enumerate() {
            let bytes = corpus.bytes(session, frame);
            let (surprise, known_template) = scorer.next(bytes);
            out.push(MessageScore { session: si, index, bytes: bytes.to_vec(), surprise, known_template });
        }
    }
    out
}
