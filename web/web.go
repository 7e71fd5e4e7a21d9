// Package web holds the browser preview of Mottle: a static page, its style
// sheet and plain JavaScript modules, embedded in the binary so that the
// preview works offline. The service mounts Assets at "/".
//
// The page talks only to the HTTP API under /v1 (see api/); it loads no
// script, font or style from any other origin.
package web

import (
	"embed"
	"io/fs"
)

//go:embed static
var files embed.FS

// Assets returns the static files of the preview with index.html at the
// root, ready for http.FileServerFS. The returned file system is read-only
// and safe for concurrent use.
func Assets() fs.FS {
	sub, err := fs.Sub(files, "static")
	if err != nil {
		// fs.Sub fails only for an invalid path; "static" is a valid one.
		panic("web: embedded assets: " + err.Error())
	}
	return sub
}
