//! The Parquet and Arrow IPC table readers on arbitrary bytes: Ok or Err, never a panic
//! that escapes, an abort or a hang. The readers take a path, so each input is written to
//! one file per process; the first byte picks the format. Seeds: the fixtures of
//! `tests/data` (good.parquet, good.feather), with a leading 0 or 1.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // libfuzzer-sys's panic hook aborts on any panic, even one flipmend catches
    // (`io::columnar::guarded` turns arrow-rs decoder panics into errors). A silent hook
    // replaces it, so only a panic that escapes the loader (libfuzzer-sys still aborts on
    // those) counts as a crash.
    static HOOK: std::sync::Once = std::sync::Once::new();
    HOOK.call_once(|| std::panic::set_hook(Box::new(|_| {})));
    let Some((&pick, bytes)) = data.split_first() else {
        return;
    };
    let extension = if pick % 2 == 0 { "parquet" } else { "feather" };
    let path =
        std::env::temp_dir().join(format!("flipmend-fuzz-{}.{extension}", std::process::id()));
    if std::fs::write(&path, bytes).is_err() {
        return;
    }
    let options = flipmend::data::TableOptions::default();
    let _ = flipmend::data::Dataset::load(&path, &options);
});
