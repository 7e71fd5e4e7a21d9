// Package correlate tracks speckle subsets from a reference image into a
// deformed image: integer ZNCC search from seed points, subpixel inverse
// compositional Gauss–Newton (IC-GN) refinement with first- or second-order
// shape functions, and reliability-guided propagation over a grid.
//
// Run measures a regular grid over a region of interest; RunPoints measures
// arbitrary positions independently (for a series engine that carries
// points from frame to frame). Every grid point is returned with a Status:
// points that cannot be measured are flagged with the reason, never dropped.
//
// # Method
//
//   - Criterion: zero-mean normalised sum of squared differences (ZNSSD),
//     insensitive to offset and scale changes of intensity; ZNCC = 1 − ZNSSD/2
//     is reported (Pan, Xie & Wang 2010, Appl. Opt. 49:5501).
//   - Interpolation of the deformed image: prefiltered cubic or quintic
//     B-splines (package spline). Warped subsets must stay 2 px (cubic) or
//     3 px (quintic) inside the image, where the mirror boundary of the
//     spline is accurate.
//   - Subpixel: IC-GN (Baker & Matthews 2004; Pan, Li & Tong 2013) with the
//     Hessian, Σ J and Σ J·f̃ computed once per point, one pass over the
//     subset per iteration, and convergence on the largest displacement
//     change over the subset.
//   - Seeds: an integer ZNCC search within Options.Search px; if IC-GN from
//     the found translation is not accepted, templates warped by rotations
//     up to ±30° and scales 0.85–1.15 are searched and IC-GN starts from the
//     best matches, so large rotations and stretches need no hints.
//   - Propagation: reliability-guided (Pan 2009), in batches of a fixed
//     size formed from the state of earlier batches only, which keeps the
//     results bit-identical for any number of threads.
//   - Uncertainty: noise σ from the median ZNSSD residual of the accepted
//     points (or Options.Noise), and per point StdU = σ·√(2·(H⁻¹)_uu) with H
//     the Gauss–Newton Hessian of the reference subset; for a translation-only
//     subset this is √2·σ/√(Σ fx²) (Wang et al. 2007; Pan et al. 2010).
//
// # Performance
//
// BenchmarkRun1024 (1024×1024 8-bit pair, subset 31, step 8, first order,
// 15,625 grid points), measured on the project's shared 2-core machine
// under a load average of 8–12: about 18,000 points per CPU-second (an
// estimate, not a measurement, of some 35,000 points/s on two idle cores;
// wall-clock figures on the loaded machine were 4,000–10,000 points/s), 2.5 IC-GN iterations per point at
// Tol = 1e-4 px, no allocation per point (about 260 allocations per run, all
// set-up), and a peak heap of 35 bytes per image pixel above the two input
// images (43 including them). The second-order shape function runs at
// about 6,700 points per CPU-second.
package correlate
