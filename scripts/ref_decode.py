#!/usr/bin/python3
"""Reference decodes of the shared image fixtures in testdata/images, for
pkg/imageio's TestDecodeAgainstReferenceLibraries and TestOrientationAgainstOpenCV.

Run with Debian's python3 (python3-opencv, python3-skimage) from the
repository root:

    /usr/bin/python3 scripts/ref_decode.py > testdata/images/decode_ref.json

Lossless files (PNG, TIFF) are read by OpenCV (cv2.imread with
IMREAD_UNCHANGED: samples as stored, 8 or 16 bit) and by scikit-image
(skimage.io.imread). The EXIF-tagged JPEGs are read by OpenCV with
IMREAD_GRAYSCALE, which applies the EXIF orientation (OpenCV 3.1 and
later), so the entry records the upright size and the upright pixels.
"""

import json
import os
import sys

import cv2
import numpy as np
import skimage
import skimage.io

DIR = "testdata/images"
LOSSLESS = ["speckle-8.png", "speckle-16.png", "speckle-8.tif", "speckle-16.tif", "speckle-12in16.png"]
ORIENTED = ["scene-ref-exif6.jpg", "scene-def-exif6.jpg"]


def entry(name, lib, version, a, oriented=False):
    if a.ndim != 2:
        sys.exit("%s: %s reads %d channels; the fixtures are single-channel" % (name, lib, a.shape[2]))
    h, w = a.shape
    pts = [(0, 0), (w - 1, 0), (0, h - 1), (w - 1, h - 1), (w // 2, h // 3), (w // 3, h // 2), (17, 11)]
    return {
        "file": name, "library": lib, "version": version,
        "width": int(w), "height": int(h), "dtype": str(a.dtype),
        "sum": float(a.astype(np.float64).sum()),
        "min": float(a.min()), "max": float(a.max()),
        "samples": [[int(x), int(y), int(a[y, x])] for x, y in pts],
        "row_sums": [float(s) for s in a.astype(np.float64).sum(axis=1)],
        "oriented": oriented,
    }


def main():
    out = []
    for n in LOSSLESS:
        p = os.path.join(DIR, n)
        out.append(entry(n, "opencv", cv2.__version__, cv2.imread(p, cv2.IMREAD_UNCHANGED)))
        out.append(entry(n, "scikit-image", skimage.__version__, skimage.io.imread(p)))
    for n in ORIENTED:
        p = os.path.join(DIR, n)
        out.append(entry(n, "opencv", cv2.__version__, cv2.imread(p, cv2.IMREAD_GRAYSCALE), oriented=True))
    json.dump(out, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
