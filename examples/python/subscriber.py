#!/usr/bin/env python3
"""Subscriber for wahbad: prints the attitude feed of a running daemon.

Needs the PyPI package `msgpack` (pip install msgpack).

Usage:
  subscriber.py [--addr HOST:PORT | --addr unix:PATH] [--duration S] [--json]
                [--no-verdicts] [--token T]

Prints one line per solution (epoch, quaternion, status, inlier fraction,
1-sigma per axis in arcseconds) and alerts on lines of their own; with
--json, every message as one JSON object per line instead. Stops after
--duration seconds (default: until the daemon closes the connection).
"""
import argparse, json, math, socket, struct, sys, time
import msgpack

ARCSEC = 180 / math.pi * 3600

def read_exact(sock, n):
    data = b""
    while len(data) < n:
        chunk = sock.recv(n - len(data))
        if not chunk:
            return None
        data += chunk
    return data

def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--addr", default="127.0.0.1:7600")
    ap.add_argument("--duration", type=float)
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--no-verdicts", action="store_true")
    ap.add_argument("--token")
    a = ap.parse_args()
    if a.addr.startswith("unix:"):
        sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM); sock.connect(a.addr[5:])
    else:
        host, port = a.addr.rsplit(":", 1); sock = socket.create_connection((host, int(port)))
    hello = {"type": "hello", "version": 1, "role": "subscriber", "name": "subscriber.py",
             "verdicts": not a.no_verdicts}
    if a.token:
        hello["token"] = a.token
    body = msgpack.packb(hello)
    sock.sendall(struct.pack(">I", len(body)) + body)
    end = time.monotonic() + a.duration if a.duration else None
    while end is None or time.monotonic() < end:
        if end is not None:
            sock.settimeout(max(0.01, end - time.monotonic()))
        try:
            head = read_exact(sock, 4)
            msg = head and msgpack.unpackb(read_exact(sock, struct.unpack(">I", head)[0]))
        except socket.timeout:
            break
        if not msg:
            break
        msg["recv_wall_ns"] = time.time_ns()  # added locally, for latency checks
        kind = msg.get("type")
        if a.json:
            print(json.dumps(msg), flush=True)
        elif kind == "solution":
            sig = " ".join(f"{math.sqrt(max(msg['cov'][i], 0)) * ARCSEC:7.1f}" for i in (0, 4, 8))
            q = " ".join(f"{c:+.6f}" for c in msg["q"])
            print(f"{msg['t'] / 1e9:9.3f}s {msg['status']:<12} q=[{q}] "
                  f"in={msg['inlier_fraction']:.2f} 1sig[as]={sig}", flush=True)
        elif kind == "alert":
            print(f"*** alert {msg['state']}: {msg['kind']} {msg.get('sensor', '')} "
                  f"value={msg['value']:.3f} level={msg['threshold']:.3f}: {msg['message']}", flush=True)
        elif kind == "error":
            print(f"daemon error {msg['code']}: {msg['message']}", file=sys.stderr)
            break
        elif kind != "welcome":
            print(f"# {kind}: {msg}", flush=True)
    sock.close()

if __name__ == "__main__":
    main()
