"""Reference for the Wahba cross-check: SciPy's Rotation.align_vectors.

Reads {"cases": [{"b": [[x,y,z],...], "r": [[x,y,z],...], "w": [...]}, ...]}
on stdin and writes {"results": [{"q": [w,x,y,z], "sens": [9 numbers]}, ...]}
on stdout.

SciPy finds the rotation C minimising sum w_i |a_i - C b_i|^2, so a = our
body vectors b and SciPy's b = our reference vectors r: C is our attitude
matrix A (b = A r). SciPy quaternions are scalar-last [x, y, z, w]; they are
reordered to our scalar-first [w, x, y, z] with w >= 0. The sensitivity
matrix is in frame A (our body frame), row-major.
"""

import json
import sys

import numpy as np
from scipy.spatial.transform import Rotation


def main() -> None:
    cases = json.load(sys.stdin)["cases"]
    results = []
    for case in cases:
        b = np.asarray(case["b"], dtype=float)
        r = np.asarray(case["r"], dtype=float)
        w = np.asarray(case["w"], dtype=float)
        rot, _rssd, sens = Rotation.align_vectors(b, r, weights=w, return_sensitivity=True)
        x, y, z, s = rot.as_quat()  # scalar-last
        q = [s, x, y, z]
        if s < 0:
            q = [-v for v in q]
        results.append({"q": [float(v) for v in q], "sens": [float(v) for v in np.asarray(sens).reshape(9)]})
    json.dump({"results": results}, sys.stdout)


if __name__ == "__main__":
    main()
