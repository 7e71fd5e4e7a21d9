package web_test

import (
	"fmt"
	"io/fs"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/maps"
	"github.com/mottledic/mottle/web"
)

// TestAssetsSelfContained checks that the page works offline: index.html
// is at the root, every file that a page or module refers to is embedded,
// and no asset loads anything from another origin.
func TestAssetsSelfContained(t *testing.T) {
	assets := web.Assets()
	if _, err := fs.Stat(assets, "index.html"); err != nil {
		t.Fatalf("index.html is not at the root of the assets: %v", err)
	}
	refs := regexp.MustCompile(`(?:src|href)="([^"]+)"|(?:from|import)\s*'([^']+)'|(?:from|import)\s*"([^"]+)"`)
	external := regexp.MustCompile(`(?i)(?:https?:)?//[a-z0-9.-]+\.[a-z]{2,}/`)
	n := 0
	err := fs.WalkDir(assets, ".", func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		n++
		b, err := fs.ReadFile(assets, path)
		if err != nil {
			return err
		}
		text := string(b)
		if m := external.FindString(text); m != "" {
			t.Errorf("%s refers to another origin (%s); the preview must work offline", path, m)
		}
		if !strings.HasSuffix(path, ".html") && !strings.HasSuffix(path, ".js") {
			return nil
		}
		dir := ""
		if i := strings.LastIndex(path, "/"); i >= 0 {
			dir = path[:i+1]
		}
		for _, m := range refs.FindAllStringSubmatch(text, -1) {
			ref := m[1] + m[2] + m[3]
			if strings.HasPrefix(ref, "data:") || strings.HasPrefix(ref, "#") || strings.HasPrefix(ref, "/v1/") {
				continue
			}
			target := clean(dir + strings.TrimPrefix(ref, "./"))
			if _, err := fs.Stat(assets, target); err != nil {
				t.Errorf("%s refers to %q, which is not embedded (%s)", path, ref, target)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 5 {
		t.Errorf("only %d asset files embedded", n)
	}
}

// clean resolves "a/../b" in slash paths.
func clean(p string) string {
	var out []string
	for _, s := range strings.Split(p, "/") {
		switch s {
		case "", ".":
		case "..":
			if len(out) > 0 {
				out = out[:len(out)-1]
			}
		default:
			out = append(out, s)
		}
	}
	return strings.Join(out, "/")
}

// TestColormapsServed checks that the page gets the server's colour maps:
// js/cmaps.js is served as JavaScript, holds every map of pkg/maps with
// its entries, and names the server's default map for each quantity.
func TestColormapsServed(t *testing.T) {
	rec := httptest.NewRecorder()
	http.FileServerFS(web.Assets()).ServeHTTP(rec, httptest.NewRequest("GET", "/"+web.ColormapsPath, nil))
	if rec.Code != 200 || !strings.Contains(rec.Header().Get("Content-Type"), "javascript") {
		t.Fatalf("GET /%s: %d %s", web.ColormapsPath, rec.Code, rec.Header().Get("Content-Type"))
	}
	js := rec.Body.String()
	for _, cm := range []maps.Colormap{maps.Viridis(), maps.Cividis(), maps.CoolWarm()} {
		i := strings.Index(js, "  "+cm.Name+": {")
		if i < 0 {
			t.Errorf("cmaps.js lacks %s", cm.Name)
			continue
		}
		line := js[i : i+strings.Index(js[i:], "\n")]
		if n := strings.Count(line, ","); n < 3*1025-1 {
			t.Errorf("%s: %d values, want 3 × 1025", cm.Name, n)
		}
	}
	for _, q := range []string{"E11", "u", "zncc", "von_mises", "valid"} {
		if want := fmt.Sprintf("%q: %q", q, maps.ForQuantity(q).Name); !strings.Contains(js, want) {
			t.Errorf("cmaps.js does not say %s", want)
		}
	}
}
