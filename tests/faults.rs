//! Faults: misbehaving targets, campaigns killed with SIGKILL, and hostile payloads and files,
//! all through the `tracewalk` command. The misbehaving targets are modes of
//! tests/targets/misbehave.rs (std only, built with rustc) or `sh -c` scripts a user might
//! write as a target command.

mod common;
mod hunting;

use std::collections::BTreeSet;
use std::os::unix::fs::PermissionsExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

use common::{stderr, stdout, tracewalk};
use hunting::{QUICK_PANICS, findings, lamp_hub, lamp_model, scratch, shop_model, summary};
use rand::{RngExt, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use tracewalk::hunt::store::{StoredFinding, finding_id};
use tracewalk::trace::Trace;

/// The misbehaving target program, built once per test binary.
fn misbehave() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| hunting::build_std_program("tests/targets/misbehave.rs", "misbehave"))
}

/// `misbehave ARGS` as a command line for --exec or --spawn.
fn target(args: &str) -> String {
    format!("{} {args}", misbehave().display())
}

/// Whether a process exists and is not a zombie.
fn alive(pid: &str) -> bool {
    match std::fs::read_to_string(format!("/proc/{}/stat", pid.trim())) {
        Ok(stat) => !stat.rsplit_once(") ").is_some_and(|(_, rest)| rest.starts_with('Z')),
        Err(_) => false,
    }
}

/// Asserts that every process that wrote its pid into `dir` is gone (there must be some).
fn none_left_alive(dir: &Path) {
    let pids: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "pid"))
        .map(|p| std::fs::read_to_string(p).unwrap())
        .collect();
    assert!(!pids.is_empty(), "no process recorded its pid in {}", dir.display());
    // Killed processes are reaped by whoever inherits them; give that a moment.
    let until = Instant::now() + Duration::from_secs(2);
    while pids.iter().any(|p| alive(p)) && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(20));
    }
    let living: Vec<&String> = pids.iter().filter(|p| alive(p)).collect();
    assert!(living.is_empty(), "left alive: {living:?} of {} started", pids.len());
}

fn pid_dir(base: &Path) -> PathBuf {
    let d = base.join("pids");
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn hunt(model: &Path, dir: &Path, target: &[&str], extra: &[&str]) -> Output {
    let mut args = vec!["hunt", model.to_str().unwrap(), "-o", dir.to_str().unwrap(), "--json", "--brief"];
    args.extend_from_slice(target);
    args.extend_from_slice(extra);
    tracewalk(&args)
}

/// The only finding of a summary.
fn only_finding(s: &serde_json::Value) -> &serde_json::Value {
    let all = s["findings"].as_array().unwrap();
    assert_eq!(all.len(), 1, "{all:?}");
    &all[0]
}

fn read_trace(path: &str) -> Trace {
    Trace::parse(&std::fs::read_to_string(path).unwrap()).unwrap()
}

// --- Misbehaving targets ---------------------------------------------------------------------

#[test]
fn a_target_crashing_on_every_input_is_one_finding_shrunk_to_nothing() {
    let dir = scratch("faults-crash-always");
    let pids = pid_dir(&dir);
    let env = format!("FAULTS_PIDS={}", pids.display());
    let exec = target("crash-always");
    let out = hunt(
        lamp_model(),
        &dir.join("c"),
        &["--exec", &exec, "--env", &env],
        &["--budget", "20", "--seed", "3"],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    assert_eq!(s["runs"], 20);
    let f = only_finding(&s);
    assert_eq!(f["signature"], "SIGABRT: fatal: the lamp table is gone");
    assert_eq!((f["first_run"].as_u64(), f["hits"].as_u64()), (Some(1), Some(20)), "deduplicated");
    assert_eq!(f["flaky"], false);
    // It fails whatever it gets, so the empty trace is the minimal one.
    assert_eq!(f["shrunk_messages"], 0);
    assert!(f["original_messages"].as_u64().unwrap() > 0);
    let replay = tracewalk(&["replay", f["shrunk"].as_str().unwrap(), "--exec", &exec, "-q"]);
    assert_eq!(replay.status.code(), Some(1), "{}", stdout(&replay));
    none_left_alive(&pids);
    // A target that cannot start: one line, exit 2, the cause said once.
    let missing = tracewalk(&["replay", f["shrunk"].as_str().unwrap(), "--exec", "/nonexistent/target"]);
    assert_eq!(missing.status.code(), Some(2));
    let err = stderr(&missing);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert_eq!(err.matches("No such file or directory").count(), 1, "{err}");
}

#[test]
fn exit_zero_with_an_error_line_is_caught_by_the_stderr_pattern() {
    let dir = scratch("faults-quiet-fail");
    let exec = target("quiet-fail FADE");
    let unseen = hunt(lamp_model(), &dir.join("plain"), &["--exec", &exec], &["--budget", "30"]);
    assert_eq!(unseen.status.code(), Some(0), "exit 0 alone is no failure: {}", stderr(&unseen));
    let out = hunt(
        lamp_model(),
        &dir.join("pattern"),
        &["--exec", &exec, "--fail-stderr", "table corrupted"],
        &["--budget", "30"],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    let f = only_finding(&s);
    assert_eq!(f["kind"], "stderr match");
    assert_eq!(f["signature"], "stderr match: ERROR: zone table corrupted after FADE");
    assert_eq!(f["shrunk_messages"], 1);
    let shrunk = read_trace(f["shrunk"].as_str().unwrap());
    assert!(shrunk.messages[0].bytes.starts_with(b"FADE"), "{:?}", shrunk.messages);
    // The stored replay command keeps the pattern; without it the same trace passes.
    let script = Path::new(f["shrunk"].as_str().unwrap()).with_file_name("replay.sh");
    let replay = Command::new("sh").arg(&script).output().unwrap();
    assert_eq!(replay.status.code(), Some(1), "{}", stdout(&replay));
    let plain = tracewalk(&["replay", f["shrunk"].as_str().unwrap(), "--exec", &exec, "-q"]);
    assert_eq!(plain.status.code(), Some(0), "{}", stdout(&plain));
}

#[test]
fn a_target_failing_one_run_in_ten_is_flaky_and_not_shrunk() {
    let dir = scratch("faults-flaky");
    // Chance that this test fails by bad luck: no failure in 150 runs 0.9^150 ≈ 1e-7; all five
    // confirming reruns failing too 0.1^5 = 1e-5.
    let out = hunt(
        lamp_model(),
        &dir.join("c"),
        &["--exec", &target("flaky")],
        &["--budget", "150", "--confirm", "5"],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    let f = only_finding(&s);
    assert_eq!(f["signature"], "exit 3: error: lost a race with the dimmer thread");
    assert_eq!(f["flaky"], true);
    assert_eq!(f["shrunk"], serde_json::Value::Null);
    assert_eq!(f["shrunk_messages"], serde_json::Value::Null);
    assert_eq!(f["shrink_runs"], 0, "no shrinking towards noise");
    let original = read_trace(f["original"].as_str().unwrap());
    assert!(original.get("flaky").is_some());
    let finding_dir = Path::new(f["original"].as_str().unwrap()).parent().unwrap();
    assert!(!finding_dir.join("shrunk.trace").exists());
    let stored: StoredFinding =
        serde_json::from_slice(&std::fs::read(finding_dir.join("finding.json")).unwrap()).unwrap();
    assert!(stored.flaky && stored.shrunk_messages.is_none());
}

#[test]
fn a_server_closing_the_connection_mid_reply_is_a_cut_reply() {
    let dir = scratch("faults-cut-reply");
    let pids = pid_dir(&dir);
    let env = format!("FAULTS_PIDS={}", pids.display());
    let spawn = target("cut-reply {port}");
    let out = hunt(
        shop_model(),
        &dir.join("c"),
        &["--tcp", "127.0.0.1:21851", "--spawn", &spawn, "--env", &env],
        &["--budget", "3", "--reply-timeout", "100ms"],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    assert_eq!(s["runs"], 3);
    let f = only_finding(&s);
    assert_eq!(f["signature"], "cut reply");
    assert_eq!(f["shrunk_messages"], 1, "one request is enough to be cut off");
    none_left_alive(&pids);
    assert!(std::net::TcpStream::connect("127.0.0.1:21851").is_err(), "the server is gone");
}

#[test]
fn a_server_that_never_accepts_is_a_hang_and_the_campaign_goes_on() {
    let dir = scratch("faults-no-accept");
    let pids = pid_dir(&dir);
    let env = format!("FAULTS_PIDS={}", pids.display());
    let quick = ["--timeout", "300ms", "--reply-timeout", "100ms", "--shrink-runs", "5"];
    // Started by tracewalk: the accept queue (one connection) fills, and a connect stalls.
    let spawn = target("no-accept {port}");
    let mut extra = vec!["--budget", "4"];
    extra.extend_from_slice(&quick);
    let started = Instant::now();
    let out = hunt(
        shop_model(),
        &dir.join("spawned"),
        &["--tcp", "127.0.0.1:21852", "--spawn", &spawn, "--env", &env],
        &extra,
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    assert_eq!(s["runs"], 4, "every run was made");
    // The connection tracewalk made to see the server up fills the queue: no run gets in.
    assert_eq!(findings(&s), [("timeout".to_string(), 1, Some(0))]);
    assert_eq!(only_finding(&s)["hits"], 4);
    none_left_alive(&pids);
    // Started by someone else: tracewalk cannot restart it, and each run still ends in time.
    let mut server = Command::new(misbehave())
        .args(["no-accept", "21853"])
        .env("FAULTS_PIDS", &pids)
        .stdin(Stdio::null())
        .spawn()
        .unwrap();
    let until = Instant::now() + Duration::from_secs(5);
    while std::fs::read_dir(&pids).unwrap().count() == 0 || !server_listening(21853) {
        assert!(Instant::now() < until, "the server did not start");
        std::thread::sleep(Duration::from_millis(10));
    }
    let out = hunt(shop_model(), &dir.join("external"), &["--tcp", "127.0.0.1:21853"], &extra);
    let _ = server.kill();
    let _ = server.wait();
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    assert_eq!(s["runs"], 4);
    // The first connection fits the queue and gets no reply; the queue is then full.
    for f in s["findings"].as_array().unwrap() {
        match f["kind"].as_str().unwrap() {
            "timeout" => {}
            "no reply" => assert_eq!(f["flaky"], true, "{f}"),
            other => panic!("unexpected {other}: {f}"),
        }
    }
    let kinds: BTreeSet<String> = findings(&s).into_iter().map(|f| f.0).collect();
    assert!(kinds.contains("timeout"), "{kinds:?}");
    // Responsive: runs of 300 ms each, not the kernel's minutes of connect retries.
    assert!(started.elapsed() < Duration::from_secs(60), "{:?}", started.elapsed());
}

/// Whether a listener exists on the port, without connecting (a connection would take the one
/// place in its accept queue): /proc/net/tcp lists it in state 0A.
fn server_listening(port: u16) -> bool {
    let needle = format!(":{port:04X} 00000000:0000 0A");
    std::fs::read_to_string("/proc/net/tcp").is_ok_and(|t| t.contains(&needle))
}

#[test]
fn hangs_and_children_holding_the_pipes_die_with_their_group() {
    let dir = scratch("faults-children");
    let pids = pid_dir(&dir);
    let p = pids.display();
    // Leaves a child behind that keeps stdout open, and exits 0: a pass, without waiting for it.
    let leaves = format!("sh -c 'cat > /dev/null; sleep 30 & echo $! > {p}/$!.pid; exit 0'");
    let started = Instant::now();
    let out = hunt(lamp_model(), &dir.join("leaves"), &["--exec", &leaves], &["--budget", "5"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert_eq!(summary(&out)["runs"], 5);
    assert!(started.elapsed() < Duration::from_secs(25), "waited for the children: {:?}", started.elapsed());
    none_left_alive(&pids);
    // Hangs, with a child: a timeout, and the whole group is killed.
    let hangs = format!("sh -c 'echo $$ > {p}/$$.pid; sleep 30 & echo $! > {p}/$!.pid; wait'");
    let out = hunt(
        lamp_model(),
        &dir.join("hangs"),
        &["--exec", &hangs, "--timeout", "300ms"],
        &["--budget", "2", "--shrink-runs", "3"],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let s = summary(&out);
    assert_eq!(only_finding(&s)["signature"], "timeout");
    none_left_alive(&pids);
}

// --- Interruption ----------------------------------------------------------------------------

/// Checks a campaign directory after a SIGKILL: every finding with `finding.json` is complete
/// and readable, every other file there is whole. Returns the runs of the checkpoint.
fn check_campaign_dir(dir: &Path) -> u64 {
    let state: serde_json::Value = match std::fs::read(dir.join("campaign.json")) {
        Ok(bytes) => serde_json::from_slice(&bytes).expect("campaign.json is whole"),
        Err(_) => serde_json::json!({"runs": 0}),
    };
    let Ok(listing) = std::fs::read_dir(dir.join("findings")) else { return 0 };
    for entry in listing {
        let path = entry.unwrap().path();
        let name = path.file_name().unwrap().to_str().unwrap().to_string();
        assert!(name.len() == 16 && name.bytes().all(|b| b.is_ascii_hexdigit()), "{name}");
        let files: BTreeSet<String> = std::fs::read_dir(&path)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_str().unwrap().to_string())
            .collect();
        for f in &files {
            assert!(
                [
                    "original.trace",
                    "shrunk.trace",
                    "output.txt",
                    "shrunk-output.txt",
                    "replay.sh",
                    "finding.json"
                ]
                .contains(&f.as_str())
                    || (f.starts_with(".tracewalk-") && f.ends_with(".tmp")),
                "unexpected {f} in {name}"
            );
        }
        for t in ["original.trace", "shrunk.trace"] {
            if files.contains(t) {
                let text = std::fs::read_to_string(path.join(t)).unwrap();
                Trace::parse(&text).unwrap_or_else(|e| panic!("{name}/{t} is whole: {e}"));
            }
        }
        if !files.contains("finding.json") {
            continue;
        }
        let stored: StoredFinding =
            serde_json::from_slice(&std::fs::read(path.join("finding.json")).unwrap()).unwrap();
        assert_eq!(finding_id(&stored.signature), name);
        for needed in ["original.trace", "output.txt", "replay.sh"] {
            assert!(files.contains(needed), "{name} is complete but lacks {needed}");
        }
        let original = Trace::parse(&std::fs::read_to_string(path.join("original.trace")).unwrap()).unwrap();
        assert_eq!(original.get("signature"), Some(stored.signature.as_str()));
        assert_eq!(original.messages.len(), stored.original_messages);
        if let Some(n) = stored.shrunk_messages {
            let shrunk = Trace::parse(&std::fs::read_to_string(path.join("shrunk.trace")).unwrap()).unwrap();
            assert_eq!(shrunk.messages.len(), n);
        }
    }
    state["runs"].as_u64().unwrap()
}

/// Hidden temporary files anywhere under `dir`.
fn temp_files(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.file_name().unwrap().to_str().unwrap().starts_with(".tracewalk-") {
                out.push(p);
            }
        }
    }
    out
}

#[test]
fn sigkill_at_seeded_moments_loses_nothing_and_resumes_to_the_same_findings() {
    let args = |dir: &Path, jobs: &str| -> Vec<String> {
        let mut a: Vec<String> = [
            "hunt",
            lamp_model().to_str().unwrap(),
            "--exec",
            lamp_hub().to_str().unwrap(),
            "--mode",
            "rare",
            "--seed",
            "7",
            "--budget",
            "2000",
            "-o",
            dir.to_str().unwrap(),
            "--json",
            "--brief",
            "--jobs",
            jobs,
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        a.extend(QUICK_PANICS.iter().map(|s| s.to_string()));
        a
    };
    let run = |a: &[String]| Command::new(env!("CARGO_BIN_EXE_tracewalk")).args(a).output().unwrap();
    let started = Instant::now();
    let reference = run(&args(&scratch("faults-kill-reference"), "1"));
    // Kill moments scale with how fast this machine runs the campaign whole.
    let whole = started.elapsed();
    let reference = summary(&reference);
    let expected = findings(&reference);
    assert!(expected.len() >= 2, "{expected:?}");
    let hits = |s: &serde_json::Value| -> Vec<u64> {
        s["findings"].as_array().unwrap().iter().map(|f| f["hits"].as_u64().unwrap()).collect()
    };

    let dir = scratch("faults-kill");
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(20);
    let mut checkpoint = 0;
    let mut checkpoints = Vec::new();
    let mut killed_with_temp_files = 0;
    for _ in 0..4 {
        let delay = whole.mul_f64(rng.random_range(0.05..0.3));
        let mut child = Command::new(env!("CARGO_BIN_EXE_tracewalk"))
            .args(args(&dir, "2"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(delay);
        child.kill().unwrap(); // SIGKILL
        child.wait().unwrap();
        let runs = check_campaign_dir(&dir);
        assert!(runs >= checkpoint, "the checkpoint went back from {checkpoint} to {runs}");
        checkpoint = runs;
        checkpoints.push((delay.as_millis(), runs));
        killed_with_temp_files += usize::from(!temp_files(&dir).is_empty());
    }
    // What a kill in the middle of a write leaves, planted so that the clean-up is always seen.
    let mut places = vec![dir.clone()];
    places.extend(std::fs::read_dir(dir.join("findings")).into_iter().flatten().map(|e| e.unwrap().path()));
    for place in &places {
        std::fs::write(place.join(".tracewalk-killed.tmp"), b"half a file").unwrap();
    }
    let last = run(&args(&dir, "2"));
    assert_eq!(last.status.code(), Some(1), "{}", stderr(&last));
    let last = summary(&last);
    assert_eq!(last["resumed_from"], checkpoint);
    assert_eq!(last["runs"], 2000);
    assert_eq!(last["session_runs"].as_u64().unwrap(), 2000 - checkpoint);
    assert_eq!(findings(&last), expected, "killed four times, the campaign finds what it finds whole");
    assert_eq!(hits(&last), hits(&reference), "hits are counted once each");
    check_campaign_dir(&dir);
    assert!(temp_files(&dir).is_empty(), "temporary files left by killed sessions are cleared");
    eprintln!(
        "whole campaign {whole:?}; kills (ms after start, checkpoint runs): {checkpoints:?}; kills leaving temp files: {killed_with_temp_files}"
    );
}

// --- Security --------------------------------------------------------------------------------

/// Every file under `dir` whose name holds `needle`.
fn files_named(dir: &Path, needle: &str) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.file_name().unwrap().to_string_lossy().contains(needle) {
                out.push(p.clone());
            }
            if p.symlink_metadata().unwrap().is_dir() {
                stack.push(p);
            }
        }
    }
    out
}

/// Runs tracewalk in `cwd` under umask 000 with TMPDIR set (the shell here is the test's, to
/// set the umask; tracewalk itself never uses one).
fn tracewalk_in(cwd: &Path, tmpdir: &Path, args: &[&str]) -> Output {
    Command::new("sh")
        .args(["-c", "umask 000; exec \"$0\" \"$@\"", env!("CARGO_BIN_EXE_tracewalk")])
        .args(args)
        .current_dir(cwd)
        .env("TMPDIR", tmpdir)
        .output()
        .unwrap()
}

/// Payloads a shell or a path built from them would act on: each would create a file named
/// with PWNED somewhere under the test's directory.
const PAYLOADS: &str = r#"builtins: false
classes:
  any:
    - {name: subst, value: '$(touch PWNED-subst)'}
    - {name: backticks, value: '`touch PWNED-ticks`'}
    - {name: separator, value: '; touch PWNED-semi; '}
    - {name: traversal, value: '../../PWNED-dots'}
    - {name: placeholder, value: '{file}{port} touch PWNED-file'}
"#;

#[test]
fn generated_payloads_never_reach_a_shell_or_a_path() {
    let root = scratch("faults-payloads");
    let cwd = root.join("work/here");
    let (tmp, rec) = (root.join("tmp"), root.join("rec"));
    for d in [&cwd, &tmp, &rec] {
        std::fs::create_dir_all(d).unwrap();
    }
    let hostile = root.join("payloads.yaml");
    std::fs::write(&hostile, PAYLOADS).unwrap();
    let exec = target(&format!("record {} {{file}}", rec.display()));
    let out = tracewalk_in(
        &cwd,
        &tmp,
        &[
            "hunt",
            lamp_model().to_str().unwrap(),
            "--exec",
            &exec,
            "--mode",
            "rare",
            "--hostile",
            hostile.to_str().unwrap(),
            "--hostile-rate",
            "1",
            "--budget",
            "25",
            "--shrink-runs",
            "40",
            "-o",
            "campaign",
            "--json",
        ],
    );
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let mut payloads_seen = BTreeSet::new();
    let mut runs = 0;
    for entry in std::fs::read_dir(&rec).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "bytes") {
            let bytes = std::fs::read(&path).unwrap();
            for needle in ["$(touch", "`touch", "; touch", "../../PWNED", "{file}{port}"] {
                if bytes.windows(needle.len()).any(|w| w == needle.as_bytes()) {
                    payloads_seen.insert(needle);
                }
            }
            continue;
        }
        runs += 1;
        // The command line is exactly the one given, {file} replaced by a temporary file's path.
        let record = std::fs::read_to_string(&path).unwrap();
        let argv: Vec<&str> = record.split('\0').collect();
        assert_eq!(argv.len(), 5, "{argv:?}");
        assert_eq!(argv[..3], [misbehave().to_str().unwrap(), "record", rec.to_str().unwrap()]);
        let file = Path::new(argv[3]);
        assert_eq!(file.parent(), Some(tmp.as_path()), "{argv:?}");
        let name = file.file_name().unwrap().to_str().unwrap();
        assert!(name.starts_with("tracewalk-") && name.ends_with(".trace-bytes"), "{name}");
        assert_eq!(argv[4], "mode=600", "the trace's temporary file is owner-only under umask 000");
    }
    assert!(runs >= 25, "{runs} runs recorded");
    assert_eq!(payloads_seen.len(), 5, "every payload was sent: {payloads_seen:?}");
    assert_eq!(files_named(&root, "PWNED"), Vec::<PathBuf>::new());
    assert_eq!(std::fs::read_dir(&tmp).unwrap().count(), 0, "temporary files are removed");
    // Stored findings: hash names, fixed file names, owner-only, although umask is 000.
    let s = summary(&out);
    assert!(!s["findings"].as_array().unwrap().is_empty());
    let campaign = cwd.join("campaign");
    check_campaign_dir(&campaign);
    let mut stack = vec![campaign];
    while let Some(d) = stack.pop() {
        let mode = std::fs::metadata(&d).unwrap().permissions().mode();
        assert_eq!(mode & 0o077, 0, "{} has mode {mode:o}", d.display());
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let mode = std::fs::metadata(&p).unwrap().permissions().mode();
                assert_eq!(mode & 0o077, 0, "{} has mode {mode:o}", p.display());
            }
        }
    }
}

#[test]
fn hostile_traces_models_and_manifests_stay_inside_the_given_paths() {
    let root = scratch("faults-hostile-files");
    let cwd = root.join("work/here");
    let tmp = root.join("tmp");
    std::fs::create_dir_all(&cwd).unwrap();
    std::fs::create_dir_all(&tmp).unwrap();
    let crash = target("crash-always");
    // A trace whose header fields and messages look like paths and commands.
    let trace = "%tracewalk-trace 1\n%source ../../PWNED-source\n%signature ../../PWNED-signature\n\
                 %model /tmp/PWNED-model\n\n@1\n../../PWNED-message\\n\n@2\n$(touch PWNED-subst)\\n\n@end\n";
    assert_eq!(Trace::parse(trace).unwrap().messages.len(), 2);
    std::fs::write(cwd.join("in.trace"), trace).unwrap();
    let out = tracewalk_in(&cwd, &tmp, &["replay", "in.trace", "--exec", &crash, "-q"]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let out = tracewalk_in(&cwd, &tmp, &["shrink", "in.trace", "--exec", &crash, "-o", "small.trace"]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let small = Trace::parse(&std::fs::read_to_string(cwd.join("small.trace")).unwrap()).unwrap();
    assert_eq!(small.messages.len(), 0);

    // A model whose every string is such a value: learned from a corpus of them.
    let corpus = root.join("corpus");
    std::fs::create_dir_all(&corpus).unwrap();
    let lines: String = (0..40)
        .map(|i| match i % 4 {
            0 => format!("GET ../../PWNED-model-{i}\n"),
            1 => format!("PUT /tmp/PWNED-abs-{i}\n"),
            2 => format!("RUN $(touch PWNED-run-{i}); `touch PWNED-tick`\n"),
            _ => "QUIT {file}\n".to_string(),
        })
        .collect();
    std::fs::write(corpus.join("s.txt"), lines.repeat(3)).unwrap();
    let model = cwd.join("hostile.model");
    let out = tracewalk_in(&cwd, &tmp, &["learn", "../../corpus", "-o", "hostile.model", "-q"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let m = model.to_str().unwrap();
    let out = tracewalk_in(&cwd, &tmp, &["gen", m, "-n", "5", "-o", "gen"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let out = tracewalk_in(&cwd, &tmp, &["seed", m, "-n", "5", "-o", "seeds"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let out =
        tracewalk_in(&cwd, &tmp, &["hunt", m, "--exec", &crash, "--budget", "5", "-o", "camp", "--json"]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    check_campaign_dir(&cwd.join("camp"));
    let names = |d: &str| -> Vec<String> {
        std::fs::read_dir(cwd.join(d))
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .collect()
    };
    assert!(names("gen").iter().all(|n| n.len() == 10 && n.ends_with(".trace")), "{:?}", names("gen"));
    assert!(names("seeds").iter().all(|n| n.len() == 32 && n.bytes().all(|b| b.is_ascii_hexdigit())));
    assert_eq!(files_named(&root, "PWNED"), Vec::<PathBuf>::new());
    assert!(!Path::new("/tmp/PWNED-model").exists() && !Path::new("/tmp/PWNED-abs-1").exists());

    // A manifest whose include patterns point outside its directory reads nothing there.
    let secret = root.join("secret");
    std::fs::create_dir_all(&secret).unwrap();
    std::fs::write(secret.join("s.txt"), "TOPSECRET line\n".repeat(50)).unwrap();
    let corp = root.join("corp");
    std::fs::create_dir_all(&corp).unwrap();
    std::fs::write(corp.join("a.txt"), "HELLO there\nBYE\n".repeat(30)).unwrap();
    std::fs::write(
        corp.join("corpus.yaml"),
        "include: ['*.txt', '../secret/*', '/**/secret/*', '**/../secret/s.txt']\nformat: lines\n",
    )
    .unwrap();
    let out = tracewalk_in(&cwd, &tmp, &["learn", corp.to_str().unwrap(), "-o", "corp.model", "-q"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let bytes = std::fs::read(cwd.join("corp.model")).unwrap();
    assert!(!bytes.windows(9).any(|w| w == b"TOPSECRET"), "the manifest reached outside its directory");
    assert!(bytes.windows(5).any(|w| w == b"HELLO"));
}

#[test]
fn a_symbolic_link_in_the_campaign_directory_is_never_written_through() {
    let root = scratch("faults-symlink");
    let outside = root.join("outside");
    std::fs::create_dir_all(&outside).unwrap();
    let camp = root.join("camp");
    std::fs::create_dir_all(camp.join("findings")).unwrap();
    // The directory the next finding would be stored in, planted as a link to elsewhere.
    let signature = "SIGABRT: fatal: the lamp table is gone";
    std::os::unix::fs::symlink(&outside, camp.join("findings").join(finding_id(signature))).unwrap();
    let out = hunt(lamp_model(), &camp, &["--exec", &target("crash-always")], &["--budget", "3"]);
    assert_eq!(out.status.code(), Some(2), "{}", stdout(&out));
    let err = stderr(&out);
    let last = err.lines().last().unwrap_or("");
    assert!(last.starts_with("tracewalk: ") && last.contains("symbolic link"), "{err}");
    assert!(last.contains(&finding_id(signature)), "{err}");
    assert_eq!(std::fs::read_dir(&outside).unwrap().count(), 0, "nothing written through the link");
}

#[test]
fn a_second_campaign_on_a_busy_directory_is_refused() {
    let dir = scratch("faults-busy");
    let campaign = dir.join("campaign");
    let (model, campaign_arg) = (lamp_model().to_str().unwrap(), campaign.to_str().unwrap());
    // The first campaign's target sleeps, so it holds the directory for seconds.
    let mut first = Command::new(env!("CARGO_BIN_EXE_tracewalk"))
        .args(["hunt", model, "--exec", "sleep 5", "--timeout", "20s", "--budget", "1", "-o", campaign_arg])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let lock = campaign.join("campaign.lock");
    let waited = Instant::now();
    while !lock.exists() && waited.elapsed() < Duration::from_secs(10) {
        std::thread::sleep(Duration::from_millis(20));
    }
    assert!(lock.exists(), "the first campaign started");
    let second = hunt(lamp_model(), &campaign, &["--exec", "true"], &["--budget", "1"]);
    let err = stderr(&second);
    assert_eq!(second.status.code(), Some(2), "{err}");
    assert!(err.contains("another tracewalk hunt is using this campaign directory"), "{err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    first.kill().unwrap();
    first.wait().unwrap();
    // The lock dies with its process: a killed campaign does not keep its directory busy.
    let after = hunt(lamp_model(), &campaign, &["--exec", "true"], &["--budget", "2"]);
    assert_eq!(after.status.code(), Some(0), "{}", stderr(&after));
}
