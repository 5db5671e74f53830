//! Byte-level tests of the log writer and reader: round trip, torn tail,
//! damage in the middle, empty and foreign files.

use super::*;

fn header() -> LogHeader {
    LogHeader {
        created_ns: 1_700_000_000_000_000_000,
        program: "wahbad test".into(),
        protocol: 1,
        origin: "test".into(),
        config: "period_ms = 100\n".into(),
    }
}

/// A log with `n` frames (bodies of distinct lengths), a tick, and the end record.
fn sample_log(n: usize) -> Vec<u8> {
    let mut writer = LogWriter::new(Vec::new(), &header()).unwrap();
    for idx in 0..n {
        let body = vec![idx as u8; 10 + idx];
        writer.write_frame(1000 + idx as i64, &body).unwrap();
    }
    writer.write_tick(5000, 123_456_789).unwrap();
    writer.finish("finished", 6000).unwrap()
}

fn read_all(bytes: &[u8]) -> (Vec<Record>, Vec<ReadWarning>, bool) {
    let mut reader = LogReader::new(bytes).unwrap();
    let mut records = Vec::new();
    while let Some(record) = reader.next_record().unwrap() {
        records.push(record);
    }
    (records, reader.warnings().to_vec(), reader.ended_cleanly())
}

#[test]
fn round_trip_keeps_every_byte_and_order() {
    let bytes = sample_log(5);
    assert_eq!(&bytes[..8], MAGIC);
    let reader = LogReader::new(&bytes[..]).unwrap();
    assert_eq!(reader.header(), &header());
    let (records, warnings, clean) = read_all(&bytes);
    assert!(warnings.is_empty(), "{warnings:?}");
    assert!(clean);
    assert_eq!(records.len(), 7);
    for (idx, record) in records.iter().take(5).enumerate() {
        assert_eq!(
            record,
            &Record::Frame {
                recv_ns: 1000 + idx as i64,
                body: vec![idx as u8; 10 + idx]
            }
        );
    }
    assert_eq!(
        records[5],
        Record::Tick {
            recv_ns: 5000,
            bench_ns: 123_456_789
        }
    );
    match &records[6] {
        Record::End { end, .. } => {
            assert_eq!(end.records, 7);
            assert_eq!(end.reason, "finished");
        }
        other => panic!("expected end, got {other:?}"),
    }
}

#[test]
fn record_layout_is_as_documented() {
    let mut writer = LogWriter::new(Vec::new(), &header()).unwrap();
    writer
        .write_frame(0x0102_0304_0506_0708, &[0xAA, 0xBB])
        .unwrap();
    let bytes = writer.finish("x", 0).unwrap();
    // Find the frame record: kind 'F', len 2, recv_ns, payload, crc.
    let at = bytes
        .windows(5)
        .position(|w| w == [b'F', 0, 0, 0, 2])
        .expect("frame record");
    assert_eq!(
        &bytes[at + 5..at + 13],
        &[1, 2, 3, 4, 5, 6, 7, 8],
        "recv_ns big-endian"
    );
    assert_eq!(&bytes[at + 13..at + 15], &[0xAA, 0xBB]);
    let crc = crc32(&bytes[at..at + 15]);
    assert_eq!(&bytes[at + 15..at + 19], &crc.to_be_bytes());
    assert_eq!(&bytes[8..12], &[0, 1, 0, 0], "version 1, flags 0");
}

#[test]
fn torn_tail_reads_up_to_last_whole_record() {
    let full = sample_log(5);
    // Cut inside the tick record: frames survive, tick and end do not.
    let tick_at = full
        .windows(5)
        .position(|w| w == [b'T', 0, 0, 0, 8])
        .unwrap();
    for cut in [tick_at + 1, tick_at + 12, tick_at + 20] {
        let (records, warnings, clean) = read_all(&full[..cut]);
        assert_eq!(records.len(), 5, "cut at {cut}");
        assert!(!clean);
        assert!(
            warnings.iter().any(
                |w| matches!(w, ReadWarning::TornTail { offset, .. } if *offset == tick_at as u64)
            ),
            "{warnings:?}"
        );
        assert!(warnings
            .iter()
            .any(|w| matches!(w, ReadWarning::NoCleanEnd { .. })));
    }
    // Cut exactly between records: no torn tail, but no clean end either.
    let (records, warnings, clean) = read_all(&full[..tick_at]);
    assert_eq!(records.len(), 5);
    assert!(!clean);
    assert_eq!(warnings, vec![ReadWarning::NoCleanEnd { records: 6 }]);
}

#[test]
fn damaged_middle_record_is_skipped_and_reading_goes_on() {
    let mut bytes = sample_log(5);
    // Flip a payload byte of the third frame (body [2; 12]).
    let third = bytes
        .windows(5)
        .position(|w| w == [b'F', 0, 0, 0, 12])
        .unwrap();
    bytes[third + 13 + 3] ^= 0xFF;
    let (records, warnings, clean) = read_all(&bytes);
    assert!(clean, "the end record is still found");
    let frames: Vec<_> = records
        .iter()
        .filter_map(|r| match r {
            Record::Frame { body, .. } => Some(body[0]),
            _ => None,
        })
        .collect();
    assert_eq!(frames, vec![0, 1, 3, 4]);
    assert_eq!(
        warnings,
        vec![ReadWarning::Resynced {
            offset: third as u64,
            skipped: (13 + 12 + 4) as u64
        }]
    );
}

#[test]
fn damaged_length_field_resyncs() {
    let mut bytes = sample_log(5);
    let second = bytes
        .windows(5)
        .position(|w| w == [b'F', 0, 0, 0, 11])
        .unwrap();
    bytes[second + 1] = 0x7F; // absurd length
    let (records, warnings, _) = read_all(&bytes);
    let n_frames = records
        .iter()
        .filter(|r| matches!(r, Record::Frame { .. }))
        .count();
    assert_eq!(n_frames, 4);
    assert!(matches!(warnings[0], ReadWarning::Resynced { offset, .. } if offset == second as u64));
}

#[test]
fn empty_foreign_and_future_files_are_clear_errors() {
    assert!(matches!(LogReader::new(&[][..]), Err(RecordError::Empty)));
    assert!(matches!(
        LogReader::new(&b"hello, this is not a log"[..]),
        Err(RecordError::NotALog)
    ));
    let mut future = sample_log(1);
    future[9] = 9;
    assert!(matches!(
        LogReader::new(&future[..]),
        Err(RecordError::UnsupportedVersion(9))
    ));
    let full = sample_log(1);
    assert!(matches!(
        LogReader::new(&full[..20]),
        Err(RecordError::BadHeader(_))
    ));
    let msg = RecordError::NotALog.to_string();
    assert!(msg.contains("not a wahbad log"), "{msg}");
}

#[test]
fn long_logs_are_read_in_bounded_buffers() {
    let mut writer = LogWriter::new(Vec::new(), &header()).unwrap();
    let body = vec![7u8; 60_000];
    for idx in 0..40 {
        writer.write_frame(idx, &body).unwrap();
    }
    let bytes = writer.finish("finished", 0).unwrap();
    let (records, warnings, clean) = read_all(&bytes);
    assert!(warnings.is_empty());
    assert!(clean);
    assert_eq!(records.len(), 41);
}

#[test]
fn token_masking_keeps_length_and_hides_secret() {
    let mut body = b"\x82\xa4type\xa3obs\xa5token\xa6s3cr3t".to_vec();
    let len = body.len();
    mask_token(&mut body, b"s3cr3t");
    assert_eq!(body.len(), len);
    assert!(!body.windows(6).any(|w| w == b"s3cr3t"));
    assert!(body.ends_with(b"******"));
}

#[test]
fn oversize_payload_is_refused() {
    let mut writer = LogWriter::new(Vec::new(), &header()).unwrap();
    let err = writer.write_frame(0, &vec![0u8; 70_000]).unwrap_err();
    assert!(matches!(err, RecordError::TooLarge { .. }));
}
