package field

import (
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"io"
)

// vtsPoints returns the VTK point coordinates of f: the grid (x, y, 0) in
// px, or, for a field holding 3D positions x_mm, y_mm and z_mm (a stereo
// result), those positions, so that ParaView shows the measured surface in
// place. Points without a finite position are placed at the centroid of
// the others and returned as hidden.
func vtsPoints(f *Field) (pts []float64, hidden []bool) {
	g := f.Grid
	pts = make([]float64, 3*g.Len())
	xs, ok1 := f.Quantities["x_mm"]
	ys, ok2 := f.Quantities["y_mm"]
	zs, ok3 := f.Quantities["z_mm"]
	if !ok1 || !ok2 || !ok3 {
		for p := range g.Len() {
			pts[3*p], pts[3*p+1] = g.X[p], g.Y[p]
		}
		return pts, nil
	}
	hidden = make([]bool, g.Len())
	var c [3]float64
	n := 0
	for p := range g.Len() {
		if finite(xs[p]) && finite(ys[p]) && finite(zs[p]) {
			c[0], c[1], c[2] = c[0]+xs[p], c[1]+ys[p], c[2]+zs[p]
			n++
		}
	}
	if n > 0 {
		c = [3]float64{c[0] / float64(n), c[1] / float64(n), c[2] / float64(n)}
	}
	for p := range g.Len() {
		if finite(xs[p]) && finite(ys[p]) && finite(zs[p]) {
			pts[3*p], pts[3*p+1], pts[3*p+2] = xs[p], ys[p], zs[p]
		} else {
			pts[3*p], pts[3*p+1], pts[3*p+2] = c[0], c[1], c[2]
			hidden[p] = true
		}
	}
	return pts, hidden
}

// writeGhosts writes VTK's vtkGhostType point array: HIDDENPOINT (2) for
// the hidden points, 0 elsewhere, as inline binary UInt8.
func writeGhosts(w io.Writer, hidden []bool) {
	fmt.Fprintf(w, "        <DataArray type=\"UInt8\" Name=\"vtkGhostType\" NumberOfComponents=\"1\" format=\"binary\">\n          ")
	b := make([]byte, 8+len(hidden))
	binary.LittleEndian.PutUint64(b, uint64(len(hidden)))
	for k, h := range hidden {
		if h {
			b[8+k] = 2
		}
	}
	enc := base64.NewEncoder(base64.StdEncoding, w)
	enc.Write(b)
	enc.Close()
	fmt.Fprintf(w, "\n        </DataArray>\n")
}
