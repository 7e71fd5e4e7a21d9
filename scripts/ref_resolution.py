#!/usr/bin/python3
"""Expected table of the star-pattern resolution check (pkg/verify,
TestTheoryPeriodTable): for odd subsets N and shape-function orders 1 and
2, the period p10 at which the unweighted least-squares polynomial fit
over k = -h..h (N = 2h + 1) of cos(2 pi k / p) reads 0.9 of the amplitude
at the crest (k = 0): the attenuation level of the star-pattern
resolution check of DIC Challenge 2.0 (Reu et al. 2022, Exp. Mech.
62:639; level from memory). Computed with NumPy's lstsq and SciPy's brentq,
independently of pkg/verify's own fit and bisection.

    /usr/bin/python3 scripts/ref_resolution.py > testdata/protocol/resolution_p10.csv
"""

import sys

import numpy as np
import scipy
from scipy.optimize import brentq


def attenuation(n, order, p):
    h = n // 2
    k = np.arange(-h, h + 1, dtype=float)
    a = np.vander(k, order + 1, increasing=True)
    c, *_ = np.linalg.lstsq(a, np.cos(2 * np.pi * k / p), rcond=None)
    return c[0]


def main():
    w = sys.stdout
    w.write("# p10 of the least-squares subset filter; NumPy %s lstsq, SciPy %s brentq (xtol 1e-12)\n" % (np.__version__, scipy.__version__))
    w.write("subset_px,order,p10_px\n")
    for order in (1, 2):
        for n in (11, 21, 31, 41, 51, 101):
            # The main lobe: attenuation rises from below 0.9 at p = N/2
            # (order 1) or p = N/4 (order 2, whose fit follows the crest) to 1.
            lo = n / 2 if order == 1 else n / 4
            p = brentq(lambda p: attenuation(n, order, p) - 0.9, lo, 1000 * n, xtol=1e-12)
            w.write("%d,%d,%.10g\n" % (n, order, p))


if __name__ == "__main__":
    main()
