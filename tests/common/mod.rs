//! Helpers shared by integration tests.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use tracewalk::model::{Compiled, LearnOptions, OrderChoice};
use tracewalk::read::{self, ReadOptions};

/// Path of a bundled corpus.
pub fn corpus(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("corpora").join(name)
}

/// Runs the tracewalk binary.
pub fn tracewalk(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_tracewalk")).args(args).output().expect("binary runs")
}

/// Standard error of a run as text.
pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Standard output of a run as text.
pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Learns a bundled corpus through the library with its manifest's read options.
pub fn learn_corpus(name: &str, order: usize) -> Compiled {
    let path = corpus(name);
    let options: ReadOptions = read::options_from_manifests(std::slice::from_ref(&path)).unwrap();
    let corpus = read::read_paths(&[path], &options).unwrap();
    let opts = LearnOptions {
        session_order: OrderChoice::Fixed(order),
        message_order: OrderChoice::Fixed(order),
        ..LearnOptions::default()
    };
    let (model, _) = tracewalk::model::learn(&corpus, &opts, None).unwrap();
    let hash = tracewalk::model::content_hash(&model);
    Compiled::new(model, hash).unwrap()
}
