//! The "Recording log format" section of `protocol/PROTOCOL.md` against the
//! writer: the preamble and the documented tick record, byte for byte (the
//! CRC in the document was computed with Python's `zlib.crc32`, the zlib
//! CRC-32 the format names).

use wahbad::record::{LogHeader, LogWriter, PREAMBLE_LEN};

fn hex_block(doc: &str, after: &str) -> Vec<u8> {
    let start = doc.find(after).expect("example heading") + after.len();
    let block = &doc[start..];
    let block = &block[block.find("```text").unwrap() + 7..];
    let block = &block[..block.find("```").unwrap()];
    block
        .lines()
        .flat_map(|line| {
            line.split_whitespace()
                .take_while(|word| word.len() == 2 && u8::from_str_radix(word, 16).is_ok())
                .map(|word| u8::from_str_radix(word, 16).unwrap())
                .collect::<Vec<_>>()
        })
        .collect()
}

#[test]
fn the_documented_bytes_are_what_the_writer_writes() {
    let doc = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../protocol/PROTOCOL.md"
    ))
    .unwrap();
    let expected_tick = hex_block(&doc, "### Example: a tick record");
    assert_eq!(expected_tick.len(), 25);
    let header = LogHeader {
        created_ns: 0,
        program: "p".into(),
        protocol: 1,
        origin: "test".into(),
        config: String::new(),
    };
    let mut writer = LogWriter::new(Vec::new(), &header).unwrap();
    let before = {
        writer.flush().unwrap();
        // Bytes so far: preamble + header record; the tick follows.
        let probe = LogWriter::new(Vec::new(), &header).unwrap();
        probe.finish("x", 0).unwrap().len() - end_len()
    };
    writer.write_tick(1_000_000_000, 5_000_000_000).unwrap();
    let bytes = writer.finish("shutdown", 0).unwrap();
    assert_eq!(&bytes[..8], b"WAHBADLG");
    assert_eq!(&bytes[8..PREAMBLE_LEN], &[0, 1, 0, 0], "version 1, flags 0");
    assert_eq!(&bytes[before..before + 25], &expected_tick[..]);
}

/// Length of an end record with reason "x" and `records` < 128.
fn end_len() -> usize {
    // kind + len + recv_ns + payload + crc; payload = fixmap(2) "records" int "reason" "x".
    let payload = rmp_serde::to_vec_named(&wahbad::record::LogEnd {
        records: 1,
        reason: "x".into(),
    })
    .unwrap();
    13 + payload.len() + 4
}
