//! Fuzz target: model files. The input is the body of a binary model file (a valid header with
//! the right hash is put in front, so the engine reaches decoding and validation), or, when it
//! starts with the YAML key, a YAML model file. Loading never panics; a model that loads also
//! compiles and generates.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tracewalk::generate::{GenOptions, Generator};
use tracewalk::model::{Compiled, from_bytes_with_hash};

fuzz_target!(|data: &[u8]| {
    let file = if data.starts_with(b"tracewalk_model:") {
        data.to_vec()
    } else {
        let mut f = b"TRACEWALK-MODEL\0".to_vec();
        f.extend_from_slice(&1u32.to_le_bytes());
        f.extend_from_slice(blake3::hash(data).as_bytes());
        f.extend_from_slice(data);
        f
    };
    let Ok((model, hash)) = from_bytes_with_hash(&file, "fuzz input") else { return };
    let Ok(compiled) = Compiled::new(model, hash) else { return };
    let options = GenOptions { max_messages: 8, max_tokens: 32, ..GenOptions::default() };
    let mut generator = Generator::new(&compiled, options).expect("valid options");
    let _ = generator.trace(0, 0);
});
