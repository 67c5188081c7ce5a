//! The text lexer: one left-to-right pass of a multi-pattern regex that splits bytes into slot
//! values (by rule) and literal pieces (words, digit runs, space runs, single punctuation bytes).
//!
//! All rules and the structural patterns are compiled into one `regex_automata::meta::Regex`; an
//! anchored search at each position returns the longest-preferred match and the index of the
//! pattern that matched, so classification costs no second pass. Time: O(n) in the message length
//! for the lazy DFA engine; memory: the DFA cache, bounded by regex-automata's defaults.

use regex_automata::meta::Regex;
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
    all: Regex,
    rules: usize,
    rule_class: Vec<u16>,
    rule_group: Vec<Option<(Regex, usize)>>,
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
            rule_group.push(group);
            rule_refine.push(rule.refine);
            rule_requires.push(requires);
        }
        let mut patterns: Vec<&str> = rules.rules.iter().map(|r| r.pattern.as_str()).collect();
        patterns.extend(STRUCTURE);
        let all = build(&patterns).map_err(|e| err(format!("cannot combine patterns: {e}")))?;
        Ok(Lexer {
            all,
            rules: rules.rules.len(),
            rule_class,
            rule_group,
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
        let mut pos = start;
        while pos < end {
            let input = Input::new(&out.arena[..end]).span(pos..end).anchored(Anchored::Yes);
            let Some(m) = self.all.search(&input) else {
                // Cannot happen (the last structural pattern matches any byte); stay total anyway.
                out.push(PieceKind::Lit, pos, pos + 1);
                pos += 1;
                continue;
            };
            let (pid, m_end) = (m.pattern().as_usize(), m.end());
            if pid < self.rules && self.accepts(pid, &out.arena[pos..m_end]) {
                self.push_slot(out, pid, pos, m_end);
            } else if pid < self.rules {
                // Rule matched but its `requires` did not: the text is literal structure.
                self.lex_structure(out, pos, m_end);
            } else {
                out.push(PieceKind::Lit, pos, m_end);
            }
            pos = m_end;
        }
    }

    fn accepts(&self, rule: usize, value: &[u8]) -> bool {
        self.rule_requires[rule].as_ref().is_none_or(|re| re.is_match(value))
    }

    fn push_slot(&self, out: &mut Tokenized, rule: usize, start: usize, end: usize) {
        let class = self.rule_class[rule];
        let Some((re, group)) = &self.rule_group[rule] else {
            out.push(PieceKind::Slot(class), start, end);
            return;
        };
        let mut caps = re.create_captures();
        re.search_captures(
            &Input::new(&out.arena[..end]).span(start..end).anchored(Anchored::Yes),
            &mut caps,
        );
        let Some(span) = caps.get_group(*group) else {
            out.push(PieceKind::Lit, start, end);
            return;
        };
        if span.start > start {
            out.push(PieceKind::Lit, start, span.start);
        }
        let class = if self.rule_refine[rule] {
            self.classify(&out.arena[span.start..span.end]).unwrap_or(class)
        } else {
            class
        };
        out.push(PieceKind::Slot(class), span.start, span.end);
        if end > span.end {
            out.push(PieceKind::Lit, span.end, end);
        }
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
        if value.is_empty() {
            return None;
        }
        let m = self.all.search(&Input::new(value).anchored(Anchored::Yes))?;
        let pid = m.pattern().as_usize();
        (pid < self.rules
            && m.end() == value.len()
            && self.rule_group[pid].is_none()
            && self.accepts(pid, value))
        .then(|| self.rule_class[pid])
    }
}
