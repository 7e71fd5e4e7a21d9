package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// writePair renders a small translation pair into dir and returns the paths.
func writePair(t *testing.T, dir string) (ref, def string) {
	t.Helper()
	r, d, err := synth.Pair(synth.PatternOptions{Diameter: 4, EdgeBlur: 1, Seed: 7}, synth.Translation{U: 1.25, V: -0.5}, synth.RenderOptions{W: 96, H: 80})
	if err != nil {
		t.Fatal(err)
	}
	ref, def = filepath.Join(dir, "ref.png"), filepath.Join(dir, "def.png")
	for _, f := range []struct {
		p string
		g *imageio.Gray
	}{{ref, r}, {def, d}} {
		if err := imageio.WriteFile(f.p, f.g, 8); err != nil {
			t.Fatal(err)
		}
	}
	return ref, def
}

// TestAnalyzeOutCheckedFirst: an --out that cannot be created is refused
// before the analysis runs. The context is cancelled, so an analysis that
// ran first would fail with "context canceled" instead.
func TestAnalyzeOutCheckedFirst(t *testing.T) {
	dir := t.TempDir()
	ref, def := writePair(t, dir)
	blocker := filepath.Join(dir, "a-file")
	if err := os.WriteFile(blocker, []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	e, stdout, stderr := testEnv()
	code := run(ctx, e, []string{"analyze", "--ref", ref, "--def", def, "--out", filepath.Join(blocker, "res")})
	if code != 1 || !strings.Contains(stderr.String(), "--out") || !strings.Contains(stderr.String(), "cannot create") || strings.Contains(stderr.String(), "canceled") {
		t.Errorf("exit %d, stderr %q; want exit 1 and an --out error before any analysis", code, stderr.String())
	}
	if stdout.Len() != 0 {
		t.Errorf("stdout %q; want nothing", stdout.String())
	}
}

// TestPixelLimitHint: images over the pixel limit are refused with the flag
// that raises it, on analyze and on series.
func TestPixelLimitHint(t *testing.T) {
	dir := t.TempDir()
	ref, def := writePair(t, dir)
	for _, args := range [][]string{
		{"analyze", "--ref", ref, "--def", def, "--max-pixels", "1000", "--out", filepath.Join(dir, "a")},
		{"series", "--max-pixels", "1000", "--out", filepath.Join(dir, "s"), ref, def},
	} {
		e, _, stderr := testEnv()
		code := run(context.Background(), e, args)
		if code != 1 || !strings.Contains(stderr.String(), "over the limit of 1000 px") || !strings.Contains(stderr.String(), "--max-pixels N") {
			t.Errorf("%s: exit %d, stderr %q; want the limit and how to raise it", args[0], code, stderr.String())
		}
	}
}

// TestROIWholePixels: --roi refuses fractional bounds (they used to be
// truncated silently) and its help says x1, y1 are exclusive.
func TestROIWholePixels(t *testing.T) {
	for _, args := range [][]string{
		{"analyze", "--ref", "a.png", "--def", "b.png", "--roi", "10,20.5,90,70"},
		{"series", "--roi", "10,20.5,90,70", "a.png", "b.png"},
	} {
		e, _, stderr := testEnv()
		if code := run(context.Background(), e, args); code != 2 || !strings.Contains(stderr.String(), "y0 = 20.5 is not a whole pixel") {
			t.Errorf("%s: exit %d, stderr %q; want exit 2 naming y0", args[0], code, stderr.String())
		}
	}
	s, err := parseROI("10,20,90,70")
	if err != nil || *s.Rect != [4]int{10, 20, 90, 70} {
		t.Errorf("parseROI: %v, %v", s, err)
	}
	for _, c := range []string{"analyze", "series"} {
		e, out, _ := testEnv()
		run(context.Background(), e, []string{c, "--help"})
		if !strings.Contains(out.String(), "x0 ≤ x < x1, y0 ≤ y < y1 (x1, y1 exclusive)") {
			t.Errorf("%s --help does not say that x1, y1 are exclusive", c)
		}
	}
}

// TestHelpWithoutFlags: a command without flags prints no empty "Flags:"
// section and no trailing space after its name.
func TestHelpWithoutFlags(t *testing.T) {
	e, out, _ := testEnv()
	if code := run(context.Background(), e, []string{"version", "--help"}); code != 0 {
		t.Fatalf("version --help: exit %d", code)
	}
	h := out.String()
	if strings.Contains(h, "Flags:") || strings.Contains(h, " \n") || !strings.HasPrefix(h, "Usage: mottle version\n") {
		t.Errorf("version --help printed %q", h)
	}
	e, out, _ = testEnv()
	run(context.Background(), e, []string{"analyze", "--help"})
	if !strings.Contains(out.String(), "\nFlags:\n") {
		t.Errorf("analyze --help lost its Flags section: %q", firstLine(out.String()))
	}
}

// TestSeedWholePixels: --seed refuses fractional coordinates instead of
// truncating them.
func TestSeedWholePixels(t *testing.T) {
	e, _, stderr := testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", "a.png", "--def", "b.png", "--seed", "100,40.5"}); code != 2 || !strings.Contains(stderr.String(), "y = 40.5 is not a whole pixel") {
		t.Errorf("exit %d, stderr %q; want exit 2 naming y", code, stderr.String())
	}
}

// TestRedactURL: the serve banner names the NATS servers without the user
// names, passwords or query options of the backend URL.
func TestRedactURL(t *testing.T) {
	for in, want := range map[string]string{
		"nats://a:4222": "nats://a:4222",
		"nats://u:secret@a:4222,b:4222?replicas=3":   "nats://a:4222,b:4222",
		"tls://tok@a:4222,tls://u:p@b:4222?creds=/x": "tls://a:4222,tls://b:4222",
	} {
		if got := redactURL(in); got != want || strings.Contains(got, "secret") {
			t.Errorf("redactURL(%q) = %q, want %q", in, got, want)
		}
	}
}
