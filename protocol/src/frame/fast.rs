//! Hand-written decoder for the common shape of `obs`, `rate` and `truth`.
//!
//! One pass over a flat top-level map: string keys, scalar values or arrays of
//! scalars, every field in an encoding serde would accept with the same
//! result. Returns `None` for anything else, and the caller then runs the
//! general two-pass path, which words every error. So this decoder never
//! produces an error and never decides what a malformed body means.
//!
//! Why the structural pass is not needed for what it accepts: it has read
//! every byte of the body as MessagePack (markers, lengths in bounds, UTF-8 of
//! every string, keys and values alike), found the map ends exactly at the end
//! of the body, seen every key is a string, nesting at most 2 and `type` once.
//! That is every check of [`super::skim`]; the structural pass would succeed.
//!
//! Numbers follow serde's primitive visitors as rmp-serde drives them: an
//! `f64` field takes float64, float32 (widened) and any integer (`as f64`); a
//! `u64` takes any non-negative integer; an `i64` any integer in range; never
//! a float for an integer. Marker table: MessagePack specification, "Formats"
//! overview (github.com/msgpack/msgpack/blob/master/spec.md).

use crate::message::{Message, Obs, Rate, Truth};

/// Decodes `body` when it is a well-formed `obs`, `rate` or `truth` of the
/// plain shape; `None` means "use the general path".
pub(super) fn decode_fast(body: &[u8]) -> Option<Message> {
    let slots = scan(body)?;
    let at = |off: Option<usize>| off.map(|pos| Cursor { buf: body, pos });
    let type_name = at(slots.type_)?.str()?;
    let token = optional(at(slots.token), |cur| cur.str().map(str::to_owned))?;
    Some(match type_name {
        "obs" => Message::Obs(Obs {
            sensor: at(slots.sensor)?.str()?.to_owned(),
            seq: at(slots.seq)?.u64()?,
            t: at(slots.t)?.i64()?,
            b: at(slots.b)?.f64_array()?,
            r: at(slots.r)?.f64_array()?,
            sigma: optional(at(slots.sigma), Cursor::f64)?,
            token,
        }),
        "rate" => Message::Rate(Rate {
            sensor: at(slots.sensor)?.str()?.to_owned(),
            seq: at(slots.seq)?.u64()?,
            t: at(slots.t)?.i64()?,
            w: at(slots.w)?.f64_array()?,
            token,
        }),
        "truth" => Message::Truth(Truth {
            t: at(slots.t)?.i64()?,
            q: at(slots.q)?.f64_array()?,
            token,
        }),
        _ => return None,
    })
}

/// An optional key: absent and `nil` both give `Some(None)`; `None` when the
/// value is present but `read` refuses it.
fn optional<'a, T>(
    cur: Option<Cursor<'a>>,
    read: impl FnOnce(&mut Cursor<'a>) -> Option<T>,
) -> Option<Option<T>> {
    let Some(mut cur) = cur else {
        return Some(None);
    };
    if cur.nil() {
        return Some(None);
    }
    read(&mut cur).map(Some)
}

/// Offsets in the body of the values of the keys these three types use.
#[derive(Default)]
struct Slots {
    type_: Option<usize>,
    sensor: Option<usize>,
    seq: Option<usize>,
    t: Option<usize>,
    b: Option<usize>,
    r: Option<usize>,
    sigma: Option<usize>,
    token: Option<usize>,
    w: Option<usize>,
    q: Option<usize>,
}

/// Reads the whole body as a flat map, validating every byte, and records
/// where each known key's value starts. `None` on any doubt: a repeated known
/// key, a nested map, an ext, bytes after the map, anything malformed.
fn scan(body: &[u8]) -> Option<Slots> {
    let mut cur = Cursor { buf: body, pos: 0 };
    let n_pairs = cur.map_len()?;
    let mut slots = Slots::default();
    for _ in 0..n_pairs {
        let key = cur.str_bytes()?;
        let slot = match key {
            b"type" => &mut slots.type_,
            b"sensor" => &mut slots.sensor,
            b"seq" => &mut slots.seq,
            b"t" => &mut slots.t,
            b"b" => &mut slots.b,
            b"r" => &mut slots.r,
            b"sigma" => &mut slots.sigma,
            b"token" => &mut slots.token,
            b"w" => &mut slots.w,
            b"q" => &mut slots.q,
            other => {
                std::str::from_utf8(other).ok()?;
                cur.skip_value()?;
                continue;
            }
        };
        if slot.is_some() {
            return None;
        }
        *slot = Some(cur.pos);
        cur.skip_value()?;
    }
    (cur.pos == body.len()).then_some(slots)
}

/// A read position in the body; every read is bounds-checked and `None` past
/// the end.
struct Cursor<'a> {
    buf: &'a [u8],
    pos: usize,
}

impl<'a> Cursor<'a> {
    fn take(&mut self, n: usize) -> Option<&'a [u8]> {
        let bytes = self.buf.get(self.pos..self.pos.checked_add(n)?)?;
        self.pos += n;
        Some(bytes)
    }

    fn byte(&mut self) -> Option<u8> {
        let b = *self.buf.get(self.pos)?;
        self.pos += 1;
        Some(b)
    }

    fn be<const N: usize>(&mut self) -> Option<[u8; N]> {
        self.take(N)?.try_into().ok()
    }

    /// A big-endian length of 1, 2 or 4 bytes.
    fn len_of(&mut self, n_bytes: u8) -> Option<usize> {
        Some(match n_bytes {
            1 => usize::from(self.byte()?),
            2 => usize::from(u16::from_be_bytes(self.be()?)),
            _ => u32::from_be_bytes(self.be()?) as usize,
        })
    }

    /// Consumes a nil marker if there is one.
    fn nil(&mut self) -> bool {
        let is_nil = self.buf.get(self.pos) == Some(&0xc0);
        self.pos += usize::from(is_nil);
        is_nil
    }

    fn map_len(&mut self) -> Option<usize> {
        match self.byte()? {
            m @ 0x80..=0x8f => Some(usize::from(m & 0x0f)),
            0xde => self.len_of(2),
            0xdf => self.len_of(4),
            _ => None,
        }
    }

    fn array_len(&mut self) -> Option<usize> {
        match self.byte()? {
            m @ 0x90..=0x9f => Some(usize::from(m & 0x0f)),
            0xdc => self.len_of(2),
            0xdd => self.len_of(4),
            _ => None,
        }
    }

    /// The bytes of a string (fixstr, str 8/16/32), not yet checked as UTF-8.
    fn str_bytes(&mut self) -> Option<&'a [u8]> {
        let len = match self.byte()? {
            m @ 0xa0..=0xbf => usize::from(m & 0x1f),
            0xd9 => self.len_of(1)?,
            0xda => self.len_of(2)?,
            0xdb => self.len_of(4)?,
            _ => return None,
        };
        self.take(len)
    }

    fn str(&mut self) -> Option<&'a str> {
        std::str::from_utf8(self.str_bytes()?).ok()
    }

    /// Any integer, as the widest signed type that holds every encoding.
    fn int(&mut self) -> Option<i128> {
        let m = self.byte()?;
        Some(match m {
            0x00..=0x7f => i128::from(m),
            0xe0..=0xff => i128::from(m as i8),
            0xcc => i128::from(self.byte()?),
            0xcd => i128::from(u16::from_be_bytes(self.be()?)),
            0xce => i128::from(u32::from_be_bytes(self.be()?)),
            0xcf => i128::from(u64::from_be_bytes(self.be()?)),
            0xd0 => i128::from(self.byte()? as i8),
            0xd1 => i128::from(i16::from_be_bytes(self.be()?)),
            0xd2 => i128::from(i32::from_be_bytes(self.be()?)),
            0xd3 => i128::from(i64::from_be_bytes(self.be()?)),
            _ => return None,
        })
    }

    fn u64(&mut self) -> Option<u64> {
        u64::try_from(self.int()?).ok()
    }

    fn i64(&mut self) -> Option<i64> {
        i64::try_from(self.int()?).ok()
    }

    /// A float field: float64, float32 widened, or any integer converted as
    /// serde's `f64` visitor does (`u64 as f64`, `i64 as f64`).
    fn f64(&mut self) -> Option<f64> {
        match *self.buf.get(self.pos)? {
            0xcb => {
                self.pos += 1;
                Some(f64::from_be_bytes(self.be()?))
            }
            0xca => {
                self.pos += 1;
                Some(f64::from(f32::from_be_bytes(self.be()?)))
            }
            _ => {
                let v = self.int()?;
                Some(match u64::try_from(v) {
                    Ok(u) => u as f64,
                    // Every other encoding holds an i64.
                    Err(_) => i64::try_from(v).ok()? as f64,
                })
            }
        }
    }

    /// An array of exactly `N` floats (rmp-serde refuses any other length).
    fn f64_array<const N: usize>(&mut self) -> Option<[f64; N]> {
        if self.array_len()? != N {
            return None;
        }
        let mut out = [0.0; N];
        for x in &mut out {
            *x = self.f64()?;
        }
        Some(out)
    }

    /// Skips one value: a scalar, or an array of scalars. Maps, nested arrays
    /// and ext values are left to the general path.
    fn skip_value(&mut self) -> Option<()> {
        if let Some(&m) = self.buf.get(self.pos) {
            if let 0x90..=0x9f | 0xdc | 0xdd = m {
                let n = self.array_len()?;
                for _ in 0..n {
                    self.skip_scalar()?;
                }
                return Some(());
            }
        }
        self.skip_scalar()
    }

    /// Skips one scalar, checking what the structural pass checks (lengths in
    /// bounds, strings UTF-8).
    fn skip_scalar(&mut self) -> Option<()> {
        let m = self.byte()?;
        let n = match m {
            0x00..=0x7f | 0xe0..=0xff | 0xc0 | 0xc2 | 0xc3 => 0,
            0xa0..=0xbf | 0xd9..=0xdb => {
                self.pos -= 1;
                return self.str().map(drop);
            }
            0xc4 => self.len_of(1)?,
            0xc5 => self.len_of(2)?,
            0xc6 => self.len_of(4)?,
            0xca => 4,
            0xcb => 8,
            0xcc..=0xcf => 1 << (m - 0xcc),
            0xd0..=0xd3 => 1 << (m - 0xd0),
            _ => return None,
        };
        self.take(n).map(drop)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn encoder_output_of_each_type_takes_the_fast_path() {
        let obs = Message::Obs(Obs {
            sensor: "star_cam".into(),
            seq: 123_456,
            t: -5,
            b: [0.25, -0.5, 1.0],
            r: [1.0, 0.0, 0.0],
            sigma: Some(1e-4),
            token: Some("k".into()),
        });
        let rate = Message::Rate(Rate {
            sensor: "gyro".into(),
            seq: 0,
            t: i64::MAX,
            w: [0.01, -0.02, 0.003],
            token: None,
        });
        let truth = Message::Truth(Truth {
            t: i64::MIN,
            q: [0.9, 0.3, -0.2, 0.2],
            token: None,
        });
        for msg in [obs, rate, truth] {
            let body = super::super::encode_body(&msg);
            assert_eq!(decode_fast(&body), Some(msg));
        }
    }

    #[test]
    fn other_shapes_are_left_to_the_general_path() {
        // MessagePack spec: fixmap 0x81, fixstr "type" a4 74 79 70 65,
        // fixstr "hello" a5 68 65 6c 6c 6f; an `obs` with nothing else; a
        // fixarray 0x90 body.
        let hello = [0x81, 0xa4, b't', b'y', b'p', b'e', 0xa5, b'h', b'e', b'l', b'l', b'o'];
        assert_eq!(decode_fast(&hello), None);
        let bare_obs = [0x81, 0xa4, b't', b'y', b'p', b'e', 0xa3, b'o', b'b', b's'];
        assert_eq!(decode_fast(&bare_obs), None);
        assert_eq!(decode_fast(&[0x90]), None);
        assert_eq!(decode_fast(&[]), None);
    }
}
