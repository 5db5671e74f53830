//! Fuzz target: `LogReader` over arbitrary bytes.
//!
//! Oracles: no panic and termination (records bounded by the input size);
//! once it returns `None` it keeps returning `None`; every record turns into
//! an input or a typed error through the live decoder and validation; the
//! header's configuration either parses or is a typed error.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wahbad::record::{record_input, LogReader, RECORD_HEAD_LEN, RECORD_TAIL_LEN};

fuzz_target!(|data: &[u8]| {
    let Ok(mut reader) = LogReader::new(data) else {
        return;
    };
    let _ = reader.header().estimator_config();
    let max_records = data.len() / (RECORD_HEAD_LEN + RECORD_TAIL_LEN) + 1;
    let mut n_read = 0usize;
    while let Some(record) = reader.next_record().expect("reading a slice cannot fail on i/o") {
        n_read += 1;
        assert!(n_read <= max_records, "more records than the bytes can hold");
        let _ = record_input(&record);
    }
    assert!(reader.next_record().unwrap().is_none(), "None must stick");
    assert_eq!(reader.n_records(), n_read as u64 + 1);
    let _ = reader.warnings().iter().map(|w| w.to_string()).count();
});
