package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// formatsHelp describes the result formats for --help.
func formatsHelp() string {
	var b strings.Builder
	b.WriteString("Result formats (--formats, default " + results.DefaultFormats + "):\n")
	for _, f := range results.Formats() {
		fmt.Fprintf(&b, "  %-14s %s: %s\n", f.Name, f.Files, f.Doc)
	}
	return b.String()
}

// recordSources notes in the field's metadata where its images are, so
// that maps can be drawn later from a folder that holds no copy of them.
func recordSources(f *field.Field, ref, def string) {
	for key, p := range map[string]string{"reference_file": ref, "deformed_file": def} {
		if a, err := filepath.Abs(p); err == nil {
			f.Meta.Extra[key] = a
		}
	}
}

// sources returns the images to draw the formats of set over; the Images
// format copies PNG inputs as they are.
func sources(set results.Set, r, d *imageio.Gray, refPath, defPath string) (results.Sources, error) {
	src := results.Sources{Ref: r, Def: d}
	if !set[results.Images] {
		return src, nil
	}
	for _, im := range []struct {
		path string
		dst  *[]byte
	}{{refPath, &src.RefPNG}, {defPath, &src.DefPNG}} {
		if strings.EqualFold(filepath.Ext(im.path), ".png") {
			b, err := os.ReadFile(im.path)
			if err != nil {
				return src, err
			}
			*im.dst = b
		}
	}
	return src, nil
}

// background loads the reference or deformed image of a results folder:
// DIR/reference.png (deformed.png) when the folder holds one, else the file
// its field.npz names. It returns nil and an error saying what to do when
// neither exists.
func background(dir string, f *field.Field, deformed bool) (*imageio.Gray, error) {
	g, _, err := backgroundFile(dir, f, deformed)
	return g, err
}

// backgroundFile is background that also returns the file's bytes when it
// is a PNG (which the Images format copies as it is).
func backgroundFile(dir string, f *field.Field, deformed bool) (*imageio.Gray, []byte, error) {
	path, err := backgroundPath(dir, f, deformed)
	if err != nil {
		return nil, nil, err
	}
	lim := imageio.DefaultLimits()
	lim.MaxPixels = max(lim.MaxPixels, int64(f.Meta.ImageWidth)*int64(f.Meta.ImageHeight))
	g, err := imageio.ReadFile(path, lim)
	if err != nil {
		return nil, nil, fmt.Errorf("background image: %w", err)
	}
	if o := recordedOrientation(f); !o.Upright() {
		// The field was measured on the image turned upright: draw
		// over the same turn (and not over the file's own bytes).
		if g, err = imageio.Orient(g, o); err != nil {
			return nil, nil, fmt.Errorf("background image: %w", err)
		}
		return g, nil, nil
	}
	var raw []byte
	if strings.EqualFold(filepath.Ext(path), ".png") {
		if raw, err = os.ReadFile(path); err != nil {
			return nil, nil, fmt.Errorf("background image: %w", err)
		}
	}
	return g, raw, nil
}

// backgroundPath returns the path of the image background loads.
func backgroundPath(dir string, f *field.Field, deformed bool) (string, error) {
	name, key := "reference.png", "reference_file"
	if deformed {
		name, key = "deformed.png", "deformed_file"
	}
	p := filepath.Join(dir, name)
	if _, err := os.Stat(p); err == nil {
		return p, nil
	}
	if s, ok := f.Meta.Extra[key].(string); ok && s != "" {
		if _, err := os.Stat(s); err == nil {
			return s, nil
		}
		return "", fmt.Errorf("background image: %s holds no %s and the image it was made from, %s, is gone; write the folder with --formats …,images to keep a copy", dir, name, s)
	}
	return "", fmt.Errorf("background image: %s holds no %s; write the folder with --formats …,images to keep a copy", dir, name)
}

func runExport(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "export", "DIR --formats LIST",
		"Write more result formats into a results folder from its stored result (field.npz),\n"+
			"exactly as analyze would have written them. Maps need the images: DIR/reference.png and\n"+
			"deformed.png, or the image files the analysis read.\n\n"+formatsHelp())
	formats := fs.String("formats", "", "result `formats` to write, comma-separated, e.g. csv,vts or all")
	pos, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 || *formats == "" {
		fmt.Fprintln(e.stderr, "mottle export: give one results folder and --formats")
		fs.Usage()
		return errUsage
	}
	set, err := results.ParseFormats(*formats)
	if err != nil {
		return usagef("--formats: %w", err)
	}
	dir := pos[0]
	f, err := results.ReadStored(dir)
	if err != nil {
		return err
	}
	var src results.Sources
	var errs []error
	if set[results.Maps] || set[results.MapsAll] || set[results.Vectors] || set[results.Images] {
		if src.Ref, src.RefPNG, err = backgroundFile(dir, f, false); err != nil {
			errs = append(errs, err)
		}
	}
	if set[results.MapsDef] || set[results.Spatial] || set[results.Images] {
		// The spatial view needs only the image size, which the field keeps.
		if src.Def, src.DefPNG, err = backgroundFile(dir, f, true); err != nil && (set[results.MapsDef] || set[results.Images]) {
			errs = append(errs, err)
		}
	}
	if len(errs) > 0 {
		return errors.Join(errs...)
	}
	// The stored result is already there; write it again only if asked.
	if !strings.Contains(","+strings.ReplaceAll(*formats, " ", "")+",", ","+results.NPZ+",") {
		delete(set, results.NPZ)
	}
	paths, err := results.Write(ctx, dir, f, src, set)
	for _, p := range paths {
		fmt.Fprintf(e.stdout, "wrote %s\n", p)
	}
	return err
}

// orientPair turns the reference *r and the deformed image *d upright by
// the reference's EXIF orientation (imageio.OrientSeries: the camera did
// not turn between the two) and says so on w; it returns the orientation
// applied.
func orientPair(w io.Writer, r, d **imageio.Gray, defName string) (imageio.Orientation, error) {
	o, imgs, differ, err := imageio.OrientSeries(*r, *d)
	if err != nil {
		return o, fmt.Errorf("orientation: %w", err)
	}
	own := (*d).Orientation
	*r, *d = imgs[0], imgs[1]
	if !o.Upright() {
		fmt.Fprintf(w, "orientation: the reference's EXIF orientation %d (%s) applied to both images\n", int(o), o)
	}
	if len(differ) > 0 {
		fmt.Fprintf(w, "orientation: %s carries EXIF orientation %d, the reference %d; the reference's is used (the camera is taken not to have turned)\n", defName, int(own), int(o))
	}
	return o, nil
}

// recordedOrientation returns the EXIF orientation a result was measured
// under (field.json's extra "orientation"), 0 when none was applied.
func recordedOrientation(f *field.Field) imageio.Orientation {
	m, ok := f.Meta.Extra["orientation"].(map[string]any)
	if !ok {
		return 0
	}
	switch v := m["exif"].(type) {
	case float64:
		return imageio.Orientation(v)
	case int:
		return imageio.Orientation(v)
	}
	return 0
}
