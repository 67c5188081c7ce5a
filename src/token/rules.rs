//! Slot rules: which byte patterns are variable fields, and of which class.
//!
//! Rules come from `builtin-rules.yaml` (documented defaults, printed by `tracewalk rules`) and
//! optionally a user file with the same schema plus `builtins` / `disable`. The expanded list is
//! stored in every model, so a model always tokenizes the way it learned.

use serde::{Deserialize, Serialize};

use super::TokenError;

/// One slot rule.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SlotRule {
    /// Slot class; several rules may share one class.
    pub name: String,
    /// Regex (Rust regex syntax, byte-oriented, ASCII classes).
    pub pattern: String,
    /// Capture group holding the value; the rest of the match stays literal.
    #[serde(default)]
    pub group: Option<usize>,
    /// Re-classify the captured value against all classes.
    #[serde(default)]
    pub refine: bool,
    /// A second pattern the matched value must also contain.
    #[serde(default)]
    pub requires: Option<String>,
}

/// The schema of a rules file.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct RulesFile {
    #[serde(default)]
    classes: Vec<SlotRule>,
    #[serde(default = "yes")]
    builtins: bool,
    #[serde(default)]
    disable: Vec<String>,
}

fn yes() -> bool {
    true
}

/// The text of the built-in rules file.
pub const BUILTIN_RULES_YAML: &str = include_str!("builtin-rules.yaml");

/// An ordered, expanded list of slot rules (earlier rules win).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct RuleSet {
    pub rules: Vec<SlotRule>,
}

/// Slot classes every rule set has, because the structural tokenizers (JSON, HTTP) need them.
pub const CORE_CLASSES: [&str; 3] = ["string", "int", "decimal"];

impl RuleSet {
    /// The built-in rules.
    pub fn builtin() -> RuleSet {
        let file: RulesFile =
            serde_yaml::from_str(BUILTIN_RULES_YAML).expect("built-in rules file is valid YAML");
        RuleSet { rules: file.classes }
    }

    /// Parses a user rules file (`origin` names it in errors) and expands it with the built-ins.
    pub fn from_yaml(text: &str, origin: &str) -> Result<RuleSet, TokenError> {
        let file: RulesFile = serde_yaml::from_str(text).map_err(|e| TokenError::Rules {
            origin: origin.to_string(),
            message: first_line(&e.to_string()),
        })?;
        let mut rules = file.classes;
        if file.builtins {
            let builtin = RuleSet::builtin();
            for name in &file.disable {
                if !builtin.rules.iter().any(|r| &r.name == name) {
                    return Err(TokenError::Rules {
                        origin: origin.to_string(),
                        message: format!("`disable` names `{name}`, which is not a built-in class"),
                    });
                }
            }
            rules.extend(builtin.rules.into_iter().filter(|r| !file.disable.contains(&r.name)));
        }
        let set = RuleSet { rules };
        super::Lexer::new(&set, origin)?;
        Ok(set)
    }

    /// Checks names and patterns (a model file may carry a hostile rule set).
    pub fn validate(&self, origin: &str) -> Result<(), TokenError> {
        let err = |message: String| TokenError::Rules { origin: origin.to_string(), message };
        if self.rules.len() > 1000 {
            return Err(err(format!("{} rules; at most 1000 are allowed", self.rules.len())));
        }
        for rule in &self.rules {
            if rule.name.is_empty()
                || rule.name.len() > 40
                || !rule.name.bytes().all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-')
            {
                return Err(err(format!(
                    "class name `{}` must be 1-40 characters of a-z, 0-9 and -",
                    rule.name
                )));
            }
            if rule.pattern.len() > 4096 {
                return Err(err(format!("pattern of `{}` is longer than 4096 bytes", rule.name)));
            }
        }
        Ok(())
    }

    /// Distinct class names in order of first appearance, then the core classes if missing.
    pub fn class_names(&self) -> Vec<String> {
        let mut names: Vec<String> = Vec::new();
        for rule in &self.rules {
            if !names.contains(&rule.name) {
                names.push(rule.name.clone());
            }
        }
        for core in CORE_CLASSES {
            if !names.iter().any(|n| n == core) {
                names.push(core.to_string());
            }
        }
        names
    }
}

fn first_line(text: &str) -> String {
    text.lines().next().unwrap_or("").to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn user_rules_come_first_and_can_disable_builtins() {
        let set = RuleSet::from_yaml(
            "classes:\n- name: order-ref\n  pattern: 'ORD-\\d{6}'\ndisable: [base64]\n",
            "r.yaml",
        )
        .unwrap();
        assert_eq!(set.rules[0].name, "order-ref");
        assert!(!set.rules.iter().any(|r| r.name == "base64"));
        assert!(set.rules.iter().any(|r| r.name == "uuid"));
    }

    #[test]
    fn bad_files_name_the_origin() {
        let e = RuleSet::from_yaml("classes: 7", "mine.yaml").unwrap_err();
        assert!(e.to_string().starts_with("mine.yaml: "), "{e}");
        let e = RuleSet::from_yaml("disable: [nope]", "mine.yaml").unwrap_err();
        assert!(e.to_string().contains("not a built-in class"), "{e}");
        let e = RuleSet::from_yaml("classes:\n- name: Bad Name\n  pattern: x\n", "m").unwrap_err();
        assert!(e.to_string().contains("class name"), "{e}");
    }
}
