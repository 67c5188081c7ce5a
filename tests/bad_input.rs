//! Bad input gives one clear line naming the file and the problem, exit code 2, never a panic;
//! partial damage is skipped, counted and reported.

mod common;

use common::{corpus, stderr, tracewalk};
use std::path::Path;

/// Runs a command expected to fail with exit 2 and one line on stderr containing `needles`.
fn fails(args: &[&str], needles: &[&str]) {
    let run = tracewalk(args);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "{args:?}: {err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{args:?}: not one line: {err}");
    assert!(!err.contains("panicked"), "{err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: `{n}` not in {err}");
    }
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> String {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p.display().to_string()
}

#[test]
fn unusable_inputs_to_learn() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("m.model").display().to_string();
    let empty = write(dir.path(), "empty.log", b"");
    fails(&["learn", &empty, "-o", &out], &["empty.log", "no usable messages", "1 empty files"]);
    let garbage: Vec<u8> = (0..4096u32).map(|i| (i.wrapping_mul(2654435761) >> 13) as u8).collect();
    let bin = write(dir.path(), "garbage.bin", &garbage);
    fails(&["learn", &bin, "-o", &out], &["garbage.bin", "binary files"]);
    fails(&["learn", &bin, "-o", &out, "--format", "http"], &["garbage.bin", "no usable messages"]);
    let line = vec![b'a'; 100 << 20];
    let long = write(dir.path(), "long.log", &line);
    fails(&["learn", &long, "-o", &out], &["long.log", "lines over 1 MiB"]);
    let truncated = write(
        dir.path(),
        "cut.http",
        b"POST /v1/carts HTTP/1.1\r\nHost: a.example\r\nContent-Length: 40\r\n\r\n{\"x\":",
    );
    fails(&["learn", &truncated, "-o", &out, "--format", "http"], &["cut.http", "truncated HTTP messages"]);
    fails(&["learn", "/nonexistent/traffic", "-o", &out], &["/nonexistent/traffic", "cannot read"]);
    let json = write(dir.path(), "x.jsonl", b"{\"a\":1\n[[[\n");
    fails(&["learn", &json, "-o", &out, "--format", "jsonl"], &["x.jsonl", "2 lines not JSON"]);
    fails(&["learn", &json, "-o", &out, "--session-key", "("], &["--session-key", "bad regex"]);
    let rules = write(dir.path(), "rules.yaml", b"classes:\n- name: x\n  pattern: '('\n");
    let ok = write(dir.path(), "ok.log", b"PING 1\nPING 2\n");
    fails(&["learn", &ok, "-o", &out, "--rules", &rules], &["rules.yaml", "bad pattern"]);
    assert!(!Path::new(&out).exists(), "nothing written on failure");
}

#[test]
fn partial_damage_is_skipped_counted_and_reported() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("m.model").display().to_string();
    let mut bytes = b"GET /a HTTP/1.1\r\nHost: a.example\r\n\r\n".to_vec();
    bytes.extend_from_slice(b"\x00\x01 not http\r\n\r\n");
    bytes.extend_from_slice(
        b"GET /b HTTP/1.1\r\nHost: a.example\r\n\r\nPOST /c HTTP/1.1\r\nContent-Length: 9\r\n\r\nab",
    );
    let f = write(dir.path(), "mixed.http", &bytes);
    let run = tracewalk(&["learn", &f, "-o", &out, "--format", "http"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let err = stderr(&run);
    assert!(err.contains("skipped: 1 truncated HTTP messages, 1 unparseable HTTP messages"), "{err}");
    assert!(err.contains("2 messages"), "{err}");
    // Invalid UTF-8 is learned as bytes, never lost.
    let latin = write(dir.path(), "latin.log", b"HELLO caf\xe9\nHELLO caf\xe9\nBYE\n");
    let run = tracewalk(&["learn", &latin, "-o", &out, "-q"]);
    assert!(run.status.success(), "{}", stderr(&run));
    let generated = tracewalk(&["gen", &out, "-n", "1", "--seed", "1", "--raw"]);
    assert!(
        generated.stdout.windows(5).any(|w| w == b"caf\xe9\n"),
        "{:?}",
        String::from_utf8_lossy(&generated.stdout)
    );
}

#[test]
fn damaged_model_files() {
    let dir = tempfile::tempdir().unwrap();
    let good = dir.path().join("good.model");
    let run = tracewalk(&[
        "learn",
        corpus("lamp-control").to_str().unwrap(),
        "-o",
        good.to_str().unwrap(),
        "-q",
        "--order",
        "2",
    ]);
    assert!(run.status.success());
    let text = std::fs::read(&good).unwrap();
    let truncated = write(dir.path(), "truncated.model", &text[..text.len() / 2]);
    fails(&["show", &truncated], &["truncated.model", "damaged model"]);
    let foreign = write(dir.path(), "foreign.model", b"name: something else\n");
    fails(&["gen", &foreign], &["foreign.model", "not a tracewalk model"]);
    let empty = write(dir.path(), "empty.model", b"");
    fails(&["gen", &empty], &["empty.model", "empty file"]);
    let newer =
        String::from_utf8(text.clone()).unwrap().replacen("tracewalk_model: 1", "tracewalk_model: 7", 1);
    let newer = write(dir.path(), "newer.model", newer.as_bytes());
    fails(&["show", &newer], &["newer.model", "format 7 is newer"]);
    let edited = String::from_utf8(text.clone()).unwrap().replacen("sessions: 450", "sessions: 451", 1);
    let edited = write(dir.path(), "edited.model", edited.as_bytes());
    fails(&["show", &edited], &["edited.model", "content hash mismatch"]);
    // Binary: a flipped byte anywhere in the body is caught by the hash.
    let bin = dir.path().join("good.bin");
    let run = tracewalk(&[
        "learn",
        corpus("lamp-control").to_str().unwrap(),
        "-o",
        bin.to_str().unwrap(),
        "-q",
        "--binary",
        "--order",
        "2",
    ]);
    assert!(run.status.success());
    let mut bytes = std::fs::read(&bin).unwrap();
    let at = bytes.len() - 10;
    bytes[at] ^= 0x40;
    let flipped = write(dir.path(), "flipped.bin", &bytes);
    fails(&["gen", &flipped], &["flipped.bin", "content hash mismatch"]);
    fails(&["show", "/nonexistent.model"], &["/nonexistent.model", "cannot read"]);
}

#[test]
fn bad_options_are_usage_errors() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("m.model").display().to_string();
    let lamp = corpus("lamp-control").display().to_string();
    fails(&["learn", &lamp, "-o", &out, "--order", "0"], &["--order"]);
    fails(&["learn", &lamp, "-o", &out, "--discount", "1.5"], &["--discount"]);
    let run = tracewalk(&["learn", &lamp]);
    assert_eq!(run.status.code(), Some(2));
    let run = tracewalk(&["frobnicate"]);
    assert_eq!(run.status.code(), Some(2));
}
