package series

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"
	"unicode"
)

// naturalLess orders names so that "f2" comes before "f10".
func naturalLess(a, b string) bool {
	for a != "" && b != "" {
		if unicode.IsDigit(rune(a[0])) && unicode.IsDigit(rune(b[0])) {
			i, j := 0, 0
			for i < len(a) && unicode.IsDigit(rune(a[i])) {
				i++
			}
			for j < len(b) && unicode.IsDigit(rune(b[j])) {
				j++
			}
			na, nb := strings.TrimLeft(a[:i], "0"), strings.TrimLeft(b[:j], "0")
			if len(na) != len(nb) {
				return len(na) < len(nb)
			}
			if na != nb {
				return na < nb
			}
			a, b = a[i:], b[j:]
			continue
		}
		if a[0] != b[0] {
			return a[0] < b[0]
		}
		a, b = a[1:], b[1:]
	}
	return len(a) < len(b)
}

var imageExt = map[string]bool{".png": true, ".tif": true, ".tiff": true, ".jpg": true, ".jpeg": true, ".bmp": true, ".pgm": true}

// ListFrames expands the arguments (a folder, globs or files) into image
// paths in natural order. In a folder, an image named reference.* (as
// mottle synth writes) comes first, so that it is the reference. A pattern
// must match something; see CheckFrames for the files themselves.
func ListFrames(args []string) ([]string, error) {
	var out []string
	for _, a := range args {
		if st, err := os.Stat(a); err == nil && st.IsDir() {
			ents, err := os.ReadDir(a)
			if err != nil {
				return nil, err
			}
			var names []string
			for _, e := range ents {
				if !e.IsDir() && imageExt[strings.ToLower(filepath.Ext(e.Name()))] {
					names = append(names, filepath.Join(a, e.Name()))
				}
			}
			if len(names) == 0 {
				return nil, fmt.Errorf("folder %s holds no PNG, TIFF, JPEG, BMP or PGM image", a)
			}
			sort.Slice(names, func(i, j int) bool {
				ri, rj := isReferenceName(names[i]), isReferenceName(names[j])
				if ri != rj {
					return ri
				}
				return naturalLess(names[i], names[j])
			})
			out = append(out, names...)
			continue
		}
		if strings.ContainsAny(a, "*?[") {
			m, err := filepath.Glob(a)
			if err != nil {
				return nil, fmt.Errorf("pattern %q: %w", a, err)
			}
			if len(m) == 0 {
				return nil, fmt.Errorf("pattern %q matches no file", a)
			}
			sort.Slice(m, func(i, j int) bool { return naturalLess(m[i], m[j]) })
			out = append(out, m...)
			continue
		}
		out = append(out, a)
	}
	return out, nil
}

// CheckFrames makes sure every frame is a file before any is analysed.
func CheckFrames(paths []string) error {
	for _, a := range paths {
		if st, err := os.Stat(a); err != nil {
			return fmt.Errorf("frame %q: %w (give a folder, a glob such as 'frames/*.tif' or image files; flags may come before or after them)", a, err)
		} else if !st.Mode().IsRegular() {
			return fmt.Errorf("frame %q is not a regular file", a)
		}
	}
	return nil
}

// isReferenceName reports whether path is named reference.<image ext>.
func isReferenceName(path string) bool {
	b := strings.ToLower(filepath.Base(path))
	return strings.TrimSuffix(b, filepath.Ext(b)) == "reference"
}

// TimeSource says where the frames' time stamps come from: a regular
// expression on the file names (Pattern, its first group times Scale in
// s), a frame rate (FPS, time = index/FPS), or the files' modification
// times (FileTimes); none of them gives no time stamps.
type TimeSource struct {
	Pattern   string
	Scale     float64
	FPS       float64
	FileTimes bool
}

// FrameMetas returns the metadata of the frames names (the reference
// first): their base names, time stamps from ts and, with a table, the
// table's times (where ts gives none) and loads. Time stamps must be
// given for every frame or none, and must increase (CheckTimes); errors
// name the frame.
func FrameMetas(names []string, ts TimeSource, tbl *Table) ([]FrameMeta, error) {
	times := make([]*float64, len(names))
	switch {
	case ts.Pattern != "":
		scale := ts.Scale
		if scale == 0 {
			scale = 1
		}
		tt, err := TimesFromNames(names, ts.Pattern, scale)
		if err != nil {
			return nil, err
		}
		for i := range tt {
			times[i] = &tt[i]
		}
	case ts.FPS > 0:
		for i := range names {
			t := float64(i) / ts.FPS
			times[i] = &t
		}
	case ts.FileTimes:
		var t0 time.Time
		for i, n := range names {
			st, err := os.Stat(n)
			if err != nil {
				return nil, err
			}
			if i == 0 {
				t0 = st.ModTime()
			}
			t := st.ModTime().Sub(t0).Seconds()
			times[i] = &t
		}
	}
	metas := make([]FrameMeta, len(names))
	for i, n := range names {
		m := FrameMeta{Name: filepath.Base(n), Time: times[i]}
		if tbl != nil {
			tm, load, err := tbl.Lookup(i, n, m.Time)
			if err != nil {
				return nil, err
			}
			if tm != nil && m.Time == nil {
				m.Time = tm
			}
			m.Load = load
		}
		metas[i] = m
	}
	if len(metas) > 0 && metas[0].Time != nil {
		var tt []float64
		for _, m := range metas {
			if m.Time == nil {
				return nil, fmt.Errorf("frame %q has no time stamp while others do", m.Name)
			}
			tt = append(tt, *m.Time)
		}
		if err := CheckTimes(names, tt); err != nil {
			return nil, err
		}
	}
	return metas, nil
}
