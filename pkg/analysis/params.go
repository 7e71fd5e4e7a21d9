// Package analysis is the pipeline that turns a reference and a deformed
// image into a result field: correlation, then kinematics, then the field
// with its metadata. The CLI, the service and the series engine all call it.
package analysis

import (
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/roi"
)

// Params are the user-facing parameters of one analysis. The JSON names are
// the ones the CLI flags, the HTTP API and field.json use.
type Params struct {
	Subset        int       `json:"subset"`          // subset side in px, odd; default 31
	Step          int       `json:"step"`            // grid spacing in px; default 8
	Shape         string    `json:"shape"`           // "first" or "second"; default "first"
	Interpolation string    `json:"interpolation"`   // "cubic" or "quintic"; default "cubic"
	Prefilter     float64   `json:"prefilter_sigma"` // Gaussian prefilter σ in px, 0 = off
	ROI           *roi.Spec `json:"roi,omitempty"`   // nil = whole image
	Seeds         [][2]int  `json:"seeds,omitempty"` // seed points (x, y); empty = automatic
	Search        int       `json:"search"`          // integer search radius in px; default 40
	MinZNCC       float64   `json:"min_zncc"`        // points below are rejected; default 0.8
	MaxIter       int       `json:"max_iterations"`  // IC-GN iteration cap; default 50
	Tolerance     float64   `json:"tolerance"`       // convergence on the update norm, px; default 1e-4
	Threads       int       `json:"threads"`         // 0 = all cores
	Noise         float64   `json:"noise_sigma"`     // known image noise σ in grey levels, 0 = estimate
	StrainWindow  int       `json:"strain_window"`   // strain window side in grid points, odd; default 5
	StrainFit     string    `json:"strain_fit"`      // "plane" or "quadratic"; default "plane"
	MMPerPx       float64   `json:"mm_per_px"`       // scale; 0 = results in px
	ScalePoints   *ScaleRef `json:"scale_points,omitempty"`
	// Calibration, when set, is the camera calibration (a mottle-camera/1
	// file, see DEVELOPERS.md): reference and deformed positions are
	// undistorted before displacements and strains are formed, and with a
	// specimen plane in the file they are in mm in that plane. It excludes
	// mm_per_px and scale_points. nil = positions stay image px.
	Calibration *calib.File `json:"calibration,omitempty"`
	// CalibrationName says where the calibration came from (its file
	// name), for the results' metadata.
	CalibrationName string `json:"calibration_name,omitempty"`
}

// ScaleRef sets the scale from two reference-image points a known distance apart.
type ScaleRef struct {
	A        [2]float64 `json:"a"`
	B        [2]float64 `json:"b"`
	Distance float64    `json:"distance_mm"`
}
