//! From a crash of the structured lamp hub fuzz target to a shrunk readable trace: the crash
//! file's choices, `tracewalk decode` to the session the target ran, `tracewalk shrink` over the
//! demo binary, and the planted minimal session at the end.

mod common;
mod hunting;

// The fuzz targets run the demo hub in-process through this same file.
#[path = "../examples/lamp_hub.rs"]
#[allow(dead_code)]
mod lamp_hub;

use rand::{Rng, RngExt, SeedableRng};
use tracewalk::feed::{DecodeOptions, decode_bytes};
use tracewalk::trace::Trace;

use hunting::{QUICK_PANICS, lamp_hub, lamp_signature, messages, planted};

/// Engine-like inputs (seeded random choice bytes) until one whose decoded session crashes the
/// hub in-process, exactly as `fuzz/fuzz_targets/lamp_hub_structured.rs` runs it.
fn find_crashing_choices(model: &tracewalk::model::Compiled) -> (Vec<u8>, usize) {
    let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(7);
    let mut found = None;
    for tries in 1..=50_000 {
        let mut data = vec![0u8; rng.random_range(8..512)];
        rng.fill_bytes(&mut data);
        let session = decode_bytes(model, &data, &DecodeOptions::default());
        if std::panic::catch_unwind(|| lamp_hub::serve(session.as_slice(), std::io::sink())).is_err() {
            found = Some((data, tries));
            break;
        }
    }
    found.expect("random choices reach a planted bug of the lamp hub within 50000 tries")
}

#[test]
fn a_structured_crash_decodes_and_shrinks_to_the_planted_session() {
    let dir = hunting::scratch("fuzz-flow");
    let model_path = dir.join("lamp.model");
    let model_arg = model_path.to_str().unwrap();
    // The model fuzz/build.rs embeds in the lamp hub targets.
    let learn = common::tracewalk(&[
        "learn",
        common::corpus("lamp-control").to_str().unwrap(),
        "--order",
        "2,3",
        "-o",
        model_arg,
        "-q",
    ]);
    assert!(learn.status.success(), "{}", common::stderr(&learn));
    let (model, hash) = tracewalk::model::load_with_hash(&model_path).unwrap();
    let model = tracewalk::model::Compiled::new(model, hash).unwrap();

    let (choices, tries) = find_crashing_choices(&model);
    eprintln!("crashing choices found after {tries} inputs");
    let crash = dir.join("crash-choices");
    std::fs::write(&crash, &choices).unwrap();

    // decode: raw bytes identical to what the target ran, and a trace with the same wire bytes.
    let session = dir.join("session.raw");
    let raw = common::tracewalk(&[
        "decode",
        model_arg,
        crash.to_str().unwrap(),
        "--raw",
        "-o",
        session.to_str().unwrap(),
    ]);
    assert!(raw.status.success(), "{}", common::stderr(&raw));
    let ran = decode_bytes(&model, &choices, &DecodeOptions::default());
    assert_eq!(std::fs::read(&session).unwrap(), ran);
    let as_trace = common::tracewalk(&["decode", model_arg, crash.to_str().unwrap()]);
    assert!(as_trace.status.success(), "{}", common::stderr(&as_trace));
    let trace = Trace::parse(&common::stdout(&as_trace)).unwrap();
    assert_eq!(trace.wire_bytes(), ran);
    let signature = lamp_signature(&messages(&trace)).expect("the decoded session fails on the demo binary");

    // Which planted bug it is, and that bug's minimal session.
    let minimal = ["lamp-order", "lamp-transition", "lamp-boundary"]
        .iter()
        .map(|name| planted(name))
        .find(|p| lamp_signature(&messages(p)).as_deref() == Some(signature.as_str()))
        .unwrap_or_else(|| panic!("{signature} is not one of the planted bugs"));

    // shrink the decoded session on the demo binary over stdin. The trace, not the raw bytes:
    // slot values taken verbatim from the choices may hold NUL bytes, and the reader skips raw
    // files that look binary.
    let trace_path = dir.join("session.trace");
    std::fs::write(&trace_path, common::stdout(&as_trace)).unwrap();
    let small_path = dir.join("small.trace");
    let mut args = vec!["shrink", trace_path.to_str().unwrap(), "--exec", lamp_hub().to_str().unwrap()];
    args.extend(QUICK_PANICS);
    args.extend(["--model", model_arg, "-o", small_path.to_str().unwrap()]);
    let shrink = common::tracewalk(&args);
    assert_eq!(shrink.status.code(), Some(1), "{}", common::stderr(&shrink));
    let small = Trace::parse(&std::fs::read_to_string(&small_path).unwrap()).unwrap();
    assert_eq!(small.get("signature"), Some(signature.as_str()));
    assert_eq!(
        small.messages.len(),
        minimal.messages.len(),
        "shrunk to {:?}",
        small.messages.iter().map(|m| String::from_utf8_lossy(&m.bytes).into_owned()).collect::<Vec<_>>()
    );
    let replay = common::tracewalk(&[
        "replay",
        small_path.to_str().unwrap(),
        "--exec",
        lamp_hub().to_str().unwrap(),
        "-q",
    ]);
    assert_eq!(replay.status.code(), Some(1));
    assert!(common::stdout(&replay).contains(&signature));
}

#[test]
fn decode_names_a_missing_input_and_exits_2() {
    let dir = hunting::scratch("fuzz-flow-bad");
    let model = dir.join("lamp.model");
    let learn = common::tracewalk(&[
        "learn",
        common::corpus("lamp-control").to_str().unwrap(),
        "--order",
        "1",
        "-o",
        model.to_str().unwrap(),
        "-q",
    ]);
    assert!(learn.status.success(), "{}", common::stderr(&learn));
    let missing = dir.join("no-such-crash");
    let run = common::tracewalk(&["decode", model.to_str().unwrap(), missing.to_str().unwrap()]);
    assert_eq!(run.status.code(), Some(2));
    let err = common::stderr(&run);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("no-such-crash") && err.contains("cannot read"), "{err}");
}
