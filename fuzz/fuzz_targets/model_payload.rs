//! A learner kind (first byte) and arbitrary payload bytes, wrapped in a valid container:
//! every input reaches a learner's decoder and the checks after it.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Err(err) = bagwise::fuzzing::check_payload(data) {
        assert!(bagwise::fuzzing::names_its_argument(&err), "{err}");
    }
});
