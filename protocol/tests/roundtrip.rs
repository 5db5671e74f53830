//! Round trip of every message type through the framing, the datagram path,
//! serde's own MessagePack decoding and JSON.

mod common;

use std::collections::BTreeSet;
use wahbad_protocol::*;

#[test]
fn every_sample_round_trips_through_frames() {
    let samples = common::samples();
    let mut stream = Vec::new();
    for msg in &samples {
        encode_frame_into(msg, &mut stream);
    }
    let mut dec = FrameDecoder::new();
    dec.push(&stream);
    let mut out = Vec::new();
    while let Some(msg) = dec.next_message().unwrap() {
        out.push(msg);
    }
    dec.finish().unwrap();
    assert_eq!(out, samples);
}

#[test]
fn every_sample_round_trips_as_a_datagram_and_through_serde() {
    for msg in common::samples() {
        let body = encode_body(&msg);
        assert_eq!(decode_datagram(&body).unwrap(), msg);
        // The derived serde path (internally tagged) agrees with decode_body.
        assert_eq!(rmp_serde::from_slice::<Message>(&body).unwrap(), msg);
        // JSON (used for logs and reports) has no infinity: serde_json writes
        // null, which must then be refused rather than read as a number.
        let json = serde_json::to_string(&msg).unwrap();
        match serde_json::from_str::<Message>(&json) {
            Ok(back) => assert_eq!(back, msg, "{json}"),
            Err(err) => {
                assert!(json.contains("null"), "{err}: {json}");
                assert!(err.to_string().contains("null"), "{err}");
            }
        }
    }
}

#[test]
fn type_key_comes_first_and_names_the_variant() {
    let mut seen = BTreeSet::new();
    for msg in common::samples() {
        let body = encode_body(&msg);
        let name = msg.type_name();
        // fixmap marker, then fixstr "type", then fixstr of the name.
        let mut head = vec![0xa4];
        head.extend_from_slice(b"type");
        head.push(0xa0 | name.len() as u8);
        head.extend_from_slice(name.as_bytes());
        assert_eq!(&body[1..1 + head.len()], &head[..], "{name}");
        seen.insert(name);
    }
    assert_eq!(
        seen,
        MESSAGE_TYPES.into_iter().collect(),
        "samples cover every type"
    );
}

#[test]
fn status_request_and_answer_are_told_apart() {
    let req = serde_json::from_str::<Message>(r#"{"type":"status"}"#).unwrap();
    assert_eq!(req, Message::Status(Status { report: None }));
    let answer = serde_json::from_str::<Message>(
        r#"{"type":"status","uptime_s":1,"sources":0,"subscribers":0,"accepted":0,"rejected":0,"dropped":0,"epochs":0,"extra":[1]}"#,
    )
    .unwrap();
    let Message::Status(Status {
        report: Some(report),
    }) = answer
    else {
        panic!("{answer:?}")
    };
    assert_eq!(report.uptime_s, 1.0);
    let partial = serde_json::from_str::<Message>(r#"{"type":"status","epochs":3}"#);
    assert!(partial
        .unwrap_err()
        .to_string()
        .contains("missing field `uptime_s`"));
}

#[test]
fn error_codes_have_their_wire_strings() {
    let wire: Vec<&str> = ErrorCode::ALL.iter().map(|c| c.as_str()).collect();
    assert_eq!(
        wire,
        ["version", "auth", "hello", "framing", "busy", "timeout", "shutdown"]
    );
    for code in ErrorCode::ALL {
        assert_eq!(ErrorCode::from_wire(code.as_str()), Some(code));
    }
    assert_eq!(ErrorCode::from_wire("nope"), None);
}
