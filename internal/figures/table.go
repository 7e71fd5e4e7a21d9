package figures

// README rows, by the start of their "check" cell.
const (
	rowHomogeneous = "homogeneous F"
	rowDiscs       = "the same on default discs"
	rowSweep       = "subpixel translation sweep"
	rowNoise       = "noise σ = 2"
	rowQuadratic   = "quadratic displacement field"
	rowStretchRot  = "12 % stretch with 15° rotation"
	rowRotation    = "30° rigid rotation"
	rowPipeline    = "5 % stretch with 10° rotation, whole pipeline"
	rowTensile     = "20-frame rendered tensile series"
	rowIncremental = "40 % stretch series"
	rowCross       = "against OpenCV"
	rowChallenge   = "DIC Challenge 2.0"
	rowDemo        = "built-in demo"
	rowCalib       = "camera calibration on 12 rendered views"
	rowCalibCV     = "camera calibration against OpenCV"
	rowFalseStrain = "false strain of a rigid translation"
	rowStereoCalib = "stereo rig calibration"
	rowStereoCV    = "stereo against OpenCV"
	rowStereoShape = "stereo shape"
	rowStereoOOP   = "stereo, 1 mm out-of-plane translation"
	rowStereoTilt  = "stereo, 0.5 % stretch of a plane tilted 20°"
	rowStereoBulge = "stereo, bulged plate"
)

// up is a figure with an upper bound; row "" means asserted but not quoted.
func up(name, row string, value, max float64) Figure {
	return Figure{Name: name, Row: row, Value: value, Max: max}
}

// in is a figure that must stay between min and max.
func in(name, row string, value, min, max float64) Figure {
	return Figure{Name: name, Row: row, Value: value, Min: min, Max: max}
}

// All returns every accuracy figure, in README order. Values were measured
// on 2026-12-01 (mean and worst of 8 pattern seeds unless the name says
// otherwise); bounds are about 1.5× the value.
func All() []Figure {
	return []Figure{
		// pkg/demo TestDemoAgainstKirsch, the built-in demo's own images
		// (one scenario): displacement RMS error in px, and strain RMS
		// error against the exact field seen through subset and window.
		up("demo/u", rowDemo, 0.0049, 0.0073),
		up("demo/v", rowDemo, 0.0059, 0.0088),
		up("demo/E11", rowDemo, 0.00017, 0.00025),
		up("demo/E22", rowDemo, 0.00011, 0.00017),
		up("demo/E12", rowDemo, 6.4e-5, 9.6e-5),

		// pkg/correlate TestHomogeneousAffine
		up("homogeneous/first/rms/mean", rowHomogeneous, 0.00034, 0.0005),
		up("homogeneous/first/rms/worst", rowHomogeneous, 0.00037, 0.00055),
		up("homogeneous/second/rms/mean", rowHomogeneous, 0.00041, 0.0006),
		up("homogeneous/second/rms/worst", rowHomogeneous, 0.00045, 0.00068),
		up("homogeneous/F/mean", rowHomogeneous, 4.9e-5, 7.4e-5),
		up("homogeneous/F/worst", rowHomogeneous, 6.1e-5, 9.2e-5),
		up("homogeneous/discs/rms/mean", rowDiscs, 0.0059, 0.0088),
		up("homogeneous/discs/rms/worst", rowDiscs, 0.0067, 0.01),

		// pkg/correlate TestSubpixelBiasSweep: peak of the mean bias over 0…1 px.
		up("sweep/cubic/mean", rowSweep, 0.0023, 0.0035),
		up("sweep/cubic/worst", rowSweep, 0.0025, 0.0038),
		up("sweep/quintic/mean", rowSweep, 0.00053, 0.0008),
		up("sweep/quintic/worst", rowSweep, 0.00059, 0.00089),
		up("sweep/prefilter-ratio/mean", rowSweep, 0.37, 0.56),
		up("sweep/prefilter-ratio/worst", rowSweep, 0.41, 0.61),

		// pkg/correlate TestNoisePrediction: std pooled over the seeds, its
		// ratio to the closed-form prediction, and the worst seed's
		// deviation |ratio − 1| (u or v).
		up("noise/first/std", rowNoise, 0.0036, 0.0055),
		in("noise/first/ratio", rowNoise, 1.07, 0.9, 1.15),
		in("noise/first/engine-ratio", rowNoise, 0.97, 0.85, 1.15),
		up("noise/first/deviation/mean", "", 0.092, 0.14),
		up("noise/first/deviation/worst", rowNoise, 0.17, 0.25),
		up("noise/first/engine-deviation/mean", "", 0.061, 0.092),
		up("noise/first/engine-deviation/worst", "", 0.11, 0.17),
		up("noise/second/std", rowNoise, 0.0070, 0.0105),
		in("noise/second/ratio", rowNoise, 1.03, 0.9, 1.12),
		in("noise/second/engine-ratio", rowNoise, 0.97, 0.85, 1.15),
		up("noise/second/deviation/mean", "", 0.074, 0.11),
		up("noise/second/deviation/worst", rowNoise, 0.14, 0.21),
		up("noise/second/engine-deviation/mean", "", 0.068, 0.1),
		up("noise/second/engine-deviation/worst", "", 0.12, 0.18),

		// pkg/correlate TestQuadraticFieldSecondOrderWins
		up("quadratic/first/rms/mean", rowQuadratic, 0.054, 0.08),
		up("quadratic/first/rms/worst", rowQuadratic, 0.054, 0.081),
		up("quadratic/first/closed-form-deviation/mean", "", 0.0067, 0.01),
		up("quadratic/first/closed-form-deviation/worst", rowQuadratic, 0.019, 0.028),
		up("quadratic/second/rms/mean", rowQuadratic, 0.00041, 0.0006),
		up("quadratic/second/rms/worst", rowQuadratic, 0.00042, 0.00063),

		// pkg/correlate TestLargeDeformationNoHints
		up("stretch-rotation/first/rms/mean", rowStretchRot, 0.0039, 0.0059),
		up("stretch-rotation/first/rms/worst", rowStretchRot, 0.0047, 0.0071),
		up("stretch-rotation/first/F/mean", "", 0.001, 0.0016),
		up("stretch-rotation/first/F/worst", "", 0.0012, 0.0018),
		up("stretch-rotation/second/rms/mean", rowStretchRot, 0.0076, 0.011),
		up("stretch-rotation/second/rms/worst", rowStretchRot, 0.0084, 0.013),
		up("stretch-rotation/second/F/mean", "", 0.0013, 0.0019),
		up("stretch-rotation/second/F/worst", "", 0.0017, 0.0025),
		up("rotation/first/rms/mean", rowRotation, 0.0038, 0.0057),
		up("rotation/first/rms/worst", rowRotation, 0.0047, 0.007),
		up("rotation/first/F/mean", "", 0.0011, 0.0017),
		up("rotation/first/F/worst", "", 0.0013, 0.002),
		up("rotation/second/rms/mean", rowRotation, 0.0075, 0.011),
		up("rotation/second/rms/worst", rowRotation, 0.0082, 0.012),
		up("rotation/second/F/mean", "", 0.0012, 0.0018),
		up("rotation/second/F/worst", "", 0.0015, 0.0023),

		// pkg/analysis TestRunHomogeneousStretchAndRotation: Green–Lagrange
		// E against the closed form, largest error at any point and RMS;
		// error of the mean rotation, degrees.
		up("pipeline/E/max/mean", rowPipeline, 0.00014, 0.00021),
		up("pipeline/E/max/worst", rowPipeline, 0.00018, 0.00027),
		up("pipeline/E/rms/mean", rowPipeline, 3.5e-5, 5.3e-5),
		up("pipeline/E/rms/worst", rowPipeline, 3.9e-5, 5.9e-5),
		up("pipeline/rotation/worst", rowPipeline, 0.00016, 0.00024),

		// pkg/series TestMaterialLawSeries: |relative error| in percent of
		// the properties from the gauge strains against the invented law.
		up("tensile/modulus/mean", rowTensile, 0.074, 0.11),
		up("tensile/modulus/worst", rowTensile, 0.16, 0.24),
		up("tensile/poisson/mean", rowTensile, 0.32, 0.48),
		up("tensile/poisson/worst", rowTensile, 0.67, 1),
		up("tensile/yield/mean", rowTensile, 0.0037, 0.0056),
		up("tensile/yield/worst", rowTensile, 0.011, 0.017),
		up("tensile/r/mean", rowTensile, 0.093, 0.14),
		up("tensile/r/worst", rowTensile, 0.36, 0.54),

		// pkg/series TestIncrementalLargeStretch: |error| of the final
		// gauge strains against the closed form.
		up("incremental/E11/mean", rowIncremental, 0.0002, 0.0003),
		up("incremental/E11/worst", rowIncremental, 0.00055, 0.00082),
		up("incremental/E22/mean", rowIncremental, 0.00013, 0.0002),
		up("incremental/E22/worst", rowIncremental, 0.00038, 0.00057),

		// pkg/verify TestCrossCheckLibraries: RMS displacement error in px
		// of Mottle on each case (one seed per case), and of the library
		// results README quotes (held to [0.67, 1.5]× so that a broken
		// library run cannot flatter Mottle).
		up("crosscheck/translation 0.37, -1.62/mottle", rowCross, 0.0087, 0.013),
		in("crosscheck/translation 0.37, -1.62/ecc_default", rowCross, 0.0125, 0.0084, 0.019),
		in("crosscheck/translation 0.37, -1.62/phase_hann", rowCross, 0.05, 0.034, 0.075),
		up("crosscheck/translation 2.25, 0.81 noise 2/mottle", "", 0.0094, 0.014),
		up("crosscheck/translation 0.5, 0.5/mottle", "", 0.006, 0.009),
		up("crosscheck/affine strain 1.2 %/mottle", rowCross, 0.0073, 0.011),
		in("crosscheck/affine strain 1.2 %/ecc_default", rowCross, 0.0199, 0.013, 0.03),
		up("crosscheck/affine strain 1.2 % noise 2/mottle", "", 0.0075, 0.011),
		up("crosscheck/rotation 1.5 deg/mottle", "", 0.0074, 0.011),

		// pkg/verify TestChallengeMottle, first-order subsets 11–51 on the
		// rendered star: mean 10 % attenuation period per subset side,
		// worst |p10/theory − 1| and largest MEI (px²).
		// pkg/calib TestCalibrateRendered (one rendered set per target):
		// reprojection RMS (px), the larger focal-length error (%), the
		// larger principal-point error (px) and the k1 error (%) against
		// the renderer's lens; bounds are the published limits.
		up("calib/checkerboard/rms", rowCalib, 0.011, 0.05),
		up("calib/checkerboard/focal", rowCalib, 0.0104, 0.1),
		up("calib/checkerboard/principal", rowCalib, 0.018, 0.5),
		up("calib/checkerboard/k1", rowCalib, 0.07, 2),
		up("calib/dots/rms", rowCalib, 0.0065, 0.05),
		up("calib/dots/focal", rowCalib, 0.00047, 0.1),
		up("calib/dots/principal", rowCalib, 0.011, 0.5),
		up("calib/dots/k1", rowCalib, 0.13, 2),

		// pkg/calib TestOpenCV: largest |ours − OpenCV| over the nine
		// parameters in units of our standard deviation; largest difference
		// of undistorted points with the same camera, px.
		up("calib/opencv/params-in-std", rowCalibCV, 0.0015, 1),
		up("calib/opencv/undistort", rowCalibCV, 9.3e-11, 1e-6),

		// pkg/verify TestFalseStrainCorrected: largest |E| of a rigid
		// translation seen through a distorting lens, without calibration
		// (held to [0.0005, 0.002] so the test keeps a real false strain to
		// remove), with the calibration, and with the true lens and pose.
		in("falsestrain/without", rowFalseStrain, 0.0012, 0.0005, 0.002),
		up("falsestrain/with", rowFalseStrain, 3.8e-5, 5e-5),
		up("falsestrain/true-lens", rowFalseStrain, 3.7e-5, 5e-5),

		// pkg/calib TestStereoCalibrateTruth and TestStereoOpenCV (one
		// rendered set of 10 pairs, 640×480): the larger reprojection RMS
		// of the two cameras (px), the baseline error (%) and the error
		// of the angle between the axes (degrees) against the renderer's
		// rig; the largest |ours − OpenCV stereoCalibrate| over the 21 free
		// parameters in units of our standard deviation (bound: 1 std).
		// pkg/stereo TestTriangulateOpenCV: the largest distance between
		// our and OpenCV's triangulatePoints on the same undistorted
		// pairs, as a fraction of the 500 mm working distance (bound: the
		// issue's 1e-6).
		up("stereo/calib/rms", rowStereoCalib, 0.0077, 0.012),
		up("stereo/calib/baseline", rowStereoCalib, 0.0058, 0.009),
		up("stereo/calib/angle", rowStereoCalib, 0.03, 0.045),
		up("stereo/calib/opencv/params-in-std", rowStereoCV, 0.0026, 1),
		up("stereo/opencv/triangulate/noisy", rowStereoCV, 6.5e-14, 1e-6),
		up("stereo/opencv/triangulate/corrected", "", 6.1e-14, 1e-6),

		// pkg/stereo TestFigures (central 448×320 px of 1024×768 pairs of
		// the invented bench): shape RMS error (mm) of a plane and of a
		// cylinder; 1 mm out-of-plane translation: RMS error (mm), false
		// surface strain (largest |mean| or RMS of a component) and the
		// mean false strain of 2D correlation of the left camera (held to
		// [0.0015, 0.0025] around w/Z = 0.002); a 0.5 % stretch of a plane
		// tilted 20° (largest |mean| or RMS of the principal-strain
		// errors); a bulged plate (RMS error of the principal strains, and
		// of w in mm). Bounds of the first four are the stereo issue's.
		up("stereo/shape/plane/mean", rowStereoShape, 0.00097, 0.005),
		up("stereo/shape/plane/worst", rowStereoShape, 0.001, 0.005),
		up("stereo/shape/cylinder/mean", rowStereoShape, 0.0011, 0.005),
		up("stereo/shape/cylinder/worst", rowStereoShape, 0.0012, 0.005),
		up("stereo/out-of-plane/displacement/mean", rowStereoOOP, 0.0012, 0.005),
		up("stereo/out-of-plane/displacement/worst", rowStereoOOP, 0.0013, 0.005),
		up("stereo/out-of-plane/strain/mean", rowStereoOOP, 1.8e-5, 1e-4),
		up("stereo/out-of-plane/strain/worst", rowStereoOOP, 2.2e-5, 1e-4),
		in("stereo/out-of-plane/2d-strain", rowStereoOOP, 0.0019, 0.0015, 0.0025),
		up("stereo/tilted/strain/mean", rowStereoTilt, 3e-5, 1e-4),
		up("stereo/tilted/strain/worst", rowStereoTilt, 3.2e-5, 1e-4),
		up("stereo/bulge/strain/mean", rowStereoBulge, 0.00014, 0.0002),
		up("stereo/bulge/strain/worst", rowStereoBulge, 0.00014, 0.00021),
		up("stereo/bulge/w/mean", rowStereoBulge, 0.0012, 0.0018),
		up("stereo/bulge/w/worst", rowStereoBulge, 0.0013, 0.002),

		in("challenge/first/p10-per-subset", rowChallenge, 3.8, 3.72, 4.26),
		up("challenge/first/p10-deviation/worst", rowChallenge, 0.056, 0.084),
		up("challenge/first/mei/worst", rowChallenge, 0.28, 0.42),
	}
}
