#!/usr/bin/python3
"""OpenCV camera-calibration reference driver for Mottle's calibration tests.

Request (JSON, from the file named as the first argument):

    {
      "image_size": [w, h],
      "views": [{"object": [[X, Y], ...],     # target points, mm (Z = 0)
                 "image":  [[x, y], ...]}],   # detected image points, px
      "undistort": {"camera": {"fx_px":..,"fy_px":..,"cx_px":..,"cy_px":..,
                               "k1":..,"k2":..,"k3":..,"p1":..,"p2":..},
                    "points": [[x, y], ...]}
    }

Response (JSON on stdout):

    {"library": "opencv", "version": "...",
     "rms": <cv2 RMS reprojection error, px>,
     "camera": {...same names...}, "std": {...},
     "undistorted_given": [[x, y], ...],   # points undistorted with the given camera
     "undistorted_fit":   [[x, y], ...],   # ...and with OpenCV's own fit
     "seconds": <wall time of calibrateCameraExtended alone>}

The fit is cv2.calibrateCameraExtended with the full five-term model (k1, k2,
p1, p2, k3), zero skew, its own initialisation, and a tight stop. Points are
undistorted with cv2.undistortPointsIter (P = the camera matrix, so results
are pixels of the undistorted camera) to 1e-14, because cv2.undistortPoints
stops after 5 iterations, which is not enough for strong distortion.

Run with Debian's /usr/bin/python3 and the python3-opencv package.
"""

import json
import sys
import time

import numpy as np

from refcommon import fail


def camera_matrix(c):
    return np.array([[c["fx_px"], 0, c["cx_px"]], [0, c["fy_px"], c["cy_px"]], [0, 0, 1]], dtype=np.float64)


def dist_coeffs(c):
    return np.array([c["k1"], c["k2"], c["p1"], c["p2"], c["k3"]], dtype=np.float64)


def undistort(cv2, pts, K, d):
    if len(pts) == 0:
        return []
    src = np.array(pts, dtype=np.float64).reshape(-1, 1, 2)
    crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 200, 1e-14)
    out = cv2.undistortPointsIter(src, K, d, None, K, crit)
    return out.reshape(-1, 2).tolist()


def main(argv):
    if len(argv) != 2:
        fail("usage: %s REQUEST.json" % argv[0])
    try:
        with open(argv[1], "r", encoding="utf-8") as f:
            req = json.load(f)
    except (OSError, ValueError) as e:
        fail("request %s: %s" % (argv[1], e))
    import cv2

    w, h = req["image_size"]
    obj, img = [], []
    for v in req["views"]:
        o = np.array([[p[0], p[1], 0.0] for p in v["object"]], dtype=np.float32)
        i = np.array(v["image"], dtype=np.float32).reshape(-1, 1, 2)
        obj.append(o)
        img.append(i)
    crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 500, 1e-15)
    t0 = time.perf_counter()
    rms, K, d, _, _, std_in, _, _ = cv2.calibrateCameraExtended(
        obj, img, (w, h), None, None, flags=0, criteria=crit)
    seconds = time.perf_counter() - t0
    d = d.ravel()
    s = std_in.ravel()
    cam = {"fx_px": K[0, 0], "fy_px": K[1, 1], "cx_px": K[0, 2], "cy_px": K[1, 2],
           "k1": d[0], "k2": d[1], "p1": d[2], "p2": d[3], "k3": d[4]}
    std = {"fx_px": s[0], "fy_px": s[1], "cx_px": s[2], "cy_px": s[3],
           "k1": s[4], "k2": s[5], "p1": s[6], "p2": s[7], "k3": s[8]}
    und = req.get("undistort", {"camera": cam, "points": []})
    given = undistort(cv2, und["points"], camera_matrix(und["camera"]), dist_coeffs(und["camera"]))
    fit = undistort(cv2, und["points"], K, d)
    json.dump({"library": "opencv", "version": cv2.__version__, "rms": rms, "seconds": seconds,
               "camera": {k: float(v) for k, v in cam.items()},
               "std": {k: float(v) for k, v in std.items()},
               "undistorted_given": given, "undistorted_fit": fit}, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main(sys.argv)
