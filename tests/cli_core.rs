//! The core commands end to end through the binary: learn, show, gen, score, merge, rules.

mod common;

use common::{corpus, stderr, stdout, tracewalk};
use std::path::Path;

fn learn(dir: &Path, name: &str, extra: &[&str]) -> std::path::PathBuf {
    let out = dir.join(format!("{name}.model"));
    let input = corpus(name);
    let mut args = vec!["learn", input.to_str().unwrap(), "-o", out.to_str().unwrap(), "-q"];
    args.extend_from_slice(extra);
    let run = tracewalk(&args);
    assert!(run.status.success(), "learn {name}: {}", stderr(&run));
    out
}

#[test]
fn learn_show_gen_score_on_a_bundled_corpus() {
    let dir = tempfile::tempdir().unwrap();
    let model = learn(dir.path(), "lamp-control", &[]);
    let model = model.to_str().unwrap();

    let show = tracewalk(&["show", model]);
    assert!(show.status.success());
    let text = stdout(&show);
    for needle in
        ["session chain: order", "message chain: order", "entropy rate", "held-out perplexity", "slot pools"]
    {
        assert!(text.contains(needle), "show lacks `{needle}`:\n{text}");
    }

    let json = tracewalk(&["show", model, "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).expect("show --json is JSON");
    assert_eq!(v["sessions"], 450);
    assert!(!v["session_chain"]["held_out"].as_array().unwrap().is_empty());
    assert!(v["message_chain"]["entropy_rate_bits"].as_f64().unwrap() > 0.0);

    // Sessions open with HELLO then AUTH: AUTH must be the likeliest next message.
    let next = tracewalk(&["show", model, "--next", "HELLO wallpanel-hall 2.1"]);
    let text = stdout(&next);
    let first = text.lines().nth(1).unwrap_or("");
    assert!(first.contains("AUTH"), "{text}");

    let dot = dir.path().join("chain.dot");
    assert!(tracewalk(&["show", model, "--dot", dot.to_str().unwrap()]).status.success());
    let graph = std::fs::read_to_string(&dot).unwrap();
    assert!(graph.starts_with("digraph") && graph.contains("->") && graph.contains("penwidth"));

    // Same model, seed and options: byte-identical output; another seed differs.
    let a = tracewalk(&["gen", model, "-n", "20", "--seed", "7"]);
    let b = tracewalk(&["gen", model, "-n", "20", "--seed", "7"]);
    let c = tracewalk(&["gen", model, "-n", "20", "--seed", "8"]);
    assert!(a.status.success());
    assert_eq!(a.stdout, b.stdout);
    assert_ne!(a.stdout, c.stdout);
    let traces = tracewalk::trace::Trace::parse_all(&stdout(&a)).unwrap();
    assert_eq!(traces.len(), 20);
    assert!(traces.iter().all(|t| t.messages[0].bytes.starts_with(b"HELLO ")));

    // -o DIR: one file per trace, each the same as the corresponding trace on stdout.
    let out = dir.path().join("traces");
    assert!(
        tracewalk(&["gen", model, "-n", "20", "--seed", "7", "-o", out.to_str().unwrap()]).status.success()
    );
    let mut files: Vec<_> = std::fs::read_dir(&out).unwrap().map(|e| e.unwrap().path()).collect();
    files.sort();
    assert_eq!(files.len(), 20);
    let fifth = tracewalk::trace::Trace::parse(&std::fs::read_to_string(&files[4]).unwrap()).unwrap();
    assert_eq!(fifth, traces[4]);
    let raw = tracewalk(&["gen", model, "-n", "20", "--seed", "7", "--raw"]);
    let wire: Vec<u8> = traces.iter().flat_map(|t| t.wire_bytes()).collect();
    assert_eq!(raw.stdout, wire);

    // Scoring the training data flags little; a session out of order is flagged.
    let score =
        tracewalk(&["score", model, corpus("lamp-control").join("sessions/0001.txt").to_str().unwrap()]);
    assert!(score.status.success(), "{}", stderr(&score));
    let odd = dir.path().join("odd.txt");
    std::fs::write(&odd, "BYE\nSET zone=4 level=70\nHELLO wallpanel-hall 2.1\nFROB 1 2 3\n").unwrap();
    let score = tracewalk(&["score", model, odd.to_str().unwrap(), "--json"]);
    let rows: Vec<serde_json::Value> =
        stdout(&score).lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert_eq!(rows.len(), 4);
    assert!(rows.iter().all(|r| r["flagged"] == true), "{rows:?}");
    assert_eq!(rows[3]["known_template"], false);
}

#[test]
fn gen_writes_every_format_and_rules_prints_defaults() {
    let rules = tracewalk(&["rules"]);
    assert!(rules.status.success());
    let text = stdout(&rules);
    assert!(text.contains("- name: uuid") && text.contains("- name: int"));
    let dir = tempfile::tempdir().unwrap();
    let own = dir.path().join("rules.yaml");
    std::fs::write(&own, "classes:\n- name: zone\n  pattern: 'zone=\\d+'\n").unwrap();
    let model = learn(dir.path(), "lamp-control", &["--rules", own.to_str().unwrap(), "--order", "2"]);
    let show = tracewalk(&["show", model.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&show.stdout).unwrap();
    assert!(v["slot_classes"].as_array().unwrap().iter().any(|c| c == "zone"), "{}", v["slot_classes"]);
}

/// Copies every second session file of a corpus (by name) into `dir`.
fn split_corpus(name: &str, dir: &Path, parity: usize) {
    std::fs::create_dir_all(dir).unwrap();
    let mut files: Vec<_> =
        std::fs::read_dir(corpus(name).join("sessions")).unwrap().map(|e| e.unwrap().path()).collect();
    files.sort();
    for f in files.into_iter().skip(parity).step_by(2) {
        std::fs::copy(&f, dir.join(f.file_name().unwrap())).unwrap();
    }
}

// The model file is canonical: learning shards and merging equals learning everything at once,
// byte for byte; so does learning the files in another order.
#[test]
fn merge_of_shards_equals_learning_everything() {
    for (name, read) in [
        ("lamp-control", vec!["--format", "lines", "--reply-pattern", "^(OK|ERR|VAL|EVT)( |$)"]),
        ("shop-api", vec!["--format", "http"]),
        ("ticket-desk", vec!["--format", "lines", "--reply-pattern", "^(OK|ERR|VAL)( |$)"]),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let (a, b) = (dir.path().join("a"), dir.path().join("b"));
        split_corpus(name, &a, 0);
        split_corpus(name, &b, 1);
        let learn_to = |inputs: &[&Path], out: &Path| {
            let mut args = vec!["learn"];
            let inputs: Vec<String> = inputs.iter().map(|p| p.display().to_string()).collect();
            args.extend(inputs.iter().map(|s| s.as_str()));
            let out = out.display().to_string();
            args.extend(["-o", &out, "-q", "--order", "2"]);
            args.extend(read.iter().copied());
            let run = tracewalk(&args);
            assert!(run.status.success(), "{}", stderr(&run));
        };
        let (ma, mb, mall, mrev, merged) = (
            dir.path().join("a.model"),
            dir.path().join("b.model"),
            dir.path().join("all.model"),
            dir.path().join("rev.model"),
            dir.path().join("merged.model"),
        );
        learn_to(&[&a], &ma);
        learn_to(&[&b], &mb);
        let all_sessions = corpus(name).join("sessions");
        learn_to(&[&all_sessions], &mall);
        learn_to(&[&b, &a], &mrev);
        let run =
            tracewalk(&["merge", ma.to_str().unwrap(), mb.to_str().unwrap(), "-o", merged.to_str().unwrap()]);
        assert!(run.status.success(), "{}", stderr(&run));
        let whole = std::fs::read(&mall).unwrap();
        assert_eq!(
            std::fs::read(&merged).unwrap(),
            whole,
            "{name}: merged model differs from learning at once"
        );
        assert_eq!(std::fs::read(&mrev).unwrap(), whole, "{name}: input order changed the model");
        let g1 = tracewalk(&["gen", merged.to_str().unwrap(), "-n", "5", "--seed", "3"]);
        let g2 = tracewalk(&["gen", mall.to_str().unwrap(), "-n", "5", "--seed", "3"]);
        assert_eq!(g1.stdout, g2.stdout);
        assert!(!g1.stdout.is_empty());
    }
}

#[test]
fn merge_refuses_models_learned_differently() {
    let dir = tempfile::tempdir().unwrap();
    let a = learn(dir.path(), "lamp-control", &["--order", "2"]);
    let b = dir.path().join("b.model");
    let run = tracewalk(&[
        "learn",
        corpus("lamp-control").to_str().unwrap(),
        "-o",
        b.to_str().unwrap(),
        "-q",
        "--order",
        "1",
    ]);
    assert!(run.status.success());
    let out = dir.path().join("m.model");
    let run = tracewalk(&["merge", a.to_str().unwrap(), b.to_str().unwrap(), "-o", out.to_str().unwrap()]);
    assert_eq!(run.status.code(), Some(2));
    assert!(stderr(&run).contains("orders differ"), "{}", stderr(&run));
    assert!(!out.exists());
}

#[test]
fn binary_and_yaml_encodings_hold_the_same_model() {
    let dir = tempfile::tempdir().unwrap();
    let yaml = learn(dir.path(), "events", &["--order", "2"]);
    let bin = dir.path().join("events.bin");
    let run = tracewalk(&[
        "learn",
        corpus("events").to_str().unwrap(),
        "-o",
        bin.to_str().unwrap(),
        "-q",
        "--order",
        "2",
        "--binary",
    ]);
    assert!(run.status.success());
    assert!(std::fs::metadata(&bin).unwrap().len() < std::fs::metadata(&yaml).unwrap().len());
    let (m1, h1) = tracewalk::model::load_with_hash(&yaml).unwrap();
    let (m2, h2) = tracewalk::model::load_with_hash(&bin).unwrap();
    assert_eq!(m1, m2);
    assert_eq!(h1, h2);
    let g1 = tracewalk(&["gen", yaml.to_str().unwrap(), "-n", "3"]);
    let g2 = tracewalk(&["gen", bin.to_str().unwrap(), "-n", "3"]);
    assert_eq!(g1.stdout, g2.stdout);
}

#[test]
fn a_reader_that_goes_away_ends_gen_quietly() {
    use std::io::{BufRead, BufReader};
    use std::os::unix::process::ExitStatusExt;
    let dir = tempfile::tempdir().unwrap();
    let model = learn(dir.path(), "lamp-control", &[]);
    // Like `tracewalk gen … | head -1`: far more output than a pipe holds, read one line, close.
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_tracewalk"))
        .args(["gen", model.to_str().unwrap(), "-n", "100000"])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let mut first = String::new();
    BufReader::new(child.stdout.take().unwrap()).read_line(&mut first).unwrap();
    assert!(first.starts_with('%'), "{first}");
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!err.contains("panicked"), "{err}");
    // Ended by SIGPIPE, as Unix filters are (common practice: the shell reports 141).
    assert_eq!(out.status.signal(), Some(libc::SIGPIPE), "{:?} {err}", out.status);
}
