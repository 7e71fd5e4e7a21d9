package field

import (
	"bufio"
	"fmt"
	"io"
	"strconv"
	"strings"
)

// WriteCSV writes f as comma-separated values (RFC 4180, lines ending in
// \n): a header line
//
//	i,j,x,y,status,<quantity names in the order of Field.Names>
//
// then one row per point in row-major order, where i, j are the grid
// indices and x, y the reference-image position in px. An invalid (NaN or
// infinite) value is written as an EMPTY cell, which spreadsheets show as
// blank and pandas, R and numpy.genfromtxt read as missing. Numbers use the
// shortest representation that reads back to the same float64 (float32
// when Meta.Precision is [Float32]). Units are not
// in the header (so that the names stay plain identifiers); they are in
// field.json.
func WriteCSV(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.csv: %w", err)
	}
	names := f.Names()
	bw := bufio.NewWriterSize(w, 1<<16)
	var line []byte
	for k, n := range append([]string{"i", "j", "x", "y", "status"}, names...) {
		if k > 0 {
			line = append(line, ',')
		}
		line = appendCSVField(line, n)
	}
	bw.Write(append(line, '\n'))
	cols := make([][]float64, len(names))
	for k, n := range names {
		cols[k] = f.Quantities[n]
	}
	g := f.Grid
	single := f.single()
	num := func(b []byte, x float64) []byte {
		if single {
			x = float64(float32(x))
		}
		if !finite(x) {
			return b
		}
		return appendNumber(b, x, single)
	}
	for p := range g.Len() {
		line = strconv.AppendInt(line[:0], int64(p%g.Nx), 10)
		line = append(line, ',')
		line = strconv.AppendInt(line, int64(p/g.Nx), 10)
		line = append(line, ',')
		line = num(line, g.X[p])
		line = append(line, ',')
		line = num(line, g.Y[p])
		line = append(line, ',')
		if f.Status != nil {
			line = appendCSVField(line, f.Status[p])
		}
		for _, c := range cols {
			line = append(line, ',')
			line = num(line, c[p])
		}
		if _, err := bw.Write(append(line, '\n')); err != nil {
			return fmt.Errorf("field.csv row %d: %w", p, err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("field.csv: %w", err)
	}
	return nil
}

// appendCSVField appends s to b, quoted as RFC 4180 requires when it holds
// a comma, a quote, a line break or leading or trailing space.
func appendCSVField(b []byte, s string) []byte {
	if s == "" || !strings.ContainsAny(s, ",\"\r\n") && s[0] != ' ' && s[len(s)-1] != ' ' {
		return append(b, s...)
	}
	b = append(b, '"')
	b = append(b, strings.ReplaceAll(s, `"`, `""`)...)
	return append(b, '"')
}
