//! The reviewed-worklist reader on arbitrary bytes.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;
mod common;

fuzz_target!(|data: &[u8]| {
    let d = common::dataset();
    let _ = flipmend::io::review::read_review(data, Path::new("w.csv"), &d);
});
