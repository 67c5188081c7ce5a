//! Model files: readable YAML (default) or a compact binary encoding, both carrying the format
//! version and a content hash (BLAKE3 of the binary encoding of the model, so both encodings of
//! one model have the same hash).
//!
//! YAML starts with the line `tracewalk_model: <version>`; binary starts with the 16 bytes
//! `TRACEWALK-MODEL\0`, then the version (u32 LE), the 32-byte hash and the postcard encoding.
//! Loading checks, in order: readable, recognised, not newer than this build, parseable, hash
//! matches, internally consistent. Each failure is one line naming the file and the problem.
//! Saving is atomic: a temporary file in the same directory, renamed over the target.

use std::path::Path;

use super::{Model, ModelError};

/// Version of the model file format this build reads and writes.
pub const MODEL_FORMAT_VERSION: u32 = 2;

const MAGIC: &[u8; 16] = b"TRACEWALK-MODEL\0";
const YAML_KEY: &str = "tracewalk_model:";

/// Which encoding to write.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Encoding {
    Yaml,
    Binary,
}

#[derive(serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
struct Document {
    tracewalk_model: u32,
    hash: String,
    model: Model,
}

/// The content hash of a model (64 hex digits).
pub fn content_hash(model: &Model) -> String {
    let bytes = postcard::to_stdvec(model).expect("models always encode");
    blake3::hash(&bytes).to_hex().to_string()
}

fn problem(path: &str, p: impl Into<String>) -> ModelError {
    ModelError::File { path: path.to_string(), problem: p.into() }
}

fn first_line(text: &str) -> String {
    let line = text.lines().next().unwrap_or("").trim();
    if line.len() > 200 { format!("{}…", &line[..line.floor_char_boundary(200)]) } else { line.to_string() }
}

/// Encodes a model.
pub fn to_bytes(model: &Model, encoding: Encoding) -> Vec<u8> {
    let hash = content_hash(model);
    match encoding {
        Encoding::Yaml => {
            let doc = Document { tracewalk_model: MODEL_FORMAT_VERSION, hash, model: model.clone() };
            serde_yaml::to_string(&doc).expect("models always encode").into_bytes()
        }
        Encoding::Binary => {
            let body = postcard::to_stdvec(model).expect("models always encode");
            let mut out = Vec::with_capacity(body.len() + 52);
            out.extend_from_slice(MAGIC);
            out.extend_from_slice(&MODEL_FORMAT_VERSION.to_le_bytes());
            out.extend_from_slice(blake3::hash(&body).as_bytes());
            out.extend_from_slice(&body);
            out
        }
    }
}

/// Decodes and verifies a model; `origin` names the file in errors.
pub fn from_bytes(bytes: &[u8], origin: &str) -> Result<Model, ModelError> {
    from_bytes_with_hash(bytes, origin).map(|(m, _)| m)
}

/// Like [`from_bytes`], also returning the verified content hash.
pub fn from_bytes_with_hash(bytes: &[u8], origin: &str) -> Result<(Model, String), ModelError> {
    let (model, hash) = if let Some(rest) = bytes.strip_prefix(MAGIC.as_slice()) {
        decode_binary(rest, origin)?
    } else if bytes.starts_with(YAML_KEY.as_bytes()) {
        decode_yaml(bytes, origin)?
    } else if bytes.is_empty() {
        return Err(problem(origin, "empty file, not a tracewalk model"));
    } else {
        return Err(problem(origin, "not a tracewalk model (no model header)"));
    };
    model.validate().map_err(|e| problem(origin, format!("inconsistent model: {e}")))?;
    Ok((model, hash))
}

fn check_version(version: u32, origin: &str) -> Result<(), ModelError> {
    if version > MODEL_FORMAT_VERSION {
        return Err(problem(
            origin,
            format!(
                "model format {version} is newer than this tracewalk reads ({MODEL_FORMAT_VERSION}); upgrade tracewalk"
            ),
        ));
    }
    if version == 0 {
        return Err(problem(origin, "model format 0 does not exist"));
    }
    if version < MODEL_FORMAT_VERSION {
        // Format 2 added replies and value flow, which older files cannot supply.
        return Err(problem(
            origin,
            format!(
                "model format {version} is older than this tracewalk reads ({MODEL_FORMAT_VERSION}); learn the model again"
            ),
        ));
    }
    Ok(())
}

fn decode_binary(rest: &[u8], origin: &str) -> Result<(Model, String), ModelError> {
    if rest.len() < 36 {
        return Err(problem(origin, "truncated model header"));
    }
    let version = u32::from_le_bytes(rest[..4].try_into().expect("4 bytes"));
    check_version(version, origin)?;
    let (stored, body) = rest[4..].split_at(32);
    if blake3::hash(body).as_bytes() != stored {
        return Err(problem(origin, "content hash mismatch: the file is damaged or truncated"));
    }
    let model = postcard::from_bytes(body).map_err(|e| problem(origin, format!("damaged model: {e}")))?;
    Ok((model, blake3::Hash::from_bytes(stored.try_into().expect("32 bytes")).to_hex().to_string()))
}

fn decode_yaml(bytes: &[u8], origin: &str) -> Result<(Model, String), ModelError> {
    let text = std::str::from_utf8(bytes).map_err(|_| problem(origin, "damaged model: not UTF-8 text"))?;
    let version_text = text[YAML_KEY.len()..].lines().next().unwrap_or("").trim();
    let version: u32 = version_text
        .parse()
        .map_err(|_| problem(origin, format!("bad model format version `{}`", first_line(version_text))))?;
    check_version(version, origin)?;
    let doc: Document = serde_yaml::from_str(text)
        .map_err(|e| problem(origin, format!("damaged model: {}", first_line(&e.to_string()))))?;
    let hash = content_hash(&doc.model);
    if hash != doc.hash {
        return Err(problem(origin, "content hash mismatch: the file was edited or damaged"));
    }
    Ok((doc.model, hash))
}

/// Reads a model file.
pub fn load(path: &Path) -> Result<Model, ModelError> {
    load_with_hash(path).map(|(m, _)| m)
}

/// Reads a model file, also returning its verified content hash.
pub fn load_with_hash(path: &Path) -> Result<(Model, String), ModelError> {
    let origin = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| problem(&origin, format!("cannot read: {e}")))?;
    from_bytes_with_hash(&bytes, &origin)
}

/// Writes a model file atomically.
pub fn save(model: &Model, path: &Path, encoding: Encoding) -> Result<(), ModelError> {
    let origin = path.display().to_string();
    crate::atomic::write(path, &to_bytes(model, encoding))
        .map_err(|e| problem(&origin, format!("cannot write: {e}")))
}
