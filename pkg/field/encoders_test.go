package field

import (
	"archive/zip"
	"bytes"
	"encoding/base64"
	"encoding/binary"
	"encoding/csv"
	"encoding/json"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"
)

func sameFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for k := range a {
		if a[k] != b[k] && !(math.IsNaN(a[k]) && math.IsNaN(b[k])) {
			return false
		}
	}
	return true
}

// Infinite values are invalid and written as NaN/null; compare with that.
func invalidAsNaN(x []float64) []float64 {
	y := append([]float64(nil), x...)
	for k := range y {
		if math.IsInf(y[k], 0) {
			y[k] = math.NaN()
		}
	}
	return y
}

// JSON round trip: every value comes back bit for bit (shortest
// round-trip formatting, strconv), invalid values as null ↔ NaN, and the
// document is valid JSON (RFC 8259) with quantities in canonical order.
func TestJSONRoundTrip(t *testing.T) {
	f := sample(t)
	var buf bytes.Buffer
	if err := WriteJSON(&buf, f); err != nil {
		t.Fatal(err)
	}
	if !json.Valid(buf.Bytes()) {
		t.Fatalf("not valid JSON:\n%s", buf.String())
	}
	var generic map[string]any
	if err := json.Unmarshal(buf.Bytes(), &generic); err != nil {
		t.Fatal(err)
	}
	if generic["format"] != FormatName || generic["quantities"].(map[string]any)["u"].([]any)[4] != nil {
		t.Errorf("format %v, u[4] %v: want %q and null", generic["format"], generic["quantities"].(map[string]any)["u"].([]any)[4], FormatName)
	}
	if i, j := strings.Index(buf.String(), `"rotation_deg": [`), strings.Index(buf.String(), `"custom_a": [`); !(i > 0 && j > i) {
		t.Errorf("quantities not in canonical order (rotation_deg at %d, custom_a at %d)", i, j)
	}
	g, err := ReadJSON(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(g.Names(), f.Names()) {
		t.Errorf("names %v, want %v", g.Names(), f.Names())
	}
	for _, n := range f.Names() {
		if !sameFloats(g.Quantities[n], invalidAsNaN(f.Quantities[n])) {
			t.Errorf("%s: read %v, wrote %v", n, g.Quantities[n], f.Quantities[n])
		}
	}
	if !sameFloats(g.Grid.X, f.Grid.X) || !sameFloats(g.Grid.Y, f.Grid.Y) || g.Grid.Nx != 5 || g.Grid.Ny != 3 || g.Grid.Step != 8 || g.Grid.Subset != 31 {
		t.Errorf("grid %+v", g.Grid)
	}
	if !reflect.DeepEqual(g.Status, f.Status) || !reflect.DeepEqual(g.Units, f.Units) || g.Version != Version {
		t.Errorf("status/units/version differ: %v %v %v", g.Status, g.Units, g.Version)
	}
	if !g.Meta.Created.Equal(f.Meta.Created) || g.Meta.VSG != 63 || g.Meta.Extra["specimen"] != "BML-invented-01" || len(g.Meta.Cautions) != 3 {
		t.Errorf("meta %+v", g.Meta)
	}
	var p map[string]any
	if err := json.Unmarshal(g.Params, &p); err != nil || p["subset"] != 31.0 {
		t.Errorf("params %s: %v", g.Params, err)
	}
}

func TestReadJSONErrors(t *testing.T) {
	var buf bytes.Buffer
	if err := WriteJSON(&buf, sample(t)); err != nil {
		t.Fatal(err)
	}
	good := buf.String()
	cases := map[string]string{
		"other format": strings.Replace(good, `"mottle-field"`, `"something"`, 1),
		"newer":        strings.Replace(good, `"version": 1`, `"version": 99`, 1),
		"bad number":   strings.Replace(good, `"u": [`, `"u": ["x",`, 1),
		"short":        strings.Replace(good, `"u": [`, `"u": [1],"old_u": [`, 1),
		"truncated":    good[:len(good)/2],
		"empty":        "",
	}
	for name, doc := range cases {
		if _, err := ReadJSON(strings.NewReader(doc)); err == nil {
			t.Errorf("%s: want error", name)
		}
	}
	if err := WriteJSON(io.Discard, &Field{}); err == nil {
		t.Error("WriteJSON of an empty field: want error")
	}
}

// CSV: the standard library's RFC 4180 reader parses it, the header lists
// the columns, invalid cells are empty, and values read back exactly.
func TestCSV(t *testing.T) {
	f := sample(t)
	f.Status[1] = `odd, "quoted"` // must survive RFC 4180 quoting
	var buf bytes.Buffer
	if err := WriteCSV(&buf, f); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	want := append([]string{"i", "j", "x", "y", "status"}, f.Names()...)
	if !reflect.DeepEqual(recs[0], want) {
		t.Fatalf("header %v, want %v", recs[0], want)
	}
	if len(recs) != 1+f.Grid.Len() {
		t.Fatalf("%d rows, want %d", len(recs)-1, f.Grid.Len())
	}
	for p, r := range recs[1:] {
		if r[0] != strconv.Itoa(p%5) || r[1] != strconv.Itoa(p/5) || r[4] != f.Status[p] {
			t.Errorf("row %d: %v", p, r[:5])
		}
		if x, _ := strconv.ParseFloat(r[2], 64); x != f.Grid.X[p] {
			t.Errorf("row %d: x %q, want %v", p, r[2], f.Grid.X[p])
		}
		for k, n := range f.Names() {
			cell := r[5+k]
			v := f.Quantities[n][p]
			if !finite(v) {
				if cell != "" {
					t.Errorf("row %d %s: invalid value written as %q, want empty", p, n, cell)
				}
				continue
			}
			if got, err := strconv.ParseFloat(cell, 64); err != nil || got != v {
				t.Errorf("row %d %s: %q, want %v", p, n, cell, v)
			}
		}
	}
}

type vtkArray struct {
	Type   string `xml:"type,attr"`
	Name   string `xml:"Name,attr"`
	NComp  int    `xml:"NumberOfComponents,attr"`
	Format string `xml:"format,attr"`
	Data   string `xml:",chardata"`
}

type vtkFile struct {
	XMLName   xml.Name `xml:"VTKFile"`
	Type      string   `xml:"type,attr"`
	ByteOrder string   `xml:"byte_order,attr"`
	Header    string   `xml:"header_type,attr"`
	Grid      struct {
		WholeExtent string `xml:"WholeExtent,attr"`
		Piece       struct {
			Extent    string     `xml:"Extent,attr"`
			PointData []vtkArray `xml:"PointData>DataArray"`
			Points    vtkArray   `xml:"Points>DataArray"`
		} `xml:"Piece"`
	} `xml:"StructuredGrid"`
}

// decodeVTK decodes an inline binary array: base64 of a UInt64 byte count
// then the float64 values ("VTK File Formats", Kitware, XML formats).
func decodeVTK(t *testing.T, a vtkArray) []float64 {
	t.Helper()
	raw, err := base64.StdEncoding.DecodeString(strings.TrimSpace(a.Data))
	if err != nil {
		t.Fatalf("%s: %v", a.Name, err)
	}
	nb := binary.LittleEndian.Uint64(raw)
	if int(nb) != len(raw)-8 {
		t.Fatalf("%s: header says %d bytes, have %d", a.Name, nb, len(raw)-8)
	}
	x := make([]float64, nb/8)
	for k := range x {
		x[k] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8+8*k:]))
	}
	return x
}

// The .vts is well-formed XML whose extent declares exactly the number of
// points written, with every array decoding to the field's values.
func TestVTS(t *testing.T) {
	f := sample(t)
	f.Quantities["E11"][3] = 2.5e-300 // tiny values survive binary
	var buf bytes.Buffer
	if err := WriteVTS(&buf, f); err != nil {
		t.Fatal(err)
	}
	var v vtkFile
	if err := xml.Unmarshal(buf.Bytes(), &v); err != nil {
		t.Fatalf("not valid XML: %v", err)
	}
	if v.Type != "StructuredGrid" || v.ByteOrder != "LittleEndian" || v.Header != "UInt64" {
		t.Errorf("VTKFile attributes %q %q %q", v.Type, v.ByteOrder, v.Header)
	}
	var e [6]int
	for k, s := range strings.Fields(v.Grid.WholeExtent) {
		e[k], _ = strconv.Atoi(s)
	}
	npts := (e[1] - e[0] + 1) * (e[3] - e[2] + 1) * (e[5] - e[4] + 1)
	if npts != f.Grid.Len() || v.Grid.Piece.Extent != v.Grid.WholeExtent {
		t.Fatalf("extent %q declares %d points, want %d", v.Grid.WholeExtent, npts, f.Grid.Len())
	}
	pts := decodeVTK(t, v.Grid.Piece.Points)
	if v.Grid.Piece.Points.NComp != 3 || len(pts) != 3*npts {
		t.Fatalf("points: %d components, %d values", v.Grid.Piece.Points.NComp, len(pts))
	}
	for p := range npts {
		if pts[3*p] != f.Grid.X[p] || pts[3*p+1] != f.Grid.Y[p] || pts[3*p+2] != 0 {
			t.Errorf("point %d = %v, want (%v, %v, 0)", p, pts[3*p:3*p+3], f.Grid.X[p], f.Grid.Y[p])
		}
	}
	var names []string
	for _, a := range v.Grid.Piece.PointData {
		names = append(names, a.Name)
		if a.Type != "Float64" || a.Format != "binary" || a.NComp != 1 {
			t.Errorf("%s: type %q format %q components %d", a.Name, a.Type, a.Format, a.NComp)
		}
		if got := decodeVTK(t, a); !sameFloats(got, f.Quantities[a.Name]) {
			t.Errorf("%s: %v, want %v", a.Name, got, f.Quantities[a.Name])
		}
	}
	if !reflect.DeepEqual(names, f.Names()) {
		t.Errorf("arrays %v, want %v", names, f.Names())
	}
}

// NPY header layout per NumPy Enhancement Proposal 1 (format 1.0): magic,
// version 1.0, little-endian uint16 header length, a Python dict literal
// padded with spaces and ending in a newline so the data start on a multiple
// of 64 bytes.
func TestNPY(t *testing.T) {
	data := []float64{1, math.NaN(), -2.5, math.Inf(1), 1e-310, 6}
	var buf bytes.Buffer
	if err := WriteNPY(&buf, data, 2, 3); err != nil {
		t.Fatal(err)
	}
	b := bytes.Clone(buf.Bytes())
	if string(b[:6]) != "\x93NUMPY" || b[6] != 1 || b[7] != 0 {
		t.Fatalf("preamble % x", b[:8])
	}
	hlen := int(binary.LittleEndian.Uint16(b[8:10]))
	if (10+hlen)%64 != 0 || b[10+hlen-1] != '\n' || len(b) != 10+hlen+8*len(data) {
		t.Fatalf("header length %d, file %d bytes", hlen, len(b))
	}
	h := strings.TrimRight(string(b[10:10+hlen]), " \n")
	if h != "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3), }" {
		t.Errorf("header %q", h)
	}
	got, shape, err := ReadNPY(bytes.NewReader(b), 0)
	if err != nil || !reflect.DeepEqual(shape, []int{2, 3}) || !sameFloats(got, data) {
		t.Errorf("ReadNPY = %v, %v, %v", got, shape, err)
	}
	buf.Reset()
	if err := WriteNPY(&buf, data[:4], 4); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(buf.String(), "'shape': (4,)") {
		t.Errorf("1-D shape not written as a tuple: %q", buf.String()[10:70])
	}
	if err := WriteNPY(io.Discard, data, 4, 4); err == nil {
		t.Error("shape mismatch: want error")
	}
	bad := map[string][]byte{
		"magic":   []byte("PK\x03\x04 not npy at all"),
		"dtype":   []byte(strings.Replace(string(b), "<f8", "<i4", 1)),
		"fortran": []byte(strings.Replace(string(b), "False", "True ", 1)),
		"short":   b[:len(b)-3],
		"huge":    []byte(strings.Replace(string(b), "(2, 3)", "(9999999, 9999)", 1)),
	}
	for name, x := range bad {
		if _, _, err := ReadNPY(bytes.NewReader(x), 1<<20); err == nil {
			t.Errorf("%s: want error", name)
		}
	}
}

func TestNPZ(t *testing.T) {
	f := sample(t)
	var buf bytes.Buffer
	if err := WriteNPZ(&buf, f); err != nil {
		t.Fatal(err)
	}
	zr, err := zip.NewReader(bytes.NewReader(buf.Bytes()), int64(buf.Len()))
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for _, e := range zr.File {
		seen[e.Name] = true
		if e.Name == "status.npy" || e.Name == NPZMeta {
			continue
		}
		rc, err := e.Open()
		if err != nil {
			t.Fatal(err)
		}
		data, shape, err := ReadNPY(rc, 0)
		rc.Close()
		if err != nil {
			t.Fatalf("%s: %v", e.Name, err)
		}
		want := map[string][]float64{"grid_x.npy": f.Grid.X, "grid_y.npy": f.Grid.Y}[e.Name]
		if want == nil {
			want = f.Quantities[strings.TrimSuffix(e.Name, ".npy")]
		}
		if !reflect.DeepEqual(shape, []int{3, 5}) || !sameFloats(data, want) {
			t.Errorf("%s: shape %v data %v", e.Name, shape, data)
		}
	}
	for _, n := range append(f.Names(), "grid_x", "grid_y", "status") {
		if !seen[n+".npy"] {
			t.Errorf("npz has no %s.npy", n)
		}
	}
}

// round32 returns x rounded to the nearest float32 (beyond its range to
// ±Inf).
func round32(x []float64) []float64 {
	y := append([]float64(nil), x...)
	for k := range y {
		y[k] = float64(float32(y[k]))
	}
	return y
}

// ReadNPZ gives back the field WriteNPZ wrote: every array (float64 bit
// for bit, or rounded to float32 for a float32 field), the status, units,
// parameters and metadata, and field.json written from either is the same
// document.
func TestNPZRoundTrip(t *testing.T) {
	for _, precision := range []string{"", Float32} {
		t.Run("precision="+precision, func(t *testing.T) {
			f := sample(t)
			f.Meta.Precision = precision
			var buf bytes.Buffer
			if err := WriteNPZ(&buf, f); err != nil {
				t.Fatal(err)
			}
			g, err := ReadNPZ(bytes.NewReader(buf.Bytes()), int64(buf.Len()))
			if err != nil {
				t.Fatal(err)
			}
			want := func(x []float64) []float64 { return x }
			if precision == Float32 {
				want = round32
			}
			for _, n := range f.Names() {
				if !sameFloats(g.Quantities[n], want(f.Quantities[n])) || g.Units[n] != f.Units[n] {
					t.Errorf("%s: read %v %s, wrote %v %s", n, g.Quantities[n], g.Units[n], f.Quantities[n], f.Units[n])
				}
			}
			if !reflect.DeepEqual(g.Names(), f.Names()) || !reflect.DeepEqual(g.Status, f.Status) || !sameFloats(g.Grid.X, f.Grid.X) || !sameFloats(g.Grid.Y, f.Grid.Y) {
				t.Errorf("names, status or grid differ: %v %v", g.Names(), g.Status)
			}
			var a, b bytes.Buffer
			if err := errors.Join(WriteJSON(&a, f), WriteJSON(&b, g)); err != nil {
				t.Fatal(err)
			}
			if a.String() != b.String() {
				t.Errorf("field.json from the npz differs from field.json of the field:\n%s\n%s", a.String(), b.String())
			}
		})
	}
	if _, err := ReadNPZ(bytes.NewReader([]byte("PK not a zip")), 12); err == nil {
		t.Error("ReadNPZ of garbage: want an error")
	}
}

// Cross-check with NumPy itself (numpy.load through Debian's
// /usr/bin/python3; .ci/run installs python3-numpy): every .npy and the .npz
// load with the right shape and values, compared against field.json read by
// Python's own json module. A missing NumPy fails the test (it never
// skips), naming the Debian package to install.
func TestFilesWithNumPy(t *testing.T) {
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		t.Fatalf("%s with numpy not available (apt-get install python3-numpy): %v", py, err)
	}
	for _, precision := range []string{"", Float32} {
		t.Run("precision="+precision, func(t *testing.T) { checkWithNumPy(t, py, precision) })
	}
}

func checkWithNumPy(t *testing.T, py, precision string) {
	dir := t.TempDir()
	f := sample(t)
	f.Meta.Precision = precision
	if err := os.Mkdir(filepath.Join(dir, "npy"), 0o755); err != nil {
		t.Fatal(err)
	}
	files := map[string]func(io.Writer) error{
		"field.json": func(w io.Writer) error { return WriteJSON(w, f) },
		"field.csv":  func(w io.Writer) error { return WriteCSV(w, f) },
		"field.npz":  func(w io.Writer) error { return WriteNPZ(w, f) },
	}
	npy := WriteNPY
	dtype := "float64"
	if precision == Float32 {
		npy, dtype = WriteNPY32, "float32"
	}
	for _, n := range f.Names() {
		files["npy/"+n+".npy"] = func(w io.Writer) error { return npy(w, f.Quantities[n], f.Grid.Ny, f.Grid.Nx) }
	}
	for name, write := range files {
		if err := WriteFileAtomic(filepath.Join(dir, name), 0o644, write); err != nil {
			t.Fatal(err)
		}
	}
	script := `
import json, sys, numpy as np
d = sys.argv[1]
doc = json.load(open(d + "/field.json"))
ny, nx = doc["grid"]["ny"], doc["grid"]["nx"]
z = np.load(d + "/field.npz")
def ref(vals):
    return np.array([np.nan if v is None else v for v in vals], dtype=np.float64).reshape(ny, nx)
n = 0
for name, vals in doc["quantities"].items():
    for a in (z[name], np.load(d + "/npy/" + name + ".npy")):
        assert a.dtype == np.dtype(sys.argv[2]) and a.shape == (ny, nx), (name, a.dtype, a.shape)
        r = ref(vals)
        if a.dtype == np.float32:
            r = np.where(np.abs(r) > np.finfo(np.float32).max, np.nan, r).astype(np.float32)
        fin = np.isfinite(r)
        assert np.array_equal(np.isfinite(a), fin), name
        assert np.array_equal(a[fin], r[fin]), name
        n += 1
assert np.array_equal(z["grid_x"].ravel(), np.array(doc["grid"]["x"]))
assert list(z["status"].ravel()) == doc["status"], z["status"]
assert json.loads(z["meta.json"])["meta"] == doc["meta"]
import csv
rows = list(csv.reader(open(d + "/field.csv")))
assert len(rows) == 1 + nx * ny
print("ok", n)
`
	out, err := exec.Command(py, "-c", script, dir, dtype).CombinedOutput()
	if err != nil {
		t.Fatalf("numpy check failed: %v\n%s", err, out)
	}
	if want := "ok " + strconv.Itoa(2*len(f.Names())); strings.TrimSpace(string(out)) != want {
		t.Errorf("numpy check printed %q, want %q", out, want)
	}
}

func TestWriteFileAtomic(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.txt")
	if err := WriteFileAtomic(p, 0o644, func(w io.Writer) error { _, err := io.WriteString(w, "first"); return err }); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("boom")
	err := WriteFileAtomic(p, 0o644, func(w io.Writer) error { io.WriteString(w, "partial"); return boom })
	if !errors.Is(err, boom) {
		t.Errorf("error %v, want boom", err)
	}
	b, _ := os.ReadFile(p)
	if string(b) != "first" {
		t.Errorf("after a failed write the file holds %q, want the old content", b)
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 {
		t.Errorf("temporary files left: %v", ents)
	}
	st, _ := os.Stat(p)
	if st.Mode().Perm() != 0o644 {
		t.Errorf("mode %v, want 0644", st.Mode().Perm())
	}
	if err := WriteFileAtomic(filepath.Join(dir, "no", "such", "dir", "x"), 0o644, func(io.Writer) error { return nil }); err == nil {
		t.Error("missing directory: want error")
	}
}

// FuzzReadNPY: whatever ReadNPY accepts has as many values as its shape
// says, and reads back unchanged (the same shape and the same float64
// bits, NaN payloads included) after WriteNPY: read → write → read is
// the identity, and write(read(b)) is a fixed point.
func FuzzReadNPY(f *testing.F) {
	var buf bytes.Buffer
	WriteNPY(&buf, []float64{1, 2, 3, 4}, 2, 2)
	f.Add(buf.Bytes())
	f.Add([]byte("\x93NUMPY\x02\x00\xff\xff\xff\x00"))
	f.Fuzz(func(t *testing.T, b []byte) {
		data, shape, err := ReadNPY(bytes.NewReader(b), 1<<20)
		if err != nil {
			return
		}
		n := 1
		for _, s := range shape {
			n *= s
		}
		if n != len(data) {
			t.Fatalf("shape %v but %d values", shape, len(data))
		}
		var w1 bytes.Buffer
		if err := WriteNPY(&w1, data, shape...); err != nil {
			t.Fatalf("cannot write back an array of shape %v that was read: %v", shape, err)
		}
		data2, shape2, err := ReadNPY(bytes.NewReader(w1.Bytes()), 0)
		if err != nil {
			t.Fatalf("cannot read what WriteNPY wrote for shape %v: %v", shape, err)
		}
		if !slices.Equal(shape, shape2) || len(data) != len(data2) {
			t.Fatalf("shape %v (%d values) read back as %v (%d values)", shape, len(data), shape2, len(data2))
		}
		for i := range data {
			if math.Float64bits(data[i]) != math.Float64bits(data2[i]) {
				t.Fatalf("value %d: %v (%#x) read back as %v (%#x)", i, data[i], math.Float64bits(data[i]), data2[i], math.Float64bits(data2[i]))
			}
		}
		var w2 bytes.Buffer
		if err := WriteNPY(&w2, data2, shape2...); err != nil || !bytes.Equal(w1.Bytes(), w2.Bytes()) {
			t.Fatalf("writing the array read back gives other bytes (%v)", err)
		}
	})
}

// FuzzReadJSON: whatever ReadJSON accepts passes Validate, and reads back
// equal after WriteJSON: the same grid, units, status and values (NaN
// where NaN, otherwise the same float64), the same metadata, and
// write(read(b)) is a fixed point.
func FuzzReadJSON(f *testing.F) {
	var buf bytes.Buffer
	WriteJSON(&buf, sample(f))
	f.Add(buf.Bytes())
	f.Add([]byte(`{"format":"mottle-field","version":1,"grid":{"nx":1,"ny":1,"x":[0],"y":[null]}}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		g, err := ReadJSON(bytes.NewReader(b))
		if err != nil {
			return
		}
		if err := g.Validate(); err != nil {
			t.Fatalf("ReadJSON returned a field that fails Validate: %v", err)
		}
		var w1 bytes.Buffer
		if err := WriteJSON(&w1, g); err != nil {
			t.Fatalf("cannot write back a field that was read: %v", err)
		}
		g2, err := ReadJSON(bytes.NewReader(w1.Bytes()))
		if err != nil {
			t.Fatalf("cannot read what WriteJSON wrote: %v\n%s", err, w1.Bytes())
		}
		if d := fieldDiff(g, g2); d != "" {
			t.Fatalf("field read back differs: %s", d)
		}
		var w2 bytes.Buffer
		if err := WriteJSON(&w2, g2); err != nil || !bytes.Equal(w1.Bytes(), w2.Bytes()) {
			t.Fatalf("writing the field read back gives other bytes (%v)", err)
		}
	})
}

// fieldDiff describes the first difference between two fields, or returns
// "". Values compare as float64 with NaN equal to NaN.
func fieldDiff(a, b *Field) string {
	same := func(x, y []float64) bool {
		if len(x) != len(y) {
			return false
		}
		for i := range x {
			if x[i] != y[i] && !(math.IsNaN(x[i]) && math.IsNaN(y[i])) {
				return false
			}
		}
		return true
	}
	switch {
	case a.Version != b.Version:
		return fmt.Sprintf("version %d, %d", a.Version, b.Version)
	case a.Grid.Nx != b.Grid.Nx || a.Grid.Ny != b.Grid.Ny || a.Grid.Step != b.Grid.Step || a.Grid.Subset != b.Grid.Subset:
		return fmt.Sprintf("grid %d×%d step %d subset %d, %d×%d step %d subset %d", a.Grid.Nx, a.Grid.Ny, a.Grid.Step, a.Grid.Subset, b.Grid.Nx, b.Grid.Ny, b.Grid.Step, b.Grid.Subset)
	case !same(a.Grid.X, b.Grid.X) || !same(a.Grid.Y, b.Grid.Y):
		return "grid positions"
	case !maps.Equal(a.Units, b.Units):
		return fmt.Sprintf("units %v, %v", a.Units, b.Units)
	case !slices.Equal(a.Status, b.Status):
		return fmt.Sprintf("status %v, %v", a.Status, b.Status)
	case len(a.Quantities) != len(b.Quantities):
		return fmt.Sprintf("quantities %v, %v", a.Names(), b.Names())
	case !a.Meta.Created.Equal(b.Meta.Created):
		return fmt.Sprintf("created %v, %v", a.Meta.Created, b.Meta.Created)
	}
	for n, v := range a.Quantities {
		if !same(v, b.Quantities[n]) {
			return "values of " + n
		}
	}
	ma, mb := a.Meta, b.Meta
	ma.Created, mb.Created = time.Time{}, time.Time{}
	if !reflect.DeepEqual(ma, mb) {
		return fmt.Sprintf("meta %+v, %+v", ma, mb)
	}
	if !bytes.Equal(compactJSON(a.Params), compactJSON(b.Params)) {
		return fmt.Sprintf("params %s, %s", a.Params, b.Params)
	}
	return ""
}

func compactJSON(b []byte) []byte {
	var out bytes.Buffer
	if json.Compact(&out, b) != nil {
		return b
	}
	return out.Bytes()
}
