//! A structural pass over one MessagePack value, before serde sees it.
//!
//! It checks the bytes are well-formed MessagePack (markers, lengths, UTF-8 of
//! strings), bounds the nesting without recursion, finds where the value ends
//! (so trailing bytes can be reported), and reads the top-level `type`,
//! `sensor` and `seq` keys best effort. It allocates nothing but the result.
//!
//! Marker table: MessagePack specification, "Formats" overview
//! (github.com/msgpack/msgpack/blob/master/spec.md).

use super::{MessageIds, MAX_DEPTH};

/// `sensor` and `seq` as read, borrowed from the body; made owned
/// ([`MessageIds`]) only for an error, so a good message costs no allocation here.
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Ids<'a> {
    pub sensor: Option<&'a str>,
    pub seq: Option<u64>,
}

impl Ids<'_> {
    /// The owned form carried by errors.
    pub fn owned(self) -> MessageIds {
        MessageIds {
            sensor: self.sensor.map(str::to_string),
            seq: self.seq,
        }
    }
}

/// What the structural pass learned about a well-formed top-level map.
#[derive(Debug)]
pub(super) struct Skim<'a> {
    /// The `type` key: `Some(Ok(name))`, `Some(Err(kind))` when it is not a
    /// string, `None` when absent.
    pub type_name: Option<Result<&'a str, &'static str>>,
    /// Best-effort `sensor` and `seq`.
    pub ids: Ids<'a>,
}

/// Why the structural pass refused the value.
#[derive(Debug)]
pub(super) enum Fault {
    /// Not well-formed MessagePack.
    Undecodable { offset: usize, detail: String },
    /// More than [`MAX_DEPTH`] nested maps/arrays.
    TooDeep,
    /// A whole value ended at byte `used`, before the end of the body.
    Trailing { used: usize },
    /// Well-formed but not a map.
    NotAMap { found: &'static str },
    /// A top-level key that is not a string.
    KeyNotString { found: &'static str },
    /// The top-level `type` key appears more than once.
    DuplicateType,
}

/// One decoded marker with its immediate payload.
enum Item<'a> {
    Nil,
    Bool,
    Uint(u64),
    Nint,
    Float,
    Str(&'a str),
    Bin,
    Ext,
    Array(u64),
    Map(u64),
}

impl Item<'_> {
    /// The MessagePack family name, for error texts.
    fn kind(&self) -> &'static str {
        match self {
            Item::Nil => "nil",
            Item::Bool => "bool",
            Item::Uint(_) | Item::Nint => "integer",
            Item::Float => "float",
            Item::Str(_) => "string",
            Item::Bin => "bin",
            Item::Ext => "ext",
            Item::Array(_) => "array",
            Item::Map(_) => "map",
        }
    }

    /// How many values follow as contents of this item.
    fn n_children(&self) -> u64 {
        match self {
            Item::Array(n) => *n,
            Item::Map(n) => n.saturating_mul(2),
            _ => 0,
        }
    }
}

struct Reader<'a> {
    buf: &'a [u8],
    pos: usize,
}

impl<'a> Reader<'a> {
    fn undecodable(&self, detail: impl Into<String>) -> Fault {
        Fault::Undecodable {
            offset: self.pos,
            detail: detail.into(),
        }
    }

    fn take(&mut self, n: usize) -> Result<&'a [u8], Fault> {
        let end = self.pos.checked_add(n).filter(|&end| end <= self.buf.len());
        match end {
            Some(end) => {
                let bytes = &self.buf[self.pos..end];
                self.pos = end;
                Ok(bytes)
            }
            None => Err(self.undecodable(format!(
                "value needs {n} more bytes, {} left",
                self.buf.len() - self.pos
            ))),
        }
    }

    /// Big-endian unsigned integer of `n` bytes (1, 2, 4 or 8).
    fn be(&mut self, n: usize) -> Result<u64, Fault> {
        Ok(self
            .take(n)?
            .iter()
            .fold(0u64, |acc, &b| (acc << 8) | u64::from(b)))
    }

    fn len_of(&mut self, n: usize) -> Result<usize, Fault> {
        // u32 lengths always fit usize on the 32/64-bit targets we build for.
        Ok(self.be(n)? as usize)
    }

    fn str(&mut self, len: usize) -> Result<Item<'a>, Fault> {
        let start = self.pos;
        let bytes = self.take(len)?;
        std::str::from_utf8(bytes)
            .map(Item::Str)
            .map_err(|err| Fault::Undecodable {
                offset: start,
                detail: format!("string is not valid UTF-8: {err}"),
            })
    }

    fn ext(&mut self, len: usize) -> Result<Item<'a>, Fault> {
        self.take(1 + len)?; // type byte + data
        Ok(Item::Ext)
    }

    /// Reads one marker and the payload that is not itself a value.
    fn item(&mut self) -> Result<Item<'a>, Fault> {
        let marker = self.take(1)?[0];
        Ok(match marker {
            0x00..=0x7f => Item::Uint(u64::from(marker)),
            0x80..=0x8f => Item::Map(u64::from(marker & 0x0f)),
            0x90..=0x9f => Item::Array(u64::from(marker & 0x0f)),
            0xa0..=0xbf => return self.str(usize::from(marker & 0x1f)),
            0xc0 => Item::Nil,
            0xc1 => {
                self.pos -= 1;
                return Err(self.undecodable("marker 0xc1 is never used"));
            }
            0xc2 | 0xc3 => Item::Bool,
            0xc4..=0xc6 => {
                let len = self.len_of(1 << (marker - 0xc4))?;
                self.take(len)?;
                Item::Bin
            }
            0xc7..=0xc9 => {
                let len = self.len_of(1 << (marker - 0xc7))?;
                return self.ext(len);
            }
            0xca => {
                self.take(4)?;
                Item::Float
            }
            0xcb => {
                self.take(8)?;
                Item::Float
            }
            0xcc..=0xcf => Item::Uint(self.be(1 << (marker - 0xcc))?),
            0xd0..=0xd3 => {
                let n = 1usize << (marker - 0xd0);
                let raw = self.be(n)?;
                let shift = 64 - 8 * n as u32;
                let value = ((raw << shift) as i64) >> shift; // sign-extend
                match u64::try_from(value) {
                    Ok(v) => Item::Uint(v),
                    Err(_) => Item::Nint,
                }
            }
            0xd4..=0xd8 => return self.ext(1 << (marker - 0xd4)),
            0xd9..=0xdb => {
                let len = self.len_of(1 << (marker - 0xd9))?;
                return self.str(len);
            }
            0xdc | 0xdd => Item::Array(self.be(2 << (marker - 0xdc))?),
            0xde | 0xdf => Item::Map(self.be(2 << (marker - 0xde))?),
            0xe0..=0xff => Item::Nint,
        })
    }

    /// Skips the `n_values` values that follow, `depth` containers being open.
    ///
    /// Iterative: the stack holds counts of values still to read per open
    /// container, so hostile nesting costs no call stack.
    fn skip(&mut self, n_values: u64, depth: usize) -> Result<(), Fault> {
        let mut open: Vec<u64> = Vec::new();
        let mut left = n_values;
        loop {
            while left == 0 {
                match open.pop() {
                    Some(outer) => left = outer,
                    None => return Ok(()),
                }
            }
            left -= 1;
            let item = self.item()?;
            if matches!(item, Item::Array(_) | Item::Map(_)) {
                if depth + open.len() + 1 > MAX_DEPTH {
                    return Err(Fault::TooDeep);
                }
                open.push(left);
                left = item.n_children();
            }
        }
    }
}

/// Runs the structural pass over `body`; on failure also returns the ids read so far.
pub(super) fn skim(body: &[u8]) -> Result<Skim<'_>, (Fault, Ids<'_>)> {
    let mut rd = Reader { buf: body, pos: 0 };
    let mut ids = Ids::default();
    let top = rd.item().map_err(|f| (f, Ids::default()))?;
    let Item::Map(n_pairs) = top else {
        let found = top.kind();
        rd.skip(top.n_children(), 1)
            .map_err(|f| (f, Ids::default()))?;
        let fault = if rd.pos < body.len() {
            Fault::Trailing { used: rd.pos }
        } else {
            Fault::NotAMap { found }
        };
        return Err((fault, ids));
    };
    let mut type_name = None;
    let mut first_fault = None;
    for _ in 0..n_pairs {
        let key = match rd.item() {
            Ok(key) => key,
            Err(f) => return Err((f, ids)),
        };
        let key = match key {
            Item::Str(k) => Some(k),
            other => {
                first_fault.get_or_insert(Fault::KeyNotString {
                    found: other.kind(),
                });
                if let Err(f) = rd.skip(other.n_children(), 1) {
                    return Err((f, ids));
                }
                None
            }
        };
        let value = match rd.item() {
            Ok(value) => value,
            Err(f) => return Err((f, ids)),
        };
        match (key, &value) {
            (Some("type"), v) => {
                if type_name.is_some() {
                    first_fault.get_or_insert(Fault::DuplicateType);
                }
                type_name = Some(match v {
                    Item::Str(s) => Ok(*s),
                    other => Err(other.kind()),
                });
            }
            (Some("sensor"), Item::Str(s)) => ids.sensor = Some(*s),
            (Some("seq"), Item::Uint(v)) => ids.seq = Some(*v),
            _ => {}
        }
        if let Err(f) = rd.skip(value.n_children(), 1) {
            return Err((f, ids));
        }
    }
    if rd.pos < body.len() {
        return Err((Fault::Trailing { used: rd.pos }, ids));
    }
    if let Some(fault) = first_fault {
        return Err((fault, ids));
    }
    Ok(Skim { type_name, ids })
}
