package field

import (
	"bufio"
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"html"
	"io"
	"math"
)

// WriteVTS writes f as a VTK XML structured grid (.vts, "VTK File Formats",
// Kitware, XML StructuredGrid), which ParaView and VisIt open directly.
//
// The points are (X, Y, 0) in reference-image pixels, in image axes (y
// down, so ParaView shows the specimen upside down unless the camera is
// flipped). Every quantity is a Float64 point-data array named as in
// [Field.Names] (Float32 when Meta.Precision is [Float32]), NaN where invalid (ParaView draws NaN in its "NaN colour").
// Arrays are inline base64 binary with a UInt64 byte-count header, encoded
// together with the data in one base64 stream, in little-endian byte order.
// The grid is written as extent 0..Nx−1 × 0..Ny−1 × 0..0, so point (i, j)
// is VTK point i + j·Nx, the same row-major order as the field.
func WriteVTS(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.vts: %w", err)
	}
	g := f.Grid
	bw := bufio.NewWriterSize(w, 1<<16)
	ext := fmt.Sprintf("0 %d 0 %d 0 0", g.Nx-1, g.Ny-1)
	fmt.Fprintf(bw, "<?xml version=\"1.0\"?>\n")
	fmt.Fprintf(bw, "<VTKFile type=\"StructuredGrid\" version=\"1.0\" byte_order=\"LittleEndian\" header_type=\"UInt64\">\n")
	fmt.Fprintf(bw, "  <StructuredGrid WholeExtent=\"%s\">\n", ext)
	fmt.Fprintf(bw, "    <Piece Extent=\"%s\">\n", ext)
	names := f.Names()
	typ := "Float64"
	if f.single() {
		typ = "Float32"
	}
	fmt.Fprintf(bw, "      <PointData")
	if len(names) > 0 {
		fmt.Fprintf(bw, " Scalars=\"%s\"", html.EscapeString(names[0]))
	}
	fmt.Fprintf(bw, ">\n")
	for _, n := range names {
		fmt.Fprintf(bw, "        <DataArray type=\"%s\" Name=\"%s\" NumberOfComponents=\"1\" format=\"binary\">\n          ", typ, html.EscapeString(n))
		writeVTKBinary(bw, f.Quantities[n], f.single())
		fmt.Fprintf(bw, "\n        </DataArray>\n")
	}
	pts, hidden := vtsPoints(f)
	if hidden != nil {
		writeGhosts(bw, hidden)
	}
	fmt.Fprintf(bw, "      </PointData>\n")
	fmt.Fprintf(bw, "      <Points>\n")
	fmt.Fprintf(bw, "        <DataArray type=\"%s\" Name=\"Points\" NumberOfComponents=\"3\" format=\"binary\">\n          ", typ)
	writeVTKBinary(bw, pts, f.single())
	fmt.Fprintf(bw, "\n        </DataArray>\n")
	fmt.Fprintf(bw, "      </Points>\n")
	fmt.Fprintf(bw, "    </Piece>\n")
	fmt.Fprintf(bw, "  </StructuredGrid>\n")
	fmt.Fprintf(bw, "</VTKFile>\n")
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("field.vts: %w", err)
	}
	return nil
}

// writeVTKBinary writes data as VTK inline binary: base64 of a UInt64 byte
// count followed by the little-endian float64 (with single, float32)
// values. The values are packed into blocks before encoding, so the base64
// encoder sees large writes.
func writeVTKBinary(w io.Writer, data []float64, single bool) {
	enc := base64.NewEncoder(base64.StdEncoding, w)
	size := 8
	if single {
		size = 4
	}
	buf := make([]byte, 8, 8+size*min(len(data), 4096))
	binary.LittleEndian.PutUint64(buf, uint64(size*len(data)))
	for len(data) > 0 {
		n := min(len(data), 4096)
		buf = appendValues(buf, data[:n], single)
		enc.Write(buf)
		buf, data = buf[:0], data[n:]
	}
	if len(buf) > 0 {
		enc.Write(buf)
	}
	enc.Close()
}

// appendValues appends data as little-endian float64, or with single as
// float32 (rounded to nearest).
func appendValues(b []byte, data []float64, single bool) []byte {
	if single {
		for _, x := range data {
			b = binary.LittleEndian.AppendUint32(b, math.Float32bits(float32(x)))
		}
		return b
	}
	for _, x := range data {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(x))
	}
	return b
}
