package results

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"sort"
	"strings"
	"sync"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
)

// Format is one entry of the table of result files: a name to ask for it
// by (CLI --formats, API formats) and what it writes.
type Format struct {
	Name string
	// Files describes the files written, relative to the results folder.
	Files string
	// Doc says what the files hold.
	Doc string
}

// The format names.
const (
	JSON    = "json"
	CSV     = "csv"
	VTS     = "vts"
	NPZ     = "npz"
	NPY     = "npy"
	Spatial = "spatial"
	Images  = "images"
	Maps    = "maps"
	MapsAll = "maps-all"
	MapsDef = "maps-deformed"
	Vectors = "vectors"
)

// StoredFile is the result file every other format is rendered from; it is
// written whatever the formats asked for.
const StoredFile = "field.npz"

// Formats returns the table of result files, in the order they are
// written and listed.
func Formats() []Format {
	return []Format{
		{NPZ, "field.npz", "every quantity, the grid, the status and the metadata (NumPy archive, float32); the stored result, always written"},
		{JSON, "field.json", "the whole field as one JSON document"},
		{CSV, "field.csv", "one row per point (i, j, x, y, status, quantities)"},
		{VTS, "field.vts", "VTK XML structured grid for ParaView"},
		{NPY, "npy/<quantity>.npy", "one NumPy array per quantity, shape (ny, nx), and grid_x, grid_y"},
		{Spatial, "spatial.npz, spatial.vts", "the spatial (Eulerian) view resampled on a grid of the deformed image"},
		{Images, "reference.png, deformed.png", "the two images, as backgrounds for later maps"},
		{Maps, "maps/<quantity>.png", "maps of " + strings.Join(DefaultMaps(), ", ") + " over the reference image"},
		{MapsAll, "maps/<quantity>.png", "maps of " + strings.Join(allMaps, ", ") + " over the reference image"},
		{MapsDef, "maps/<quantity>_deformed.png", "maps of " + strings.Join(deformedMaps, ", ") + " over the deformed image"},
		{Vectors, "maps/vectors.png", "the displacement vector plot"},
	}
}

// DefaultFormats are written when no formats are asked for: the stored
// result and the default maps. Everything else can be exported later from
// the stored result (mottle export, or the service's download routes).
const DefaultFormats = NPZ + "," + Maps

// defaultMaps are the quantities of the Maps format: the two normal
// strains, which a user looks at after every run. Each map costs about as
// much as correlating a tenth of a megapixel, so the default set is small;
// any other map is drawn on request (mottle map, map.png).
var defaultMaps = []string{"E11", "E22"}

// allMaps are the quantities of the MapsAll format.
var allMaps = []string{"u", "v", "E11", "E22", "E12", "E_max", "E_min", "rotation_deg", "von_mises", "zncc", "std_u"}

// deformedMaps are the quantities of the MapsDef format.
var deformedMaps = []string{"E11", "E22"}

// DefaultMaps returns the quantities the Maps format draws over the
// reference image.
func DefaultMaps() []string { return slices.Clone(defaultMaps) }

// Set is a set of format names.
type Set map[string]bool

// ParseFormats parses a comma-separated list of format names. "default"
// stands for [DefaultFormats] and "all" for every format; the stored
// result (npz) is always included. Unknown names are an error that lists
// the known ones.
func ParseFormats(s string) (Set, error) {
	out := Set{NPZ: true}
	known := map[string]bool{}
	for _, f := range Formats() {
		known[f.Name] = true
	}
	var bad []string
	for _, part := range strings.Split(s, ",") {
		part = strings.TrimSpace(strings.ToLower(part))
		switch {
		case part == "":
		case part == "default":
			for _, d := range strings.Split(DefaultFormats, ",") {
				out[d] = true
			}
		case part == "all":
			for n := range known {
				out[n] = true
			}
		case known[part]:
			out[part] = true
		default:
			bad = append(bad, part)
		}
	}
	if len(bad) > 0 {
		names := []string{"default", "all"}
		for _, f := range Formats() {
			names = append(names, f.Name)
		}
		return nil, fmt.Errorf("formats %q: unknown %s; use a comma-separated list of %s", s, strings.Join(bad, ", "), strings.Join(names, ", "))
	}
	return out, nil
}

// String lists the set in table order.
func (s Set) String() string {
	var names []string
	for _, f := range Formats() {
		if s[f.Name] {
			names = append(names, f.Name)
		}
	}
	return strings.Join(names, ",")
}

// Sources are the images the maps and the Images format are drawn from.
// Either may be nil: the outputs that need it are then skipped.
type Sources struct {
	Ref, Def *imageio.Gray
	// RefPNG, DefPNG may hold the images' PNG files as read, which the
	// Images format then copies instead of encoding the images again.
	RefPNG, DefPNG []byte
}

// Output is one result file: its name relative to the results folder, the
// format it belongs to and its encoder.
type Output struct {
	Name   string
	Format string
	Write  func(io.Writer) error
}

// MapWidth is the largest width of the maps of a results folder, px.
const MapWidth = 1600

// Outputs returns the files of the formats in set for field f, in table
// order. Maps of quantities with no valid value, and outputs whose image
// src lacks, are left out. Everything is made from f.Rounded(), the values
// the files hold.
func Outputs(f *field.Field, src Sources, set Set) []Output {
	f = f.Rounded()
	var out []Output
	seen := map[string]bool{}
	add := func(format, name string, w func(io.Writer) error) {
		out = append(out, Output{Name: name, Format: format, Write: w})
	}
	g := f.Grid
	for _, fm := range Formats() {
		if !set[fm.Name] {
			continue
		}
		switch fm.Name {
		case NPZ:
			add(NPZ, "field.npz", func(w io.Writer) error { return field.WriteNPZ(w, f) })
		case JSON:
			add(JSON, "field.json", func(w io.Writer) error { return field.WriteJSON(w, f) })
		case CSV:
			add(CSV, "field.csv", func(w io.Writer) error { return field.WriteCSV(w, f) })
		case VTS:
			add(VTS, "field.vts", func(w io.Writer) error { return field.WriteVTS(w, f) })
		case NPY:
			npy := field.WriteNPY
			if f.Meta.Precision == field.Float32 {
				npy = field.WriteNPY32
			}
			arrays := map[string][]float64{"grid_x": g.X, "grid_y": g.Y}
			for _, n := range append(f.Names(), "grid_x", "grid_y") {
				data, ok := f.Quantities[n]
				if !ok {
					data = arrays[n]
				}
				add(NPY, "npy/"+n+".npy", func(w io.Writer) error { return npy(w, data, g.Ny, g.Nx) })
			}
		case Spatial:
			w, h := f.Meta.ImageWidth, f.Meta.ImageHeight
			if src.Def != nil {
				w, h = src.Def.W, src.Def.H
			}
			if !hasFinite(f, "u") || g.Nx < 2 || g.Ny < 2 || w < 1 || h < 1 {
				continue
			}
			var once sync.Once
			var sp *field.Field
			var err error
			view := func() (*field.Field, error) {
				once.Do(func() { sp, err = SpatialView(f, w, h) })
				return sp, err
			}
			add(Spatial, "spatial.npz", func(w io.Writer) error {
				s, err := view()
				if err != nil {
					return err
				}
				return field.WriteNPZ(w, s)
			})
			add(Spatial, "spatial.vts", func(w io.Writer) error {
				s, err := view()
				if err != nil {
					return err
				}
				return field.WriteVTS(w, s)
			})
		case Images:
			for _, im := range []struct {
				name string
				g    *imageio.Gray
				raw  []byte
			}{{"reference.png", src.Ref, src.RefPNG}, {"deformed.png", src.Def, src.DefPNG}} {
				if im.g == nil {
					continue
				}
				add(Images, im.name, func(w io.Writer) error {
					if im.raw != nil {
						_, err := w.Write(im.raw)
						return err
					}
					return WriteImagePNG(w, im.g)
				})
			}
		case Maps, MapsAll, MapsDef:
			bg, qs, on := src.Ref, defaultMaps, false
			switch fm.Name {
			case MapsAll:
				qs = allMaps
			case MapsDef:
				bg, qs, on = src.Def, deformedMaps, true
			}
			if bg == nil {
				continue
			}
			for _, q := range qs {
				if !hasFinite(f, q) || on && !hasFinite(f, "u") {
					continue
				}
				name := "maps/" + q + ".png"
				if on {
					name = "maps/" + q + "_deformed.png"
				}
				if seen[name] {
					continue
				}
				seen[name] = true
				add(fm.Name, name, func(w io.Writer) error {
					b, err := RenderMap(f, bg, MapRequest{Quantity: q, OnDeformed: on, MaxWidth: MapWidth, Indexed: true})
					if err == nil {
						_, err = w.Write(b)
					}
					return err
				})
			}
		case Vectors:
			if src.Ref != nil && hasFinite(f, "u") {
				add(Vectors, "maps/vectors.png", func(w io.Writer) error {
					b, err := RenderVectors(f, src.Ref, MapWidth)
					if err == nil {
						_, err = w.Write(b)
					}
					return err
				})
			}
		}
	}
	return out
}

// WriteImagePNG writes an image as PNG at its own bit depth (8 or 16 bits)
// and the fastest compression level.
func WriteImagePNG(w io.Writer, g *imageio.Gray) error {
	bits := 8
	if g.Bits > 8 {
		bits = 16
	}
	return imageio.WritePNG(w, g, bits)
}

// run calls fn for every output on up to GOMAXPROCS goroutines and returns
// the errors in output order. Outputs are independent, so the files do
// not depend on the scheduling. The PNG pictures, the slowest outputs,
// start first, so that the data files fill the gaps beside them instead
// of keeping a picture waiting.
func run(ctx context.Context, outs []Output, fn func(Output) error) []error {
	order := make([]int, 0, len(outs))
	for pass := range 2 {
		for i, o := range outs {
			if strings.HasSuffix(o.Name, ".png") == (pass == 0) {
				order = append(order, i)
			}
		}
	}
	errs := make([]error, len(outs))
	next := make(chan int)
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), len(outs)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				errs[i] = fn(outs[i])
			}
		}()
	}
	for _, i := range order {
		if err := ctx.Err(); err != nil {
			errs[i] = err
			continue
		}
		next <- i
	}
	close(next)
	wg.Wait()
	return errs
}

// Write writes the formats in set of field f into the results folder dir
// (created if needed), every file atomically and independent files
// concurrently, and returns the paths written in table order. It writes
// every file it can and reports all failures together.
func Write(ctx context.Context, dir string, f *field.Field, src Sources, set Set) ([]string, error) {
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("results %s: %w", dir, err)
	}
	outs := Outputs(f, src, set)
	dirs := map[string]bool{dir: true}
	for _, o := range outs {
		dirs[filepath.Join(dir, filepath.Dir(o.Name))] = true
	}
	for d := range dirs {
		if err := os.MkdirAll(d, 0o755); err != nil {
			return nil, fmt.Errorf("results %s: %w", dir, err)
		}
	}
	errs := run(ctx, outs, func(o Output) error {
		return field.WriteFileAtomic(filepath.Join(dir, filepath.FromSlash(o.Name)), 0o644, o.Write)
	})
	var paths []string
	var bad []error
	for i, o := range outs {
		if errs[i] != nil {
			bad = append(bad, fmt.Errorf("%s: %w", o.Name, errs[i]))
			continue
		}
		paths = append(paths, filepath.Join(dir, filepath.FromSlash(o.Name)))
	}
	if len(bad) > 0 {
		return paths, fmt.Errorf("results %s: %w", dir, errors.Join(bad...))
	}
	return paths, nil
}

// Encode encodes the formats in set of field f in memory, independent
// files concurrently, and returns them by name (as in [Outputs]).
func Encode(ctx context.Context, f *field.Field, src Sources, set Set) (map[string][]byte, error) {
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("results: %w", err)
	}
	outs := Outputs(f, src, set)
	bufs := make([]bytes.Buffer, len(outs))
	idx := map[string]int{}
	for i, o := range outs {
		idx[o.Name] = i
	}
	errs := run(ctx, outs, func(o Output) error { return o.Write(&bufs[idx[o.Name]]) })
	files := make(map[string][]byte, len(outs))
	var bad []error
	for i, o := range outs {
		if errs[i] != nil {
			bad = append(bad, fmt.Errorf("encode %s: %w", o.Name, errs[i]))
			continue
		}
		files[o.Name] = bufs[i].Bytes()
	}
	return files, errors.Join(bad...)
}

// ReadStored reads the stored result of a results folder: field.npz, or
// field.json for folders written before the stored result existed.
func ReadStored(dir string) (*field.Field, error) {
	p := filepath.Join(dir, StoredFile)
	b, err := os.ReadFile(p)
	if err == nil {
		f, err := field.ReadNPZ(bytes.NewReader(b), int64(len(b)))
		if err != nil {
			return nil, fmt.Errorf("%s: %w", p, err)
		}
		return f, nil
	}
	if !errors.Is(err, os.ErrNotExist) {
		return nil, fmt.Errorf("results folder %s: %w", dir, err)
	}
	jp := filepath.Join(dir, "field.json")
	fh, jerr := os.Open(jp)
	if jerr != nil {
		return nil, fmt.Errorf("results folder %s: no %s or field.json: is it a folder written by mottle analyze, demo or series?", dir, StoredFile)
	}
	defer fh.Close()
	f, err := field.ReadJSON(fh)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", jp, err)
	}
	return f, nil
}

// Names returns the names of the formats, sorted, for messages.
func Names() []string {
	var out []string
	for _, f := range Formats() {
		out = append(out, f.Name)
	}
	sort.Strings(out)
	return out
}

func hasFinite(f *field.Field, q string) bool {
	vals, ok := f.Get(q)
	if !ok {
		return false
	}
	for _, x := range vals {
		if !math.IsNaN(x) && !math.IsInf(x, 0) {
			return true
		}
	}
	return false
}
