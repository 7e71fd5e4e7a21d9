#!/usr/bin/python3
"""scikit-image reference driver for Mottle's verification tests.

Method (request format in refcommon.py):

  phase     skimage.registration.phase_cross_correlation with
            upsample_factor=UPSAMPLE (Guizar-Sicairos, Thurman & Fienup 2008,
            "Efficient subpixel image registration algorithms", Opt. Lett.
            33(2):156) between the reference subset and the deformed subset
            at the rounded guess, both made zero-mean, re-centred until the
            integer position is stable (at most PASSES passes). Its model is a pure
            translation; the result is quantised to 1/UPSAMPLE px.
            normalization=None is the plain cross-correlation of the paper;
            scikit-image 0.19's default whitening ("phase") gave errors of
            about 1 px on subpixel subset shifts in our trials, so it is not used.

  phase_hann  The same with both subsets multiplied by a separable Hann
            window before the transform (common practice to suppress the
            edge discontinuity of the implied periodic extension; not part
            of the cited method, and it typically reduces the error here).

Run with Debian's /usr/bin/python3 and the python3-skimage package.
"""

import sys
import time

import refcommon as rc

try:
    import numpy as np
    import skimage
    from skimage.registration import phase_cross_correlation
except ImportError as e:  # pragma: no cover
    rc.fail("ref_skimage.py: %s; install the Debian packages python3-skimage python3-numpy" % e)

UPSAMPLE = 100
PASSES = 5


def main():
    req = rc.read_request(sys.argv)
    method = req["method"]
    if method not in ("phase", "phase_hann"):
        rc.fail("request: method %r unknown; ref_skimage.py does 'phase' or 'phase_hann'" % method)
    ref = rc.load_image(req["reference"]).astype(np.float64)
    dfm = rc.load_image(req["deformed"]).astype(np.float64)
    h = req["subset"] // 2
    H, W = dfm.shape
    out = []
    t0 = time.perf_counter()
    for (x, y), (gu, gv) in zip(req["points"], req["guess"]):
        gu, gv = int(round(gu)), int(round(gv))
        if x - h < 0 or y - h < 0 or x + h >= ref.shape[1] or y + h >= ref.shape[0]:
            out.append(rc.point_result(x, y, error="reference subset outside the image"))
            continue
        a = ref[y - h:y + h + 1, x - h:x + h + 1]
        a = a - a.mean()
        win = None
        if method == "phase_hann":
            win = np.outer(np.hanning(2 * h + 1), np.hanning(2 * h + 1))
            a = a * win
        u, v, score, ok = float(gu), float(gv), 0.0, True
        # Repeated passes re-cut the deformed subset at the rounded previous
        # estimate until that integer position is stable (at most PASSES),
        # so the final residual shift is below about 0.5 px and little of
        # the subset's content leaves the window.
        last = None
        for _ in range(PASSES):
            iu, iv = int(round(u)), int(round(v))
            if (iu, iv) == last:
                break
            last = (iu, iv)
            if (x + iu - h < 0 or y + iv - h < 0
                    or x + iu + h >= W or y + iv + h >= H):
                ok = False
                break
            b = dfm[y + iv - h:y + iv + h + 1, x + iu - h:x + iu + h + 1]
            b = b - b.mean()
            if win is not None:
                b = b * win
            shift, err, _ = phase_cross_correlation(a, b,
                                                    upsample_factor=UPSAMPLE,
                                                    normalization=None)
            # shift (rows, cols) moves b onto a; the content moved by −shift.
            u, v, score = iu - shift[1], iv - shift[0], 1 - err
        if not ok:
            out.append(rc.point_result(x, y, error="deformed subset outside the image"))
            continue
        out.append(rc.point_result(x, y, u, v, True, score))
    dt = time.perf_counter() - t0
    rc.write_response("scikit-image", skimage.__version__, method,
                      {"subset": req["subset"], "upsample_factor": UPSAMPLE,
                       "window": "hann" if method == "phase_hann" else "none",
                       "normalization": None, "zero_mean": True,
                       "passes": PASSES},
                      dt, out)


if __name__ == "__main__":
    main()
