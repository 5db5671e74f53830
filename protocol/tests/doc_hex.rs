//! Every hex example in `PROTOCOL.md` is what this crate encodes today, and
//! decodes back to its message. Regenerate with
//! `cargo run -p wahbad-protocol --example protocol_hex`.

#[path = "../examples/protocol_hex/list.rs"]
mod list;

use wahbad_protocol::{decode_body, encode_frame};

fn squash(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

#[test]
fn protocol_md_hex_examples_match_the_encoder() {
    let doc = squash(include_str!("../PROTOCOL.md"));
    for (title, msg) in list::doc_examples() {
        let frame = encode_frame(&msg);
        let hex = list::hex_lines(&frame);
        assert!(
            doc.contains(&squash(&hex)),
            "PROTOCOL.md lacks the {title} example; it encodes as:\n{hex}"
        );
        assert_eq!(decode_body(&frame[4..]).unwrap(), msg, "{title}");
    }
}

/// The body of an obs with `extra` (raw MessagePack key/value pairs) appended,
/// assembled by hand (MessagePack spec: fixmap, fixstr, float 64 0xcb).
fn obs_body(drop_key: &str, extra: &[u8], n_extra: u8) -> Vec<u8> {
    let mut pairs: Vec<(&str, Vec<u8>)> = vec![
        ("type", b"\xa3obs".to_vec()),
        ("sensor", b"\xa3sun".to_vec()),
        ("seq", vec![7]),
        ("t", vec![1]),
        (
            "b",
            [
                vec![0x93],
                vec![0xcb; 1],
                1.0f64.to_be_bytes().to_vec(),
                vec![0, 0],
            ]
            .concat(),
        ),
        ("r", vec![0x93, 1, 0, 0]),
    ];
    pairs.retain(|(k, _)| *k != drop_key);
    let mut v = vec![0x80 | (pairs.len() as u8 + n_extra)];
    for (k, val) in pairs {
        v.push(0xa0 | k.len() as u8);
        v.extend_from_slice(k.as_bytes());
        v.extend(val);
    }
    v.extend_from_slice(extra);
    v
}

#[test]
fn reasons_quoted_in_protocol_md_are_the_real_texts() {
    use wahbad_protocol::*;
    let doc = include_str!("../PROTOCOL.md");
    let mut reasons = vec![
        decode_body(&[0xc1]).unwrap_err().to_string(),
        decode_body(&[0x91, 0xa3, b'o', b'b', b's'])
            .unwrap_err()
            .to_string(),
        decode_body(b"\x81\x00\x01").unwrap_err().to_string(),
        decode_body(b"\x81\xa4type\xa9telemetry")
            .unwrap_err()
            .to_string(),
        decode_body(&obs_body("t", &[], 0)).unwrap_err().to_string(),
        decode_body(&obs_body("", b"\xa1t\x02", 1))
            .unwrap_err()
            .to_string(),
        FrameError::ZeroLength.to_string(),
        FrameError::TooLong { len: 65537 }.to_string(),
        FrameError::TooDeep {
            limit: MAX_DEPTH,
            ids: MessageIds::default(),
        }
        .to_string(),
        check_sensor_id("").unwrap_err().to_string(),
        check_sensor_id(&"a".repeat(65)).unwrap_err().to_string(),
        check_sensor_id("sun/2").unwrap_err().to_string(),
        ValidationError::SigmaOutOfRange { value: 4.0 }.to_string(),
        ValidationError::ZeroVector { field: "q" }.to_string(),
    ];
    let mut trailing = obs_body("", &[], 0);
    trailing.extend([0xc0, 0xc0]);
    let err = decode_body(&trailing).unwrap_err();
    reasons.push(
        err.to_string()
            .replace(&format!("{} bytes", trailing.len()), "93 bytes"),
    );
    let bad_b1 = obs_body("b", b"\xa1b\x93\x01\xa1x\x00", 1);
    reasons.push(decode_body(&bad_b1).unwrap_err().to_string());
    let obs = Obs {
        sensor: "sun".into(),
        seq: 1,
        t: 0,
        b: [0.0, f64::NAN, 1.0],
        r: [1.0, 0.0, 0.0],
        sigma: None,
        token: None,
    };
    reasons.push(validate_obs(&obs).unwrap_err().to_string());
    let no_sigma = Obs {
        b: [0.0, 0.0, 1.0],
        ..obs
    };
    let valid = validate_obs(&no_sigma).unwrap();
    reasons.push(valid.sigma_or(None).unwrap_err().to_string());
    let frame = encode_frame(&Message::Obs(Obs {
        seq: 7,
        t: 1_000_000_000,
        sigma: Some(0.001),
        ..no_sigma
    }));
    let mut dec = FrameDecoder::new();
    dec.push(&frame[..10]);
    reasons.push(dec.finish().unwrap_err().to_string());
    // An undecodable body in a good frame is a reject carrying that text.
    let mut dec = FrameDecoder::new();
    dec.push(&[0, 0, 0, 1, 0xc1]);
    let reject = dec.next_message().unwrap_err().to_reject().unwrap();
    reasons.push(reject.reason);
    for reason in reasons {
        assert!(
            doc.contains(&reason),
            "PROTOCOL.md does not quote the real text {reason:?}"
        );
    }
}
