//! The model-file reader on arbitrary bytes; a model that loads must also predict.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    if let Ok((_, model)) = flipmend::io::model::read_model(data, Path::new("m.json")) {
        let features = model.weights.ncols();
        let x = ndarray::Array2::<f64>::zeros((2, features));
        let _ = model.predict_proba(x.view(), None);
    }
});
