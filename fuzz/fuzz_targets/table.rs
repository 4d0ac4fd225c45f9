//! The table loader on arbitrary bytes: Ok or Err, never a panic or a hang.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let options = flipmend::data::TableOptions::default();
    let _ = flipmend::data::Dataset::from_reader(data, Path::new("t.csv"), None, &options);
});
