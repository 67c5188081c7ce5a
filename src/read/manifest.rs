//! The corpus manifest: a `corpus.yaml` beside the data that says how to read it, so that
//! `tracewalk learn DIR` needs no further options.
//!
//! ```yaml
//! include: ["sessions/*.http"]   # globs relative to the directory (default: every file)
//! format: http                   # lines | http | jsonl (default: sniffed)
//! session_key: '"visit":"([0-9a-f-]+)"'
//! idle_gap_ms: 1800000
//! reply_pattern: '^[0-9]{3}[ -]'
//! ```
//! Options given on the command line win over the manifest.

use std::path::{Path, PathBuf};

use serde::Deserialize;

use super::{ReadError, ReadOptions, bad, walk};

/// File name of the manifest inside a corpus directory.
pub const MANIFEST_NAME: &str = "corpus.yaml";

/// Parsed `corpus.yaml`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CorpusManifest {
    #[serde(default)]
    pub include: Vec<String>,
    #[serde(flatten)]
    pub read: ReadOptions,
}

impl CorpusManifest {
    /// The manifest of directory `dir`, if it has one.
    pub fn load_in(dir: &Path) -> Result<Option<CorpusManifest>, ReadError> {
        let path = dir.join(MANIFEST_NAME);
        let text = match std::fs::read_to_string(&path) {
            Ok(t) => t,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
            Err(source) => return Err(ReadError::Io { path, source }),
        };
        serde_yaml::from_str(&text).map(Some).map_err(|e| bad(&path, one_line(&e.to_string())))
    }

    /// The files of `dir` this manifest includes, sorted.
    pub fn files(&self, dir: &Path) -> Result<Vec<PathBuf>, ReadError> {
        let mut all = Vec::new();
        walk(dir, &mut all)?;
        all.retain(|p| p.file_name().is_some_and(|n| n != MANIFEST_NAME));
        if self.include.is_empty() {
            return Ok(all);
        }
        let mut builder = globset::GlobSetBuilder::new();
        for pattern in &self.include {
            let glob = globset::Glob::new(pattern).map_err(|e| {
                bad(&dir.join(MANIFEST_NAME), format!("bad include pattern `{pattern}`: {e}"))
            })?;
            builder.add(glob);
        }
        let set = builder.build().map_err(|e| bad(&dir.join(MANIFEST_NAME), e.to_string()))?;
        all.retain(|p| p.strip_prefix(dir).is_ok_and(|rel| set.is_match(rel)));
        Ok(all)
    }
}

/// Read options from the manifests of the given directories, first one wins per field.
pub fn options_from_manifests(paths: &[PathBuf]) -> Result<ReadOptions, ReadError> {
    let mut merged = ReadOptions::default();
    for path in paths.iter().filter(|p| p.is_dir()) {
        if let Some(m) = CorpusManifest::load_in(path)? {
            merged.format = merged.format.or(m.read.format);
            merged.session_key = merged.session_key.or(m.read.session_key);
            merged.idle_gap_ms = merged.idle_gap_ms.or(m.read.idle_gap_ms);
            merged.reply_pattern = merged.reply_pattern.or(m.read.reply_pattern);
        }
    }
    Ok(merged)
}

fn one_line(text: &str) -> String {
    text.lines().next().unwrap_or("").to_string()
}
