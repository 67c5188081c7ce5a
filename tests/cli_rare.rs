//! The command line of rare traffic: `gen` modes and options, `--report`, `mutate`, and errors.

mod common;

use common::{stderr, stdout, tracewalk};
use tracewalk::trace::Trace;

/// A model of the lamp-control corpus in a fresh directory.
fn lamp_model() -> (tempfile::TempDir, String) {
    let dir = tempfile::tempdir().unwrap();
    let model = dir.path().join("lamp.model").display().to_string();
    let corpus = common::corpus("lamp-control").display().to_string();
    let o = tracewalk(&["learn", "-q", &corpus, "-o", &model]);
    assert!(o.status.success(), "{}", stderr(&o));
    (dir, model)
}

#[test]
fn every_mode_runs_and_reports() {
    let (_dir, model) = lamp_model();
    for mode in ["plausible", "rare", "novel", "frontier", "tour"] {
        let o = tracewalk(&["gen", &model, "--mode", mode, "-n", "5", "--seed", "3", "--report"]);
        assert!(o.status.success(), "{mode}: {}", stderr(&o));
        let traces = Trace::parse_all(&stdout(&o)).unwrap();
        assert!(!traces.is_empty());
        assert!(traces.iter().all(|t| t.get("mode") == Some(mode)));
        let err = stderr(&o);
        for field in ["well-formed", "new templates", "transitions", "surprise"] {
            assert!(err.contains(field), "{mode}: {err}");
        }
        let again = tracewalk(&["gen", &model, "--mode", mode, "-n", "5", "--seed", "3"]);
        assert_eq!(again.stdout, o.stdout, "{mode}: same seed, same bytes");
    }
    let o = tracewalk(&["gen", &model, "--mode", "tour"]);
    assert!(stderr(&o).contains("lower bound") && stderr(&o).contains("fewest steps"), "{}", stderr(&o));
    let o = tracewalk(&["gen", &model, "--mode", "rare", "-n", "20", "--rare-rate", "0.3"]);
    assert!(stdout(&o).contains("| rare"), "forced steps are marked");
}

#[test]
fn waypoints_from_the_command_line() {
    let (_dir, model) = lamp_model();
    let o = tracewalk(&["gen", &model, "--through", "FADE", "--through", "BYE", "-n", "4"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let traces = Trace::parse_all(&stdout(&o)).unwrap();
    assert_eq!(traces.len(), 4);
    for t in &traces {
        let at = |mark: &str| t.messages.iter().position(|m| m.marks.iter().any(|k| k == mark)).unwrap();
        assert!(at("waypoint:1") < at("waypoint:2"));
        assert!(t.messages[at("waypoint:1")].bytes.starts_with(b"FADE"));
    }
    let o = tracewalk(&["gen", &model, "--through", "FADE", "--best", "-n", "4"]);
    assert_eq!(Trace::parse_all(&stdout(&o)).unwrap().len(), 1, "--best prints one session");
    let o = tracewalk(&["gen", &model, "--through", "NO SUCH CALL"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("matches no learned template"), "{}", stderr(&o));
    let o = tracewalk(&["gen", &model, "--through", "FADE", "--mode", "rare"]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn hostile_values_can_be_extended_replaced_or_disabled() {
    let (dir, model) = lamp_model();
    let mine = dir.path().join("mine.yaml");
    std::fs::write(&mine, "builtins: false\nclasses:\n  int:\n    - {name: marker, value: '7777777'}\n")
        .unwrap();
    let mine = mine.display().to_string();
    let args = ["gen", &model, "--mode", "rare", "-n", "30", "--hostile-rate", "0.5", "--hostile", &mine];
    let o = tracewalk(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    assert!(text.contains("hostile:") && text.contains(":marker") && text.contains("7777777"));
    assert!(!text.contains(":int32-max"), "built-ins replaced");
    let o =
        tracewalk(&["gen", &model, "--mode", "rare", "-n", "30", "--hostile-rate", "0.5", "--no-hostile"]);
    assert!(!stdout(&o).contains("hostile:"));
    let bad = dir.path().join("bad.yaml");
    std::fs::write(&bad, "classes:\n  int:\n    - {name: x, value: '\\q'}\n").unwrap();
    let o = tracewalk(&["gen", &model, "--mode", "rare", "--hostile", &bad.display().to_string()]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    assert!(err.contains("bad.yaml") && err.lines().count() == 1, "{err}");
    let o = tracewalk(&["rules", "--hostile"]);
    assert!(stdout(&o).contains("int32-overflow"));
}

#[test]
fn mutate_reads_traces_and_raw_traffic_reproducibly() {
    let (dir, model) = lamp_model();
    let traces = dir.path().join("in.trace");
    let o = tracewalk(&["gen", &model, "-n", "3", "--seed", "1"]);
    std::fs::write(&traces, &o.stdout).unwrap();
    let traces = traces.display().to_string();
    let raw = common::corpus("lamp-control").join("sessions/0001.txt").display().to_string();
    let run = |seed: &str| tracewalk(&["mutate", &model, &traces, &raw, "-n", "12", "--seed", seed]);
    let o = run("5");
    assert!(o.status.success(), "{}", stderr(&o));
    let mutants = Trace::parse_all(&stdout(&o)).unwrap();
    assert_eq!(mutants.len(), 12);
    assert!(mutants.iter().all(|t| t.get("mode") == Some("mutate") && t.get("mutations").is_some()));
    assert!(mutants.iter().any(|t| t.get("source").unwrap().ends_with("0001.txt")));
    assert!(
        mutants.iter().any(|t| t.messages.iter().any(|m| m.marks.iter().any(|k| k.starts_with("mutated:"))))
    );
    assert_eq!(run("5").stdout, o.stdout);
    assert_ne!(run("6").stdout, o.stdout);

    let out = dir.path().join("mutants");
    let o = tracewalk(&[
        "mutate",
        &model,
        &traces,
        "-n",
        "3",
        "--operators",
        "delete,duplicate",
        "-o",
        &out.display().to_string(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    for i in 1..=3 {
        let t = Trace::parse(&std::fs::read_to_string(out.join(format!("{i:04}.trace"))).unwrap()).unwrap();
        let ops = t.get("mutations").unwrap();
        assert!(ops.split(' ').all(|m| m.starts_with("delete@") || m.starts_with("duplicate@")), "{ops}");
    }

    let o = tracewalk(&["mutate", &model, "/no/such/file"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("/no/such/file"));
    let o = tracewalk(&["mutate", &model, &traces, "--operators", "shuffle"]);
    assert_eq!(o.status.code(), Some(2));
}
