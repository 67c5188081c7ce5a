//! What the other side answered: reply templates, their value pools, and which replies followed
//! each request template.
//!
//! Replies are tokenized like requests but kept in their own vocabulary, so the message chain
//! (what novel requests are built from) never learns reply tokens, and the request side of a
//! model is the same whether or not replies were read. Like everything in a model these are
//! counts in canonical order.

use serde::{Deserialize, Serialize};

use super::{IdList, Pool};
use crate::symbol::FIRST_TEMPLATE;
use crate::token::Token;

/// Longest run of replies to one request that is stored; longer runs keep their first replies.
pub const MAX_REPLY_RUN: usize = 32;

/// A reply template and how often it occurred.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReplyTemplate {
    /// Reply token symbols.
    pub tokens: IdList,
    pub count: u64,
}

/// How often a request template, followed by a given next request, was answered by this run
/// of reply templates (the replies between the two). The next request is part of the key
/// because what was answered shapes what the client does next (a created order is paid, a
/// refused one is not). Requests answered by nothing are not stored: their number is the count
/// of the transition (request, next) in the session chain minus its runs.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReplyRun {
    /// Request template symbol, or [`crate::symbol::BEGIN`] for replies before the first request.
    pub request: u32,
    /// The next request's template symbol, or [`crate::symbol::END`] at the end of the session.
    pub next: u32,
    /// Reply template symbols, in order.
    pub replies: IdList,
    pub count: u64,
}

/// The reply side of a model. Empty when the input had no replies or flow learning was off.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Replies {
    /// Reply token `i` has symbol `FIRST_TOKEN + i`; sorted.
    pub tokens: Vec<Token>,
    /// Reply template `i` has symbol `FIRST_TEMPLATE + i`; sorted by tokens.
    pub templates: Vec<ReplyTemplate>,
    /// Value pools of reply slots (anchors are reply token symbols), sorted by (class, anchor).
    pub pools: Vec<Pool>,
    /// Sorted by (request, next, replies).
    pub runs: Vec<ReplyRun>,
}

impl Replies {
    /// Token symbols of the reply template with this symbol.
    pub fn template(&self, symbol: u32) -> Option<&[u32]> {
        symbol
            .checked_sub(FIRST_TEMPLATE)
            .and_then(|i| self.templates.get(i as usize))
            .map(|t| t.tokens.0.as_slice())
    }

    /// The token of a reply symbol.
    pub fn token(&self, symbol: u32) -> Option<&Token> {
        symbol.checked_sub(crate::symbol::FIRST_TOKEN).and_then(|i| self.tokens.get(i as usize))
    }

    /// Printable form of a reply template.
    pub fn template_text(&self, symbol: u32) -> String {
        match self.template(symbol) {
            Some(t) => t.iter().filter_map(|&s| self.token(s)).map(Token::display).collect(),
            None => format!("<reply symbol {symbol}>"),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.templates.is_empty()
    }
}
