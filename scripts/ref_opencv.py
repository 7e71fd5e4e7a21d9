#!/usr/bin/python3
"""OpenCV reference driver for Mottle's verification tests and benchmark.

Methods (request format in refcommon.py):

  template  Integer search with cv2.matchTemplate, TM_CCOEFF_NORMED (the
            zero-normalised cross-correlation), over ±search px around the
            rounded guess. u, v are integers.

  ecc       Per-subset cv2.findTransformECC with MOTION_AFFINE (Evangelidis &
            Psarakis 2008, "Parametric image alignment using enhanced
            correlation coefficient maximization", IEEE TPAMI 30(10):1858),
            started from the template result above. Each subset is aligned
            against a window of the deformed image around its start position;
            u, v are the displacement of the subset centre under the fitted
            affine warp. ECC interpolates the deformed image bilinearly
            (fixed inside OpenCV); gaussFiltSize=1 (no extra smoothing) and a
            tight stop (rho change < 1e-8, 200 iterations) give its best
            accuracy on these images. The optional request fields
            "ecc_max_iter" and "ecc_eps" change the stop; OpenCV's own
            default is 50 iterations and 1e-3, about 50× faster here and a
            few per cent less or more accurate depending on the case.

  ecc_default  The same with OpenCV's default stop (50 iterations, 1e-3).

Run with Debian's /usr/bin/python3 and the python3-opencv package.
"""

import sys
import time

import refcommon as rc

try:
    import cv2
    import numpy as np
except ImportError as e:  # pragma: no cover
    rc.fail("ref_opencv.py: %s; install the Debian packages python3-opencv python3-numpy" % e)

MARGIN = 6          # px of deformed image kept around the subset for ECC
GAUSS = 1           # ECC's own Gaussian pre-blur; 1 = none
MAX_ITER, EPS = 200, 1e-8  # default stop: the most accurate


def criteria(req):
    it, eps = MAX_ITER, EPS
    if req["method"] == "ecc_default":
        it, eps = 50, 1e-3  # OpenCV's own default TermCriteria for ECC
    it, eps = req.get("ecc_max_iter", it), req.get("ecc_eps", eps)
    if not isinstance(it, int) or it < 1 or not isinstance(eps, (int, float)) or eps < 0:
        rc.fail("request: ecc_max_iter %r must be an integer >= 1 and ecc_eps %r a number >= 0" % (it, eps))
    return (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, it, float(eps))


def integer_search(ref, dfm, x, y, h, gu, gv, r):
    """Returns (du, dv, score) or raises ValueError if outside the image."""
    H, W = dfm.shape
    if x - h < 0 or y - h < 0 or x + h >= ref.shape[1] or y + h >= ref.shape[0]:
        raise ValueError("reference subset outside the image")
    x0, y0 = x + gu - h - r, y + gv - h - r
    x1, y1 = x + gu + h + r + 1, y + gv + h + r + 1
    if x0 < 0 or y0 < 0 or x1 > W or y1 > H:
        raise ValueError("search window outside the deformed image")
    tmpl = ref[y - h:y + h + 1, x - h:x + h + 1]
    if r == 0:
        win = dfm[y0:y1, x0:x1]
        res = cv2.matchTemplate(win, tmpl, cv2.TM_CCOEFF_NORMED)
        return gu, gv, float(res[0, 0])
    res = cv2.matchTemplate(dfm[y0:y1, x0:x1], tmpl, cv2.TM_CCOEFF_NORMED)
    _, best, _, loc = cv2.minMaxLoc(res)
    return gu + loc[0] - r, gv + loc[1] - r, float(best)


def ecc(ref, dfm, x, y, h, iu, iv, crit):
    """Returns (u, v, rho) from an affine ECC fit started at integer (iu, iv)."""
    H, W = dfm.shape
    n = 2 * h + 1
    # Window: the subset at its start position plus MARGIN px, clipped to
    # the image (ECC masks warped pixels that fall outside its input).
    sx, sy = x + iu - h, y + iv - h  # start position of the template's corner
    if sx < 0 or sy < 0 or sx + n > W or sy + n > H:
        raise ValueError("deformed subset outside the image")
    ox, oy = max(0, sx - MARGIN), max(0, sy - MARGIN)
    ex, ey = min(W, sx + n + MARGIN), min(H, sy + n + MARGIN)
    tmpl = ref[y - h:y + h + 1, x - h:x + h + 1]
    win = dfm[oy:ey, ox:ex]
    warp = np.array([[1, 0, sx - ox], [0, 1, sy - oy]], dtype=np.float32)
    rho, warp = cv2.findTransformECC(tmpl, win, warp, cv2.MOTION_AFFINE,
                                     crit, None, GAUSS)
    # Template pixel (i, j) maps to window point warp·(i, j, 1); the subset
    # centre is template pixel (h, h).
    cx = warp[0, 0] * h + warp[0, 1] * h + warp[0, 2]
    cy = warp[1, 0] * h + warp[1, 1] * h + warp[1, 2]
    return ox + cx - x, oy + cy - y, float(rho)


def main():
    req = rc.read_request(sys.argv)
    method = req["method"]
    if method not in ("template", "ecc", "ecc_default"):
        rc.fail("request: method %r unknown; ref_opencv.py does 'template', 'ecc' or 'ecc_default'" % method)
    ref = rc.load_image(req["reference"])
    dfm = rc.load_image(req["deformed"])
    h = req["subset"] // 2
    r = req["search"]
    crit = criteria(req)
    cv2.setNumThreads(1)
    out = []
    t0, c0 = time.perf_counter(), time.process_time()
    for (x, y), (gu, gv) in zip(req["points"], req["guess"]):
        gu, gv = int(round(gu)), int(round(gv))
        try:
            iu, iv, score = integer_search(ref, dfm, x, y, h, gu, gv, r)
            if method == "template":
                out.append(rc.point_result(x, y, iu, iv, True, score))
                continue
            u, v, rho = ecc(ref, dfm, x, y, h, iu, iv, crit)
            out.append(rc.point_result(x, y, u, v, True, rho))
        except ValueError as e:
            out.append(rc.point_result(x, y, error=str(e)))
        except cv2.error as e:
            msg = str(e).strip().splitlines()[-1] if str(e).strip() else "cv2.error"
            out.append(rc.point_result(x, y, error="findTransformECC: " + msg))
    dt, cpu = time.perf_counter() - t0, time.process_time() - c0
    settings = {"subset": req["subset"], "search": r}
    if method != "template":
        settings.update({"motion": "MOTION_AFFINE", "margin": MARGIN,
                         "gaussFiltSize": GAUSS, "max_iter": crit[1],
                         "eps": crit[2], "threads": 1})
    rc.write_response("opencv", cv2.__version__, method, settings, dt, out, cpu)


if __name__ == "__main__":
    main()
