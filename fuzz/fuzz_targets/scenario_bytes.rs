//! Arbitrary bytes as a scenario file: the parser and validator must refuse or accept them without
//! panicking, and whatever they accept must run through `check`, `analyze` and a small `run`.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // The binary reads files with `read_to_string`, which refuses invalid UTF-8 before parsing;
    // the lossy conversion still lets the fuzzer reach the parser with every byte string.
    let text = String::from_utf8_lossy(data);
    loancycle_fuzz::exercise(&text);
});
