package results

import (
	"bytes"
	"context"
	"errors"
	"image"
	"image/png"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// affineInput is the builder input of a homogeneous image motion
// x = F·(X − c) + c + t on a 21×17 grid, step 6, every point valid.
func affineInput(F [2][2]float64, t [2]float64) Input {
	g := correlate.Grid{X0: 20, Y0: 18, Step: 6, Nx: 21, Ny: 17}
	n := g.Len()
	in := Input{Grid: g, Subset: 21, U: make([]float64, n), V: make([]float64, n), StdU: make([]float64, n), StdV: make([]float64, n), ZNCC: make([]float64, n)}
	const cx, cy = 80, 70
	for k := range n {
		Xi, Yi := g.At(k%g.Nx, k/g.Nx)
		X, Y := float64(Xi)-cx, float64(Yi)-cy
		in.U[k] = F[0][0]*X + F[0][1]*Y + t[0] - X
		in.V[k] = F[1][0]*X + F[1][1]*Y + t[1] - Y
		in.StdU[k], in.StdV[k], in.ZNCC[k] = 0.01, 0.01, 0.99
	}
	return in
}

type scaleMapping struct{ a, b float64 }

func (m scaleMapping) Map(x, y float64) (float64, float64, error) {
	if x > 1000 {
		return 0, 0, errors.New("outside the calibrated view")
	}
	return m.a * x, m.b * y, nil
}
func (m scaleMapping) Unit() string { return "mm" }

// The builder's unit rule and its position mapping, against closed forms:
// a homogeneous F gives E = ½(FᵀF − I) at every point with a full window
// (Holzapfel 2000, Nonlinear Solid Mechanics, eq. 2.67); a uniform mm scale
// multiplies lengths and leaves strains alone; a mapping X_p = (a·x, b·y)
// of both images turns the image gradient F into A·F·A⁻¹ with A = diag(a, b)
// (the chain rule) and the displacements into A·u.
func TestBuild(t *testing.T) {
	F := [2][2]float64{{1.02, 0.01}, {-0.005, 0.99}}
	tr := [2]float64{1.5, -0.75}
	const a, b = 0.05, 0.08
	Fp := [2][2]float64{{F[0][0], F[0][1] * a / b}, {F[1][0] * b / a, F[1][1]}}
	cases := []struct {
		name   string
		opt    Options
		F      [2][2]float64
		scaleU float64
		scaleV float64
		unit   string
	}{
		{"px", Options{StrainWindow: 5, StrainFit: "plane"}, F, 1, 1, "px"},
		{"mm_per_px", Options{StrainWindow: 5, StrainFit: "plane", MMPerPx: 0.02}, F, 0.02, 0.02, "mm"},
		{"mapping", Options{StrainWindow: 5, StrainFit: "quadratic", Mapping: scaleMapping{a, b}}, Fp, a, b, "mm"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			in := affineInput(F, tr)
			f, err := Build(context.Background(), in, c.opt)
			if err != nil {
				t.Fatal(err)
			}
			E := kinematics.GreenLagrange(kinematics.Tensor(c.F))
			u, _ := f.Get("u")
			v, _ := f.Get("v")
			e11, _ := f.Get("E11")
			e12, _ := f.Get("E12")
			e22, _ := f.Get("E22")
			full := 0
			for k := range u {
				if d := math.Abs(u[k] - c.scaleU*in.U[k]); d > 1e-12 {
					t.Fatalf("u[%d] = %g, want %g", k, u[k], c.scaleU*in.U[k])
				}
				if d := math.Abs(v[k] - c.scaleV*in.V[k]); d > 1e-12 {
					t.Fatalf("v[%d] = %g, want %g", k, v[k], c.scaleV*in.V[k])
				}
				if f.Status[k] != "ok" {
					continue
				}
				full++
				for _, q := range []struct {
					name      string
					got, want float64
				}{{"E11", e11[k], E[0][0]}, {"E22", e22[k], E[1][1]}, {"E12", e12[k], E[0][1]}} {
					if math.Abs(q.got-q.want) > 1e-12 {
						t.Fatalf("%s[%d] = %.15g, closed form %.15g", q.name, k, q.got, q.want)
					}
				}
			}
			if full < len(u)/2 {
				t.Errorf("only %d of %d points have strains", full, len(u))
			}
			if f.Units["u"] != c.unit || f.Units["E11"] != "1" || f.Meta.Precision != "float32" {
				t.Errorf("units u %q, E11 %q, precision %q; want %q, 1, float32", f.Units["u"], f.Units["E11"], f.Meta.Precision, c.unit)
			}
		})
	}
}

func TestBuildErrors(t *testing.T) {
	good := affineInput([2][2]float64{{1, 0}, {0, 1}}, [2]float64{})
	short := good
	short.V = short.V[:3]
	stdHalf := good
	stdHalf.StdV = nil
	cases := []struct {
		name string
		in   Input
		opt  Options
		want string
	}{
		{"short v", short, Options{StrainWindow: 5, StrainFit: "plane"}, "v: 3 values"},
		{"half std", stdHalf, Options{StrainWindow: 5, StrainFit: "plane"}, "give both or neither"},
		{"fit", good, Options{StrainWindow: 5, StrainFit: "cubic"}, "strain_fit"},
		{"mapping and scale", good, Options{StrainWindow: 5, StrainFit: "plane", MMPerPx: 0.1, Mapping: scaleMapping{1, 1}}, "not both"},
		{"window", good, Options{StrainWindow: 4, StrainFit: "plane"}, "window"},
	}
	for _, c := range cases {
		if _, err := Build(context.Background(), c.in, c.opt); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

func TestParseFormats(t *testing.T) {
	cases := []struct {
		in, want string
		err      bool
	}{
		{"", "npz", false},
		{"default", "npz,maps", false},
		{"csv, VTS", "npz,csv,vts", false},
		{"default,spatial", "npz,spatial,maps", false},
		{"all", "npz,json,csv,vts,npy,spatial,images,maps,maps-all,maps-deformed,vectors", false},
		{"csv,xlsx", "", true},
	}
	for _, c := range cases {
		s, err := ParseFormats(c.in)
		if (err != nil) != c.err {
			t.Errorf("%q: error %v", c.in, err)
			continue
		}
		if err == nil && s.String() != c.want {
			t.Errorf("%q: %s, want %s", c.in, s, c.want)
		}
	}
	if _, err := ParseFormats("csv,xlsx"); err == nil || !strings.Contains(err.Error(), "xlsx") || !strings.Contains(err.Error(), "vts") {
		t.Errorf("unknown format error %v: want it to name xlsx and list the known formats", err)
	}
}

// Every format written later from the stored result holds exactly what it
// holds when written together with the analysis.
func TestOnDemand(t *testing.T) {
	f, bg := benchCase(t, 200, 160, 8)
	all, _ := ParseFormats("all")
	def, _ := ParseFormats("default")
	dirA, dirB := t.TempDir(), t.TempDir()
	src := Sources{Ref: bg, Def: bg}
	if _, err := Write(context.Background(), dirA, f, src, all); err != nil {
		t.Fatal(err)
	}
	if _, err := Write(context.Background(), dirB, f, src, def); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(dirB, "field.csv")); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("the default set wrote field.csv (%v)", err)
	}
	g, err := ReadStored(dirB)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Write(context.Background(), dirB, g, src, all); err != nil {
		t.Fatal(err)
	}
	n := 0
	err = filepath.WalkDir(dirA, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(dirA, p)
		a, _ := os.ReadFile(p)
		b, err := os.ReadFile(filepath.Join(dirB, rel))
		if err != nil || !bytes.Equal(a, b) {
			t.Errorf("%s: on demand %d bytes (%v), with the analysis %d bytes", rel, len(b), err, len(a))
		}
		n++
		return nil
	})
	if err != nil || n < 40 {
		t.Errorf("compared %d files (%v)", n, err)
	}
}

// The maps of a results folder are indexed PNGs (RenderMap's Indexed),
// and a map asked for on its own is in full colour; both show the same
// field within the indexed map's documented precision (pkg/maps checks
// that pixel by pixel).
func TestFolderMapsIndexed(t *testing.T) {
	f, bg := benchCase(t, 200, 160, 8)
	set, _ := ParseFormats("default")
	files, err := Encode(context.Background(), f, Sources{Ref: bg, Def: bg}, set)
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for name, b := range files {
		if !strings.HasSuffix(name, ".png") {
			continue
		}
		n++
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if p, ok := img.(*image.Paletted); !ok || len(p.Palette) != 256 {
			t.Errorf("%s decodes to %T; want a 256-colour paletted image", name, img)
		}
	}
	if n == 0 {
		t.Fatalf("the default set wrote no map: %v", files)
	}
	b, err := RenderMap(f, bg, MapRequest{Quantity: "E11", MaxWidth: MapWidth})
	if err != nil {
		t.Fatal(err)
	}
	if img, err := png.Decode(bytes.NewReader(b)); err != nil {
		t.Fatal(err)
	} else if _, ok := img.(*image.Paletted); ok {
		t.Errorf("RenderMap without Indexed gave a paletted PNG; want full colour")
	}
}

// Writing does not depend on GOMAXPROCS.
func TestEncodeDeterministic(t *testing.T) {
	f, bg := benchCase(t, 120, 100, 6)
	all, _ := ParseFormats("all")
	a, err := Encode(context.Background(), f, Sources{Ref: bg, Def: bg}, all)
	if err != nil {
		t.Fatal(err)
	}
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	for _, procs := range []int{1, 3} {
		runtime.GOMAXPROCS(procs)
		b, err := Encode(context.Background(), f, Sources{Ref: bg, Def: bg}, all)
		if err != nil {
			t.Fatal(err)
		}
		for name := range a {
			if !bytes.Equal(a[name], b[name]) {
				t.Errorf("%s differs between two encodings", name)
			}
		}
	}
}

// A point the mapping cannot map has no result and says why.
func TestBuildUnmapped(t *testing.T) {
	in := affineInput([2][2]float64{{1, 0}, {0, 1}}, [2]float64{900, 0})
	f, err := Build(context.Background(), in, Options{StrainWindow: 3, StrainFit: "plane", Mapping: scaleMapping{1, 1}})
	if err != nil {
		t.Fatal(err)
	}
	u, _ := f.Get("u")
	bad, good := 0, 0
	for k := range u {
		X, _ := in.Grid.At(k%in.Grid.Nx, k/in.Grid.Nx)
		if float64(X)+in.U[k] > 1000 {
			bad++
			if !math.IsNaN(u[k]) || f.Status[k] != StatusUnmapped {
				t.Fatalf("point %d maps outside the view: u %v, status %q", k, u[k], f.Status[k])
			}
		} else if !math.IsNaN(u[k]) {
			good++
		}
	}
	if bad == 0 || good == 0 {
		t.Fatalf("%d unmapped and %d mapped points: the case tests nothing", bad, good)
	}
}
