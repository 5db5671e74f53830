#!/usr/bin/env python3
"""Bench source for wahbad: streams a static three-sensor scene with a known attitude.

Sensors: a star camera `cam` (five stars per frame), a sun sensor `sun` and a
magnetometer `mag`, all seeing the same fixed body attitude Q (q = [w,x,y,z],
b = A(q) r). Needs the PyPI package `msgpack` (pip install msgpack).

Usage:
  bench_source.py [--addr HOST:PORT | --addr unix:PATH | --udp HOST:PORT]
                  [--q W X Y Z] [--duration S] [--rate HZ] [--speed X]
                  [--outlier-every N] [--burst START:END] [--seed N] [--token T]

--outlier-every N replaces every Nth star with a wrong direction; --burst
makes 4 of 5 stars wrong between START and END seconds of bench time. The
planted outliers are printed on stdout at the end as JSON: {"planted": [[sensor, seq], ...]}.
"""
import argparse, json, math, random, socket, struct, time
import msgpack

def unit(v):
    n = math.sqrt(sum(c * c for c in v))
    return [c / n for c in v]

def rotate(q, r):  # b = A(q) r, A as in the wahbad protocol
    w, x, y, z = q
    return [(1 - 2 * (y * y + z * z)) * r[0] + 2 * (x * y - w * z) * r[1] + 2 * (x * z + w * y) * r[2],
            2 * (x * y + w * z) * r[0] + (1 - 2 * (x * x + z * z)) * r[1] + 2 * (y * z - w * x) * r[2],
            2 * (x * z - w * y) * r[0] + 2 * (y * z + w * x) * r[1] + (1 - 2 * (x * x + y * y)) * r[2]]

def noisy(rng, v, sigma):  # small-angle noise, sigma per tangent axis (QUEST measurement model)
    return unit([c + rng.gauss(0.0, sigma) for c in v])

def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--addr", default="127.0.0.1:7600")
    ap.add_argument("--udp", help="send datagrams to HOST:PORT instead of a stream")
    ap.add_argument("--q", nargs=4, type=float, default=[0.9, 0.1, -0.3, 0.3])
    ap.add_argument("--duration", type=float, default=5.0, help="bench seconds to stream")
    ap.add_argument("--rate", type=float, default=20.0, help="frames per bench second")
    ap.add_argument("--speed", type=float, default=1.0, help="bench seconds per wall second")
    ap.add_argument("--outlier-every", type=int, default=0)
    ap.add_argument("--burst", help="START:END bench seconds of mostly wrong stars")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--token")
    a = ap.parse_args()
    rng, q = random.Random(a.seed), unit(a.q)
    stars = [unit([rng.uniform(-1, 1) for _ in range(3)]) for _ in range(5)]
    sun_r, mag_r = unit([0.3, -0.8, 0.5]), unit([0.9, 0.1, -0.4])
    burst = [float(s) for s in a.burst.split(":")] if a.burst else None
    if a.udp:
        host, port = a.udp.rsplit(":", 1)
        sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        send = lambda m: sock.sendto(msgpack.packb(m), (host, int(port)))
    else:
        if a.addr.startswith("unix:"):
            sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM); sock.connect(a.addr[5:])
        else:
            host, port = a.addr.rsplit(":", 1); sock = socket.create_connection((host, int(port)))
        send = lambda m: sock.sendall(struct.pack(">I", len(msgpack.packb(m))) + msgpack.packb(m))
        hello = {"type": "hello", "version": 1, "role": "source", "name": "bench_source.py"}
        if a.token:
            hello["token"] = a.token
        send(hello)
        head = sock.recv(4); welcome = msgpack.unpackb(sock.recv(struct.unpack(">I", head)[0]))
        if welcome.get("type") != "welcome":
            raise SystemExit(f"refused: {welcome}")
    seq, planted, t0 = {"cam": 0, "sun": 0, "mag": 0}, [], time.monotonic()
    for k in range(int(a.duration * a.rate) + 1):
        t_s = k / a.rate
        time.sleep(max(0.0, t0 + t_s / a.speed - time.monotonic()))
        t = int(round(t_s * 1e9))
        msgs = []
        for star in stars:
            seq["cam"] += 1
            b = noisy(rng, rotate(q, star), 1e-4)
            bad = (a.outlier_every and seq["cam"] % a.outlier_every == 0) or \
                  (burst and burst[0] <= t_s < burst[1] and seq["cam"] % 5 != 0)
            if bad:
                b = unit([rng.uniform(-1, 1) for _ in range(3)]); planted.append(["cam", seq["cam"]])
            msgs.append({"type": "obs", "sensor": "cam", "seq": seq["cam"], "t": t, "b": b, "r": star, "sigma": 1e-4})
        for name, r, sigma in (("sun", sun_r, 1e-3), ("mag", mag_r, 1e-2)):
            seq[name] += 1
            msgs.append({"type": "obs", "sensor": name, "seq": seq[name], "t": t,
                         "b": noisy(rng, rotate(q, r), sigma), "r": r, "sigma": sigma})
        msgs.append({"type": "truth", "t": t, "q": q})
        for m in msgs:
            if a.token and a.udp:
                m["token"] = a.token
            send(m)
    print(json.dumps({"planted": planted}), flush=True)
    sock.close()

if __name__ == "__main__":
    main()
