//! The session-file reader on arbitrary bytes; a session that loads must write back and
//! read again to the same session.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::Path;

use flipmend::io::session::{read_session, write_session};

fuzz_target!(|data: &[u8]| {
    if let Ok(session) = read_session(data, Path::new("s.json")) {
        let mut out = Vec::new();
        write_session(&mut out, &session).expect("writing to memory");
        let again = read_session(&out[..], Path::new("s.json")).expect("a written session reads");
        assert_eq!(again, session);
    }
});
