// Package web holds the browser preview of Mottle: a static page, its style
// sheet and plain JavaScript modules, embedded in the binary so that the
// preview works offline. The service mounts Assets at "/".
//
// The page talks only to the HTTP API under /v1 (see api/); it loads no
// script, font or style from any other origin. It uploads a pair (or runs
// the built-in demo), lets the user draw the region of interest and seeds,
// shows the speckle size measured from the image autocorrelation with the
// subset and step it suggests and the virtual strain gauge, follows the job
// through server-sent events, and draws every quantity of field.json over
// the reference or deformed image, with a colour bar, hover read-out, line
// profiles, displacement vectors and, for a series, the curve of any gauge.
//
// The modules under static/js:
//
//	api.js       requests, sign-in (bearer token and project kept in
//	             sessionStorage, GET /v1/principal, roles), event streams
//	             through single-use stream tickets, RFC 9457 problem
//	             documents
//	field.js     field.json parsing, nearest point, bilinear samples
//	colormap.js  the server's colour maps (js/cmaps.js, made from pkg/maps
//	             by ColormapsJS), interpolated and normalised as pkg/maps does
//	shelf.js     earlier work: list, thumbnails, open, rename, delete
//	seriesrun.js a whole test series from dropped frames, with resume
//	speckle.js   speckle size by FFT autocorrelation, parameter advice
//	roi.js       region editor (rectangle, polygon, holes, seeds)
//	viewer.js    the map, colour bar, read-out, profile and vectors
//	plot.js      canvas line plots
//	app.js       wiring of the page to the API
//
// The browser test (browser_test.go) builds cmd/mottle, starts `mottle
// serve` on 127.0.0.1 and drives Debian's Chromium (/usr/bin/chromium)
// with chromedp (the cancel step uses a server in the test process that
// holds its job until it is canceled); screenshots go to
// $MOTTLE_ARTIFACTS. Any console error or failed request that the test
// does not list as expected fails it. The sign-in test
// (access_browser_test.go) serves a token file of two projects from the
// test process.
//
// Signed in, the page shows the principal, the project and the role,
// hides what the role in the chosen project does not allow (sections
// marked needs-submit; Rename and Delete by each listed item's project),
// and sends the chosen project as X-Mottle-Project.
package web

import (
	"embed"
	"io/fs"
)

//go:embed static
var files embed.FS

// Assets returns the static files of the preview with index.html at the
// root, ready for http.FileServerFS. The returned file system is read-only
// and safe for concurrent use. It includes js/cmaps.js, made from
// pkg/maps (see ColormapsJS).
func Assets() fs.FS {
	sub, err := fs.Sub(files, "static")
	if err != nil {
		// fs.Sub fails only for an invalid path; "static" is a valid one.
		panic("web: embedded assets: " + err.Error())
	}
	return withColormaps{FS: sub, js: ColormapsJS()}
}
