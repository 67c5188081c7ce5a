//! Hostile slot values: boundary numbers, broken encodings, injection bytes, skewed lengths.
//!
//! The library is a YAML file (`hostile.yaml`, embedded, documented in its own comments and
//! printed by `tracewalk rules --hostile`) that a user file can extend or replace. Values are
//! bytes written in the escape syntax of traces, so NUL, bare CR and invalid UTF-8 are plain to
//! read and write. They are only ever copied into generated message bytes.

use std::collections::BTreeMap;
use std::sync::{Arc, OnceLock};

use rand::{Rng, RngExt};
use serde::Deserialize;

use super::GenError;

/// The text of the built-in library.
pub const BUILTIN_HOSTILE_YAML: &str = include_str!("hostile.yaml");

/// Most bytes one value may expand to (`value` × `repeat`).
pub const MAX_HOSTILE_BYTES: usize = 1 << 20;

/// Class whose entries apply to every slot class.
pub const ANY_CLASS: &str = "any";

/// One hostile value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HostileValue {
    /// Short label shown in trace marks.
    pub name: String,
    pub bytes: Vec<u8>,
}

/// A deliberate disagreement between Content-Length and the body.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LengthSkew {
    pub name: String,
    /// Added to the true length (the written value never goes below 0).
    pub delta: i64,
}

/// Hostile values by slot class, and Content-Length skews.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct HostileLibrary {
    classes: BTreeMap<String, Vec<HostileValue>>,
    length_skews: Vec<LengthSkew>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct FileEntry {
    name: String,
    value: String,
    #[serde(default)]
    repeat: Option<usize>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct FileSkew {
    name: String,
    delta: i64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct LibraryFile {
    #[serde(default)]
    classes: BTreeMap<String, Vec<FileEntry>>,
    #[serde(default)]
    length_skews: Vec<FileSkew>,
    #[serde(default = "yes")]
    builtins: bool,
}

fn yes() -> bool {
    true
}

fn valid_name(name: &str) -> bool {
    !name.is_empty()
        && name.len() <= 40
        && name.bytes().all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-')
}

impl HostileLibrary {
    /// The built-in library (parsed once per process).
    pub fn builtin() -> Arc<HostileLibrary> {
        static BUILTIN: OnceLock<Arc<HostileLibrary>> = OnceLock::new();
        BUILTIN
            .get_or_init(|| {
                let file = parse(BUILTIN_HOSTILE_YAML, "built-in hostile values")
                    .expect("the built-in hostile library is valid");
                Arc::new(
                    build(file, "built-in hostile values").expect("the built-in hostile library is valid"),
                )
            })
            .clone()
    }

    /// Parses a user library (`origin` names it in errors): its entries are added to the
    /// built-in ones unless it says `builtins: false`.
    pub fn from_yaml(text: &str, origin: &str) -> Result<HostileLibrary, GenError> {
        let file = parse(text, origin)?;
        let with_builtins = file.builtins;
        let mine = build(file, origin)?;
        if !with_builtins {
            return Ok(mine);
        }
        let mut lib = (*HostileLibrary::builtin()).clone();
        for (class, values) in mine.classes {
            lib.classes.entry(class).or_default().extend(values);
        }
        lib.length_skews.extend(mine.length_skews);
        Ok(lib)
    }

    /// Entries that apply to slots of `class`: the class's own, then those of `any`.
    pub fn values_for<'a>(&'a self, class: &str) -> impl Iterator<Item = &'a HostileValue> + 'a {
        let own = if class == ANY_CLASS { None } else { self.classes.get(class) };
        own.into_iter().flatten().chain(self.classes.get(ANY_CLASS).into_iter().flatten())
    }

    /// Number of entries that apply to `class`.
    pub fn count_for(&self, class: &str) -> usize {
        self.values_for(class).count()
    }

    /// A value for a slot of `class`, uniformly among those that apply.
    pub fn pick<R: Rng + ?Sized>(&self, class: &str, rng: &mut R) -> Option<&HostileValue> {
        let n = self.count_for(class);
        if n == 0 {
            return None;
        }
        self.values_for(class).nth(rng.random_range(0..n))
    }

    /// A Content-Length skew, uniformly.
    pub fn pick_skew<R: Rng + ?Sized>(&self, rng: &mut R) -> Option<&LengthSkew> {
        if self.length_skews.is_empty() {
            return None;
        }
        Some(&self.length_skews[rng.random_range(0..self.length_skews.len())])
    }

    /// Class names with entries of their own (besides `any`).
    pub fn classes(&self) -> impl Iterator<Item = &str> {
        self.classes.keys().map(String::as_str)
    }

    pub fn length_skews(&self) -> &[LengthSkew] {
        &self.length_skews
    }
}

fn parse(text: &str, origin: &str) -> Result<LibraryFile, GenError> {
    serde_yaml::from_str(text).map_err(|e| GenError::File {
        origin: origin.to_string(),
        problem: e.to_string().lines().next().unwrap_or("bad YAML").to_string(),
    })
}

fn build(file: LibraryFile, origin: &str) -> Result<HostileLibrary, GenError> {
    let err = |problem: String| GenError::File { origin: origin.to_string(), problem };
    let mut classes = BTreeMap::new();
    for (class, entries) in file.classes {
        if !valid_name(&class) {
            return Err(err(format!("class name `{class}` must be 1-40 characters of a-z, 0-9 and -")));
        }
        let mut values = Vec::with_capacity(entries.len());
        for e in entries {
            if !valid_name(&e.name) {
                return Err(err(format!(
                    "value name `{}` must be 1-40 characters of a-z, 0-9 and -",
                    e.name
                )));
            }
            let one = crate::escape::unescape(&e.value)
                .map_err(|x| err(format!("value `{}` of class `{class}`: {x}", e.name)))?;
            let repeat = e.repeat.unwrap_or(1);
            if repeat == 0 || one.len().saturating_mul(repeat) > MAX_HOSTILE_BYTES {
                return Err(err(format!(
                    "value `{}` of class `{class}`: repeat must be at least 1 and the value at most {MAX_HOSTILE_BYTES} bytes",
                    e.name
                )));
            }
            values.push(HostileValue { name: e.name, bytes: one.repeat(repeat) });
        }
        classes.insert(class, values);
    }
    let mut length_skews = Vec::with_capacity(file.length_skews.len());
    for s in file.length_skews {
        if !valid_name(&s.name) {
            return Err(err(format!("skew name `{}` must be 1-40 characters of a-z, 0-9 and -", s.name)));
        }
        length_skews.push(LengthSkew { name: s.name, delta: s.delta });
    }
    Ok(HostileLibrary { classes, length_skews })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builtin_library_covers_the_promised_kinds() {
        let lib = HostileLibrary::builtin();
        let int: Vec<Vec<u8>> = lib.values_for("int").map(|v| v.bytes.clone()).collect();
        for want in [
            &b"0"[..],
            b"-1",
            b"2147483647",
            b"2147483648",
            b"9223372036854775807",
            b"18446744073709551616",
            b"0000000000000000000042",
            b"",
            b"\x00",
            b"%s%s%s%n%x%p",
            b"x\r\nX-Injected: 1\r\n",
            b"../../../../../../etc/hosts",
            b"\xff\xfe\xc3\x28",
            b"' OR '1'='1",
            b"$(id)`id`;|&><*",
        ] {
            assert!(int.iter().any(|v| v == want), "missing {:?}", crate::escape::escape(want));
        }
        assert!(int.iter().any(|v| v.len() == 4096 && v.iter().all(|&b| b == b'9')), "huge digit string");
        assert!(int.iter().any(|v| v.len() == 65536), "overlong string");
        assert!(int.iter().any(|v| std::str::from_utf8(v).is_ok_and(|s| s.contains('е'))), "mixed script");
        assert!(
            lib.length_skews().iter().any(|s| s.delta == 1)
                && lib.length_skews().iter().any(|s| s.delta == -1)
        );
        // A class without entries of its own still gets the `any` entries.
        assert_eq!(lib.count_for("order-ref"), lib.count_for(ANY_CLASS));
    }

    #[test]
    fn user_files_extend_or_replace_and_errors_name_the_file() {
        let extra = "classes:\n  order-ref:\n    - {name: bad-check-digit, value: 'ORD-000000\\x00'}\n";
        let lib = HostileLibrary::from_yaml(extra, "mine.yaml").unwrap();
        let names: Vec<&str> = lib.values_for("order-ref").map(|v| v.name.as_str()).collect();
        assert_eq!(names[0], "bad-check-digit");
        assert!(names.len() > 1, "built-in `any` entries are kept");
        assert_eq!(lib.values_for("order-ref").next().unwrap().bytes, b"ORD-000000\x00");

        let only = HostileLibrary::from_yaml(&format!("builtins: false\n{extra}"), "mine.yaml").unwrap();
        assert_eq!(only.count_for("order-ref"), 1);
        assert!(only.length_skews().is_empty());

        for (text, needle) in [
            ("classes: 3", "mine.yaml: "),
            ("classes:\n  int:\n    - {name: Bad, value: x}\n", "value name"),
            ("classes:\n  int:\n    - {name: bad, value: '\\q'}\n", "unknown escape"),
            ("classes:\n  int:\n    - {name: big, value: 'ab', repeat: 1048576}\n", "at most"),
        ] {
            let e = HostileLibrary::from_yaml(text, "mine.yaml").unwrap_err().to_string();
            assert!(e.starts_with("mine.yaml: ") && e.contains(needle), "{e}");
        }
    }
}
