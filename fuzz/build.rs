//! Learns the model the HTTP fuzz targets embed, from the bundled shop-api corpus, with the
//! tracewalk library itself (build scripts are not instrumented when building with `--target`).
//! At run time the environment variable TRACEWALK_FUZZ_MODEL may name another model file.

use std::path::PathBuf;

use tracewalk::model::{Encoding, LearnOptions, OrderChoice, learn, save};
use tracewalk::read;

fn main() {
    let root = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR").expect("set by cargo")).join("..");
    let corpus = root.join("corpora").join("shop-api");
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
    let out = PathBuf::from(std::env::var("OUT_DIR").expect("set by cargo")).join("shop.model");
    save(&model, &out, Encoding::Binary).expect("model written");
}
