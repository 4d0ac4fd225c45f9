//! The probability CSV reader on arbitrary bytes.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;
mod common;

fuzz_target!(|data: &[u8]| {
    let d = common::dataset();
    let options = flipmend::data::ProbOptions {
        renormalize: data.first() == Some(&b'r'),
        delimiter: None,
    };
    let _ = flipmend::data::Probabilities::from_csv_reader(data, Path::new("p.csv"), &d, &options);
});
