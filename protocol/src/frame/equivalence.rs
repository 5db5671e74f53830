//! Property test: the fast path of [`decode_body`] gives exactly what the
//! general path (structural pass + serde) gives, on `obs`, `rate` and `truth`
//! bodies with random field encodings, key orders, unknown and repeated keys,
//! wrong types and random corruptions.
//!
//! Byte strings are assembled from the MessagePack specification's "Formats"
//! table (github.com/msgpack/msgpack/blob/master/spec.md), never by the
//! encoder under test.

use proptest::collection::vec;
use proptest::prelude::*;
use proptest::sample::{select, Index};
use proptest::strategy::ValueTree;
use proptest::test_runner::TestRunner;

use super::body::decode_general;
use super::fast::decode_fast;
use super::{decode_body, decode_datagram, encode_body, FrameDecoder, FrameError};
use crate::message::Message;

// --- MessagePack by hand --------------------------------------------------

/// One integer in family `family` (0 positive fixint, 1 negative fixint,
/// 2-5 uint 8/16/32/64 0xcc-0xcf, 6-9 int 8/16/32/64 0xd0-0xd3), when it fits.
fn int_in(v: i128, family: u8) -> Option<Vec<u8>> {
    let mut out = Vec::new();
    match family {
        0 => out.push(u8::try_from(v).ok().filter(|b| *b <= 0x7f)?),
        1 => out.push(i8::try_from(v).ok().filter(|b| *b >= -32)? as u8),
        2 => out.extend([0xcc, u8::try_from(v).ok()?]),
        3 => out.extend(
            [0xcd]
                .into_iter()
                .chain(u16::try_from(v).ok()?.to_be_bytes()),
        ),
        4 => out.extend(
            [0xce]
                .into_iter()
                .chain(u32::try_from(v).ok()?.to_be_bytes()),
        ),
        5 => out.extend(
            [0xcf]
                .into_iter()
                .chain(u64::try_from(v).ok()?.to_be_bytes()),
        ),
        6 => out.extend(
            [0xd0]
                .into_iter()
                .chain(i8::try_from(v).ok()?.to_be_bytes()),
        ),
        7 => out.extend(
            [0xd1]
                .into_iter()
                .chain(i16::try_from(v).ok()?.to_be_bytes()),
        ),
        8 => out.extend(
            [0xd2]
                .into_iter()
                .chain(i32::try_from(v).ok()?.to_be_bytes()),
        ),
        _ => out.extend(
            [0xd3]
                .into_iter()
                .chain(i64::try_from(v).ok()?.to_be_bytes()),
        ),
    }
    Some(out)
}

/// Any integer value, in a random family that holds it.
fn int_enc() -> BoxedStrategy<Vec<u8>> {
    int_enc_of(int_value())
}

/// A non-negative integer, in a random family that holds it.
fn uint_enc() -> BoxedStrategy<Vec<u8>> {
    int_enc_of(int_value().prop_map(i128::abs).boxed())
}

fn int_value() -> BoxedStrategy<i128> {
    let edges: Vec<i128> = vec![
        0,
        1,
        31,
        127,
        128,
        255,
        256,
        65535,
        65536,
        u32::MAX.into(),
        i128::from(u32::MAX) + 1,
        i64::MAX.into(),
        i128::from(i64::MAX) + 1,
        u64::MAX.into(),
        -1,
        -32,
        -33,
        -128,
        -129,
        -32768,
        -32769,
        i32::MIN.into(),
        i128::from(i32::MIN) - 1,
        i64::MIN.into(),
    ];
    prop_oneof![
        select(edges),
        any::<i64>().prop_map(i128::from),
        any::<u64>().prop_map(i128::from),
        -300i128..300,
    ]
    .boxed()
}

fn int_enc_of(value: BoxedStrategy<i128>) -> BoxedStrategy<Vec<u8>> {
    // A family too small for the value falls back to int 64 or uint 64.
    (value, 0u8..10)
        .prop_map(|(v, family)| {
            int_in(v, family)
                .or_else(|| int_in(v, 9))
                .or_else(|| int_in(v, 5))
                .unwrap_or_else(|| vec![0xcf, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff])
        })
        .boxed()
}

/// float 64 0xcb, float 32 0xca, big-endian IEEE 754.
fn f64_bytes(x: f64) -> Vec<u8> {
    [0xcb].into_iter().chain(x.to_be_bytes()).collect()
}

fn f32_bytes(x: f32) -> Vec<u8> {
    [0xca].into_iter().chain(x.to_be_bytes()).collect()
}

fn float_enc() -> BoxedStrategy<Vec<u8>> {
    let edges = vec![0.0, -0.0, 1.0, 0.5, 1e-300, 5e-324, f64::MAX, f64::INFINITY];
    prop_oneof![
        4 => any::<f64>().prop_map(f64_bytes),
        1 => select(edges).prop_map(f64_bytes),
        2 => any::<f32>().prop_map(f32_bytes),
        2 => int_enc(),
    ]
    .boxed()
}

/// A string in family `family`: 0 fixstr (when under 32 bytes), 1 str 8,
/// 2 str 16, 3 str 32.
fn str_in(text: &[u8], family: u8) -> Vec<u8> {
    let len = text.len();
    let mut out = match family {
        0 if len < 32 => vec![0xa0 | len as u8],
        0 | 1 if len < 256 => vec![0xd9, len as u8],
        0..=2 => [0xda]
            .into_iter()
            .chain((len as u16).to_be_bytes())
            .collect(),
        _ => [0xdb]
            .into_iter()
            .chain((len as u32).to_be_bytes())
            .collect(),
    };
    out.extend_from_slice(text);
    out
}

/// Mostly sensor-like names, some any Unicode, some arbitrary (maybe not UTF-8) bytes.
fn text() -> BoxedStrategy<Vec<u8>> {
    prop_oneof![
        24 => "[a-z_.-]{0,12}".prop_map(String::into_bytes),
        3 => "\\PC{0,40}".prop_map(String::into_bytes),
        1 => vec(any::<u8>(), 0..6),
    ]
    .boxed()
}

/// A string of 1 to 3 arbitrary bytes, mostly not UTF-8.
fn raw_str() -> BoxedStrategy<Vec<u8>> {
    (vec(any::<u8>(), 1..4), 0u8..4)
        .prop_map(|(t, f)| str_in(&t, f))
        .boxed()
}

fn str_enc() -> BoxedStrategy<Vec<u8>> {
    (text(), 0u8..4).prop_map(|(t, f)| str_in(&t, f)).boxed()
}

/// An array header in family `family` (0 fixarray when under 16, 1 array
/// 16 0xdc, 2 array 32 0xdd), then the items.
fn array_in(items: &[Vec<u8>], family: u8) -> Vec<u8> {
    let n = items.len();
    let mut out = match family {
        0 if n < 16 => vec![0x90 | n as u8],
        0 | 1 => [0xdc].into_iter().chain((n as u16).to_be_bytes()).collect(),
        _ => [0xdd].into_iter().chain((n as u32).to_be_bytes()).collect(),
    };
    out.extend(items.iter().flatten());
    out
}

/// A map header of `n` pairs in family `family` (0 fixmap when under 16,
/// 1 map 16 0xde, 2 map 32 0xdf).
fn map_header(n: usize, family: u8) -> Vec<u8> {
    match family {
        0 if n < 16 => vec![0x80 | n as u8],
        0 | 1 => [0xde].into_iter().chain((n as u16).to_be_bytes()).collect(),
        _ => [0xdf].into_iter().chain((n as u32).to_be_bytes()).collect(),
    }
}

/// Any MessagePack scalar, including bin (0xc4), ext (fixext 1 0xd4, ext 8
/// 0xc7) and the never-used marker 0xc1.
fn scalar() -> BoxedStrategy<Vec<u8>> {
    prop_oneof![
        4 => Just(vec![0xc0]),
        4 => Just(vec![0xc2]),
        4 => Just(vec![0xc3]),
        4 => int_enc(),
        4 => float_enc(),
        4 => str_enc(),
        4 => vec(any::<u8>(), 0..5).prop_map(|d| [0xc4, d.len() as u8].into_iter().chain(d).collect()),
        2 => (any::<u8>(), any::<u8>()).prop_map(|(ty, d)| vec![0xd4, ty, d]),
        2 => (any::<u8>(), vec(any::<u8>(), 0..4))
            .prop_map(|(ty, d)| [0xc7, d.len() as u8, ty].into_iter().chain(d).collect()),
        1 => Just(vec![0xc1]),
    ]
    .boxed()
}

/// Any MessagePack value, [`scalar`]s nested up to 3 levels.
fn any_value() -> BoxedStrategy<Vec<u8>> {
    scalar()
        .prop_recursive(3, 16, 4, |inner| {
            prop_oneof![
                (vec(inner.clone(), 0..4), 0u8..3).prop_map(|(items, f)| array_in(&items, f)),
                (vec((inner.clone(), inner), 0..3), 0u8..3).prop_map(|(pairs, f)| {
                    let mut out = map_header(pairs.len(), f);
                    out.extend(pairs.into_iter().flat_map(|(k, v)| k.into_iter().chain(v)));
                    out
                }),
            ]
        })
        .boxed()
}

/// A float array of `n` items, now and then of the wrong length.
fn float_array(n: usize) -> BoxedStrategy<Vec<u8>> {
    let len = prop_oneof![40 => Just(n), 1 => Just(n - 1), 1 => Just(n + 1)];
    (len, 0u8..3)
        .prop_flat_map(|(len, f)| (vec(float_enc(), len), Just(f)))
        .prop_map(|(items, f)| array_in(&items, f))
        .boxed()
}

/// A value for `key` of the right type, or (now and then) any value.
fn field_value(key: &str) -> BoxedStrategy<Vec<u8>> {
    let good = match key {
        "sensor" => str_enc(),
        "seq" => prop_oneof![4 => uint_enc(), 1 => int_enc()].boxed(),
        "t" => {
            let in_range = int_value().prop_map(|v| v.clamp(i64::MIN.into(), i64::MAX.into()));
            prop_oneof![12 => int_enc_of(in_range.boxed()), 1 => int_enc(), 1 => float_enc()]
                .boxed()
        }
        "b" | "r" | "w" => float_array(3),
        "q" => float_array(4),
        "sigma" => prop_oneof![6 => float_enc(), 1 => Just(vec![0xc0])].boxed(),
        "token" => prop_oneof![6 => str_enc(), 1 => Just(vec![0xc0])].boxed(),
        other => unreachable!("no field {other}"),
    };
    prop_oneof![40 => good, 1 => any_value()].boxed()
}

type Pair = (Vec<u8>, Vec<u8>);

fn key_enc(key: &'static str) -> BoxedStrategy<Vec<u8>> {
    (0u8..4)
        .prop_map(move |f| str_in(key.as_bytes(), f))
        .boxed()
}

/// An extra pair: a key of another type or no type (any value), a repeat of
/// a known key, or (rarely) a key that is not a string.
fn extra_pair() -> BoxedStrategy<Pair> {
    let names = vec![
        "x", "note", "w", "q", "b", "r", "sigma", "sensor", "seq", "t", "token", "type",
    ];
    prop_oneof![
        6 => (select(names), 0u8..4)
            .prop_flat_map(|(k, f)| {
                let value = match k {
                    "x" | "note" | "type" => prop_oneof![3 => scalar(), 1 => any_value()].boxed(),
                    known => field_value(known),
                };
                (Just(str_in(k.as_bytes(), f)), value)
            }),
        2 => (str_enc(), any_value()),
        // Strings of raw bytes, often not UTF-8, as key or as value.
        1 => (raw_str(), scalar()),
        1 => (str_enc(), raw_str()),
        1 => (any_value(), any_value()),
    ]
    .boxed()
}

/// The pairs of one `ty` message, before shuffling.
fn pairs_for(ty: &'static str) -> BoxedStrategy<Vec<Pair>> {
    let keys: &[(&'static str, bool)] = match ty {
        "obs" => &[
            ("sensor", false),
            ("seq", false),
            ("t", false),
            ("b", false),
            ("r", false),
            ("sigma", true),
            ("token", true),
        ],
        "rate" => &[
            ("sensor", false),
            ("seq", false),
            ("t", false),
            ("w", false),
            ("token", true),
        ],
        _ => &[("t", false), ("q", false), ("token", true)],
    };
    let fields: Vec<BoxedStrategy<Option<Pair>>> = keys
        .iter()
        .map(|&(key, optional)| {
            let p_present = if optional { 0.5 } else { 0.96 };
            prop::option::weighted(p_present, (key_enc(key), field_value(key))).boxed()
        })
        .collect();
    let type_value = prop_oneof![
        14 => (0u8..4).prop_map(move |f| str_in(ty.as_bytes(), f)),
        1 => select(vec!["obs", "rate", "truth", "hello", "status", "nope"])
            .prop_map(|t| str_in(t.as_bytes(), 0)),
        1 => any_value(),
    ];
    let type_pair = prop::option::weighted(0.97, (key_enc("type"), type_value));
    let extras = prop_oneof![3 => Just(Vec::new()).boxed(), 2 => vec(extra_pair(), 1..4).boxed()];
    (fields, type_pair, extras)
        .prop_map(|(fields, type_pair, extras)| {
            fields
                .into_iter()
                .flatten()
                .chain(type_pair)
                .chain(extras)
                .collect()
        })
        .boxed()
}

#[derive(Debug, Clone)]
enum Corruption {
    None,
    Truncate(Index),
    Flip(Index, u8),
    Insert(Index, u8),
    Append(Vec<u8>),
}

fn corruption() -> impl Strategy<Value = Corruption> {
    prop_oneof![
        24 => Just(Corruption::None),
        1 => any::<Index>().prop_map(Corruption::Truncate),
        1 => (any::<Index>(), 1u8..=255).prop_map(|(i, x)| Corruption::Flip(i, x)),
        1 => (any::<Index>(), any::<u8>()).prop_map(|(i, b)| Corruption::Insert(i, b)),
        1 => vec(any::<u8>(), 1..3).prop_map(Corruption::Append),
    ]
}

/// A whole body: shuffled pairs behind a map header whose count is now and
/// then off by one, then maybe corrupted.
fn body() -> impl Strategy<Value = Vec<u8>> {
    select(vec!["obs", "rate", "truth"])
        .prop_flat_map(pairs_for)
        .prop_flat_map(|pairs| {
            let count_delta = prop_oneof![40 => Just(0i64), 1 => Just(1), 1 => Just(-1)];
            (
                Just(pairs).prop_shuffle(),
                0u8..3,
                count_delta,
                corruption(),
            )
        })
        .prop_map(|(pairs, family, delta, corruption)| {
            let count = (pairs.len() as i64 + delta).max(0) as usize;
            let mut body = map_header(count, family);
            body.extend(pairs.into_iter().flat_map(|(k, v)| k.into_iter().chain(v)));
            match corruption {
                Corruption::None => {}
                Corruption::Truncate(at) => body.truncate(at.index(body.len())),
                Corruption::Flip(at, x) => {
                    let i = at.index(body.len());
                    body[i] ^= x;
                }
                Corruption::Insert(at, b) => body.insert(at.index(body.len() + 1), b),
                Corruption::Append(extra) => body.extend(extra),
            }
            body
        })
}

// --- comparison -----------------------------------------------------------

/// Equal results: messages equal bit for bit (floats compared through their
/// encoding, so NaN and -0.0 count), errors equal in value, text and code.
fn check_same(
    got: &Result<Message, FrameError>,
    want: &Result<Message, FrameError>,
) -> Result<(), TestCaseError> {
    match (got, want) {
        (Ok(a), Ok(b)) => prop_assert_eq!(encode_body(a), encode_body(b), "{:?} vs {:?}", a, b),
        (Err(a), Err(b)) => {
            prop_assert_eq!(a, b);
            prop_assert_eq!(a.to_string(), b.to_string());
            prop_assert_eq!(a.error_code(), b.error_code());
        }
        _ => prop_assert!(false, "{:?} vs {:?}", got, want),
    }
    Ok(())
}

fn framed(body: &[u8]) -> Vec<u8> {
    let mut out = (body.len() as u32).to_be_bytes().to_vec();
    out.extend_from_slice(body);
    out
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(3000))]

    #[test]
    fn every_public_decoder_matches_the_general_path(body in body()) {
        let want = decode_general(&body);
        if let Some(fast) = decode_fast(&body) {
            check_same(&Ok(fast), &want)?;
        }
        check_same(&decode_body(&body), &want)?;
        check_same(&decode_datagram(&body), &want)?;
        let mut decoder = FrameDecoder::new();
        decoder.push(&framed(&body));
        let streamed = decoder
            .next_message()
            .map(|m| m.expect("the frame is whole"));
        check_same(&streamed, &want)?;
    }
}

/// The generator must exercise both sides: bodies the fast path takes, of
/// each type, and bodies it leaves to the general path, some good, some bad.
#[test]
fn generated_bodies_reach_both_paths() {
    let mut runner = TestRunner::deterministic();
    let strategy = body();
    let (mut fast, mut general_ok, mut general_err) = (0, 0, 0);
    let mut fast_types = std::collections::BTreeSet::new();
    let n_cases = 3000;
    for _ in 0..n_cases {
        let body = strategy.new_tree(&mut runner).expect("tree").current();
        match (decode_fast(&body), decode_general(&body)) {
            (Some(msg), _) => {
                fast += 1;
                fast_types.insert(msg.type_name());
            }
            (None, Ok(_)) => general_ok += 1,
            (None, Err(_)) => general_err += 1,
        }
    }
    assert!(
        fast > n_cases / 5,
        "fast path took only {fast} of {n_cases}"
    );
    assert!(
        general_err > n_cases / 5,
        "only {general_err} errors of {n_cases}"
    );
    assert!(general_ok > 10, "only {general_ok} fallbacks decoded");
    assert_eq!(fast_types.len(), 3, "{fast_types:?}");
}
