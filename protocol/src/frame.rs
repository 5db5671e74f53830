//! Framing: 4-byte big-endian length + one MessagePack value.
//! (Skeleton: filled in by the protocol work.)
