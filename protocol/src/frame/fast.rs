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

use crate::message::{Message, Obs, Rate, SensorName, Truth};

/// Decodes `body` when it is a well-formed `obs`, `rate` or `truth` of the
/// plain shape; `None` means "use the general path".
pub(super) fn decode_fast(body: &[u8]) -> Option<Message> {
    let (kind, f) = scan(body)?;
    let token = optional(f.token)?.map(str::to_owned);
    Some(match kind {
        Kind::Obs => Message::Obs(Obs {
            sensor: SensorName::new(required(f.sensor)?),
            seq: required(f.seq)?,
            t: required(f.t)?,
            b: required(f.b)?,
            r: required(f.r)?,
            sigma: optional(f.sigma)?,
            token,
        }),
        Kind::Rate => Message::Rate(Rate {
            sensor: SensorName::new(required(f.sensor)?),
            seq: required(f.seq)?,
            t: required(f.t)?,
            w: required(f.w)?,
            token,
        }),
        Kind::Truth => Message::Truth(Truth {
            t: required(f.t)?,
            q: required(f.q)?,
            token,
        }),
    })
}

/// The three message types of the fast path.
#[derive(Clone, Copy)]
enum Kind {
    Obs,
    Rate,
    Truth,
}

/// What the scan found for one known key.
#[derive(Clone, Copy, Default)]
enum Slot<T> {
    #[default]
    Absent,
    /// Present, of the field's type.
    Good(T),
    /// Present, well formed, not of the field's type: fine where the key is
    /// unknown to the message type (serde ignores it), a refusal elsewhere.
    Bad,
}

fn required<T>(slot: Slot<T>) -> Option<T> {
    match slot {
        Slot::Good(v) => Some(v),
        Slot::Absent | Slot::Bad => None,
    }
}

/// An optional key: absent (or `nil`, read as `Good(None)`) gives `Some(None)`.
fn optional<T>(slot: Slot<Option<T>>) -> Option<Option<T>> {
    match slot {
        Slot::Absent => Some(None),
        Slot::Good(v) => Some(v),
        Slot::Bad => None,
    }
}

/// The values of the keys these three types use, read as their fields' types.
#[derive(Default)]
struct Fields<'a> {
    sensor: Slot<&'a str>,
    seq: Slot<u64>,
    t: Slot<i64>,
    b: Slot<[f64; 3]>,
    r: Slot<[f64; 3]>,
    w: Slot<[f64; 3]>,
    q: Slot<[f64; 4]>,
    sigma: Slot<Option<f64>>,
    token: Slot<Option<&'a str>>,
}

/// Reads the whole body as a flat map in one pass, validating every byte, and
/// reads each known key's value as its field's type. `None` on any doubt: a
/// `type` not one of the three, a repeated known key, a nested map, an ext,
/// bytes after the map, anything malformed.
fn scan(body: &[u8]) -> Option<(Kind, Fields<'_>)> {
    let mut cur = Cursor { buf: body, pos: 0 };
    let n_pairs = cur.map_len()?;
    let mut kind = None;
    let mut f = Fields::default();
    for _ in 0..n_pairs {
        match cur.str_bytes()? {
            b"type" => {
                let name = match cur.str_bytes()? {
                    b"obs" => Kind::Obs,
                    b"rate" => Kind::Rate,
                    b"truth" => Kind::Truth,
                    _ => return None,
                };
                if kind.replace(name).is_some() {
                    return None;
                }
            }
            b"sensor" => cur.fill(&mut f.sensor, Cursor::str)?,
            b"seq" => cur.fill(&mut f.seq, Cursor::u64)?,
            b"t" => cur.fill(&mut f.t, Cursor::i64)?,
            b"b" => cur.fill(&mut f.b, Cursor::f64_array)?,
            b"r" => cur.fill(&mut f.r, Cursor::f64_array)?,
            b"w" => cur.fill(&mut f.w, Cursor::f64_array)?,
            b"q" => cur.fill(&mut f.q, Cursor::f64_array)?,
            b"sigma" => cur.fill(&mut f.sigma, |c| c.or_nil(Cursor::f64))?,
            b"token" => cur.fill(&mut f.token, |c| c.or_nil(Cursor::str))?,
            other => {
                std::str::from_utf8(other).ok()?;
                cur.skip_value()?;
            }
        }
    }
    if cur.pos != body.len() {
        return None;
    }
    Some((kind?, f))
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

    /// Reads the value of a known key into `slot` with `read`, or, when it is
    /// not of that type, skips it as any value and marks the slot `Bad`.
    /// `None` for a repeated key or a value the fast path cannot skip.
    fn fill<T>(
        &mut self,
        slot: &mut Slot<T>,
        read: impl FnOnce(&mut Cursor<'a>) -> Option<T>,
    ) -> Option<()> {
        if !matches!(slot, Slot::Absent) {
            return None;
        }
        let start = self.pos;
        *slot = match read(self) {
            Some(v) => Slot::Good(v),
            None => {
                self.pos = start;
                self.skip_value()?;
                Slot::Bad
            }
        };
        Some(())
    }

    /// `nil` (0xc0) as `None`, else the value `read` gives.
    fn or_nil<T>(&mut self, read: impl FnOnce(&mut Cursor<'a>) -> Option<T>) -> Option<Option<T>> {
        if self.buf.get(self.pos) == Some(&0xc0) {
            self.pos += 1;
            return Some(None);
        }
        read(self).map(Some)
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
                // As serde's `f64` visitor: the sign is copied explicitly,
                // since a NaN's sign is not promised through the conversion.
                let x = f32::from_be_bytes(self.be()?);
                let sign = if x.is_sign_negative() { -1.0 } else { 1.0 };
                Some(f64::from(x).copysign(sign))
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
        if let Some(0x90..=0x9f | 0xdc | 0xdd) = self.buf.get(self.pos) {
            let n = self.array_len()?;
            for _ in 0..n {
                self.skip_scalar()?;
            }
            return Some(());
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
        let hello = [
            0x81, 0xa4, b't', b'y', b'p', b'e', 0xa5, b'h', b'e', b'l', b'l', b'o',
        ];
        assert_eq!(decode_fast(&hello), None);
        let bare_obs = [0x81, 0xa4, b't', b'y', b'p', b'e', 0xa3, b'o', b'b', b's'];
        assert_eq!(decode_fast(&bare_obs), None);
        assert_eq!(decode_fast(&[0x90]), None);
        assert_eq!(decode_fast(&[]), None);
    }
}
