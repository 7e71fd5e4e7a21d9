package field

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// WriteDir writes f into the results folder dir, creating it if needed, and
// returns the paths written:
//
//	field.json   WriteJSON
//	field.csv    WriteCSV
//	field.vts    WriteVTS
//	field.npz    WriteNPZ
//	npy/<name>.npy, npy/grid_x.npy, npy/grid_y.npy   WriteNPY, shape (Ny, Nx)
//
// Every file is written atomically ([WriteFileAtomic]), so a reader never sees
// a partial file. It stops at the first error.
func WriteDir(dir string, f *Field) ([]string, error) {
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("results %s: %w", dir, err)
	}
	if err := os.MkdirAll(filepath.Join(dir, "npy"), 0o755); err != nil {
		return nil, fmt.Errorf("results %s: %w", dir, err)
	}
	var written []string
	put := func(name string, write func(io.Writer) error) error {
		p := filepath.Join(dir, name)
		if err := WriteFileAtomic(p, 0o644, write); err != nil {
			return err
		}
		written = append(written, p)
		return nil
	}
	type job struct {
		name  string
		write func(io.Writer) error
	}
	jobs := []job{
		{"field.json", func(w io.Writer) error { return WriteJSON(w, f) }},
		{"field.csv", func(w io.Writer) error { return WriteCSV(w, f) }},
		{"field.vts", func(w io.Writer) error { return WriteVTS(w, f) }},
		{"field.npz", func(w io.Writer) error { return WriteNPZ(w, f) }},
	}
	g := f.Grid
	arrays := map[string][]float64{"grid_x": g.X, "grid_y": g.Y}
	order := append(f.Names(), "grid_x", "grid_y")
	for _, n := range order {
		data, ok := f.Quantities[n]
		if !ok {
			data = arrays[n]
		}
		jobs = append(jobs, job{filepath.Join("npy", n+".npy"), func(w io.Writer) error { return WriteNPY(w, data, g.Ny, g.Nx) }})
	}
	for _, j := range jobs {
		if err := put(j.name, j.write); err != nil {
			return written, fmt.Errorf("results %s: %w", dir, err)
		}
	}
	return written, nil
}
