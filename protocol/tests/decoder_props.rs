//! Property tests of the stream decoder: random bytes never panic it, and in a
//! stream of valid frames mixed with well-framed bad bodies, cut anywhere into
//! pieces, every valid frame is still decoded and every bad body is reported.

mod common;

use proptest::prelude::*;
use wahbad_protocol::*;

/// Pushes `pieces` one by one, draining after each; stops at a fatal error.
fn drain_all(pieces: &[&[u8]]) -> (Vec<Result<Message, FrameError>>, FrameDecoder) {
    let mut dec = FrameDecoder::new();
    let mut out = Vec::new();
    for piece in pieces {
        dec.push(piece);
        loop {
            match dec.next_message() {
                Ok(Some(msg)) => out.push(Ok(msg)),
                Ok(None) => break,
                Err(err) => {
                    let fatal = !err.can_continue();
                    out.push(Err(err));
                    if fatal {
                        return (out, dec);
                    }
                }
            }
        }
    }
    (out, dec)
}

/// A body that is well framed but can never decode (each kind by construction).
fn bad_body() -> impl Strategy<Value = Vec<u8>> {
    let junk = proptest::collection::vec(any::<u8>(), 0..40);
    prop_oneof![
        // 0xc1 is never used (MessagePack spec).
        junk.clone().prop_map(|j| [vec![0xc1], j].concat()),
        // A fixarray of positive fixints: not a map.
        proptest::collection::vec(0u8..0x80, 0..15).prop_map(|items| [
            vec![0x90 | items.len() as u8],
            items
        ]
        .concat()),
        // A map with an unknown type.
        "[a-z]{1,8}".prop_map(|name| {
            let name = format!("x-{name}");
            [
                vec![0x81, 0xa4],
                b"type".to_vec(),
                vec![0xa0 | name.len() as u8],
                name.into_bytes(),
            ]
            .concat()
        }),
        // fixmap of 15 pairs followed by fewer than 30 bytes: cut short.
        proptest::collection::vec(any::<u8>(), 0..29).prop_map(|j| [vec![0x8f], j].concat()),
        // A valid status request with trailing bytes.
        proptest::collection::vec(any::<u8>(), 1..10)
            .prop_map(|j| { [encode_body(&Message::Status(Status::request())), j].concat() }),
    ]
}

#[derive(Debug, Clone)]
enum Item {
    Good(Message),
    Bad(Vec<u8>),
}

fn item() -> impl Strategy<Value = Item> {
    let samples = common::samples();
    let n = samples.len();
    prop_oneof![
        3 => (0..n).prop_map(move |i| Item::Good(samples[i].clone())),
        1 => bad_body().prop_map(Item::Bad),
    ]
}

/// Cuts `bytes` at the given fractions into consecutive pieces.
fn cut<'a>(bytes: &'a [u8], cuts: &[f64]) -> Vec<&'a [u8]> {
    let mut at: Vec<usize> = cuts
        .iter()
        .map(|f| (f * bytes.len() as f64) as usize)
        .collect();
    at.push(0);
    at.push(bytes.len());
    at.sort_unstable();
    at.windows(2).map(|w| &bytes[w[0]..w[1]]).collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(512))]

    #[test]
    fn random_bytes_never_panic(
        bytes in proptest::collection::vec(any::<u8>(), 0..3000),
        cuts in proptest::collection::vec(0.0..1.0f64, 0..8),
    ) {
        let (_, dec) = drain_all(&cut(&bytes, &cuts));
        let _ = dec.finish();
        let _ = decode_body(&bytes);
        let _ = decode_datagram(&bytes);
    }

    #[test]
    fn random_bodies_in_good_frames_never_stop_the_stream(
        bodies in proptest::collection::vec(proptest::collection::vec(any::<u8>(), 1..200), 1..10),
    ) {
        let mut stream = Vec::new();
        for body in &bodies {
            stream.extend((body.len() as u32).to_be_bytes());
            stream.extend(body);
        }
        let (out, dec) = drain_all(&[&stream]);
        prop_assert_eq!(out.len(), bodies.len());
        for res in &out {
            if let Err(err) = res {
                prop_assert!(err.can_continue(), "{:?}", err);
            }
        }
        prop_assert!(dec.finish().is_ok());
    }

    #[test]
    fn valid_frames_around_bad_bodies_survive_any_cut(
        items in proptest::collection::vec(item(), 0..24),
        cuts in proptest::collection::vec(0.0..1.0f64, 0..16),
    ) {
        let mut stream = Vec::new();
        for item in &items {
            match item {
                Item::Good(msg) => encode_frame_into(msg, &mut stream),
                Item::Bad(body) => {
                    stream.extend((body.len() as u32).to_be_bytes());
                    stream.extend(body);
                }
            }
        }
        let (out, dec) = drain_all(&cut(&stream, &cuts));
        prop_assert_eq!(out.len(), items.len());
        for (item, res) in items.iter().zip(&out) {
            match (item, res) {
                (Item::Good(msg), Ok(got)) => prop_assert_eq!(msg, got),
                (Item::Bad(_), Err(err)) => prop_assert!(err.can_continue(), "{:?}", err),
                (item, res) => prop_assert!(false, "{:?} gave {:?}", item, res),
            }
        }
        prop_assert!(dec.finish().is_ok());
    }

    #[test]
    fn a_stream_cut_short_yields_every_whole_frame_before_the_cut(
        n_frames in 1usize..12,
        keep in 0.0..1.0f64,
    ) {
        let samples = common::samples();
        let mut stream = Vec::new();
        let mut ends = Vec::new();
        for msg in samples.iter().cycle().take(n_frames) {
            encode_frame_into(msg, &mut stream);
            ends.push(stream.len());
        }
        let kept = (keep * stream.len() as f64) as usize;
        let (out, dec) = drain_all(&[&stream[..kept]]);
        let n_whole = ends.iter().filter(|&&end| end <= kept).count();
        prop_assert_eq!(out.len(), n_whole);
        for (res, msg) in out.iter().zip(samples.iter().cycle()) {
            prop_assert_eq!(res.as_ref().unwrap(), msg);
        }
        let at_boundary = kept == 0 || ends.contains(&kept);
        prop_assert_eq!(dec.finish().is_ok(), at_boundary);
    }
}
