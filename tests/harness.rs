//! The harness against misbehaving programs, the shrinker by brute force, and the property-test
//! helper.

mod common;
mod hunting;

use std::collections::HashSet;
use std::time::{Duration, Instant};

use rand::{RngExt, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use tracewalk::generate::{GenOptions, Mode};
use tracewalk::harness::property::{PropertyCheck, check_traces};
use tracewalk::harness::{CommandLine, Limits, ReplyFraming, Target, TargetKind, TargetSpec, Timing};
use tracewalk::shrink::{ShrinkOptions, shrink};
use tracewalk::trace::Trace;

fn exec(command: &str, timeout_ms: u64) -> Box<dyn Target + Send> {
    let mut spec = TargetSpec::new(
        TargetKind::Exec { command: CommandLine::parse(command).unwrap(), per_message: false },
        ReplyFraming::Lines { end: None },
    );
    spec.timing = Timing { run_timeout: Duration::from_millis(timeout_ms), ..Timing::default() };
    spec.build(0).unwrap()
}

/// Whether a process exists and is not a zombie (an orphan is reaped whenever init gets to it).
fn alive(pid: &str) -> bool {
    match std::fs::read_to_string(format!("/proc/{}/stat", pid.trim())) {
        // The state follows the parenthesised command name.
        Ok(stat) => !stat.rsplit_once(") ").is_some_and(|(_, rest)| rest.starts_with('Z')),
        Err(_) => false,
    }
}

#[test]
fn a_hang_is_a_timeout_and_its_whole_group_dies() {
    let dir = hunting::scratch("hang");
    let pidfile = dir.join("pid");
    let mut t = exec(&format!("sh -c 'sleep 30 & echo $! > {}; wait'", pidfile.display()), 300);
    let start = Instant::now();
    let r = t.run(&[b"x\n".to_vec()]).unwrap();
    assert!(start.elapsed() < Duration::from_secs(3), "{:?}", start.elapsed());
    assert_eq!(r.failure.unwrap().signature(), "timeout");
    let pid = std::fs::read_to_string(&pidfile).unwrap();
    // SIGKILL was sent before run returned; on a loaded machine the kernel may take a moment
    // to finish the process off.
    let gone = Instant::now() + Duration::from_secs(2);
    while alive(&pid) && Instant::now() < gone {
        std::thread::sleep(Duration::from_millis(10));
    }
    assert!(!alive(&pid), "the background child {pid} was killed with the group");
}

#[test]
fn a_child_holding_the_pipes_does_not_block_the_run() {
    let mut t = exec("sh -c 'sleep 30 & exit 0'", 5000);
    let start = Instant::now();
    let r = t.run(&[]).unwrap();
    assert!(start.elapsed() < Duration::from_secs(2), "{:?}", start.elapsed());
    assert!(r.failure.is_none(), "{:?}", r.failure);
}

#[test]
fn output_floods_are_bounded() {
    let mut t = exec("sh -c 'head -c 30000000 /dev/zero; echo boom >&2; exit 3'", 20_000);
    let r = t.run(&[]).unwrap();
    let f = r.failure.unwrap();
    assert_eq!(f.kind, "exit 3");
    assert_eq!(f.location, "boom");
    assert!(r.transcript.len() < 200_000, "{} bytes kept", r.transcript.len());
    assert!(String::from_utf8_lossy(&r.transcript).contains("bytes not kept"));
}

#[test]
fn running_out_of_memory_under_the_limit_is_reported_as_memory() {
    let dir = hunting::scratch("memory");
    let source = dir.join("hog.rs");
    std::fs::write(&source, "fn main() { let v = vec![7u8; 1 << 30]; println!(\"{}\", v[12345]); }\n")
        .unwrap();
    let bin = dir.join("hog");
    let ok = std::process::Command::new("rustc").args(["-O", "-o"]).arg(&bin).arg(&source).status().unwrap();
    assert!(ok.success());
    let mut spec = TargetSpec::new(
        TargetKind::Exec {
            command: CommandLine::parse(&bin.display().to_string()).unwrap(),
            per_message: false,
        },
        ReplyFraming::Lines { end: None },
    );
    spec.limits = Limits { memory_bytes: Some(256 << 20) };
    spec.oracles.memory_limited = true;
    let r = spec.build(0).unwrap().run(&[]).unwrap();
    assert_eq!(r.failure.unwrap().kind, "memory");
    // Without the limit the same program passes.
    assert!(exec(&bin.display().to_string(), 20_000).run(&[]).unwrap().failure.is_none());
}

/// True when `messages` hold the letters a, b, c in this order (with anything between).
fn ordered_abc(messages: &[Vec<u8>]) -> bool {
    let mut want = b"abc".iter().peekable();
    for m in messages {
        if want.peek().is_some_and(|&&w| m == &[w]) {
            want.next();
        }
    }
    want.peek().is_none()
}

#[test]
fn shrinking_is_one_minimal_and_never_repeats_a_candidate() {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(11);
    let mut checked = 0;
    while checked < 200 {
        let len = rng.random_range(3..40);
        let input: Vec<Vec<u8>> = (0..len).map(|_| vec![b"abcdxy"[rng.random_range(0..6)]]).collect();
        if !ordered_abc(&input) {
            continue;
        }
        let mut seen = HashSet::new();
        let mut repeats = 0;
        let result = shrink(&input, None, &ShrinkOptions::default(), |c| {
            if !seen.insert(c.to_vec()) {
                repeats += 1;
            }
            ordered_abc(c)
        });
        assert_eq!(repeats, 0);
        assert_eq!(result.calls, seen.len());
        let small = result.bytes();
        assert!(ordered_abc(&small));
        // Brute force: no single message can go.
        for i in 0..small.len() {
            let mut less = small.clone();
            less.remove(i);
            assert!(!ordered_abc(&less), "{input:?} shrank to {small:?}, not 1-minimal at {i}");
        }
        assert_eq!(small.len(), 3);
        checked += 1;
    }
}

#[test]
fn token_shrinking_keeps_line_ends_and_simplifies_values() {
    let model = common::learn_corpus("lamp-control", 2);
    let input: Vec<Vec<u8>> =
        vec![b"HELLO wallpanel-hall 2.1\n".to_vec(), b"SET zone=13 level=85\n".to_vec(), b"PING\n".to_vec()];
    // Fails while some message sets a level.
    let result = shrink(&input, Some(&model), &ShrinkOptions::default(), |c| {
        c.iter().any(|m| m.windows(6).any(|w| w == b"level="))
    });
    let small = result.bytes();
    assert_eq!(small.len(), 1);
    assert!(small[0].ends_with(b"\n"), "{:?}", String::from_utf8_lossy(&small[0]));
    assert!(small[0].len() < b"SET zone=13 level=85\n".len(), "{:?}", String::from_utf8_lossy(&small[0]));
    assert!(result.messages[0].edited && result.messages[0].origin == 1);
}

#[test]
fn the_property_helper_panics_with_the_shrunk_trace_and_the_seed() {
    let model = common::learn_corpus("lamp-control", 2);
    let check = PropertyCheck {
        cases: 2000,
        seed: 5,
        generate: GenOptions { mode: Mode::Rare, ..GenOptions::default() },
        ..PropertyCheck::default()
    };
    let outcome = std::panic::catch_unwind(|| {
        check_traces(&model, &check, |messages| {
            let fade = messages.iter().position(|m| m.starts_with(b"FADE"));
            match fade {
                Some(at) if messages[at..].iter().any(|m| m.starts_with(b"LIST")) => {
                    Err("zones listed during a fade".to_string())
                }
                _ => Ok(()),
            }
        })
    });
    let payload = outcome.expect_err("the property fails");
    let text = payload.downcast_ref::<String>().unwrap();
    assert!(text.contains("tracewalk property failed: property: zones listed during a fade"), "{text}");
    assert!(text.contains("TRACEWALK_SEED=5"), "{text}");
    let trace = Trace::parse(&text[text.find("%tracewalk-trace").unwrap()..]).unwrap();
    assert_eq!(trace.get("seed"), Some("5"));
    assert_eq!(trace.messages.len(), 2, "{}", trace.to_text());
    assert!(trace.messages[0].bytes.starts_with(b"FADE") && trace.messages[1].bytes.starts_with(b"LIST"));
}
