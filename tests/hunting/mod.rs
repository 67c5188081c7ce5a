//! Helpers for the hunt tests: demo targets built once, models learned once, planted traces.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

use tracewalk::harness::{CommandLine, ReplyFraming, TargetKind, TargetSpec};
use tracewalk::trace::Trace;

/// A scratch directory of this test binary.
pub fn scratch(name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("hunt-tests").join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Builds a std-only program from `source` (relative to the repository) into this test
/// binary's temporary directory, named `name`.
pub fn build_std_program(source: &str, name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("hunt-demo-bin");
    std::fs::create_dir_all(&dir).unwrap();
    let out = dir.join(name);
    let source = Path::new(env!("CARGO_MANIFEST_DIR")).join(source);
    let tmp = dir.join(format!("{name}.{}.tmp", std::process::id()));
    // std only, so plain rustc builds it in about a second (no dependencies to compile).
    let status = Command::new(std::env::var("RUSTC").unwrap_or_else(|_| "rustc".into()))
        .args(["--edition", "2024", "-O", "-o"])
        .arg(&tmp)
        .arg(&source)
        .status()
        .expect("rustc runs");
    assert!(status.success(), "building {name}");
    std::fs::rename(&tmp, &out).unwrap();
    out
}

fn built(name: &str) -> PathBuf {
    build_std_program(&format!("examples/{name}.rs"), name)
}

/// The lamp hub demo target (stdin).
pub fn lamp_hub() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| built("lamp_hub"))
}

/// The shop server demo target (loopback TCP).
pub fn shop_server() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| built("shop_server"))
}

fn learned(corpus: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("hunt-models");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(format!("{corpus}.model"));
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("corpora").join(corpus);
    let o = super::common::tracewalk(&["learn", input.to_str().unwrap(), "-o", path.to_str().unwrap(), "-q"]);
    assert!(o.status.success(), "{}", super::common::stderr(&o));
    path
}

/// A model of the lamp-control corpus, learned with the CLI's defaults.
pub fn lamp_model() -> &'static Path {
    static MODEL: OnceLock<PathBuf> = OnceLock::new();
    MODEL.get_or_init(|| learned("lamp-control"))
}

/// A model of the shop-api corpus.
pub fn shop_model() -> &'static Path {
    static MODEL: OnceLock<PathBuf> = OnceLock::new();
    MODEL.get_or_init(|| learned("shop-api"))
}

/// A planted trace of examples/planted.
pub fn planted(name: &str) -> Trace {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/planted").join(format!("{name}.trace"));
    Trace::parse(&std::fs::read_to_string(path).unwrap()).unwrap()
}

pub fn messages(trace: &Trace) -> Vec<Vec<u8>> {
    trace.messages.iter().map(|m| m.bytes.clone()).collect()
}

/// A process target for the lamp hub, through the library.
pub fn lamp_target() -> Box<dyn tracewalk::harness::Target + Send> {
    let command = CommandLine::parse(&lamp_hub().display().to_string()).unwrap();
    let mut spec =
        TargetSpec::new(TargetKind::Exec { command, per_message: false }, ReplyFraming::Lines { end: None });
    spec.env = vec![("RUST_BACKTRACE".into(), "0".into())];
    spec.build(0).unwrap()
}

/// Options that keep panicking demo targets fast: a backtrace costs a tenth of a second per
/// crash, and rare traffic crashes them often.
pub const QUICK_PANICS: [&str; 2] = ["--env", "RUST_BACKTRACE=0"];

/// The signature a trace fails with on the lamp hub.
pub fn lamp_signature(messages: &[Vec<u8>]) -> Option<String> {
    lamp_target().run(messages).unwrap().failure.map(|f| f.signature())
}

/// Parses the `--json` summary of a hunt.
pub fn summary(out: &std::process::Output) -> serde_json::Value {
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!("not JSON ({e}): {}\n{}", super::common::stdout(out), super::common::stderr(out))
    })
}

/// (signature, first run, shrunk message count) of each finding of a summary.
pub fn findings(summary: &serde_json::Value) -> Vec<(String, u64, Option<u64>)> {
    summary["findings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["signature"].as_str().unwrap().to_string(),
                f["first_run"].as_u64().unwrap(),
                f["shrunk_messages"].as_u64(),
            )
        })
        .collect()
}

/// The ticket desk demo target (stdin, or loopback TCP with `--port`).
pub fn ticket_desk() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| built("ticket_desk"))
}

/// A model of the ticket-desk corpus.
pub fn desk_model() -> &'static Path {
    static MODEL: OnceLock<PathBuf> = OnceLock::new();
    MODEL.get_or_init(|| learned("ticket-desk"))
}
