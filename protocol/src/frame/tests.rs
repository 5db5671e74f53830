//! Byte-level tests of the framing and body decoding.
//!
//! Every hand-made byte string here is derived from the MessagePack
//! specification (github.com/msgpack/msgpack/blob/master/spec.md), named per
//! format family beside its use, never produced by the encoder under test.

use super::*;
use crate::message::{Hello, Lagged, Obs, Role, Status};

// --- hand assembly of MessagePack, straight from the spec -----------------

/// fixstr 0xa0-0xbf: 101XXXXX then the UTF-8 bytes (strings under 32 bytes).
fn fixstr(s: &str) -> Vec<u8> {
    assert!(s.len() < 32);
    let mut v = vec![0xa0 | s.len() as u8];
    v.extend_from_slice(s.as_bytes());
    v
}

/// fixmap 0x80-0x8f: 1000XXXX then key, value, key, value...
fn fixmap(pairs: &[(&str, Vec<u8>)]) -> Vec<u8> {
    assert!(pairs.len() < 16);
    let mut v = vec![0x80 | pairs.len() as u8];
    for (k, val) in pairs {
        v.extend(fixstr(k));
        v.extend_from_slice(val);
    }
    v
}

/// fixarray 0x90-0x9f: 1001XXXX then the elements.
fn fixarray(items: &[Vec<u8>]) -> Vec<u8> {
    let mut v = vec![0x90 | items.len() as u8];
    for item in items {
        v.extend_from_slice(item);
    }
    v
}

/// float 64 0xcb: then 8 bytes IEEE 754 big-endian.
fn f64_bytes(x: f64) -> Vec<u8> {
    let mut v = vec![0xcb];
    v.extend_from_slice(&x.to_be_bytes());
    v
}

/// A frame around `body`: 4-byte big-endian length (shared/protocol.md).
fn framed(body: &[u8]) -> Vec<u8> {
    let mut v = (body.len() as u32).to_be_bytes().to_vec();
    v.extend_from_slice(body);
    v
}

fn hex(bytes: &[u8]) -> String {
    bytes
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect::<Vec<_>>()
        .join(" ")
}

fn obs_pairs() -> Vec<(&'static str, Vec<u8>)> {
    vec![
        ("type", fixstr("obs")),
        ("sensor", fixstr("sun")),
        ("seq", vec![0x07]),
        ("t", vec![0xcd, 0x03, 0xe8]),
        (
            "b",
            fixarray(&[f64_bytes(0.0), f64_bytes(0.0), f64_bytes(1.0)]),
        ),
        (
            "r",
            fixarray(&[f64_bytes(1.0), f64_bytes(0.0), f64_bytes(0.0)]),
        ),
    ]
}

fn sample_obs() -> Obs {
    Obs {
        sensor: "sun".into(),
        seq: 7,
        t: 1000,
        b: [0.0, 0.0, 1.0],
        r: [1.0, 0.0, 0.0],
        sigma: None,
        token: None,
    }
}

fn one(body: &[u8]) -> FrameError {
    decode_body(body).expect_err("body must be refused")
}

// --- byte-exact test vectors ----------------------------------------------

#[test]
fn vector_hello_frame_is_byte_exact() {
    // MessagePack spec: fixmap 0x80-0x8f (3 pairs: 0x83), fixstr 0xa0-0xbf
    // ("type" = a4 74 79 70 65), positive fixint 0x00-0x7f (1 = 0x01).
    // Body: 1 + 5 + 6 + 8 + 1 + 5 + 7 = 33 bytes, prefix 00 00 00 21.
    let expected: [u8; 37] = [
        0x00, 0x00, 0x00, 0x21, // length 33, big-endian
        0x83, // fixmap, 3 pairs
        0xa4, b't', b'y', b'p', b'e', 0xa5, b'h', b'e', b'l', b'l', b'o', // type: "hello"
        0xa7, b'v', b'e', b'r', b's', b'i', b'o', b'n', 0x01, // version: 1
        0xa4, b'r', b'o', b'l', b'e', 0xa6, b's', b'o', b'u', b'r', b'c',
        b'e', // role: "source"
    ];
    let hello = Message::Hello(Hello {
        version: 1,
        role: Role::Source,
        name: None,
        token: None,
        verdicts: None,
    });
    assert_eq!(hex(&encode_frame(&hello)), hex(&expected));
    let mut dec = FrameDecoder::new();
    dec.push(&expected);
    assert_eq!(dec.next_message().unwrap(), Some(hello));
}

#[test]
fn vector_obs_frame_is_byte_exact() {
    // MessagePack spec: fixmap 0x86, fixstr keys, positive fixint 7 = 0x07,
    // uint 16 0xcd for 1000 = 0xcd 03 e8 (the smallest integer form),
    // fixarray 0x93, float 64 0xcb (1.0 = 3f f0 00 00 00 00 00 00, IEEE 754).
    // Body: 1 + (5+4) + (7+4) + (4+1) + (2+3) + (2+28) + (2+28) = 91 = 0x5b.
    let mut expected = vec![0x00, 0x00, 0x00, 0x5b, 0x86];
    expected.extend_from_slice(b"\xa4type\xa3obs\xa6sensor\xa3sun\xa3seq\x07\xa1t\xcd\x03\xe8");
    expected.extend_from_slice(b"\xa1b\x93");
    expected.extend_from_slice(b"\xcb\x00\x00\x00\x00\x00\x00\x00\x00");
    expected.extend_from_slice(b"\xcb\x00\x00\x00\x00\x00\x00\x00\x00");
    expected.extend_from_slice(b"\xcb\x3f\xf0\x00\x00\x00\x00\x00\x00");
    expected.extend_from_slice(b"\xa1r\x93");
    expected.extend_from_slice(b"\xcb\x3f\xf0\x00\x00\x00\x00\x00\x00");
    expected.extend_from_slice(b"\xcb\x00\x00\x00\x00\x00\x00\x00\x00");
    expected.extend_from_slice(b"\xcb\x00\x00\x00\x00\x00\x00\x00\x00");
    assert_eq!(expected.len(), 4 + 91);
    // The assembled helpers agree with the literal bytes.
    assert_eq!(hex(&expected), hex(&framed(&fixmap(&obs_pairs()))));
    let obs = Message::Obs(sample_obs());
    assert_eq!(hex(&encode_frame(&obs)), hex(&expected));
    assert_eq!(decode_body(&expected[4..]).unwrap(), obs);
}

#[test]
fn vector_lagged_and_status_request_are_byte_exact() {
    // MessagePack spec: uint 16 0xcd for 300 = 0xcd 01 2c; fixmap 0x82 / 0x81.
    let lagged = b"\x00\x00\x00\x18\x82\xa4type\xa6lagged\xa7skipped\xcd\x01\x2c";
    let msg = Message::Lagged(Lagged { skipped: 300 });
    assert_eq!(hex(&encode_frame(&msg)), hex(lagged));
    let status = b"\x00\x00\x00\x0d\x81\xa4type\xa6status";
    assert_eq!(
        hex(&encode_frame(&Message::Status(Status::request()))),
        hex(status)
    );
    assert_eq!(
        decode_body(&status[4..]).unwrap(),
        Message::Status(Status::request())
    );
}

#[test]
fn vector_obs_with_float32_and_integer_encodings_decodes() {
    // MessagePack spec: uint 64 0xcf, int 32 0xd2, float 32 0xca (1.0 =
    // 3f 80 00 00), int 8 0xd0, uint 8 0xcc, negative fixint 0xe0-0xff (0xe0 = -32).
    let body = fixmap(&[
        ("type", fixstr("obs")),
        ("sensor", fixstr("s1")),
        ("seq", vec![0xcf, 0, 0, 0, 0, 0, 0, 0, 7]),
        ("t", vec![0xd2, 0xff, 0xff, 0xff, 0x9c]),
        (
            "b",
            fixarray(&[vec![0xca, 0x3f, 0x80, 0, 0], vec![0x00], vec![0xd0, 0xff]]),
        ),
        (
            "r",
            fixarray(&[vec![0xcc, 0x02], f64_bytes(0.5), vec![0xe0]]),
        ),
        ("sigma", vec![0xca, 0x3d, 0xcc, 0xcc, 0xcd]), // float 32 nearest to 0.1
    ]);
    let Message::Obs(obs) = decode_body(&body).unwrap() else {
        panic!("not an obs")
    };
    assert_eq!(obs.seq, 7);
    assert_eq!(obs.t, -100);
    assert_eq!(obs.b, [1.0, 0.0, -1.0]);
    assert_eq!(obs.r, [2.0, 0.5, -32.0]);
    assert_eq!(obs.sigma, Some(f64::from(0.1f32)));
}

// --- number encodings -----------------------------------------------------

/// Every MessagePack integer family, with the value it encodes.
fn integer_encodings() -> Vec<(Vec<u8>, i128)> {
    vec![
        (vec![0x05], 5),                                              // positive fixint
        (vec![0x7f], 127),                                            // positive fixint max
        (vec![0xff], -1),                                             // negative fixint
        (vec![0xe0], -32),                                            // negative fixint min
        (vec![0xcc, 0xc8], 200),                                      // uint 8
        (vec![0xcd, 0x01, 0x00], 256),                                // uint 16
        (vec![0xce, 0x00, 0x01, 0x00, 0x00], 65536),                  // uint 32
        (vec![0xcf, 0, 0, 0, 1, 0, 0, 0, 0], 1 << 32),                // uint 64
        (vec![0xd0, 0x80], -128),                                     // int 8
        (vec![0xd1, 0xff, 0x00], -256),                               // int 16
        (vec![0xd2, 0xff, 0xff, 0x00, 0x00], -65536),                 // int 32
        (vec![0xd3, 0xff, 0xff, 0xff, 0xff, 0, 0, 0, 0], -(1 << 32)), // int 64
        (vec![0xd0, 0x05], 5),                                        // int 8, non-negative
    ]
}

fn obs_with(key: &str, value: Vec<u8>) -> Vec<u8> {
    let pairs: Vec<_> = obs_pairs()
        .into_iter()
        .map(|(k, v)| if k == key { (k, value.clone()) } else { (k, v) })
        .collect();
    fixmap(&pairs)
}

#[test]
fn floats_accept_every_integer_encoding_and_float32() {
    for (bytes, value) in integer_encodings() {
        let body = obs_with(
            "b",
            fixarray(&[bytes.clone(), f64_bytes(0.0), f64_bytes(1.0)]),
        );
        let Message::Obs(obs) = decode_body(&body).unwrap() else {
            panic!()
        };
        assert_eq!(obs.b[0], value as f64, "encoding {}", hex(&bytes));
    }
    // MessagePack spec: float 32 0xca; -2.5 = c0 20 00 00.
    let body = obs_with(
        "b",
        fixarray(&[vec![0xca, 0xc0, 0x20, 0, 0], f64_bytes(0.0), vec![1]]),
    );
    let Message::Obs(obs) = decode_body(&body).unwrap() else {
        panic!()
    };
    assert_eq!(obs.b, [-2.5, 0.0, 1.0]);
}

#[test]
fn integers_accept_every_integer_encoding() {
    for (bytes, value) in integer_encodings() {
        let body = obs_with("t", bytes.clone());
        let Message::Obs(obs) = decode_body(&body).unwrap() else {
            panic!()
        };
        assert_eq!(i128::from(obs.t), value, "t from {}", hex(&bytes));
        let seq = decode_body(&obs_with("seq", bytes.clone()));
        match u64::try_from(value) {
            Ok(v) => {
                let Message::Obs(obs) = seq.unwrap() else {
                    panic!()
                };
                assert_eq!(obs.seq, v, "seq from {}", hex(&bytes));
            }
            Err(_) => assert!(
                matches!(seq, Err(FrameError::WrongType { ref key, .. }) if key == "seq"),
                "negative seq {value} must be refused: {seq:?}"
            ),
        }
    }
    // Extremes: uint 64 max for seq, int 64 min for t.
    let body = obs_with(
        "seq",
        vec![0xcf, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff],
    );
    let Message::Obs(obs) = decode_body(&body).unwrap() else {
        panic!()
    };
    assert_eq!(obs.seq, u64::MAX);
    let body = obs_with("t", vec![0xd3, 0x80, 0, 0, 0, 0, 0, 0, 0]);
    let Message::Obs(obs) = decode_body(&body).unwrap() else {
        panic!()
    };
    assert_eq!(obs.t, i64::MIN);
}

#[test]
fn integer_fields_refuse_floats_and_out_of_range() {
    let err = one(&obs_with("t", f64_bytes(1.5)));
    assert!(
        matches!(&err, FrameError::WrongType { key, .. } if key == "t"),
        "{err:?}"
    );
    // uint 64 above i64::MAX cannot be a time.
    let err = one(&obs_with("t", vec![0xcf, 0x80, 0, 0, 0, 0, 0, 0, 0]));
    assert!(
        matches!(&err, FrameError::WrongType { key, .. } if key == "t"),
        "{err:?}"
    );
}

// --- decoder behaviour ----------------------------------------------------

#[test]
fn decoder_returns_none_until_a_frame_is_whole() {
    let frame = encode_frame(&Message::Obs(sample_obs()));
    let mut dec = FrameDecoder::new();
    for (idx, byte) in frame.iter().enumerate() {
        assert_eq!(dec.next_message().unwrap(), None, "after {idx} bytes");
        dec.push(std::slice::from_ref(byte));
    }
    assert_eq!(
        dec.next_message().unwrap(),
        Some(Message::Obs(sample_obs()))
    );
    assert_eq!(dec.next_message().unwrap(), None);
    assert_eq!(dec.buffered(), 0);
    dec.finish().unwrap();
}

#[test]
fn next_frame_gives_the_raw_body() {
    let body = fixmap(&obs_pairs());
    let mut dec = FrameDecoder::new();
    dec.push(&framed(&body));
    dec.push(&framed(&[0xc1]));
    assert_eq!(dec.next_frame().unwrap(), Some(&body[..]));
    // A bad body is still a good frame at this level.
    assert_eq!(dec.next_frame().unwrap(), Some(&[0xc1][..]));
    assert_eq!(dec.next_frame().unwrap(), None);
}

#[test]
fn encode_frame_into_appends_and_reuses_the_buffer() {
    let a = Message::Lagged(Lagged { skipped: 1 });
    let b = Message::Obs(sample_obs());
    let mut buf = b"junk".to_vec();
    encode_frame_into(&a, &mut buf);
    encode_frame_into(&b, &mut buf);
    let mut expected = b"junk".to_vec();
    expected.extend(encode_frame(&a));
    expected.extend(encode_frame(&b));
    assert_eq!(buf, expected);
    buf.clear();
    let cap = buf.capacity();
    encode_frame_into(&a, &mut buf);
    assert_eq!(
        buf.capacity(),
        cap,
        "a cleared buffer is reused, not regrown"
    );
    assert_eq!(buf, encode_frame(&a));
}

#[test]
fn bad_body_between_good_frames_does_not_stop_the_stream() {
    let good = encode_frame(&Message::Obs(sample_obs()));
    let mut stream = good.clone();
    stream.extend(framed(&[0x93, 1, 2, 3])); // not a map
    stream.extend(good.clone());
    let mut dec = FrameDecoder::new();
    dec.push(&stream);
    assert!(dec.next_message().unwrap().is_some());
    let err = dec.next_message().unwrap_err();
    assert_eq!(err, FrameError::NotAMap { found: "array" });
    assert!(err.can_continue());
    assert_eq!(err.error_code(), None);
    assert!(dec.next_message().unwrap().is_some());
    dec.finish().unwrap();
}

// --- frame size limits ----------------------------------------------------

/// An `error` message whose body is exactly `len` bytes (str 16 0xda message).
fn error_of_body_len(len: usize) -> Message {
    let probe = |n: usize| {
        Message::Error(crate::message::ErrorMessage {
            code: "framing".into(),
            message: "é".repeat(n / 2) + &"x".repeat(n % 2), // 2-byte UTF-8 chars too
        })
    };
    let overhead = encode_body(&probe(1000)).len() - 1000;
    let msg = probe(len - overhead);
    assert_eq!(encode_body(&msg).len(), len);
    msg
}

#[test]
fn largest_frame_is_accepted_and_one_byte_more_is_refused() {
    let largest = error_of_body_len(MAX_FRAME_LEN);
    let frame = try_encode_frame(&largest).unwrap();
    assert_eq!(&frame[..4], &[0x00, 0x01, 0x00, 0x00]);
    let mut dec = FrameDecoder::new();
    dec.push(&frame);
    assert_eq!(dec.next_message().unwrap(), Some(largest.clone()));
    assert_eq!(decode_datagram(&frame[4..]).unwrap(), largest);

    let over = error_of_body_len(MAX_FRAME_LEN + 1);
    let mut buf = b"kept".to_vec();
    let err = try_encode_frame_into(&over, &mut buf).unwrap_err();
    assert_eq!(
        err,
        EncodeError::TooLarge {
            len: MAX_FRAME_LEN + 1
        }
    );
    assert_eq!(buf, b"kept", "a refused frame leaves the buffer as it was");
    // The infallible encoder writes it anyway; the decoder refuses it as soon
    // as the prefix is in.
    let frame = encode_frame(&over);
    let mut dec = FrameDecoder::new();
    dec.push(&frame[..4]);
    let err = dec.next_message().unwrap_err();
    assert_eq!(
        err,
        FrameError::TooLong {
            len: MAX_FRAME_LEN + 1
        }
    );
    assert!(!err.can_continue());
    assert_eq!(err.error_code(), Some(ErrorCode::Framing));
    assert_eq!(
        decode_datagram(&frame[4..]).unwrap_err(),
        FrameError::TooLong {
            len: MAX_FRAME_LEN + 1
        }
    );
}

// --- every malformed-input class --------------------------------------------

#[test]
fn zero_length_is_fatal_and_sticky() {
    let mut dec = FrameDecoder::new();
    dec.push(&[0, 0, 0, 0]);
    dec.push(&encode_frame(&Message::Obs(sample_obs())));
    for _ in 0..2 {
        let err = dec.next_frame().unwrap_err();
        assert_eq!(err, FrameError::ZeroLength);
        assert!(!err.can_continue());
        assert_eq!(err.error_code(), Some(ErrorCode::Framing));
        assert_eq!(err.to_reject(), None);
    }
    assert_eq!(dec.finish(), Err(FrameError::ZeroLength));
    assert_eq!(decode_body(&[]), Err(FrameError::ZeroLength));
}

#[test]
fn huge_length_prefix_is_fatal() {
    let mut dec = FrameDecoder::new();
    dec.push(&[0xff, 0xff, 0xff, 0xff]);
    assert_eq!(
        dec.next_frame().unwrap_err(),
        FrameError::TooLong {
            len: u32::MAX as usize
        }
    );
}

#[test]
fn stream_cut_inside_a_frame_is_truncated() {
    let frame = encode_frame(&Message::Obs(sample_obs()));
    let mut dec = FrameDecoder::new();
    dec.push(&frame[..2]);
    assert_eq!(dec.next_frame().unwrap(), None);
    assert_eq!(
        dec.finish(),
        Err(FrameError::Truncated {
            buffered: 2,
            needed: 4
        })
    );
    dec.push(&frame[2..10]);
    let err = dec.finish().unwrap_err();
    assert_eq!(
        err,
        FrameError::Truncated {
            buffered: 10,
            needed: frame.len()
        }
    );
    assert!(!err.can_continue());
}

#[test]
fn undecodable_bodies() {
    // MessagePack spec: 0xc1 is "never used".
    let err = one(&[0xc1]);
    assert!(
        matches!(err, FrameError::Undecodable { offset: 0, .. }),
        "{err:?}"
    );
    assert!(err.can_continue());
    // Inside a well-formed frame: rejected, the connection stays open.
    assert_eq!(err.error_code(), None);
    assert!(err.is_undecodable());
    let reject = err.to_reject().unwrap();
    assert!(
        reject
            .reason
            .starts_with("undecodable MessagePack at byte 0: "),
        "{reject:?}"
    );
    assert_eq!((reject.sensor, reject.seq), (None, None));
    // In the first frame, where hello is expected: not decodable at all.
    assert_eq!(err.first_frame_code(), ErrorCode::Framing);
    // fixarray 0x92 announces 2 elements, only 1 follows.
    assert!(matches!(
        one(&[0x92, 0x01]),
        FrameError::Undecodable { offset: 2, .. }
    ));
    // str 8 0xd9 announcing 200 bytes with 3 present.
    assert!(matches!(
        one(&[0xd9, 200, b'a', b'b', b'c']),
        FrameError::Undecodable { .. }
    ));
    // A map cut after its keys still yields the ids read so far.
    let mut body = fixmap(&obs_pairs());
    body.truncate(body.len() - 5);
    let err = one(&body);
    let FrameError::Undecodable { ids, .. } = &err else {
        panic!("{err:?}")
    };
    assert_eq!(ids.sensor.as_deref(), Some("sun"));
    assert_eq!(ids.seq, Some(7));
    let reject = err.to_reject().unwrap();
    assert_eq!(
        (reject.sensor.as_deref(), reject.seq),
        (Some("sun"), Some(7))
    );
    assert_eq!(reject.reason, err.to_string());
    // Invalid UTF-8 in a string (fixstr of 0xff).
    let body = fixmap(&[("type", fixstr("obs")), ("sensor", vec![0xa1, 0xff])]);
    let err = one(&body);
    assert!(
        matches!(&err, FrameError::Undecodable { detail, .. } if detail.contains("UTF-8")),
        "{err:?}"
    );
}

/// A status request with an extension key holding `n` nested arrays, so the
/// body nests `n + 1` levels.
fn status_nested(n: usize) -> Vec<u8> {
    let mut deep = vec![0x91; n];
    deep.push(0xc0);
    fixmap(&[("type", fixstr("status")), ("x", deep)])
}

#[test]
fn nesting_up_to_the_limit_is_read_and_deeper_is_refused() {
    assert_eq!(
        decode_body(&status_nested(MAX_DEPTH - 1)).unwrap(),
        Message::Status(Status::request())
    );
    let err = one(&status_nested(MAX_DEPTH));
    assert_eq!(
        err,
        FrameError::TooDeep {
            limit: MAX_DEPTH,
            ids: MessageIds::default()
        }
    );
    // Hostile depth: an error, not a stack overflow.
    let err = one(&status_nested(1_000_000));
    assert!(matches!(err, FrameError::TooDeep { .. }));
    assert!(err.can_continue());
    assert_eq!(err.error_code(), None);
    assert_eq!(
        err.to_reject().unwrap().reason,
        "MessagePack nesting deeper than 32 maps/arrays"
    );
    assert_eq!(err.first_frame_code(), ErrorCode::Framing);
    assert!(matches!(
        one(&vec![0x91; 1_000_000]),
        FrameError::TooDeep { .. }
    ));
}

#[test]
fn trailing_bytes_inside_a_frame() {
    let mut body = fixmap(&obs_pairs());
    body.extend([0xc0, 0xc0]);
    let err = one(&body);
    let FrameError::TrailingBytes { len, trailing, ids } = &err else {
        panic!("{err:?}")
    };
    assert_eq!((*len, *trailing), (body.len(), 2));
    assert_eq!(ids.sensor.as_deref(), Some("sun"));
    assert_eq!(err.error_code(), None);
    let reject = err.to_reject().unwrap();
    assert_eq!(
        (reject.sensor.as_deref(), reject.seq),
        (Some("sun"), Some(7))
    );
    assert_eq!(
        reject.reason,
        format!(
            "2 trailing bytes after the message in a body of {} bytes",
            body.len()
        )
    );
    assert_eq!(err.first_frame_code(), ErrorCode::Framing);
    // Two whole messages in one frame.
    let mut two = fixmap(&obs_pairs());
    two.extend(fixmap(&obs_pairs()));
    assert!(matches!(one(&two), FrameError::TrailingBytes { .. }));
}

#[test]
fn not_a_map() {
    assert_eq!(one(&fixstr("obs")), FrameError::NotAMap { found: "string" });
    assert_eq!(one(&[0xc0]), FrameError::NotAMap { found: "nil" });
    assert_eq!(one(&f64_bytes(1.0)), FrameError::NotAMap { found: "float" });
    let err = one(&fixarray(&[fixstr("obs")]));
    assert_eq!(err, FrameError::NotAMap { found: "array" });
    assert_eq!(err.to_string(), "message is a MessagePack array, not a map");
    assert_eq!(err.to_reject().unwrap().sensor, None);
}

#[test]
fn non_string_key() {
    // A map whose first key is positive fixint 0: serde would take it for a
    // field index; the protocol wants string keys.
    let mut body = vec![0x82, 0x00, 0xa1, b'x'];
    body.extend(fixstr("type"));
    body.extend(fixstr("status"));
    let err = one(&body);
    assert!(
        matches!(
            err,
            FrameError::KeyNotString {
                found: "integer",
                ..
            }
        ),
        "{err:?}"
    );
    assert_eq!(err.error_code(), None);
}

#[test]
fn unknown_type_gives_a_reject_with_ids() {
    let body = fixmap(&[
        ("type", fixstr("telemetry")),
        ("sensor", fixstr("star1")),
        ("seq", vec![0xcd, 0x01, 0x00]),
    ]);
    let err = one(&body);
    assert!(matches!(&err, FrameError::UnknownType { name, .. } if name == "telemetry"));
    let reject = err.to_reject().unwrap();
    assert_eq!(reject.sensor.as_deref(), Some("star1"));
    assert_eq!(reject.seq, Some(256));
    assert_eq!(reject.reason, "unknown message type \"telemetry\"");
}

#[test]
fn missing_keys() {
    let err = one(&fixmap(&[("sensor", fixstr("sun"))]));
    assert!(
        matches!(&err, FrameError::MissingKey { key, .. } if key == "type"),
        "{err:?}"
    );
    let pairs: Vec<_> = obs_pairs().into_iter().filter(|(k, _)| *k != "t").collect();
    let err = one(&fixmap(&pairs));
    let reject = err.to_reject().unwrap();
    assert_eq!(reject.reason, "missing key `t`");
    assert_eq!(
        (reject.sensor.as_deref(), reject.seq),
        (Some("sun"), Some(7))
    );
    // Nested: a solution whose per-sensor entry lacks n_inliers.
    let mut sol = crate::message::Solution {
        t: 0,
        q: [1.0, 0.0, 0.0, 0.0],
        cov: [0.0; 9],
        status: crate::message::SolutionStatus::Ok,
        inlier_fraction: 1.0,
        n: 1,
        n_inliers: 1,
        method: "svd".into(),
        iterations: 1,
        sensors: vec![],
        verdicts: None,
        propagated: None,
    };
    sol.sensors.clear();
    let mut body = encode_body(&Message::Solution(sol));
    // Replace the empty sensors array (fixarray 0x90) by [{sensor:"a", n:1}].
    let at = body
        .windows(9)
        .position(|w| w == b"\xa7sensors\x90")
        .unwrap()
        + 8;
    body.splice(
        at..at + 1,
        fixarray(&[fixmap(&[("sensor", fixstr("a")), ("n", vec![1])])]),
    );
    let err = one(&body);
    assert!(
        matches!(&err, FrameError::MissingKey { key, .. } if key == "sensors[0].n_inliers"),
        "{err:?}"
    );
    // A partial status answer is not a request.
    let body = fixmap(&[("type", fixstr("status")), ("uptime_s", f64_bytes(1.0))]);
    let err = one(&body);
    assert!(
        matches!(&err, FrameError::MissingKey { key, .. } if key == "sources"),
        "{err:?}"
    );
}

#[test]
fn duplicate_keys() {
    let mut pairs = obs_pairs();
    pairs.push(("t", vec![0x01]));
    let err = one(&fixmap(&pairs));
    assert!(
        matches!(&err, FrameError::DuplicateKey { key, .. } if key == "t"),
        "{err:?}"
    );
    let mut pairs = obs_pairs();
    pairs.push(("type", fixstr("rate")));
    let err = one(&fixmap(&pairs));
    assert!(
        matches!(&err, FrameError::DuplicateKey { key, .. } if key == "type"),
        "{err:?}"
    );
}

#[test]
fn wrong_value_types() {
    let cases: Vec<(&str, Vec<u8>, &str)> = vec![
        ("b", fixarray(&[f64_bytes(1.0), f64_bytes(0.0)]), "b"), // 2 of 3 components
        (
            "b",
            fixarray(&[f64_bytes(1.0), fixstr("x"), f64_bytes(0.0)]),
            "b[1]",
        ),
        ("sensor", vec![0x05], "sensor"),
        ("seq", vec![0xff], "seq"),
        ("sigma", fixstr("small"), "sigma"),
    ];
    for (key, value, path) in cases {
        let err = one(&obs_with_extra(key, value));
        let FrameError::WrongType { key: got, ids, .. } = &err else {
            panic!("{err:?}")
        };
        assert_eq!(got, path);
        assert_eq!(err.error_code(), None);
        assert!(err
            .to_string()
            .starts_with(&format!("bad value for key `{path}`: ")));
        if key != "sensor" {
            assert_eq!(ids.sensor.as_deref(), Some("sun"));
        }
    }
    let hello = fixmap(&[
        ("type", fixstr("hello")),
        ("version", vec![1]),
        ("role", fixstr("pilot")),
    ]);
    assert!(matches!(one(&hello), FrameError::WrongType { ref key, .. } if key == "role"));
    let typeless = fixmap(&[("type", vec![0x03])]);
    assert!(matches!(one(&typeless), FrameError::WrongType { ref key, .. } if key == "type"));
}

/// The sample obs with `key` set to `value` (replaced or added).
fn obs_with_extra(key: &str, value: Vec<u8>) -> Vec<u8> {
    let mut pairs = obs_pairs();
    match pairs.iter_mut().find(|(k, _)| *k == key) {
        Some(pair) => pair.1 = value,
        None => pairs.push((leak(key), value)),
    }
    fixmap(&pairs)
}

fn leak(s: &str) -> &'static str {
    Box::leak(s.to_string().into_boxed_str())
}

#[test]
fn unknown_keys_of_every_kind_are_ignored() {
    // MessagePack spec: bin 8 0xc4, fixext 1 0xd4, ext 8 0xc7, map 16 0xde,
    // array 16 0xdc, true 0xc3, nil 0xc0, str 8 0xd9.
    let mut pairs = obs_pairs();
    pairs.push(("x_bin", vec![0xc4, 0x02, 0xde, 0xad]));
    pairs.push(("x_fixext", vec![0xd4, 0x01, 0x00]));
    pairs.push(("x_ext", vec![0xc7, 0x01, 0x05, 0x00]));
    pairs.push(("x_map16", vec![0xde, 0x00, 0x01, 0x01, 0x02])); // integer keys inside are fine
    pairs.push(("x_arr16", vec![0xdc, 0x00, 0x02, 0xc3, 0xc0]));
    pairs.push(("x_str8", vec![0xd9, 0x01, b'z']));
    let body = fixmap(&pairs);
    assert_eq!(decode_body(&body).unwrap(), Message::Obs(sample_obs()));
}

#[test]
fn optional_keys_may_be_nil() {
    let mut pairs = obs_pairs();
    pairs.push(("sigma", vec![0xc0]));
    assert_eq!(
        decode_body(&fixmap(&pairs)).unwrap(),
        Message::Obs(sample_obs())
    );
}

#[test]
fn error_codes_and_can_continue_per_class() {
    // Undecodable, too deep, trailing bytes: well framed but not MessagePack.
    let undecodable = [one(&[0xc1]), one(&status_nested(40)), one(&[0xc0, 0xc0])];
    // Well-formed MessagePack, not a valid message.
    let invalid = [one(&[0xc0]), one(&fixmap(&[("type", fixstr("nope"))]))];
    for err in undecodable.iter().chain(&invalid) {
        assert!(err.can_continue(), "{err:?}");
        assert_eq!(err.error_code(), None, "{err:?}");
        let reject = err.to_reject().unwrap();
        assert_eq!(reject.reason, err.to_string());
    }
    for err in &undecodable {
        assert!(err.is_undecodable(), "{err:?}");
        assert_eq!(err.first_frame_code(), ErrorCode::Framing, "{err:?}");
    }
    for err in &invalid {
        assert!(!err.is_undecodable(), "{err:?}");
        assert_eq!(err.first_frame_code(), ErrorCode::Hello, "{err:?}");
    }
    let fatal = [
        FrameError::ZeroLength,
        FrameError::TooLong { len: 70000 },
        FrameError::Truncated {
            buffered: 3,
            needed: 4,
        },
    ];
    for err in &fatal {
        assert!(!err.can_continue());
        assert_eq!(err.error_code(), Some(ErrorCode::Framing));
        assert_eq!(err.to_reject(), None);
        assert_eq!(err.first_frame_code(), ErrorCode::Framing);
    }
}

#[test]
fn garbage_body_between_good_frames_is_rejected_and_the_stream_goes_on() {
    let good = encode_frame(&Message::Obs(sample_obs()));
    let mut stream = good.clone();
    stream.extend(framed(&[0xc1, 0xff, 0x00])); // 0xc1: never used (MessagePack spec)
    stream.extend(framed(&status_nested(MAX_DEPTH)));
    stream.extend(framed(&[0xc0, 0xc0])); // nil, then a trailing nil
    stream.extend(good.clone());
    let mut dec = FrameDecoder::new();
    dec.push(&stream);
    assert!(dec.next_message().unwrap().is_some());
    for _ in 0..3 {
        let err = dec.next_message().unwrap_err();
        assert!(err.to_reject().is_some(), "{err:?}");
    }
    assert_eq!(
        dec.next_message().unwrap(),
        Some(Message::Obs(sample_obs()))
    );
    dec.finish().unwrap();
}

/// A source `hello` whose `version` value is the raw MessagePack `version`.
fn hello_with_version(version: Vec<u8>) -> Vec<u8> {
    fixmap(&[
        ("type", fixstr("hello")),
        ("version", version),
        ("role", fixstr("subscriber")),
    ])
}

#[test]
fn hello_version_reads_any_integer_and_clamps_out_of_range() {
    // shared/protocol.md: `version` is an int. MessagePack spec: positive
    // fixint, negative fixint 0xff = -1, int 64 0xd3, uint 64 0xcf.
    let version = |raw: Vec<u8>| match decode_body(&hello_with_version(raw)) {
        Ok(Message::Hello(h)) => h.version,
        other => panic!("{other:?}"),
    };
    assert_eq!(version(vec![0x01]), 1);
    assert_eq!(version(vec![0xcd, 0x01, 0x00]), 256);
    // Unsupported either way, so the daemon answers `version`, not `hello`.
    assert_eq!(version(vec![0xff]), 0);
    assert_eq!(
        version([vec![0xd3], i64::MIN.to_be_bytes().to_vec()].concat()),
        0
    );
    assert_eq!(
        version([vec![0xcf], u64::MAX.to_be_bytes().to_vec()].concat()),
        u32::MAX
    );
    // Not an integer: not a valid hello.
    let err = one(&hello_with_version(f64_bytes(1.0)));
    assert!(
        matches!(&err, FrameError::WrongType { key, .. } if key == "version"),
        "{err:?}"
    );
    assert_eq!(err.first_frame_code(), ErrorCode::Hello);
}

#[test]
fn hello_verdicts_default_to_true() {
    let Ok(Message::Hello(h)) = decode_body(&hello_with_version(vec![0x01])) else {
        panic!()
    };
    assert_eq!(h.verdicts, None);
    assert!(h.wants_verdicts());
    let h = Hello {
        verdicts: Some(false),
        ..h
    };
    assert!(!h.wants_verdicts());
}
