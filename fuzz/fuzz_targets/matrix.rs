//! The flip-matrix CSV reader on arbitrary bytes.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;
mod common;

fuzz_target!(|data: &[u8]| {
    let d = common::dataset();
    let _ = flipmend::io::matrix_csv::read_matrix_csv(data, Path::new("m.csv"), &d.classes, true);
});
