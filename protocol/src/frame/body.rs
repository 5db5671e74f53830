//! Decoding one body (a frame's contents or a datagram) into a [`Message`].
//!
//! **Fast path** ([`super::fast`]). Replay of a dense log and a busy source
//! are bounded by decoding `obs`, `rate` and `truth`, so these three have a
//! hand-written one-pass decoder for their common shape: a map (fixmap, map
//! 16/32) with string keys (fixstr, str 8/16/32) in any order, each known key
//! once, numbers in every encoding the protocol allows (any integer width for
//! integers; float64, float32 or any integer for floats), arrays of exactly
//! the field's length, optional keys absent or `nil`, and unknown keys whose
//! value is a scalar or an array of scalars. It reads every byte of the body,
//! so what it accepts is well-formed MessagePack the structural pass would
//! pass, and it yields exactly the value serde would.
//!
//! **Fallback rule.** Whenever the fast path does not fully recognise a body
//! (another type, a repeated known key, a nested map or an ext in an unknown
//! key, a wrong type, a bin where a string is due, any malformed byte) it
//! returns nothing and the general path below runs from the start. Errors are
//! therefore always worded by the general path, byte for byte as before.
//!
//! **General path.** Two passes: the structural pass ([`super::skim`])
//! classifies malformed MessagePack and reads the `type`; then the struct of
//! that type is decoded by serde straight from the bytes, with rmp-serde's
//! nesting limit set and the path of a failing key kept for the error text.

use super::fast::decode_fast;
use super::skim::{skim, Fault};
use super::{FrameError, MessageIds, MAX_DEPTH, MAX_FRAME_LEN};
use crate::message::{Message, MESSAGE_TYPES};

/// Decodes one MessagePack body (no length prefix) into a message.
pub fn decode_body(body: &[u8]) -> Result<Message, FrameError> {
    if body.is_empty() {
        return Err(FrameError::ZeroLength);
    }
    if let Some(msg) = decode_fast(body) {
        return Ok(msg);
    }
    decode_general(body)
}

/// The general path: structural pass, then serde; every error is worded here.
pub(super) fn decode_general(body: &[u8]) -> Result<Message, FrameError> {
    if body.is_empty() {
        return Err(FrameError::ZeroLength);
    }
    let skimmed = skim(body).map_err(|(fault, ids)| fault_error(fault, ids.owned(), body.len()))?;
    let ids = skimmed.ids;
    let name = match skimmed.type_name {
        None => {
            return Err(FrameError::MissingKey {
                key: "type".into(),
                ids: ids.owned(),
            })
        }
        Some(Err(found)) => {
            return Err(FrameError::WrongType {
                key: "type".into(),
                detail: format!("expected a string, found a MessagePack {found}"),
                ids: ids.owned(),
            })
        }
        Some(Ok(name)) => name,
    };
    if !MESSAGE_TYPES.contains(&name) {
        return Err(FrameError::UnknownType {
            name: name.to_string(),
            ids: ids.owned(),
        });
    }
    // Plain serde first. The path-tracking pass runs only to word an
    // error, so a good message does not pay for it and errors read the same.
    if let Ok(msg) = decode_plain(body, name) {
        return Ok(msg);
    }
    decode_typed(body, name).map_err(|err| serde_error(err, ids.owned()))
}

/// Decodes one datagram (a bare body, no prefix) into a message.
///
/// Same rules as [`decode_body`], plus the [`MAX_FRAME_LEN`] size limit. A
/// datagram gets no answer: whatever the error, the daemon drops and counts
/// it ([`FrameError::error_code`] and [`FrameError::to_reject`] are for streams).
pub fn decode_datagram(datagram: &[u8]) -> Result<Message, FrameError> {
    if datagram.len() > MAX_FRAME_LEN {
        return Err(FrameError::TooLong {
            len: datagram.len(),
        });
    }
    decode_body(datagram)
}

type PathError = serde_path_to_error::Error<rmp_serde::decode::Error>;

/// A deserializer with the nesting limit of [`MAX_DEPTH`].
fn deserializer(
    body: &[u8],
) -> rmp_serde::Deserializer<rmp_serde::decode::ReadRefReader<'_, [u8]>> {
    let mut de = rmp_serde::Deserializer::from_read_ref(body);
    // rmp-serde fails when its counter reaches 0 on entering a container, so
    // MAX_DEPTH + 1 admits exactly MAX_DEPTH levels (the structural pass's rule).
    de.set_max_depth(MAX_DEPTH + 1);
    de
}

/// [`decode_typed`] without path tracking.
fn decode_plain(body: &[u8], name: &str) -> Result<Message, rmp_serde::decode::Error> {
    use serde::Deserialize;
    let mut de = deserializer(body);
    let de = &mut de;
    Ok(match name {
        "hello" => Message::Hello(Deserialize::deserialize(de)?),
        "welcome" => Message::Welcome(Deserialize::deserialize(de)?),
        "error" => Message::Error(Deserialize::deserialize(de)?),
        "obs" => Message::Obs(Deserialize::deserialize(de)?),
        "rate" => Message::Rate(Deserialize::deserialize(de)?),
        "truth" => Message::Truth(Deserialize::deserialize(de)?),
        "reject" => Message::Reject(Deserialize::deserialize(de)?),
        "solution" => Message::Solution(Deserialize::deserialize(de)?),
        "alert" => Message::Alert(Deserialize::deserialize(de)?),
        "lagged" => Message::Lagged(Deserialize::deserialize(de)?),
        "status" => Message::Status(Deserialize::deserialize(de)?),
        other => unreachable!("type {other:?} is checked against MESSAGE_TYPES first"),
    })
}

/// Serde pass: the struct named by `type` straight from the bytes. Its own
/// `type` key is an unknown key to the struct and is skipped.
fn decode_typed(body: &[u8], name: &str) -> Result<Message, PathError> {
    let mut de = deserializer(body);
    let de = &mut de;
    use serde_path_to_error::deserialize as typed;
    Ok(match name {
        "hello" => Message::Hello(typed(de)?),
        "welcome" => Message::Welcome(typed(de)?),
        "error" => Message::Error(typed(de)?),
        "obs" => Message::Obs(typed(de)?),
        "rate" => Message::Rate(typed(de)?),
        "truth" => Message::Truth(typed(de)?),
        "reject" => Message::Reject(typed(de)?),
        "solution" => Message::Solution(typed(de)?),
        "alert" => Message::Alert(typed(de)?),
        "lagged" => Message::Lagged(typed(de)?),
        "status" => Message::Status(typed(de)?),
        other => unreachable!("type {other:?} is checked against MESSAGE_TYPES first"),
    })
}

fn fault_error(fault: Fault, ids: MessageIds, len: usize) -> FrameError {
    match fault {
        Fault::Undecodable { offset, detail } => FrameError::Undecodable {
            offset,
            detail,
            ids,
        },
        Fault::TooDeep => FrameError::TooDeep {
            limit: MAX_DEPTH,
            ids,
        },
        Fault::Trailing { used } => FrameError::TrailingBytes {
            len,
            trailing: len - used,
            ids,
        },
        Fault::NotAMap { found } => FrameError::NotAMap { found },
        Fault::KeyNotString { found } => FrameError::KeyNotString { found, ids },
        Fault::DuplicateType => FrameError::DuplicateKey {
            key: "type".into(),
            ids,
        },
    }
}

/// Classifies a serde error from a body the structural pass found well formed.
fn serde_error(err: PathError, ids: MessageIds) -> FrameError {
    let path = err.path().to_string();
    let inner = err.into_inner();
    if let rmp_serde::decode::Error::DepthLimitExceeded = inner {
        return FrameError::TooDeep {
            limit: MAX_DEPTH,
            ids,
        };
    }
    let detail = match &inner {
        rmp_serde::decode::Error::TypeMismatch(marker) => {
            format!("unexpected MessagePack {}", marker_family(*marker))
        }
        other => other.to_string(),
    };
    // serde's derive words these two with the key in backticks.
    let key_in = |prefix: &str| {
        let rest = detail.strip_prefix(prefix)?;
        let field = rest.split('`').next()?;
        Some(match path.as_str() {
            "." | "" => field.to_string(),
            outer => format!("{outer}.{field}"),
        })
    };
    if let Some(key) = key_in("missing field `") {
        return FrameError::MissingKey { key, ids };
    }
    if let Some(key) = key_in("duplicate field `") {
        return FrameError::DuplicateKey { key, ids };
    }
    FrameError::WrongType {
        key: path,
        detail,
        ids,
    }
}

/// The MessagePack family of a marker, for error texts (rmp's own `Debug`
/// names like `FixStr(1)` mean little to a client author).
fn marker_family(marker: rmp::Marker) -> &'static str {
    use rmp::Marker as M;
    match marker {
        M::Null => "nil",
        M::True | M::False => "bool",
        M::FixPos(_) | M::FixNeg(_) | M::U8 | M::U16 | M::U32 | M::U64 => "integer",
        M::I8 | M::I16 | M::I32 | M::I64 => "integer",
        M::F32 | M::F64 => "float",
        M::FixStr(_) | M::Str8 | M::Str16 | M::Str32 => "string",
        M::Bin8 | M::Bin16 | M::Bin32 => "bin",
        M::FixArray(_) | M::Array16 | M::Array32 => "array",
        M::FixMap(_) | M::Map16 | M::Map32 => "map",
        M::FixExt1 | M::FixExt2 | M::FixExt4 | M::FixExt8 | M::FixExt16 => "ext",
        M::Ext8 | M::Ext16 | M::Ext32 => "ext",
        M::Reserved => "reserved marker",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `n` nested one-element arrays around a nil: 0x91 … 0x91 0xc0
    /// (MessagePack spec: fixarray 0x90-0x9f, nil 0xc0).
    fn nested_arrays(n: usize) -> Vec<u8> {
        let mut v = vec![0x91; n];
        v.push(0xc0);
        v
    }

    #[test]
    fn rmp_serde_depth_limit_is_set_and_stops_deep_nesting() {
        // Bypasses the structural pass: the serde pass alone must refuse
        // hostile nesting with an error, not by overflowing the stack.
        let body = nested_arrays(200_000);
        let mut de = deserializer(&body);
        let res: Result<serde::de::IgnoredAny, _> = serde::Deserialize::deserialize(&mut de);
        assert!(matches!(
            res,
            Err(rmp_serde::decode::Error::DepthLimitExceeded)
        ));
    }

    #[test]
    fn rmp_serde_depth_limit_admits_exactly_max_depth() {
        let ok = nested_arrays(MAX_DEPTH);
        let res: Result<serde::de::IgnoredAny, _> =
            serde::Deserialize::deserialize(&mut deserializer(&ok));
        assert!(res.is_ok(), "{res:?}");
        let deep = nested_arrays(MAX_DEPTH + 1);
        let res: Result<serde::de::IgnoredAny, _> =
            serde::Deserialize::deserialize(&mut deserializer(&deep));
        assert!(matches!(
            res,
            Err(rmp_serde::decode::Error::DepthLimitExceeded)
        ));
    }
}
