//! Feeding coverage-guided engines: structured decoding of inputs into walks, and seed corpora.

mod common;

use arbitrary::Unstructured;
use rand::{Rng, SeedableRng};
use tracewalk::feed::{DecodeOptions, decode};

#[test]
fn every_input_decodes_to_a_walk_deterministically() {
    let model = common::learn_corpus("lamp-control", 2);
    let options = DecodeOptions::default();
    let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(1);
    for len in [0usize, 1, 3, 17, 64, 400, 4000] {
        for _ in 0..50 {
            let mut data = vec![0u8; len];
            rng.fill_bytes(&mut data);
            let a = decode(&model, &mut Unstructured::new(&data), &options);
            let b = decode(&model, &mut Unstructured::new(&data), &options);
            assert_eq!(a, b, "same input, same walk");
            assert!(a.steps.len() <= options.max_messages);
            for step in &a.steps {
                assert!(!step.render(&model).is_empty());
            }
        }
    }
    // An exhausted input ends the walk as soon as the chain allows: the empty input is the
    // shortest possible session.
    let empty = decode(&model, &mut Unstructured::new(&[]), &options);
    assert!(empty.ended);
    assert!(empty.steps.len() <= 1, "{} steps", empty.steps.len());
}

#[test]
fn decoded_choices_cover_the_learned_first_steps() {
    // Changing the first four bytes changes the first choice: the learned first messages are
    // all reachable by varying them.
    let model = common::learn_corpus("lamp-control", 1);
    let mut first = std::collections::BTreeSet::new();
    for k in 0..=255u8 {
        let data = [0, 0, 0, k, 0xff, 0xff, 0xff, 0xff];
        let walk = decode(&model, &mut Unstructured::new(&data), &DecodeOptions::default());
        if let Some(s) = walk.steps.first() {
            first.insert(s.render(&model).split(|&b| b == b' ').next().unwrap().to_vec());
        }
    }
    assert!(first.contains(b"HELLO".as_slice()), "{first:?}");
}

#[test]
fn seed_writes_raw_traces_named_by_content_hash() {
    let dir = tempfile::tempdir().unwrap();
    let model = dir.path().join("shop.model");
    let run = common::tracewalk(&[
        "learn",
        common::corpus("shop-api").to_str().unwrap(),
        "-o",
        model.to_str().unwrap(),
        "-q",
        "--order",
        "2",
    ]);
    assert!(run.status.success());
    let seeds = dir.path().join("seeds");
    let run = common::tracewalk(&[
        "seed",
        model.to_str().unwrap(),
        "-n",
        "40",
        "-o",
        seeds.to_str().unwrap(),
        "--seed",
        "3",
    ]);
    assert!(run.status.success(), "{}", common::stderr(&run));
    let files: Vec<_> = std::fs::read_dir(&seeds).unwrap().map(|e| e.unwrap().path()).collect();
    assert!(!files.is_empty() && files.len() <= 40);
    for f in files {
        let bytes = std::fs::read(&f).unwrap();
        let name = f.file_name().unwrap().to_str().unwrap().to_string();
        assert_eq!(name, blake3::hash(&bytes).to_hex()[..32].to_string());
        assert!(bytes.starts_with(b"POST ") || bytes.starts_with(b"GET "), "{name}");
    }
}
