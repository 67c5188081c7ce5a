//! The text lexer: splits bytes into slot values (by rule) and literal pieces (words, digit runs,
//! space runs, single punctuation bytes).
//!
//! The defining rule (what [`Lexer::lex_anchored`] does literally): all rules and then the
//! structural patterns form one multi-pattern `regex_automata::meta::Regex`; at each piece
//! boundary an anchored leftmost-first search picks the first pattern that matches there, and the
//! piece ends where its match ends.
//!
//! [`Lexer::lex`] produces exactly the same pieces faster, by skipping the search where it cannot
//! find a rule: at build time a lazy DFA of the rules tells, for each (previous byte, byte) pair,
//! whether any rule can match starting there (the DFA is dead after one byte if not). Where none
//! can, the piece is the structural one, cut by a byte loop that mirrors the structural patterns.
//! Spaces, punctuation and words inside a line that no rule can begin skip the regex entirely.
//! The benchmark `benches/lexer.rs` keeps the two side by side.
//!
//! Search state (regex caches) lives in the caller's [`Tokenized`], so parallel workers never
//! contend for a shared cache pool. Time: O(n) in the message length per search for the lazy DFA
//! engine; memory: the DFA caches, bounded by regex-automata's defaults.

use std::sync::atomic::{AtomicU64, Ordering};

use regex_automata::meta::{Cache, Regex};
use regex_automata::util::captures::Captures;
use regex_automata::util::syntax;
use regex_automata::{Anchored, Input};

use super::rules::RuleSet;
use super::{PieceKind, TokenError, Tokenized};

/// Structural patterns appended after the rules, matched when no rule matches.
const STRUCTURE: [&str; 7] = [
    r"\r\n",
    r"[A-Za-z_][A-Za-z0-9_]*",
    r"[0-9][A-Za-z0-9_]*",
    r"[ \t]+",
    r"[\x80-\xFF]+",
    r"(?s:.)",
    // Unreachable guard so that every byte is covered even if `.` were ever restricted.
    r"[\x00-\xFF]",
];

/// Compiled slot rules plus structure.
#[derive(Debug, Clone)]
pub struct Lexer {
    /// Identifies the compiled regexes (shared by clones) that cached search state belongs to.
    id: u64,
    all: Regex,
    /// Whether some rule can match starting at a byte, given the byte before it.
    starts: RuleStarts,
    rules: usize,
    rule_class: Vec<u16>,
    rule_group: Vec<Option<(Regex, usize)>>,
    /// For group rules of the shape `literal (group) literal`: the literals' lengths, so the
    /// group's span follows from the match without a capture search.
    rule_delimited: Vec<Option<(usize, usize)>>,
    rule_refine: Vec<bool>,
    rule_requires: Vec<Option<Regex>>,
    classes: Vec<String>,
}

fn syntax_config() -> syntax::Config {
    syntax::Config::new().unicode(false).utf8(false)
}

fn build(patterns: &[&str]) -> Result<Regex, String> {
    Regex::builder()
        .syntax(syntax_config())
        .configure(Regex::config().utf8_empty(false))
        .build_many(patterns)
        .map_err(|e| one_line(&e.to_string()))
}

/// Regex errors come with a multi-line diagram; keep the line that says what is wrong.
pub(crate) fn one_line(text: &str) -> String {
    text.lines()
        .rev()
        .find_map(|l| l.trim().strip_prefix("error: "))
        .unwrap_or_else(|| text.lines().next().unwrap_or(""))
        .to_string()
}

impl Lexer {
    /// Compiles `rules`; `origin` names the rules in errors.
    pub fn new(rules: &RuleSet, origin: &str) -> Result<Lexer, TokenError> {
        let err = |message: String| TokenError::Rules { origin: origin.to_string(), message };
        rules.validate(origin)?;
        let classes = rules.class_names();
        let mut rule_class = Vec::new();
        let mut rule_group = Vec::new();
        let mut rule_delimited = Vec::new();
        let mut rule_refine = Vec::new();
        let mut rule_requires = Vec::new();
        for rule in &rules.rules {
            let single = build(&[&rule.pattern])
                .map_err(|e| err(format!("class `{}`: bad pattern: {e}", rule.name)))?;
            if single.is_match(Input::new(b"").anchored(Anchored::Yes)) {
                return Err(err(format!("class `{}`: pattern matches the empty string", rule.name)));
            }
            let groups = single.group_info().group_len(regex_automata::PatternID::ZERO);
            let group = match rule.group {
                Some(g) if g == 0 || g >= groups => {
                    return Err(err(format!(
                        "class `{}`: group {g} does not exist in the pattern",
                        rule.name
                    )));
                }
                Some(g) => Some((single, g)),
                None => None,
            };
            let requires = rule
                .requires
                .as_deref()
                .map(|p| build(&[p]).map_err(|e| err(format!("class `{}`: bad `requires`: {e}", rule.name))))
                .transpose()?;
            let class = classes.iter().position(|c| c == &rule.name).expect("listed") as u16;
            rule_class.push(class);
            rule_delimited.push(rule.group.and_then(|g| delimited_shape(&rule.pattern, g)));
            rule_group.push(group);
            rule_refine.push(rule.refine);
            rule_requires.push(requires);
        }
        let mut patterns: Vec<&str> = rules.rules.iter().map(|r| r.pattern.as_str()).collect();
        let starts = RuleStarts::new(&patterns);
        patterns.extend(STRUCTURE);
        let all = build(&patterns).map_err(|e| err(format!("cannot combine patterns: {e}")))?;
        static NEXT_ID: AtomicU64 = AtomicU64::new(1);
        Ok(Lexer {
            id: NEXT_ID.fetch_add(1, Ordering::Relaxed),
            all,
            starts,
            rules: rules.rules.len(),
            rule_class,
            rule_group,
            rule_delimited,
            rule_refine,
            rule_requires,
            classes,
        })
    }

    /// Class names; `PieceKind::Slot(i)` refers to `classes()[i]`.
    pub fn classes(&self) -> &[String] {
        &self.classes
    }

    /// Index of a class by name.
    pub fn class(&self, name: &str) -> Option<u16> {
        self.classes.iter().position(|c| c == name).map(|i| i as u16)
    }

    /// Lexes `out.arena[start..end]` into pieces appended to `out.pieces`.
    pub fn lex(&self, out: &mut Tokenized, start: usize, end: usize) {
        let mut cache = out.take_lex_cache(self);
        let mut pos = start;
        while pos < end {
            let before = pos.checked_sub(1).map(|i| out.arena[i]);
            if !self.starts.can_start(before, out.arena[pos]) {
                let next = structural_end(&out.arena[..end], pos);
                out.push(PieceKind::Lit, pos, next);
                pos = next;
                continue;
            }
            pos = self.lex_one(out, &mut cache, pos, end);
        }
        out.lex_cache = Some(cache);
    }

    /// Pushes the piece(s) of one anchored search at `pos`; returns where they end.
    fn lex_one(&self, out: &mut Tokenized, cache: &mut LexCache, pos: usize, end: usize) -> usize {
        let input = Input::new(&out.arena[..end]).span(pos..end).anchored(Anchored::Yes);
        let Some(m) = self.all.search_with(&mut cache.all, &input) else {
            // Cannot happen (the last structural pattern matches any byte); stay total anyway.
            out.push(PieceKind::Lit, pos, pos + 1);
            return pos + 1;
        };
        let (pid, m_end) = (m.pattern().as_usize(), m.end());
        if pid < self.rules && self.accepts(cache, pid, &out.arena[pos..m_end]) {
            self.push_slot(out, cache, pid, pos, m_end);
        } else if pid < self.rules {
            // Rule matched but its `requires` did not: the text is literal structure.
            self.lex_structure(out, pos, m_end);
        } else {
            out.push(PieceKind::Lit, pos, m_end);
        }
        m_end
    }

    /// The defining rule, literally: an anchored search of rules and structure at each boundary.
    /// Gives the same pieces as [`Lexer::lex`], slower; kept as the reference the fast path is
    /// tested and benchmarked against.
    pub fn lex_anchored(&self, out: &mut Tokenized, start: usize, end: usize) {
        let mut cache = out.take_lex_cache(self);
        let mut pos = start;
        while pos < end {
            pos = self.lex_one(out, &mut cache, pos, end);
        }
        out.lex_cache = Some(cache);
    }

    fn accepts(&self, cache: &mut LexCache, rule: usize, value: &[u8]) -> bool {
        match &self.rule_requires[rule] {
            None => true,
            Some(re) => {
                let c = cache.requires[rule].get_or_insert_with(|| re.create_cache());
                re.search_with(c, &Input::new(value).earliest(true)).is_some()
            }
        }
    }

    fn push_slot(&self, out: &mut Tokenized, cache: &mut LexCache, rule: usize, start: usize, end: usize) {
        let class = self.rule_class[rule];
        if self.rule_group[rule].is_none() {
            out.push(PieceKind::Slot(class), start, end);
            return;
        }
        let before = start.checked_sub(1).map(|i| out.arena[i]);
        let value = &out.arena[start..end];
        let memo = GroupMemo::slot(rule, before, value);
        let found = match &cache.memo[memo] {
            Some(m) if m.rule == rule && m.before == before && *m.value == *value => m.found,
            _ => {
                let found = self.group_value(cache, rule, &out.arena[..end], start);
                if value.len() <= GroupMemo::MAX_VALUE {
                    cache.memo[memo] = Some(GroupMemo { rule, before, value: value.into(), found });
                }
                found
            }
        };
        let Some((g_start, g_end, class)) = found else {
            out.push(PieceKind::Lit, start, end);
            return;
        };
        let (g_start, g_end) = (start + g_start as usize, start + g_end as usize);
        if g_start > start {
            out.push(PieceKind::Lit, start, g_start);
        }
        out.push(PieceKind::Slot(class), g_start, g_end);
        if end > g_end {
            out.push(PieceKind::Lit, g_end, end);
        }
    }

    /// The value group of a rule's match `hay[start..]` (offsets from `start`) and its class.
    fn group_value(
        &self,
        cache: &mut LexCache,
        rule: usize,
        hay: &[u8],
        start: usize,
    ) -> Option<(u32, u32, u16)> {
        let span = match self.rule_delimited[rule] {
            Some((open, close)) if hay.len() >= start + open + close => {
                regex_automata::Span { start: start + open, end: hay.len() - close }
            }
            _ => {
                let (re, group) = self.rule_group[rule].as_ref()?;
                let (c, caps) =
                    cache.groups[rule].get_or_insert_with(|| (re.create_cache(), re.create_captures()));
                re.search_captures_with(
                    c,
                    &Input::new(hay).span(start..hay.len()).anchored(Anchored::Yes),
                    caps,
                );
                caps.get_group(*group)?
            }
        };
        let class = match self.rule_refine[rule] {
            true => self.classify_with(&mut cache.all, &hay[span.start..span.end]),
            false => None,
        };
        let class = class.unwrap_or(self.rule_class[rule]);
        Some(((span.start - start) as u32, (span.end - start) as u32, class))
    }

    /// Structural lexing of a span no rule may claim: identifier-like runs, else single bytes.
    fn lex_structure(&self, out: &mut Tokenized, start: usize, end: usize) {
        let mut pos = start;
        while pos < end {
            let word = |b: &u8| b.is_ascii_alphanumeric() || *b == b'_';
            let run = out.arena[pos..end].iter().take_while(|b| word(b)).count();
            let stop = pos + run.max(1);
            out.push(PieceKind::Lit, pos, stop);
            pos = stop;
        }
    }

    /// The class of `value` if one rule (without a capture group) matches all of it.
    pub fn classify(&self, value: &[u8]) -> Option<u16> {
        self.classify_with(&mut self.all.create_cache(), value)
    }

    fn classify_with(&self, cache: &mut Cache, value: &[u8]) -> Option<u16> {
        if value.is_empty() {
            return None;
        }
        let m = self.all.search_with(cache, &Input::new(value).anchored(Anchored::Yes))?;
        let pid = m.pattern().as_usize();
        if pid >= self.rules || m.end() != value.len() || self.rule_group[pid].is_some() {
            return None;
        }
        // `requires` patterns are rare: a fresh cache is cheaper than threading one through.
        self.rule_requires[pid].as_ref().is_none_or(|re| re.is_match(value)).then(|| self.rule_class[pid])
    }

    fn new_cache(&self) -> LexCache {
        LexCache {
            owner: self.id,
            all: self.all.create_cache(),
            groups: vec![None; self.rules],
            requires: vec![None; self.rules],
            memo: vec![None; GroupMemo::SLOTS],
        }
    }
}

/// End of the structural piece starting at `pos` (the same as the anchored search of
/// [`STRUCTURE`] there): CRLF, an identifier or digit-led run of `[A-Za-z0-9_]`, a run of spaces
/// and tabs, a run of bytes ≥ 0x80, else one byte.
fn structural_end(hay: &[u8], pos: usize) -> usize {
    let run = |pos: usize, f: fn(u8) -> bool| pos + hay[pos..].iter().take_while(|&&b| f(b)).count();
    let word = |b: u8| b.is_ascii_alphanumeric() || b == b'_';
    match hay[pos] {
        b'\r' if hay.get(pos + 1) == Some(&b'\n') => pos + 2,
        b if word(b) => run(pos + 1, word),
        b' ' | b'\t' => run(pos + 1, |b| b == b' ' || b == b'\t'),
        0x80.. => run(pos + 1, |b| b >= 0x80),
        _ => pos + 1,
    }
}

/// Search state of one lexer for one thread: regex caches and capture slots, created on first
/// use and reused for every later message.
#[derive(Debug, Clone)]
pub(crate) struct LexCache {
    owner: u64,
    all: Cache,
    groups: Vec<Option<(Cache, Captures)>>,
    requires: Vec<Option<Cache>>,
    memo: Vec<Option<GroupMemo>>,
}

/// A remembered capture-group search. Quoted values repeat a lot in traffic (agents,
/// referrers, JSON values), and finding a group costs a second pass over the match; so the
/// result for a (rule, byte before, matched bytes) key, all the search depends on, is kept in a
/// small direct-mapped table (a new key overwrites its slot).
#[derive(Debug, Clone)]
struct GroupMemo {
    rule: usize,
    before: Option<u8>,
    value: Box<[u8]>,
    /// Group offsets from the match start and the (refined) class; `None` if the group is empty.
    found: Option<(u32, u32, u16)>,
}

impl GroupMemo {
    const SLOTS: usize = 1024;
    const MAX_VALUE: usize = 512;

    fn slot(rule: usize, before: Option<u8>, value: &[u8]) -> usize {
        let key =
            xxhash_rust::xxh3::xxh3_64_with_seed(value, (rule as u64) << 9 | before.map_or(256, u64::from));
        (key as usize) & (Self::SLOTS - 1)
    }
}

impl Tokenized {
    /// The cached search state for `lexer`, or fresh state if what is cached belongs to another.
    fn take_lex_cache(&mut self, lexer: &Lexer) -> LexCache {
        match self.lex_cache.take() {
            Some(c) if c.owner == lexer.id => c,
            _ => lexer.new_cache(),
        }
    }
}

/// If `pattern` is `literal (group) literal` with `group` the capture group asked for, the
/// byte lengths of the two literals: the group is then the match without them.
fn delimited_shape(pattern: &str, group: usize) -> Option<(usize, usize)> {
    use regex_syntax::hir::HirKind;
    let hir = regex_syntax::ParserBuilder::new().unicode(false).utf8(false).build().parse(pattern).ok()?;
    let HirKind::Concat(parts) = hir.kind() else { return None };
    match parts.as_slice() {
        [open, inner, close] => match (open.kind(), inner.kind(), close.kind()) {
            (HirKind::Literal(a), HirKind::Capture(c), HirKind::Literal(b)) if c.index as usize == group => {
                Some((a.0.len(), b.0.len()))
            }
            _ => None,
        },
        _ => None,
    }
}

/// For each byte and the byte before it (or the start of the haystack): can any rule match
/// starting at that byte? Computed from a lazy DFA of the rules: if its state after the first
/// byte is dead, no rule matches there, whatever follows. Look-around in this regex dialect sees
/// one byte on each side, so the previous byte is all the context a start needs.
#[derive(Debug, Clone)]
struct RuleStarts {
    /// Row per distinct DFA start state; `row_after[b]` is the row when the previous byte is
    /// `b`, `row_at_start` at the start of the haystack.
    rows: Vec<[bool; 256]>,
    row_after: [u8; 256],
    row_at_start: u8,
}

impl RuleStarts {
    /// Every start possible: the safe answer if the DFA cannot be built or gives up.
    fn everywhere() -> RuleStarts {
        RuleStarts { rows: vec![[true; 256]], row_after: [0; 256], row_at_start: 0 }
    }

    fn new(rules: &[&str]) -> RuleStarts {
        if rules.is_empty() {
            return RuleStarts { rows: vec![[false; 256]], row_after: [0; 256], row_at_start: 0 };
        }
        Self::from_dfa(rules).unwrap_or_else(RuleStarts::everywhere)
    }

    fn from_dfa(rules: &[&str]) -> Option<RuleStarts> {
        use regex_automata::hybrid::dfa::DFA;
        use regex_automata::util::start;
        let dfa = DFA::builder()
            .syntax(syntax_config())
            .configure(DFA::config().match_kind(regex_automata::MatchKind::All))
            .build_many(rules)
            .ok()?;
        let mut cache = dfa.create_cache();
        let mut starts = Vec::new();
        let mut rows = Vec::new();
        let mut row_of = |before: Option<u8>| -> Option<u8> {
            let config = start::Config::new().anchored(Anchored::Yes).look_behind(before);
            let sid = dfa.start_state(&mut cache, &config).ok()?;
            if let Some(i) = starts.iter().position(|&s| s == sid) {
                return Some(i as u8);
            }
            let mut row = [false; 256];
            for (b, can) in row.iter_mut().enumerate() {
                let next = dfa.next_state(&mut cache, sid, b as u8).ok()?;
                *can = !next.is_dead();
            }
            starts.push(sid);
            rows.push(row);
            u8::try_from(rows.len() - 1).ok()
        };
        let row_at_start = row_of(None)?;
        let mut row_after = [0u8; 256];
        for (b, row) in row_after.iter_mut().enumerate() {
            *row = row_of(Some(b as u8))?;
        }
        // State ids are only comparable while the cache was never cleared.
        (cache.clear_count() == 0).then_some(RuleStarts { rows, row_after, row_at_start })
    }

    #[inline]
    fn can_start(&self, before: Option<u8>, byte: u8) -> bool {
        let row = before.map_or(self.row_at_start, |b| self.row_after[b as usize]);
        self.rows[row as usize][byte as usize]
    }
}

#[cfg(test)]
mod shape_tests {
    use super::delimited_shape;

    #[test]
    fn recognises_delimited_groups_only() {
        assert_eq!(delimited_shape(r#""((?:[^"\\\r\n]|\\.)*)""#, 1), Some((1, 1)));
        assert_eq!(delimited_shape(r"id=<(\d+)>;", 1), Some((4, 2)));
        assert_eq!(delimited_shape(r"a(b)?c", 1), None);
        assert_eq!(delimited_shape(r"(a)(b)c", 2), None);
        assert_eq!(delimited_shape(r"x(\d+)y|z", 1), None);
    }
}
