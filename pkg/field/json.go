package field

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
)

// WriteJSON writes f as a self-describing JSON document (field.json):
//
//	{"format": "mottle-field", "version": 1, "params": {…},
//	 "grid": {"nx", "ny", "step", "subset", "x": […], "y": […]},
//	 "units": {name: unit}, "meta": {…},
//	 "names": [quantity names in canonical order],
//	 "descriptions": {name: text},
//	 "quantities": {name: [one value per point, row-major]},
//	 "status": [one string per point]}
//
// Invalid (NaN or infinite) values are written as null. Numbers use the
// shortest representation that reads back to the same float64 (or float32,
// when Meta.Precision is [Float32]), so [ReadJSON] recovers the field as
// written. It returns an error if f does not
// pass [Field.Validate].
func WriteJSON(w io.Writer, f *Field) error {
	if err := f.Validate(); err != nil {
		return fmt.Errorf("field.json: %w", err)
	}
	entries, err := header(f)
	if err != nil {
		return fmt.Errorf("field.json: %w", err)
	}
	names := f.Names()
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.WriteString("{\n")
	for _, e := range entries {
		fmt.Fprintf(bw, "  %q: ", e.key)
		bw.Write(e.val)
		bw.WriteString(",\n")
	}
	g := f.Grid
	fmt.Fprintf(bw, "  \"grid\": {\"nx\": %d, \"ny\": %d, \"step\": %d, \"subset\": %d,\n    \"x\": ", g.Nx, g.Ny, g.Step, g.Subset)
	single := f.single()
	writeFloats(bw, g.X, single)
	bw.WriteString(",\n    \"y\": ")
	writeFloats(bw, g.Y, single)
	bw.WriteString("},\n  \"quantities\": {")
	for k, n := range names {
		if k > 0 {
			bw.WriteString(",")
		}
		fmt.Fprintf(bw, "\n    %q: ", n)
		writeFloats(bw, f.Quantities[n], single)
	}
	bw.WriteString("\n  },\n")
	status := f.Status
	if status == nil {
		status = []string{}
	}
	b, err := json.Marshal(status)
	if err != nil {
		return fmt.Errorf("field.json status: %w", err)
	}
	bw.WriteString("  \"status\": ")
	bw.Write(b)
	bw.WriteString("\n}\n")
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("field.json: %w", err)
	}
	return nil
}

func writeFloats(w *bufio.Writer, x []float64, single bool) {
	buf := make([]byte, 0, 4096)
	buf = append(buf, '[')
	for k, a := range x {
		if k > 0 {
			buf = append(buf, ',')
		}
		if single {
			a = float64(float32(a))
		}
		if !finite(a) {
			buf = append(buf, "null"...)
		} else {
			buf = appendNumber(buf, a, single)
		}
		if len(buf) > 4000 {
			w.Write(buf)
			buf = buf[:0]
		}
	}
	buf = append(buf, ']')
	w.Write(buf)
}

// appendNumber appends the shortest text of the finite value a that reads
// back to the same float64, or with single to the same float32 (a must
// then be a float32 value: callers round first, so that a value beyond
// float32's range is written as invalid in every format alike).
func appendNumber(b []byte, a float64, single bool) []byte {
	if single {
		return strconv.AppendFloat(b, a, 'g', -1, 32)
	}
	return strconv.AppendFloat(b, a, 'g', -1, 64)
}

// nullFloats is a JSON array of numbers in which null stands for NaN.
type nullFloats []float64

// UnmarshalJSON parses an array of numbers and nulls.
func (n *nullFloats) UnmarshalJSON(b []byte) error {
	b = bytes.TrimSpace(b)
	if bytes.Equal(b, []byte("null")) {
		*n = nil
		return nil
	}
	if len(b) < 2 || b[0] != '[' || b[len(b)-1] != ']' {
		return errors.New("want an array of numbers")
	}
	body := bytes.TrimSpace(b[1 : len(b)-1])
	out := make([]float64, 0, bytes.Count(body, []byte(","))+1)
	if len(body) == 0 {
		*n = out
		return nil
	}
	for k, tok := range bytes.Split(body, []byte(",")) {
		tok = bytes.TrimSpace(tok)
		if bytes.Equal(tok, []byte("null")) {
			out = append(out, math.NaN())
			continue
		}
		x, err := strconv.ParseFloat(string(tok), 64)
		if err != nil {
			return fmt.Errorf("element %d: %q is not a number or null", k, tok)
		}
		out = append(out, x)
	}
	*n = out
	return nil
}

type jsonField struct {
	Format  string          `json:"format"`
	Version int             `json:"version"`
	Params  json.RawMessage `json:"params"`
	Grid    struct {
		Nx     int        `json:"nx"`
		Ny     int        `json:"ny"`
		Step   int        `json:"step"`
		Subset int        `json:"subset"`
		X      nullFloats `json:"x"`
		Y      nullFloats `json:"y"`
	} `json:"grid"`
	Units      map[string]string     `json:"units"`
	Meta       Meta                  `json:"meta"`
	Names      []string              `json:"names"`
	Quantities map[string]nullFloats `json:"quantities"`
	Status     []string              `json:"status"`
}

// field returns the field of the document's header: grid shape, units,
// metadata and parameters, without arrays.
func (j *jsonField) field() (*Field, error) {
	if j.Format != FormatName {
		return nil, fmt.Errorf("format %q, want %q", j.Format, FormatName)
	}
	if j.Version < 1 || j.Version > Version {
		return nil, fmt.Errorf("version %d, this program reads versions 1 to %d", j.Version, Version)
	}
	f := &Field{
		Version: j.Version,
		Grid:    Grid{Nx: j.Grid.Nx, Ny: j.Grid.Ny, Step: j.Grid.Step, Subset: j.Grid.Subset, X: j.Grid.X, Y: j.Grid.Y},
		Units:   j.Units, Meta: j.Meta, Status: j.Status,
		Quantities: make(map[string][]float64, len(j.Quantities)),
	}
	if f.Units == nil {
		f.Units = map[string]string{}
	}
	// WriteJSON writes a field without statuses as "status": [], so an
	// empty list reads as no statuses, as a missing one does (found by
	// FuzzReadJSON: a document without a status list was accepted but its
	// written copy was refused).
	if len(f.Status) == 0 {
		f.Status = nil
	}
	// Likewise empty cautions, which WriteJSON omits; the extra metadata is
	// always a map (empty when the document has none), so callers can add
	// to it.
	if len(f.Meta.Cautions) == 0 {
		f.Meta.Cautions = nil
	}
	if f.Meta.Extra == nil {
		f.Meta.Extra = map[string]any{}
	}
	if len(j.Params) > 0 && !bytes.Equal(j.Params, []byte("null")) {
		f.Params = j.Params
	}
	return f, nil
}

// headerJSON returns the header of f's field.json document as one compact
// JSON object: format, version, params, units, meta, names, descriptions
// and the grid's shape (nx, ny, step, subset), without any array.
func headerJSON(f *Field) ([]byte, error) {
	entries, err := header(f)
	if err != nil {
		return nil, err
	}
	var b bytes.Buffer
	b.WriteByte('{')
	for _, e := range entries {
		fmt.Fprintf(&b, "%q:%s,", e.key, e.val)
	}
	g := f.Grid
	fmt.Fprintf(&b, "\"grid\":{\"nx\":%d,\"ny\":%d,\"step\":%d,\"subset\":%d}}", g.Nx, g.Ny, g.Step, g.Subset)
	return b.Bytes(), nil
}

type entry struct {
	key string
	val []byte
}

// header returns the header entries of field.json in order, each value
// encoded as compact JSON.
func header(f *Field) ([]entry, error) {
	names := f.Names()
	params := f.Params
	if params == nil {
		params = json.RawMessage("null")
	}
	units := map[string]string{}
	desc := map[string]string{}
	for _, n := range names {
		if u, ok := f.Units[n]; ok {
			units[n] = u
		}
		if d := Describe(n); d != "" {
			desc[n] = d
		}
	}
	var compact bytes.Buffer
	if err := json.Compact(&compact, params); err != nil {
		return nil, fmt.Errorf("params: %w", err)
	}
	var out []entry
	for _, kv := range []struct {
		k string
		v any
	}{
		{"format", FormatName}, {"version", f.Version}, {"params", json.RawMessage(compact.Bytes())},
		{"units", units}, {"meta", f.Meta}, {"names", names}, {"descriptions", desc},
	} {
		b, err := json.Marshal(kv.v)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", kv.k, err)
		}
		out = append(out, entry{kv.k, b})
	}
	return out, nil
}

// ReadJSON reads a field written by [WriteJSON]; null values become NaN,
// and units of quantities the document does not hold are dropped.
// It returns an error for a document of another format or a newer version,
// and for a field that fails [Field.Validate].
func ReadJSON(r io.Reader) (*Field, error) {
	var j jsonField
	dec := json.NewDecoder(r)
	if err := dec.Decode(&j); err != nil {
		return nil, fmt.Errorf("field.json: %w", err)
	}
	f, err := j.field()
	if err != nil {
		return nil, fmt.Errorf("field.json: %w", err)
	}
	for n, q := range j.Quantities {
		f.Quantities[n] = q
	}
	// Units belong to quantities: as WriteJSON writes only the units of
	// the field's quantities, a unit naming no quantity is dropped here,
	// so that a field reads back the same after it is written.
	for n := range f.Units {
		if _, ok := f.Quantities[n]; !ok {
			delete(f.Units, n)
		}
	}
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("field.json: %w", err)
	}
	return f, nil
}
