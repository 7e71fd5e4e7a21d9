// Package verify checks Mottle against references outside the project:
// general-purpose image-registration libraries (OpenCV and scikit-image,
// run through Debian's /usr/bin/python3 by the drivers in scripts/), the
// exact truth of rendered images, and the DIC Challenge 2.0 evaluation
// protocol (Reu et al. 2022, "DIC Challenge 2.0: developing images and
// guidelines for evaluating accuracy and resolution of 2D analyses",
// Exp. Mech. 62:639).
//
// The harness is plain: a [Runner] sends a [Request] (two image files, the
// subset size and integer subset centres) to a driver script and decodes its
// [Response]; [Errors] compares any set of displacements with the truth;
// [Challenge] runs the noise / spatial-resolution protocol with any
// [Tracker]. Mottle itself is adapted by [MottleTracker].
//
// Everything here is a test oracle: it is used by this package's tests, by
// cmd/mottle-bench and by scripts/bench, never by the analysis pipeline.
package verify
