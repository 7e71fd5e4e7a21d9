// Package quality measures how well a speckle image suits digital image
// correlation, turns the measures into warnings that say what to change at
// the bench, and chooses the subset that meets a target displacement
// uncertainty.
//
// It sits right after package imageio in the dependency chain and uses only
// imageio, roi and spline (for the same image gradients the correlation
// engine uses): it never correlates. Everything here is computed from the
// pixels of one image, or of a reference and a later image.
//
// # Measures (Measure, Compare)
//
//   - Saturated and black-clipped fractions: pixels at the full-scale level
//     of the signal's bit depth and at 0.
//   - Used grey range (the 0.1–99.9 % percentile span as a fraction of full
//     scale) and the bit depth: the container's and the one the levels
//     actually use (a 12-bit camera in a 16-bit file).
//   - Mean intensity gradient δ_f, the mean of |∇f| with the Sobel operator
//     (Pan, Lu & Xie 2010, "Mean intensity gradient: an effective global
//     parameter for quality assessment of the speckle patterns used in
//     digital image correlation", Opt. Lasers Eng. 48:469).
//   - Speckle size from the autocorrelation (imageio.SpeckleSize).
//   - Edge width, the blur indicator: the used grey span divided by the 99th
//     percentile of the gradient magnitude, the width of the sharpest edges.
//     A Gaussian blur of σ spreads a step to √(2π)·σ (its peak slope is
//     C/(σ√(2π))); an in-focus image measures about 2 px.
//   - Noise σ from the image alone (NoiseFromImage) or a static pair
//     (NoiseFromPair).
//   - Against a reference: the relative change of mean brightness, of
//     contrast (grey standard deviation) and of edge width.
//
// # Subset for a target uncertainty (ChooseSubset)
//
// The standard deviation of u for a subset S with noise σ in both images is
// σ_u ≈ √2·σ/√(Σ_S (∂f/∂x)²) (Wang, Li, Tong & Ruan 2007, Exp. Mech.
// 47:701), likewise σ_v with ∂f/∂y; the sum of squared subset intensity
// gradients (SSSIG) is the criterion of Pan, Xie, Wang, Qian & Wang 2008,
// "Study on subset size selection in digital image correlation for speckle
// patterns", Opt. Express 16:7037. ChooseSubset evaluates it with summed-area
// tables for every odd subset at every point of a grid and returns the
// smallest subset that meets the target at a chosen fraction of the points,
// and the subset each point would need.
//
// The formula is for a pure translation and first-order errors: it does not
// include interpolation bias, the smoothing of noise by subpixel
// interpolation (which lowers the real error somewhat), or shape-function
// mismatch under strain gradients. The noise comes from a static pair
// (NoiseFromPair, the reliable way) or from the image alone (NoiseFromImage,
// a rougher estimate).
package quality
