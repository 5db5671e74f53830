//! Fuzz target: the stream frame decoder over arbitrary bytes, fed in
//! arbitrary chunks, and body decoding of every frame it yields.
//!
//! Input: byte 0 seeds the chunk sizes, the rest is the stream.
//! Oracles: chunking never changes what comes out (frames, the fatal error,
//! `finish`); a body error never claims the stream is lost; a decoded message
//! re-encodes to a body that decodes and encodes to the same bytes.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wahbad_protocol::{decode_body, decode_datagram, encode_body, FrameDecoder, FrameError};

/// What a decoder produced from a stream.
#[derive(Debug, PartialEq)]
struct Outcome {
    frames: Vec<Vec<u8>>,
    fatal: Option<FrameError>,
    finish: Result<(), FrameError>,
}

fn drain(decoder: &mut FrameDecoder, out: &mut Outcome) {
    if out.fatal.is_some() {
        return;
    }
    loop {
        match decoder.next_frame() {
            Ok(Some(body)) => out.frames.push(body.to_vec()),
            Ok(None) => return,
            Err(err) => {
                assert!(!err.can_continue(), "next_frame failed with a body error: {err}");
                assert!(err.error_code().is_some());
                out.fatal = Some(err);
                return;
            }
        }
    }
}

fn run(stream: &[u8], chunk_seed: u8) -> Outcome {
    let mut decoder = FrameDecoder::new();
    let mut out = Outcome {
        frames: Vec::new(),
        fatal: None,
        finish: Ok(()),
    };
    let mut rest = stream;
    let mut state = u32::from(chunk_seed) | 1;
    while !rest.is_empty() {
        // xorshift32: cheap, deterministic chunk sizes of 1..=64 bytes.
        state ^= state << 13;
        state ^= state >> 17;
        state ^= state << 5;
        let size = if chunk_seed == 0 {
            rest.len()
        } else {
            (state % 64 + 1) as usize
        };
        let (piece, tail) = rest.split_at(size.min(rest.len()));
        decoder.push(piece);
        drain(&mut decoder, &mut out);
        rest = tail;
    }
    out.finish = decoder.finish();
    if let Some(fatal) = &out.fatal {
        // A fatal error sticks.
        assert_eq!(decoder.next_frame().err().as_ref(), Some(fatal));
    }
    out
}

fn check_body(body: &[u8]) {
    match decode_body(body) {
        Ok(msg) => {
            let again = encode_body(&msg);
            let msg2 = decode_body(&again).expect("a re-encoded message decodes");
            assert_eq!(encode_body(&msg2), again, "encoding is not stable");
        }
        Err(err) => {
            assert!(err.can_continue(), "a body error must not be fatal: {err}");
            assert!(err.error_code().is_none());
            let _ = err.to_reject().expect("a body error is answered by a reject");
            let _ = err.first_frame_code();
        }
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&seed, stream)) = data.split_first() else {
        return;
    };
    let whole = run(stream, 0);
    let chunked = run(stream, seed);
    let bytewise = {
        let mut decoder = FrameDecoder::new();
        let mut out = Outcome {
            frames: Vec::new(),
            fatal: None,
            finish: Ok(()),
        };
        for byte in stream {
            decoder.push(std::slice::from_ref(byte));
            drain(&mut decoder, &mut out);
        }
        out.finish = decoder.finish();
        out
    };
    assert_eq!(whole, chunked);
    assert_eq!(whole, bytewise);
    for body in &whole.frames {
        check_body(body);
    }
    let _ = decode_datagram(stream);
});
