"""Shared input/output for the reference-library drivers (ref_opencv.py,
ref_skimage.py) used by Mottle's verification tests and benchmark.

Request (JSON, from the file named as the first argument, or stdin if "-"):

    {
      "reference": "ref.npy",      # .npy (float32/float64, shape H×W) or any
      "deformed":  "def.npy",      #   single-channel image OpenCV can read
      "method":    "ecc",          # driver-specific, see each driver
      "subset":    21,             # odd subset side, px
      "search":    4,              # integer search radius around the guess, px
      "points":    [[x, y], ...],  # integer subset centres (pixel centres at integers)
      "guess":     [[u, v], ...]   # optional initial displacement per point
    }

Response (JSON on stdout):

    {"library": "...", "version": "...", "method": "...", "settings": {...},
     "seconds": <wall time of the per-point loop only>,
     "cpu_seconds": <CPU time (user + system) of the process during that loop; optional>,
     "points": [{"x":..,"y":..,"u":..,"v":..,"ok":true,"score":..,"error":""}]}

u, v are the displacement of the subset centre (deformed − reference) in px,
x to the right and y down. A point that cannot be measured has ok=false and
an error message; the driver itself exits with status 2 and a message on
stderr only when the request as a whole is unusable.
"""

import json
import sys

import numpy as np


class RequestError(Exception):
    """The request cannot be processed at all."""


def fail(msg):
    sys.stderr.write(msg.rstrip() + "\n")
    sys.exit(2)


def read_request(argv):
    if len(argv) != 2:
        fail("usage: %s REQUEST.json|-  (see refcommon.py for the format)" % argv[0])
    try:
        if argv[1] == "-":
            req = json.load(sys.stdin)
        else:
            with open(argv[1], "r", encoding="utf-8") as f:
                req = json.load(f)
    except (OSError, ValueError) as e:
        fail("request %s: %s" % (argv[1], e))
    problems = []
    for key in ("reference", "deformed", "method", "subset", "points"):
        if key not in req:
            problems.append("missing field %r" % key)
    if problems:
        fail("request: " + "; ".join(problems))
    n = req["subset"]
    if not isinstance(n, int) or n < 5 or n % 2 == 0:
        problems.append("subset %r must be an odd integer >= 5" % (n,))
    s = req.get("search", 0)
    if not isinstance(s, int) or s < 0:
        problems.append("search %r must be an integer >= 0" % (s,))
    pts = req["points"]
    if not isinstance(pts, list):
        problems.append("points must be a list of [x, y]")
        pts = []
    for i, p in enumerate(pts):
        if (not isinstance(p, list) or len(p) != 2
                or not all(isinstance(c, int) for c in p)):
            problems.append("points[%d] = %r must be two integers" % (i, p))
            break
    g = req.get("guess")
    if g is not None and (not isinstance(g, list) or len(g) != len(pts)):
        problems.append("guess must have one [u, v] per point (%d)" % len(pts))
    if problems:
        fail("request: " + "; ".join(problems))
    req.setdefault("search", 0)
    if g is None:
        req["guess"] = [[0.0, 0.0]] * len(pts)
    return req


def load_image(path):
    """Returns the image as a float32 H×W array in its native grey scale."""
    try:
        if path.endswith(".npy"):
            a = np.load(path, allow_pickle=False)
        else:
            import cv2
            a = cv2.imread(path, cv2.IMREAD_UNCHANGED)
            if a is None:
                raise RequestError("cannot decode (not an image OpenCV reads?)")
    except (OSError, ValueError, RequestError) as e:
        fail("image %s: %s" % (path, e))
    if a.ndim != 2:
        fail("image %s: shape %s, want a single-channel H×W image" % (path, a.shape))
    return np.ascontiguousarray(a, dtype=np.float32)


def write_response(library, version, method, settings, seconds, points, cpu_seconds=None):
    out = {"library": library, "version": version, "method": method,
           "settings": settings, "seconds": seconds, "points": points}
    if cpu_seconds is not None:
        out["cpu_seconds"] = cpu_seconds
    json.dump(out, sys.stdout)
    sys.stdout.write("\n")


def point_result(x, y, u=0.0, v=0.0, ok=False, score=0.0, error=""):
    return {"x": x, "y": y, "u": float(u), "v": float(v), "ok": bool(ok),
            "score": float(score), "error": error}
