"""MessagePack interop with an independent implementation (PyPI `msgpack`).

Modes (argv[1]):
  encode  write frames built with msgpack to stdout: float32 and integer
          encodings of floats, forced wide integer encodings, unknown extra
          keys, `type` not first; the Rust test knows what each must decode to.
  decode  read frames written by the Rust encoder on stdin, check each against
          EXPECTED field for field, print "checked N".
  echo    read frames on stdin, decode them with msgpack and re-encode them with
          msgpack's own choices, write the frames to stdout.

Frame: 4-byte big-endian length, then one MessagePack value (shared/protocol.md).
"""

import struct
import sys

import msgpack

F64 = msgpack.Packer()  # floats as float 64, integers in their smallest form
F32 = msgpack.Packer(use_single_float=True)  # floats as float 32


def frame(body: bytes) -> bytes:
    return struct.pack(">I", len(body)) + body


def raw_map(pairs) -> bytes:
    """A map from (key, packed value bytes) pairs, so each value's encoding is chosen."""
    out = F64.pack_map_header(len(pairs))
    for key, value in pairs:
        out += F64.pack(key) + value
    return out


def arr(*items: bytes) -> bytes:
    return F64.pack_array_header(len(items)) + b"".join(items)


# Forced wide encodings (MessagePack spec: uint 64 0xcf, int 64 0xd3, int 16 0xd1, uint 8 0xcc).
def u64(v): return b"\xcf" + struct.pack(">Q", v)
def i64(v): return b"\xd3" + struct.pack(">q", v)
def i16(v): return b"\xd1" + struct.pack(">h", v)
def u8(v): return b"\xcc" + struct.pack(">B", v)
def f32(v): return F32.pack(float(v))
def f64(v): return F64.pack(float(v))
def p(v): return F64.pack(v)


def encoded_frames():
    bodies = [
        # hello: unicode name, unknown keys of several kinds, type last.
        raw_map([
            ("version", p(1)), ("role", p("subscriber")), ("name", p("banc d'essai — 試験台")),
            ("verdicts", p(False)), ("x_future", p({"nested": [1, 2.5, None]})),
            ("x_blob", p(b"\x00\x01")), ("type", p("hello")),
        ]),
        # obs: b as float 32, r as integers of three widths, sigma float 32, t uint 64 form.
        raw_map([
            ("type", p("obs")), ("sensor", p("sun")), ("seq", p(0)), ("t", p(2**40)),
            ("b", arr(f32(0.1), f32(-0.5), f32(1.0))), ("r", arr(p(1), p(300), p(70000))),
            ("sigma", f32(0.25)), ("extra", p([1, 2, 3])),
        ]),
        # obs: forced wide integer encodings everywhere.
        raw_map([
            ("type", p("obs")), ("sensor", p("star.1")), ("seq", u64(7)), ("t", i64(5)),
            ("b", arr(u8(3), i16(-2), i64(0))), ("r", arr(u64(0), u64(0), u8(1))),
            ("token", p("s3cret")),
        ]),
        raw_map([("type", p("rate")), ("sensor", p("gyro")), ("seq", p(1)), ("t", p(-1)),
                 ("w", arr(p(-1), p(-200), f32(0.125)))]),
        raw_map([("type", p("truth")), ("t", p(10)), ("q", arr(f32(0.5), f32(-0.5), p(0), f64(0.7)))]),
        raw_map([("type", p("status"))]),
        raw_map([("type", p("status")), ("uptime_s", p(3)), ("sources", p(1)), ("subscribers", p(2)),
                 ("accepted", p(300)), ("rejected", p(0)), ("dropped", p(2**33)), ("epochs", p(9))]),
        raw_map([
            ("type", p("solution")), ("t", p(100)), ("q", arr(p(1), p(0), p(0), p(0))),
            ("cov", arr(*[p(0)] * 8, f64(1e12))), ("status", p("degraded")),
            ("inlier_fraction", f32(0.5)), ("n", p(2)), ("n_inliers", p(1)), ("method", p("lud")),
            ("iterations", p(4)), ("sensors", p([{"sensor": "sun", "n": 2, "n_inliers": 1, "x": 0}])),
            ("verdicts", arr(raw_map([("sensor", p("sun")), ("seq", p(5)), ("residual", f32(0.25)),
                                      ("inlier", p(True))]))),
            ("propagated", p(False)),
        ]),
        raw_map([("type", p("alert")), ("t", p(1)), ("kind", p("stale")), ("state", p("raised")),
                 ("value", p(2)), ("threshold", f32(1.5)), ("sensor", p("mag")),
                 ("message", p("mag silent 2 s ⚠"))]),
        raw_map([("type", p("lagged")), ("skipped", u64(12))]),
        raw_map([("type", p("reject")), ("reason", p("sigma 4 rad is outside 0 < sigma < pi")),
                 ("seq", p(3))]),
        raw_map([("type", p("welcome")), ("version", p(1)), ("server", p("wahbad"))]),
        raw_map([("type", p("error")), ("code", p("busy")), ("message", p(""))]),
    ]
    return b"".join(frame(b) for b in bodies)


INF = float("inf")

# What the Rust test writes in `decode` mode, in order (see protocol_interop.rs).
EXPECTED = [
    {"type": "hello", "version": 1, "role": "source"},
    {"type": "hello", "version": 1, "role": "subscriber", "name": "試験台 🛰", "token": "",
     "verdicts": True},
    {"type": "welcome", "version": 1, "server": "wahbad 0.1.0"},
    {"type": "error", "code": "framing", "message": "frame length 70000 exceeds the maximum"},
    {"type": "obs", "sensor": "sun", "seq": 2**64 - 1, "t": -(2**63), "b": [0.1, -0.0, 1e300],
     "r": [5e-324, INF, -1.0], "sigma": 0.001},
    {"type": "rate", "sensor": "gyro.z-1", "seq": 0, "t": 2**63 - 1, "w": [0.01, -0.02, 0.0],
     "token": "tok"},
    {"type": "truth", "t": 5, "q": [1.0, 0.0, 0.0, 0.0]},
    {"type": "reject", "sensor": "sun", "seq": 9, "reason": "b has zero length"},
    {"type": "reject", "reason": "message is a MessagePack array, not a map"},
    {"type": "solution", "t": 1500000000, "q": [0.5, 0.5, 0.5, 0.5],
     "cov": [1e-6, 0.0, 0.0, 0.0, 1e-6, 0.0, 0.0, 0.0, 1e12], "status": "ok",
     "inlier_fraction": 0.75, "n": 4, "n_inliers": 3, "method": "gnc-tls", "iterations": 17,
     "sensors": [], "verdicts": [], "propagated": False},
    {"type": "solution", "t": 2, "q": [1.0, 0.0, 0.0, 0.0], "cov": [0.0] * 9,
     "status": "insufficient", "inlier_fraction": 0.0, "n": 1, "n_inliers": 0, "method": "svd",
     "iterations": 0, "sensors": [{"sensor": "mag", "n": 1, "n_inliers": 0}],
     "verdicts": [{"sensor": "mag", "seq": 4, "residual": 0.3, "inlier": False}]},
    {"type": "alert", "t": 7, "kind": "inlier_fraction", "state": "cleared", "value": 0.9,
     "threshold": 0.5, "message": "inliers back above 50 %"},
    {"type": "lagged", "skipped": 0},
    {"type": "status"},
    {"type": "status", "uptime_s": 12.5, "sources": 2, "subscribers": 1, "accepted": 1000,
     "rejected": 3, "dropped": 0, "epochs": 50},
]


def read_frames(data: bytes):
    at = 0
    while at < len(data):
        (n,) = struct.unpack(">I", data[at:at + 4])
        assert 1 <= n <= 65536, f"frame length {n}"
        body = data[at + 4:at + 4 + n]
        assert len(body) == n, "stream cut inside a frame"
        yield body
        at += 4 + n


def unpack(body: bytes):
    # strict_map_key: every map key must be a string (or bytes); raw=False: str is UTF-8.
    return msgpack.unpackb(body, raw=False, strict_map_key=True)


def same(got, want, path="") -> None:
    """Field-for-field comparison; floats bit-exact (so -0.0 differs from 0.0)."""
    if isinstance(want, dict):
        assert isinstance(got, dict), f"{path}: {got!r} is not a map"
        assert set(got) == set(want), f"{path}: keys {sorted(got)} != {sorted(want)}"
        for key in want:
            same(got[key], want[key], f"{path}.{key}")
    elif isinstance(want, list):
        assert isinstance(got, list) and len(got) == len(want), f"{path}: {got!r} != {want!r}"
        for idx, (g, w) in enumerate(zip(got, want)):
            same(g, w, f"{path}[{idx}]")
    elif isinstance(want, float):
        assert isinstance(got, float), f"{path}: {got!r} is not a float"
        assert struct.pack(">d", got) == struct.pack(">d", want), f"{path}: {got!r} != {want!r}"
    else:
        assert type(got) is type(want) and got == want, f"{path}: {got!r} != {want!r}"


def main() -> None:
    mode = sys.argv[1]
    if mode == "encode":
        sys.stdout.buffer.write(encoded_frames())
    elif mode == "decode":
        bodies = list(read_frames(sys.stdin.buffer.read()))
        assert len(bodies) == len(EXPECTED), f"{len(bodies)} frames, expected {len(EXPECTED)}"
        for idx, (body, want) in enumerate(zip(bodies, EXPECTED)):
            same(unpack(body), want, f"frame {idx}")
        print(f"checked {len(bodies)}")
    elif mode == "echo":
        out = b"".join(frame(msgpack.packb(unpack(b))) for b in read_frames(sys.stdin.buffer.read()))
        sys.stdout.buffer.write(out)
    else:
        raise SystemExit(f"unknown mode {mode!r}")


if __name__ == "__main__":
    main()
