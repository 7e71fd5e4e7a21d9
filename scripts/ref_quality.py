#!/usr/bin/python3
"""SciPy/NumPy reference for Mottle's image quality measures (pkg/quality).

Request (JSON, from the file named as the first argument):

    {"images": [{"path": "a.npy", "full_scale": 255}, ...]}

each image a .npy float32 H×W array in its native grey scale. Response
(JSON on stdout):

    {"library": "scipy", "version": "...", "numpy": "...",
     "results": [{"mean_gradient": .., "saturated_fraction": ..,
                  "black_clipped_fraction": ..}, ...]}

mean_gradient is the mean intensity gradient of Pan, Lu & Xie 2010
(Opt. Lasers Eng. 48:469): the mean of sqrt(fx^2 + fy^2) with fx, fy from
scipy.ndimage.sobel divided by 8 (SciPy's Sobel kernel is unnormalised),
over the interior pixels (a 1 px border left out, so the boundary mode does
not matter). saturated_fraction is the share of pixels >= full_scale and
black_clipped_fraction the share <= 0, with NumPy.

Run with Debian's /usr/bin/python3 and the python3-scipy package.
"""

import json
import sys

try:
    import numpy as np
    import scipy
    from scipy import ndimage
except ImportError as e:  # pragma: no cover
    sys.stderr.write("ref_quality.py: %s; install the Debian packages python3-scipy python3-numpy\n" % e)
    sys.exit(2)


def main(argv):
    if len(argv) != 2:
        sys.stderr.write("usage: %s REQUEST.json\n" % argv[0])
        return 2
    with open(argv[1], "r", encoding="utf-8") as f:
        req = json.load(f)
    out = []
    for im in req["images"]:
        a = np.load(im["path"], allow_pickle=False).astype(np.float64)
        if a.ndim != 2:
            sys.stderr.write("image %s: shape %s, want H×W\n" % (im["path"], a.shape))
            return 2
        gx = ndimage.sobel(a, axis=1, mode="reflect") / 8.0
        gy = ndimage.sobel(a, axis=0, mode="reflect") / 8.0
        mag = np.hypot(gx, gy)[1:-1, 1:-1]
        fs = float(im["full_scale"])
        out.append({
            "mean_gradient": float(mag.mean()),
            "saturated_fraction": float((a >= fs).mean()),
            "black_clipped_fraction": float((a <= 0).mean()),
        })
    json.dump({"library": "scipy", "version": scipy.__version__, "numpy": np.__version__,
               "results": out}, sys.stdout)
    sys.stdout.write("\n")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
