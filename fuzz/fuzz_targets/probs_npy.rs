//! The `.npy` reader on arbitrary bytes.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;
mod common;

fuzz_target!(|data: &[u8]| {
    let d = common::dataset();
    let _ = flipmend::data::Probabilities::from_npy_reader(
        data,
        Path::new("p.npy"),
        &d,
        &Default::default(),
    );
});
