package verify

import (
	"context"
	"math"
	"math/rand/v2"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// requirePython fails the test (never skips) when Debian's interpreter or a
// reference library is missing, naming the package to install.
func requirePython(t *testing.T) Runner {
	t.Helper()
	if err := CheckPython(context.Background(), Python); err != nil {
		t.Fatalf("%v", err)
	}
	dir, err := FindScripts(".")
	if err != nil {
		t.Fatal(err)
	}
	return Runner{Scripts: dir, Dir: t.TempDir()}
}

func TestCheckPythonNamesDebianPackage(t *testing.T) {
	err := CheckPython(context.Background(), filepath.Join(t.TempDir(), "no-python"))
	if err == nil || !strings.Contains(err.Error(), "python3-opencv") || !strings.Contains(err.Error(), "python3-skimage") {
		t.Fatalf("missing interpreter: error %v should name the Debian packages", err)
	}
	// An interpreter that imports nothing: a shell stub that always fails.
	stub := filepath.Join(t.TempDir(), "py")
	if err := writeExec(stub, "#!/bin/sh\necho 'ModuleNotFoundError: No module named cv2' >&2\nexit 1\n"); err != nil {
		t.Fatal(err)
	}
	err = CheckPython(context.Background(), stub)
	if err == nil || !strings.Contains(err.Error(), "apt-get install -y python3-numpy python3-scipy python3-opencv python3-skimage") {
		t.Fatalf("broken interpreter: error %v should list every package", err)
	}
}

// blobs is a plumbing-test pattern (not an accuracy oracle): Gaussian spots
// at fixed pseudo-random places, shifted exactly by (du, dv) px.
func blobs(w, h int, du, dv float64) *imageio.Gray {
	rng := rand.New(rand.NewPCG(3, 4))
	type spot struct{ x, y float64 }
	var s []spot
	for i := 0; i < w*h/25; i++ {
		s = append(s, spot{rng.Float64()*float64(w+20) - 10, rng.Float64()*float64(h+20) - 10})
	}
	g := imageio.NewGray(w, h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var v float64
			for _, p := range s {
				dx, dy := float64(x)-du-p.x, float64(y)-dv-p.y
				if d2 := dx*dx + dy*dy; d2 < 36 {
					v += math.Exp(-d2 / 4.5)
				}
			}
			g.Set(x, y, float32(200-120*math.Min(v, 1.5)))
		}
	}
	return g
}

// On an exact integer shift every driver must return that shift: the
// plumbing (file format, coordinates, signs) is then right.
func TestDriversIntegerShift(t *testing.T) {
	r := requirePython(t)
	dir := t.TempDir()
	ref, def := blobs(96, 96, 0, 0), blobs(96, 96, 3, -2)
	rp, dp := filepath.Join(dir, "ref.npy"), filepath.Join(dir, "def.npy")
	if err := WriteNPY(rp, ref); err != nil {
		t.Fatal(err)
	}
	if err := WriteNPY(dp, def); err != nil {
		t.Fatal(err)
	}
	pts := [][2]int{{30, 30}, {48, 50}, {64, 40}, {20, 70}}
	var guess [][2]float64
	for _, m := range []Method{Template, ECC, ECCDefault, Phase, PhaseHann} {
		// Phase correlation has no search of its own: it starts from the
		// integer search result, as in the cross-checks.
		resp, err := r.Run(context.Background(), Request{Reference: rp, Deformed: dp, Method: m, Subset: 21, Search: 5, Points: pts, Guess: guess})
		if err != nil {
			t.Fatal(err)
		}
		if m == Template {
			for _, p := range resp.Points {
				guess = append(guess, [2]float64{p.U + 0.4, p.V - 0.4}) // off by < ½ px
			}
		}
		for i, p := range resp.Points {
			if !p.OK || p.X != pts[i][0] || p.Y != pts[i][1] || math.Abs(p.U-3) > 1e-3 || math.Abs(p.V+2) > 1e-3 {
				t.Errorf("%s point %v: got %+v, want u=3 v=−2", m, pts[i], p)
			}
		}
		if resp.PeakRSS <= 0 {
			t.Errorf("%s: peak RSS not measured", m)
		}
	}
	// A point whose subset leaves the image is reported per point, not fatal.
	resp, err := r.Run(context.Background(), Request{Reference: rp, Deformed: dp, Method: ECC, Subset: 21, Search: 5, Points: [][2]int{{3, 3}}})
	if err != nil || resp.Points[0].OK || resp.Points[0].Error == "" {
		t.Errorf("edge point: %v %+v, want a per-point error", err, resp)
	}
	// A bad request is an error that carries the driver's message.
	_, err = r.Run(context.Background(), Request{Reference: rp, Deformed: dp, Method: ECC, Subset: 20, Points: pts})
	if err == nil || !strings.Contains(err.Error(), "odd") {
		t.Errorf("even subset: error %v should say it must be odd", err)
	}
	if _, err := r.Run(context.Background(), Request{Method: "lsq"}); err == nil {
		t.Error("unknown method accepted")
	}
}

// NumPy must read our .npy files back bit for bit.
func TestWriteNPYReadByNumPy(t *testing.T) {
	requirePython(t)
	g := imageio.NewGray(7, 3)
	for i := range g.Pix {
		g.Pix[i] = float32(i)*0.5 - 1
	}
	p := filepath.Join(t.TempDir(), "a.npy")
	if err := WriteNPY(p, g); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(Python, "-c", "import numpy as np,sys; a=np.load(sys.argv[1]); print(a.dtype, a.shape, float(a[2,6]), float(a[1,0]))", p).CombinedOutput()
	if err != nil {
		t.Fatalf("numpy.load: %v: %s", err, out)
	}
	if got, want := strings.TrimSpace(string(out)), "float32 (3, 7) 9.0 2.5"; got != want {
		t.Errorf("numpy read %q, want %q", got, want)
	}
	if err := WriteNPY(p, &imageio.Gray{W: 3, H: 3, Stride: 3}); err == nil {
		t.Error("image without pixels accepted")
	}
}
