package field

import (
	"archive/zip"
	"bufio"
	"bytes"
	"compress/flate"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"unicode/utf8"
)

// npyMagic starts every NPY file (NumPy Enhancement Proposal 1, "A simple
// file format for NumPy arrays", format version 1.0).
const npyMagic = "\x93NUMPY"

// writeNPYHeader writes the NPY 1.0 preamble for an array of dtype descr
// (e.g. "<f8") and the given C-order shape. The header is padded with spaces
// and a final newline so that the data start at a multiple of 64 bytes.
func writeNPYHeader(w io.Writer, descr string, shape []int) error {
	var sh strings.Builder
	sh.WriteByte('(')
	for k, s := range shape {
		if s < 0 {
			return fmt.Errorf("npy: negative dimension %d in shape %v", s, shape)
		}
		if k > 0 {
			sh.WriteString(", ")
		}
		sh.WriteString(strconv.Itoa(s))
	}
	if len(shape) == 1 {
		sh.WriteByte(',')
	}
	sh.WriteByte(')')
	dict := fmt.Sprintf("{'descr': '%s', 'fortran_order': False, 'shape': %s, }", descr, sh.String())
	total := len(npyMagic) + 4 + len(dict) + 1
	pad := (64 - total%64) % 64
	hlen := len(dict) + pad + 1
	if hlen > math.MaxUint16 {
		return fmt.Errorf("npy: header of %d bytes is too long for format 1.0", hlen)
	}
	var pre [10]byte
	copy(pre[:], npyMagic)
	pre[6], pre[7] = 1, 0
	binary.LittleEndian.PutUint16(pre[8:], uint16(hlen))
	if _, err := w.Write(pre[:]); err != nil {
		return err
	}
	_, err := io.WriteString(w, dict+strings.Repeat(" ", pad)+"\n")
	return err
}

// WriteNPY writes data as a NumPy .npy file (format 1.0) of little-endian
// float64 ('<f8') in C order with the given shape, whose product must be
// len(data). NaN values are written as NaN. For a field quantity use the
// shape (Ny, Nx): numpy.load then returns the map with rows along y.
func WriteNPY(w io.Writer, data []float64, shape ...int) error {
	return writeNPY(w, data, false, shape)
}

// WriteNPY32 is [WriteNPY] for float32 ('<f4') data: each value is rounded
// to the nearest float32 (see [Float32]).
func WriteNPY32(w io.Writer, data []float64, shape ...int) error {
	return writeNPY(w, data, true, shape)
}

func writeNPY(w io.Writer, data []float64, single bool, shape []int) error {
	n := 1
	for _, s := range shape {
		n *= s
	}
	if n != len(data) {
		return fmt.Errorf("npy: shape %v holds %d values, data has %d", shape, n, len(data))
	}
	descr := "<f8"
	if single {
		descr = "<f4"
	}
	if err := writeNPYHeader(w, descr, shape); err != nil {
		return err
	}
	buf := make([]byte, 0, 8*min(len(data), 8192))
	for len(data) > 0 {
		k := min(len(data), 8192)
		buf = appendValues(buf[:0], data[:k], single)
		if _, err := w.Write(buf); err != nil {
			return err
		}
		data = data[k:]
	}
	return nil
}

// writeNPYStrings writes s as a 1-D NumPy unicode array ('<U<n>', UTF-32LE,
// each string padded with zeros to the longest one).
func writeNPYStrings(w io.Writer, s []string, shape ...int) error {
	width := 1
	for _, x := range s {
		width = max(width, utf8.RuneCountInString(x))
	}
	if err := writeNPYHeader(w, fmt.Sprintf("<U%d", width), shape); err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	var b [4]byte
	for _, x := range s {
		k := 0
		for _, r := range x {
			binary.LittleEndian.PutUint32(b[:], uint32(r))
			bw.Write(b[:])
			k++
		}
		for ; k < width; k++ {
			bw.Write([]byte{0, 0, 0, 0})
		}
	}
	return bw.Flush()
}

var (
	npyDescr = regexp.MustCompile(`'descr'\s*:\s*'([^']*)'`)
	npyOrder = regexp.MustCompile(`'fortran_order'\s*:\s*(True|False)`)
	npyShape = regexp.MustCompile(`'shape'\s*:\s*\(([^)]*)\)`)
)

// ReadNPY reads a .npy file (format 1.0, 2.0 or 3.0) holding little-endian
// float64 or float32 data in C order, as written by [WriteNPY] and
// [WriteNPY32], and returns the values and the shape. Other dtypes and Fortran order are reported as errors, as
// are files larger than maxBytes (0 = no limit).
func ReadNPY(r io.Reader, maxBytes int64) ([]float64, []int, error) {
	var pre [8]byte
	if _, err := io.ReadFull(r, pre[:]); err != nil {
		return nil, nil, fmt.Errorf("npy: %w", err)
	}
	if string(pre[:6]) != npyMagic {
		return nil, nil, errors.New("npy: missing \\x93NUMPY magic: not a .npy file")
	}
	var hlen int
	switch pre[6] {
	case 1:
		var b [2]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return nil, nil, fmt.Errorf("npy: %w", err)
		}
		hlen = int(binary.LittleEndian.Uint16(b[:]))
	case 2, 3:
		var b [4]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return nil, nil, fmt.Errorf("npy: %w", err)
		}
		hlen = int(binary.LittleEndian.Uint32(b[:]))
		if hlen > 1<<20 {
			return nil, nil, fmt.Errorf("npy: header of %d bytes: too long", hlen)
		}
	default:
		return nil, nil, fmt.Errorf("npy: format version %d.%d: want 1.0, 2.0 or 3.0", pre[6], pre[7])
	}
	h := make([]byte, hlen)
	if _, err := io.ReadFull(r, h); err != nil {
		return nil, nil, fmt.Errorf("npy header: %w", err)
	}
	m := npyDescr.FindSubmatch(h)
	size := 8
	switch {
	case m != nil && (string(m[1]) == "<f8" || string(m[1]) == "f8"):
	case m != nil && string(m[1]) == "<f4":
		size = 4
	default:
		return nil, nil, fmt.Errorf("npy: header %q: want dtype '<f8' or '<f4' (little-endian float64 or float32)", bytes.TrimSpace(h))
	}
	if m := npyOrder.FindSubmatch(h); m == nil || string(m[1]) != "False" {
		return nil, nil, fmt.Errorf("npy: header %q: want C order (fortran_order False)", bytes.TrimSpace(h))
	}
	m = npyShape.FindSubmatch(h)
	if m == nil {
		return nil, nil, fmt.Errorf("npy: header %q: no shape", bytes.TrimSpace(h))
	}
	var shape []int
	n := int64(1)
	for _, part := range strings.Split(string(m[1]), ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		s, err := strconv.Atoi(part)
		if err != nil || s < 0 {
			return nil, nil, fmt.Errorf("npy: shape (%s): dimension %q is not a count", m[1], part)
		}
		shape = append(shape, s)
		n *= int64(s)
		if n > math.MaxInt32 || (maxBytes > 0 && int64(size)*n > maxBytes) {
			return nil, nil, fmt.Errorf("npy: shape (%s) is too large", m[1])
		}
	}
	raw := make([]byte, int64(size)*n)
	if _, err := io.ReadFull(r, raw); err != nil {
		return nil, nil, fmt.Errorf("npy data: want %d values: %w", n, err)
	}
	data := make([]float64, n)
	if size == 4 {
		for k := range data {
			data[k] = float64(math.Float32frombits(binary.LittleEndian.Uint32(raw[4*k:])))
		}
		return data, shape, nil
	}
	for k := range data {
		data[k] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*k:]))
	}
	return data, shape, nil
}

// NPZMeta is the name of the member of an .npz archive written by
// [WriteNPZ] that holds everything of the field but its arrays, as JSON:
// the field.json document (see [WriteJSON]) without "grid.x", "grid.y",
// "quantities" and "status". numpy.load returns it as bytes.
const NPZMeta = "meta.json"

// WriteNPZ writes every quantity of f as an .npz archive (a zip of .npy
// files, compressed with Deflate at its fastest level as
// numpy.savez_compressed writes them): "<name>.npy" of shape (Ny, Nx) for
// each quantity ('<f4' when Meta.Precision is [Float32], else '<f8'),
// "grid_x.npy" and "grid_y.npy" with the reference coordinates, "status.npy"
// with the status strings (unicode, shape (Ny, Nx)) and [NPZMeta] with the
// parameters, units and metadata. numpy.load opens it without allow_pickle,
// and [ReadNPZ] reads it back to the same field.
func WriteNPZ(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.npz: %w", err)
	}
	meta, err := headerJSON(f)
	if err != nil {
		return fmt.Errorf("field.npz: %w", err)
	}
	zw := zip.NewWriter(w)
	// Members are written one after the other, so one compressor serves
	// them all (a new one per member allocates about a megabyte).
	var fw *flate.Writer
	zw.RegisterCompressor(zip.Deflate, func(out io.Writer) (io.WriteCloser, error) {
		if fw == nil {
			var err error
			fw, err = flate.NewWriter(out, flate.BestSpeed)
			return fw, err
		}
		fw.Reset(out)
		return fw, nil
	})
	g := f.Grid
	single := f.single()
	member := func(name string) (io.Writer, error) {
		return zw.CreateHeader(&zip.FileHeader{Name: name, Method: zip.Deflate})
	}
	add := func(name string, data []float64) error {
		e, err := member(name + ".npy")
		if err != nil {
			return err
		}
		return writeNPY(e, data, single, []int{g.Ny, g.Nx})
	}
	for _, n := range f.Names() {
		if err := add(n, f.Quantities[n]); err != nil {
			return fmt.Errorf("field.npz %s: %w", n, err)
		}
	}
	if err := errors.Join(add("grid_x", g.X), add("grid_y", g.Y)); err != nil {
		return fmt.Errorf("field.npz grid: %w", err)
	}
	if f.Status != nil {
		e, err := member("status.npy")
		if err == nil {
			err = writeNPYStrings(e, f.Status, g.Ny, g.Nx)
		}
		if err != nil {
			return fmt.Errorf("field.npz status: %w", err)
		}
	}
	e, err := member(NPZMeta)
	if err == nil {
		_, err = e.Write(meta)
	}
	if err != nil {
		return fmt.Errorf("field.npz %s: %w", NPZMeta, err)
	}
	if err := zw.Close(); err != nil {
		return fmt.Errorf("field.npz: %w", err)
	}
	return nil
}

// ReadNPZ reads a field from an .npz archive written by [WriteNPZ] (r is
// the archive's bytes, size its length), checking it as [ReadJSON] does.
// Values of float32 arrays come back as the float64 of the same value.
func ReadNPZ(r io.ReaderAt, size int64) (*Field, error) {
	zr, err := zip.NewReader(r, size)
	if err != nil {
		return nil, fmt.Errorf("field.npz: %w", err)
	}
	members := map[string]*zip.File{}
	for _, m := range zr.File {
		members[m.Name] = m
	}
	open := func(name string) (io.ReadCloser, error) {
		m, ok := members[name]
		if !ok {
			return nil, fmt.Errorf("field.npz: no member %s; it was not written by this program's WriteNPZ (version 1 with metadata)", name)
		}
		return m.Open()
	}
	rc, err := open(NPZMeta)
	if err != nil {
		return nil, err
	}
	var j jsonField
	err = json.NewDecoder(io.LimitReader(rc, 64<<20)).Decode(&j)
	rc.Close()
	if err != nil {
		return nil, fmt.Errorf("field.npz %s: %w", NPZMeta, err)
	}
	f, err := j.field()
	if err != nil {
		return nil, fmt.Errorf("field.npz: %w", err)
	}
	n := j.Grid.Nx * j.Grid.Ny
	if j.Grid.Nx < 1 || j.Grid.Ny < 1 || n > math.MaxInt32 {
		return nil, fmt.Errorf("field.npz: grid %d×%d: want at least 1×1 points", j.Grid.Nx, j.Grid.Ny)
	}
	array := func(name string) ([]float64, error) {
		rc, err := open(name + ".npy")
		if err != nil {
			return nil, err
		}
		defer rc.Close()
		data, shape, err := ReadNPY(rc, 8*int64(n)+1)
		if err != nil {
			return nil, fmt.Errorf("field.npz %s: %w", name, err)
		}
		if len(shape) != 2 || shape[0] != j.Grid.Ny || shape[1] != j.Grid.Nx {
			return nil, fmt.Errorf("field.npz %s: shape %v, want (%d, %d)", name, shape, j.Grid.Ny, j.Grid.Nx)
		}
		return data, nil
	}
	if f.Grid.X, err = array("grid_x"); err != nil {
		return nil, err
	}
	if f.Grid.Y, err = array("grid_y"); err != nil {
		return nil, err
	}
	for _, name := range j.Names {
		if f.Quantities[name], err = array(name); err != nil {
			return nil, err
		}
	}
	if _, ok := members["status.npy"]; ok {
		rc, err := open("status.npy")
		if err != nil {
			return nil, err
		}
		f.Status, err = readNPYStrings(rc, n)
		rc.Close()
		if err != nil {
			return nil, fmt.Errorf("field.npz status: %w", err)
		}
	}
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("field.npz: %w", err)
	}
	return f, nil
}

// readNPYStrings reads a unicode array ('<U<n>') of n strings written by
// writeNPYStrings, trimming the zero padding.
func readNPYStrings(r io.Reader, n int) ([]string, error) {
	var pre [10]byte
	if _, err := io.ReadFull(r, pre[:]); err != nil {
		return nil, err
	}
	if string(pre[:6]) != npyMagic || pre[6] != 1 {
		return nil, errors.New("not a .npy file of format 1.0")
	}
	h := make([]byte, binary.LittleEndian.Uint16(pre[8:]))
	if _, err := io.ReadFull(r, h); err != nil {
		return nil, err
	}
	m := npyDescr.FindSubmatch(h)
	if m == nil || !bytes.HasPrefix(m[1], []byte("<U")) {
		return nil, fmt.Errorf("header %q: want a unicode array '<U…'", bytes.TrimSpace(h))
	}
	width, err := strconv.Atoi(string(m[1][2:]))
	if err != nil || width < 1 || width > 1024 {
		return nil, fmt.Errorf("header %q: bad string width", bytes.TrimSpace(h))
	}
	raw := make([]byte, 4*width*n)
	if _, err := io.ReadFull(r, raw); err != nil {
		return nil, fmt.Errorf("want %d strings: %w", n, err)
	}
	out := make([]string, n)
	rs := make([]rune, 0, width)
	for k := range out {
		rs = rs[:0]
		for c := range width {
			v := binary.LittleEndian.Uint32(raw[4*(k*width+c):])
			if v == 0 {
				break
			}
			rs = append(rs, rune(v))
		}
		out[k] = string(rs)
	}
	return out, nil
}
