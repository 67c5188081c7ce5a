//! Interning pieces into symbols, and the vocabulary of a loaded model.

use rustc_hash::FxHashMap;

use super::{Piece, PieceKind, Token, Tokenized};
use crate::symbol::FIRST_TOKEN;

/// Assigns symbols to pieces while learning. Symbols are local to this interner (first come,
/// first numbered from [`FIRST_TOKEN`]); the model renumbers them canonically afterwards.
#[derive(Debug, Clone)]
pub struct Interner {
    tokens: Vec<Token>,
    /// One-byte literals (spaces, punctuation: most pieces), found without hashing.
    bytes: [Option<u32>; 256],
    lits: FxHashMap<Box<[u8]>, u32>,
    slots: Vec<Option<u32>>,
    others: FxHashMap<Token, u32>,
    classes: Vec<String>,
}

impl Interner {
    /// An empty interner for a tokenizer with these slot classes.
    pub fn new(classes: &[String]) -> Interner {
        Interner {
            tokens: Vec::new(),
            bytes: [None; 256],
            lits: FxHashMap::default(),
            slots: vec![None; classes.len()],
            others: FxHashMap::default(),
            classes: classes.to_vec(),
        }
    }

    fn add(&mut self, token: Token) -> u32 {
        self.tokens.push(token);
        FIRST_TOKEN + self.tokens.len() as u32 - 1
    }

    /// The symbol of a piece, interning it if new.
    pub fn intern(&mut self, tokenized: &Tokenized, piece: &Piece) -> u32 {
        match piece.kind {
            PieceKind::Lit => {
                let bytes = tokenized.bytes(piece);
                if let [b] = bytes {
                    if let Some(s) = self.bytes[*b as usize] {
                        return s;
                    }
                    let s = self.add(Token::Lit(bytes.to_vec()));
                    self.bytes[*b as usize] = Some(s);
                    return s;
                }
                if let Some(&s) = self.lits.get(bytes) {
                    return s;
                }
                let s = self.add(Token::Lit(bytes.to_vec()));
                self.lits.insert(bytes.into(), s);
                s
            }
            PieceKind::Slot(class) => {
                if let Some(s) = self.slots[class as usize] {
                    return s;
                }
                let s = self.add(Token::Slot(self.classes[class as usize].clone()));
                self.slots[class as usize] = Some(s);
                s
            }
            PieceKind::Derived(d) => self.other(Token::Derived(d)),
            PieceKind::Body(f) => self.other(Token::Body(f)),
        }
    }

    fn other(&mut self, token: Token) -> u32 {
        if let Some(&s) = self.others.get(&token) {
            return s;
        }
        let s = self.add(token.clone());
        self.others.insert(token, s);
        s
    }

    /// The interned tokens; token `i` has symbol `FIRST_TOKEN + i`.
    pub fn into_tokens(self) -> Vec<Token> {
        self.tokens
    }
}

/// The vocabulary of a model: tokens by symbol, and lookup of pieces without allocation.
#[derive(Debug, Clone, Default)]
pub struct Vocab {
    tokens: Vec<Token>,
    lits: FxHashMap<Box<[u8]>, u32>,
    by_token: FxHashMap<Token, u32>,
    slot_of_class: Vec<Option<u32>>,
}

impl Vocab {
    /// Builds lookups for `tokens` (token `i` has symbol `FIRST_TOKEN + i`); `classes` are the
    /// tokenizer's slot classes.
    pub fn new(tokens: Vec<Token>, classes: &[String]) -> Vocab {
        let mut lits = FxHashMap::default();
        let mut by_token = FxHashMap::default();
        for (i, t) in tokens.iter().enumerate() {
            let s = FIRST_TOKEN + i as u32;
            match t {
                Token::Lit(b) => {
                    lits.insert(b.clone().into_boxed_slice(), s);
                }
                other => {
                    by_token.insert(other.clone(), s);
                }
            }
        }
        let slot_of_class = classes.iter().map(|c| by_token.get(&Token::Slot(c.clone())).copied()).collect();
        Vocab { tokens, lits, by_token, slot_of_class }
    }

    /// The token of a symbol, if the symbol is a token.
    pub fn token(&self, symbol: u32) -> Option<&Token> {
        symbol.checked_sub(FIRST_TOKEN).and_then(|i| self.tokens.get(i as usize))
    }

    pub fn tokens(&self) -> &[Token] {
        &self.tokens
    }

    pub fn len(&self) -> usize {
        self.tokens.len()
    }

    pub fn is_empty(&self) -> bool {
        self.tokens.is_empty()
    }

    /// One past the largest symbol (the alphabet size of the message chain).
    pub fn symbols(&self) -> u32 {
        FIRST_TOKEN + self.tokens.len() as u32
    }

    /// The symbol of a piece, or `None` if the model never saw it.
    pub fn lookup(&self, tokenized: &Tokenized, piece: &Piece) -> Option<u32> {
        match piece.kind {
            PieceKind::Lit => self.lits.get(tokenized.bytes(piece)).copied(),
            PieceKind::Slot(class) => self.slot_of_class.get(class as usize).copied().flatten(),
            PieceKind::Derived(d) => self.by_token.get(&Token::Derived(d)).copied(),
            PieceKind::Body(f) => self.by_token.get(&Token::Body(f)).copied(),
        }
    }

    /// The symbol of a literal, if known.
    pub fn lit(&self, bytes: &[u8]) -> Option<u32> {
        self.lits.get(bytes).copied()
    }
}
