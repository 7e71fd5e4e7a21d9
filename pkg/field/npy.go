package field

import (
	"archive/zip"
	"bufio"
	"bytes"
	"encoding/binary"
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
	n := 1
	for _, s := range shape {
		n *= s
	}
	if n != len(data) {
		return fmt.Errorf("npy: shape %v holds %d values, data has %d", shape, n, len(data))
	}
	if err := writeNPYHeader(w, "<f8", shape); err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	var b [8]byte
	for _, x := range data {
		binary.LittleEndian.PutUint64(b[:], math.Float64bits(x))
		bw.Write(b[:])
	}
	return bw.Flush()
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
// float64 data in C order, as written by [WriteNPY], and returns the values
// and the shape. Other dtypes and Fortran order are reported as errors, as
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
	if m == nil || (string(m[1]) != "<f8" && string(m[1]) != "f8") {
		return nil, nil, fmt.Errorf("npy: header %q: want dtype '<f8' (little-endian float64)", bytes.TrimSpace(h))
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
		if n > math.MaxInt32 || (maxBytes > 0 && 8*n > maxBytes) {
			return nil, nil, fmt.Errorf("npy: shape (%s) is too large", m[1])
		}
	}
	raw := make([]byte, 8*n)
	if _, err := io.ReadFull(r, raw); err != nil {
		return nil, nil, fmt.Errorf("npy data: want %d values: %w", n, err)
	}
	data := make([]float64, n)
	for k := range data {
		data[k] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*k:]))
	}
	return data, shape, nil
}

// WriteNPZ writes every quantity of f as an .npz archive (a zip of .npy
// files, stored uncompressed as numpy.savez writes them): "<name>.npy" of
// shape (Ny, Nx) for each quantity, "grid_x.npy" and "grid_y.npy" with the
// reference coordinates, and "status.npy" with the status strings (unicode,
// shape (Ny, Nx)). numpy.load opens it without allow_pickle.
func WriteNPZ(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.npz: %w", err)
	}
	zw := zip.NewWriter(w)
	g := f.Grid
	add := func(name string, data []float64) error {
		e, err := zw.CreateHeader(&zip.FileHeader{Name: name + ".npy", Method: zip.Store})
		if err != nil {
			return err
		}
		return WriteNPY(e, data, g.Ny, g.Nx)
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
		e, err := zw.CreateHeader(&zip.FileHeader{Name: "status.npy", Method: zip.Store})
		if err == nil {
			err = writeNPYStrings(e, f.Status, g.Ny, g.Nx)
		}
		if err != nil {
			return fmt.Errorf("field.npz status: %w", err)
		}
	}
	if err := zw.Close(); err != nil {
		return fmt.Errorf("field.npz: %w", err)
	}
	return nil
}
