//! Arbitrary bytes as a model file: the container must refuse them with an error naming
//! `data`, or the model they hold must predict (see `bagwise::fuzzing`).
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Err(err) = bagwise::fuzzing::check_file(data) {
        assert!(bagwise::fuzzing::names_its_argument(&err), "{err}");
    }
});
