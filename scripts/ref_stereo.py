#!/usr/bin/python3
"""OpenCV stereo reference driver for Mottle's stereo tests.

Request (JSON, from the file named as the first argument); either part may
be left out:

    {
      "calibrate": {
        "image_size": [w, h],
        "views": [{"object": [[X, Y], ...],   # target points, mm (Z = 0)
                   "left":  [[x, y], ...],    # the same points in the left image, px
                   "right": [[x, y], ...]}],  # ... and in the right image
        "fix_k3": false                       # hold k3 at zero in both cameras
      },
      "triangulate": {
        "P1": [[...4], [...4], [...4]],       # 3x4 projection matrices
        "P2": [[...4], [...4], [...4]],
        "left":  [[x, y], ...],               # undistorted point pairs
        "right": [[x, y], ...]
      }
    }

Response (JSON on stdout):

    {"library": "opencv", "version": "...",
     "calibrate": {"rms": ..., "left": {camera}, "right": {camera},
                   "R": 3x3, "T": [3]},
     "triangulate": [[X, Y, Z], ...]}

Calibration: cv2.calibrateCamera for each camera (the full five-term model
k1, k2, p1, p2, k3), then cv2.stereoCalibrate with CALIB_USE_INTRINSIC_GUESS,
so that both cameras' intrinsics and the relative pose are refined together,
with a tight stop. Triangulation: cv2.triangulatePoints (the linear method),
in float64, divided by the homogeneous coordinate.

Run with Debian's /usr/bin/python3 and the python3-opencv package.
"""

import json
import sys

import numpy as np

from refcommon import fail


def camera(K, d):
    d = d.ravel()
    return {"fx_px": float(K[0, 0]), "fy_px": float(K[1, 1]), "cx_px": float(K[0, 2]), "cy_px": float(K[1, 2]),
            "k1": float(d[0]), "k2": float(d[1]), "p1": float(d[2]), "p2": float(d[3]), "k3": float(d[4])}


def calibrate(cv2, req):
    w, h = req["image_size"]
    obj, left, right = [], [], []
    for v in req["views"]:
        if not (len(v["object"]) == len(v["left"]) == len(v["right"])):
            fail("each view needs the same points in object, left and right")
        obj.append(np.array([[p[0], p[1], 0.0] for p in v["object"]], dtype=np.float32))
        left.append(np.array(v["left"], dtype=np.float32).reshape(-1, 1, 2))
        right.append(np.array(v["right"], dtype=np.float32).reshape(-1, 1, 2))
    crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 500, 1e-15)
    fix = cv2.CALIB_FIX_K3 if req.get("fix_k3") else 0
    _, K1, d1, _, _ = cv2.calibrateCamera(obj, left, (w, h), None, None, flags=fix, criteria=crit)
    _, K2, d2, _, _ = cv2.calibrateCamera(obj, right, (w, h), None, None, flags=fix, criteria=crit)
    rms, K1, d1, K2, d2, R, T, _, _ = cv2.stereoCalibrate(
        obj, left, right, K1, d1, K2, d2, (w, h),
        flags=cv2.CALIB_USE_INTRINSIC_GUESS | fix, criteria=crit)
    return {"rms": float(rms), "left": camera(K1, d1), "right": camera(K2, d2),
            "R": R.tolist(), "T": T.ravel().tolist()}


def triangulate(cv2, req):
    P1 = np.array(req["P1"], dtype=np.float64)
    P2 = np.array(req["P2"], dtype=np.float64)
    a = np.array(req["left"], dtype=np.float64).T
    b = np.array(req["right"], dtype=np.float64).T
    X = cv2.triangulatePoints(P1, P2, a, b)
    X = X[:3] / X[3]
    return X.T.tolist()


def main(argv):
    if len(argv) != 2:
        fail("usage: %s REQUEST.json" % argv[0])
    try:
        with open(argv[1], "r", encoding="utf-8") as f:
            req = json.load(f)
    except (OSError, ValueError) as e:
        fail("request %s: %s" % (argv[1], e))
    import cv2

    out = {"library": "opencv", "version": cv2.__version__}
    if "calibrate" in req:
        out["calibrate"] = calibrate(cv2, req["calibrate"])
    if "triangulate" in req:
        out["triangulate"] = triangulate(cv2, req["triangulate"])
    json.dump(out, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main(sys.argv)
