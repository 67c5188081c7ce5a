//! Learns the models the fuzz targets embed, from the bundled shop-api (HTTP targets) and
//! lamp-control (lamp hub targets) corpora, with the tracewalk library itself (build scripts are not instrumented when building with `--target`).
//! At run time the environment variable TRACEWALK_FUZZ_MODEL may name another model file.

use std::path::PathBuf;

use tracewalk::model::{Encoding, LearnOptions, OrderChoice, learn, save};
use tracewalk::read;

fn main() {
    learn_into("shop-api", "shop.model");
    learn_into("lamp-control", "lamp.model");
}

/// Learns `corpora/NAME` with orders 2 (sessions) and 3 (messages): the same model, content hash
/// included, as `tracewalk learn corpora/NAME --order 2,3` writes, so `tracewalk decode` with
/// that file replays exactly what a structured target ran.
fn learn_into(name: &str, file: &str) {
    let root = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR").expect("set by cargo")).join("..");
    let corpus = root.join("corpora").join(name);
    println!("cargo:rerun-if-changed={}", corpus.join("corpus.yaml").display());
    println!("cargo:rerun-if-changed={}", corpus.join("sessions").display());
    let options = read::options_from_manifests(std::slice::from_ref(&corpus)).expect("corpus manifest");
    let corpus = read::read_paths(&[corpus], &options).expect("bundled corpus reads");
    let learn_options = LearnOptions {
        session_order: OrderChoice::Fixed(2),
        message_order: OrderChoice::Fixed(3),
        ..LearnOptions::default()
    };
    let (model, _) = learn(&corpus, &learn_options, None).expect("bundled corpus learns");
    let out = PathBuf::from(std::env::var("OUT_DIR").expect("set by cargo")).join(file);
    save(&model, &out, Encoding::Binary).expect("model written");
}
