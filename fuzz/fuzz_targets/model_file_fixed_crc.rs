//! Arbitrary bytes as a model file whose CRC-32 is recomputed before reading, so mutations
//! of the header and length fields reach the parsers behind the checksum.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let mut data = data.to_vec();
    bagwise::fuzzing::fix_checksum(&mut data);
    if let Err(err) = bagwise::fuzzing::check_file(&data) {
        assert!(bagwise::fuzzing::names_its_argument(&err), "{err}");
    }
});
