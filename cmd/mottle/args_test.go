package main

import (
	"context"
	"flag"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/series"
)

// TestParseArgs: flags may come before, between and after the positional
// arguments, and "--" ends the flags (common practice of command-line
// tools; Go's flag package alone stops at the first positional argument,
// which made "mottle series DIR --ext …" read "--ext" as a frame).
func TestParseArgs(t *testing.T) {
	for _, tc := range []struct {
		args []string
		pos  []string
		out  string
		n    int
	}{
		{[]string{"a", "b"}, []string{"a", "b"}, "", 0},
		{[]string{"--out", "o", "a"}, []string{"a"}, "o", 0},
		{[]string{"a", "--out", "o", "b", "-n", "3"}, []string{"a", "b"}, "o", 3},
		{[]string{"a", "--", "--out", "b"}, []string{"a", "--out", "b"}, "", 0},
		{[]string{"--n", "2", "--", "x"}, []string{"x"}, "", 2},
		{nil, nil, "", 0},
	} {
		e, _, _ := testEnv()
		fs := flag.NewFlagSet("t", flag.ContinueOnError)
		out := fs.String("out", "", "")
		n := fs.Int("n", 0, "")
		pos, err := parseArgs(e, fs, tc.args)
		if err != nil {
			t.Errorf("%q: %v", tc.args, err)
			continue
		}
		if !reflect.DeepEqual(pos, tc.pos) || *out != tc.out || *n != tc.n {
			t.Errorf("%q: positional %q, --out %q, -n %d; want %q, %q, %d", tc.args, pos, *out, *n, tc.pos, tc.out, tc.n)
		}
	}
}

// TestCommandLineUsage: stray arguments and malformed flag values are usage
// errors (exit 2) that name the argument and say what would work; before,
// "mottle map DIR --quantity E11 extra --range 0,1" silently ignored
// everything after "extra", and a malformed --range or --roi exited 1.
func TestCommandLineUsage(t *testing.T) {
	dir := t.TempDir()
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"analyze", "--ref", "a.png", "--def", "b.png", "extra", "--subset", "21"}, `unexpected argument "extra"`},
		{[]string{"analyze", "--ref", "a.png", "--def", "b.png", "--roi", "1,2,3"}, "x0,y0,x1,y1"},
		{[]string{"analyze", "--ref", "a.png", "--def", "b.png", "--scale-points", "1,2"}, "x1,y1,x2,y2,mm"},
		{[]string{"demo", "extra"}, `unexpected argument "extra"`},
		{[]string{"version", "extra"}, `unexpected argument "extra"`},
		{[]string{"synth", "--out", dir, "extra"}, `unexpected argument "extra"`},
		{[]string{"map", dir, "extra", "--range", "0,1"}, "one results folder"},
		{[]string{"map", dir, "--range", "1"}, "--range"},
		{[]string{"map", dir, "--range", "0.01,-0.01"}, "lo must be below hi"},
		{[]string{"map", dir, "--on", "sideways"}, "reference or deformed"},
		{[]string{"series", "--static-pair", "a.png", "a.png", "b.png"}, "--static-pair"},
	} {
		e, _, stderr := testEnv()
		if code := run(context.Background(), e, tc.args); code != 2 || !strings.Contains(stderr.String(), tc.want) {
			t.Errorf("%q: exit %d, stderr %q; want exit 2 and %q", tc.args, code, firstLine(stderr.String()), tc.want)
		}
	}
}

func firstLine(s string) string {
	l, _, _ := strings.Cut(s, "\n")
	return l
}

// TestFrameList: a folder written by mottle synth (reference.png and
// frame_001.png …) lists reference.png first, so that it is the reference
// (natural order alone put frame_001 first and reference.png last); missing
// files and empty patterns are refused before any frame is analysed.
func TestFrameList(t *testing.T) {
	dir := t.TempDir()
	for _, n := range []string{"frame_002.png", "frame_010.png", "frame_001.png", "reference.png", "frame_011.pgm", "truth.json", "notes.txt"} {
		if err := os.WriteFile(filepath.Join(dir, n), []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := series.ListFrames([]string{dir})
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, g := range got {
		names = append(names, filepath.Base(g))
	}
	if want := []string{"reference.png", "frame_001.png", "frame_002.png", "frame_010.png", "frame_011.pgm"}; !reflect.DeepEqual(names, want) {
		t.Errorf("folder order %q, want %q", names, want)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{filepath.Join(dir, "reference.png"), "--ext"}, `frame "--ext"`},
		{[]string{filepath.Join(dir, "nope_*.png")}, "matches no file"},
		{[]string{t.TempDir()}, "holds no PNG"},
		{[]string{dir, filepath.Join(dir, "gone.png")}, `gone.png": stat`},
	} {
		list, err := series.ListFrames(tc.args)
		if err == nil {
			err = series.CheckFrames(list)
		}
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: error %v, want %q", tc.args, err, tc.want)
		}
	}
}

// TestPrintSkipped: properties the series could not compute are printed
// with the reason, and with the flag to set when an input was missing; the
// command used to print nothing about them.
func TestPrintSkipped(t *testing.T) {
	var b strings.Builder
	printSkipped(&b, map[string]string{
		"youngs_modulus": "properties.modulus_range not set",
		"offset_yield":   "offset yield: the curve never falls below the 0.002 offset line",
	})
	got := b.String()
	for _, want := range []string{
		"not computed: youngs_modulus: properties.modulus_range not set; set --modulus-range lo,hi",
		"not computed: offset_yield: offset yield: the curve never falls below the 0.002 offset line\n",
	} {
		if !strings.Contains(got, want) {
			t.Errorf("output %q lacks %q", got, want)
		}
	}
	if strings.Index(got, "offset_yield") > strings.Index(got, "youngs_modulus") {
		t.Errorf("not sorted by name: %q", got)
	}
}
