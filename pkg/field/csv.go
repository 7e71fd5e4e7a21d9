package field

import (
	"encoding/csv"
	"fmt"
	"io"
	"strconv"
)

// WriteCSV writes f as comma-separated values (RFC 4180): a header line
//
//	i,j,x,y,status,<quantity names in the order of Field.Names>
//
// then one row per point in row-major order, where i, j are the grid
// indices and x, y the reference-image position in px. An invalid (NaN or
// infinite) value is written as an EMPTY cell, which spreadsheets show as
// blank and pandas, R and numpy.genfromtxt read as missing. Numbers use the
// shortest representation that reads back to the same float64. Units are not
// in the header (so that the names stay plain identifiers); they are in
// field.json.
func WriteCSV(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.csv: %w", err)
	}
	names := f.Names()
	cw := csv.NewWriter(w)
	rec := append([]string{"i", "j", "x", "y", "status"}, names...)
	if err := cw.Write(rec); err != nil {
		return fmt.Errorf("field.csv: %w", err)
	}
	cols := make([][]float64, len(names))
	for k, n := range names {
		cols[k] = f.Quantities[n]
	}
	g := f.Grid
	var buf []byte
	format := func(x float64) string {
		if !finite(x) {
			return ""
		}
		buf = strconv.AppendFloat(buf[:0], x, 'g', -1, 64)
		return string(buf)
	}
	for p := range g.Len() {
		rec = rec[:0]
		st := ""
		if f.Status != nil {
			st = f.Status[p]
		}
		rec = append(rec, strconv.Itoa(p%g.Nx), strconv.Itoa(p/g.Nx), format(g.X[p]), format(g.Y[p]), st)
		for _, c := range cols {
			rec = append(rec, format(c[p]))
		}
		if err := cw.Write(rec); err != nil {
			return fmt.Errorf("field.csv row %d: %w", p, err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("field.csv: %w", err)
	}
	return nil
}
